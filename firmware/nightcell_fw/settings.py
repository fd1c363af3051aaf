"""Device settings: built-in defaults, validation, canonical JSON and its crc (``schema/settings.md``).

Owns what a valid setting is. Never touches hardware; reading and writing the file is done by the caller with
``load``/``save`` so that a bad file can never stop the board: ``load`` returns the defaults and a message instead.

Usage::

    s, problem = load("/settings.json")      # problem is None, or text for an EVENT 2 record
    s = validate(dict(s, interval_ms=5000))   # raises ValueError with a message that says what to fix
    text = canonical(s); crc = crc32(text)
"""

import json
import os
from nightcell_fw.records import crc32
from nightcell_fw import ranges as T

# The table of settings (keys, ranges, defaults) is schema/settings.json, copied into ranges.py by
# schema/write_ranges.py; a test checks the copy is current and that settings_default.json says the same.
DEFAULTS = T.DEFAULTS
BOARDS = T.BOARDS
# keys whose new value takes effect only after a reset (they choose pins and drivers)
HARDWARE_KEYS = T.HARDWARE_KEYS
_RANGES = T.WHOLE


def defaults():
    return json.loads(canonical(DEFAULTS))  # a deep copy


def _is_int(v):
    return isinstance(v, int) and not isinstance(v, bool)


def _pin(key, v, allow_name=False):
    lo, hi = T.PINS
    if v is None or _is_int(v) and lo <= v <= hi or allow_name and isinstance(v, str) and 0 < len(v) <= T.PIN_NAME_MAX_BYTES:
        return
    raise ValueError("%s must be a pin number%s or null, not %s" % (key, " or name" if allow_name else "", _show(v)))


def _num(x):
    return ("%d" % x) if x == int(x) else repr(x)


def _show(v):
    t = canonical(v)
    return t if len(t) <= 40 else t[:37] + "..."


def check(key, v):
    """Raise ValueError (with what to do) unless ``v`` is a valid value for ``key``."""
    if key in _RANGES:
        lo, hi = _RANGES[key]
        if not _is_int(v) or not lo <= v <= hi:
            raise ValueError("%s must be a whole number from %d to %d, not %s" % (key, lo, hi, _show(v)))
    elif key == "board":
        if v not in BOARDS:
            raise ValueError("board must be one of %s, not %s" % (", ".join(BOARDS), _show(v)))
    elif key == "label":
        if not isinstance(v, str) or len(v.encode("utf-8")) > T.LABEL_MAX_BYTES:
            raise ValueError("label must be text of at most %d bytes" % T.LABEL_MAX_BYTES)
    elif key in T.NUMBERS:
        least, most = T.NUMBERS[key]
        if not isinstance(v, (int, float)) or isinstance(v, bool) or not least <= v <= most:
            raise ValueError("%s must be a number from %s to %s, not %s" % (key, _num(least), _num(most), _show(v)))
    elif key == "channels":
        lo, hi = T.CHANNELS
        if not isinstance(v, list) or not lo <= len(v) <= hi:
            raise ValueError("channels must be a list of %d to %d {name, led, adc} objects" % (lo, hi))
        for ch in v:
            if not isinstance(ch, dict) or sorted(ch.keys()) != ["adc", "led", "name"]:
                raise ValueError("each channel must be an object with exactly name, led and adc")
            if not isinstance(ch["name"], str) or not 0 < len(ch["name"].encode("utf-8")) <= T.NAME_MAX_BYTES:
                raise ValueError("a channel name must be text of 1 to %d bytes" % T.NAME_MAX_BYTES)
            _pin("channel led", ch["led"])
            if not _is_int(ch["adc"]) or not T.PINS[0] <= ch["adc"] <= T.PINS[1]:
                raise ValueError("a channel's adc must be a pin or sensor channel number, not %s" % _show(ch["adc"]))
    elif key in ("reference_adc", "temp_pin", "button_pin"):
        _pin(key, v)
    elif key == "status_led":
        _pin(key, v, True)
    elif key == "dither_pins":
        if not isinstance(v, list) or len(v) > T.DITHER_PINS_MAX:
            raise ValueError("dither_pins must be a list of at most %d pin numbers" % T.DITHER_PINS_MAX)
        for p in v:
            if p is None:
                raise ValueError("dither_pins must be pin numbers, not null")
            _pin("dither pin", p)
    elif key == "i2c":
        if not isinstance(v, dict) or sorted(v.keys()) != ["address", "scl", "sda", "sensor"]:
            raise ValueError("i2c must be an object with exactly sda, scl, sensor and address")
        _pin("i2c sda", v["sda"])
        _pin("i2c scl", v["scl"])
        if v["sensor"] not in T.SENSORS:
            raise ValueError("i2c sensor must be tsl2591 (the one this firmware drives)")
        if not _is_int(v["address"]) or not 0 < v["address"] < 128:
            raise ValueError("i2c address must be a 7-bit number")
    else:
        raise ValueError("unknown setting %s: the settings are %s" % (_show(key), ", ".join(sorted(DEFAULTS))))


def validate(d, base=None):
    """A complete, checked settings dict: missing keys take their defaults (``base``, else ``DEFAULTS``)."""
    if not isinstance(d, dict):
        raise ValueError("settings must be a JSON object")
    out = json.loads(canonical(base)) if base else defaults()
    for k in d:
        check(k, d[k])
        out[k] = d[k]
    return out


def parse_value(key, text):
    """A setting's value from the text of a ``set`` request: JSON, or plain text for text settings."""
    try:
        v = json.loads(text)
    except ValueError:
        if key in ("label", "board", "status_led"):
            return text
        raise ValueError("value for %s must be JSON (a number, true/false/null, a list or an object)" % key)
    if key == "label" and not isinstance(v, str):
        return text
    return v


def read_raw(path):
    """The file's JSON object, ``{}`` when there is no file, or None when it cannot be read as one."""
    try:
        f = open(path, "rb")
    except OSError:
        return {}
    try:
        d = json.loads(f.read().decode("utf-8"))
    except ValueError:
        return None
    finally:
        f.close()
    return d if isinstance(d, dict) else None


def load(path, base=None):
    """(settings, problem): the file's settings, or the defaults and a message when the file is missing or bad."""
    safe = json.loads(canonical(base)) if base else defaults()
    try:
        f = open(path, "rb")
    except OSError:
        return safe, None  # no file: defaults, nothing wrong
    try:
        raw = f.read()
    finally:
        f.close()
    try:
        return validate(json.loads(raw.decode("utf-8")), base), None
    except ValueError as e:  # covers bad JSON and bad UTF-8 (UnicodeError is a ValueError)
        return safe, "settings.json ignored, safe defaults used: %s" % (str(e) or "not valid JSON")


def save(path, d):
    """Write the settings atomically: a temporary file, then rename over the old one."""
    tmp = path + ".new"
    f = open(tmp, "wb")
    try:
        f.write(canonical(d).encode("utf-8"))
    finally:
        f.close()
    os.rename(tmp, path)


def _esc(s):
    out = ['"']
    for ch in s:
        o = ord(ch)
        if ch == '"' or ch == "\\":
            out.append("\\" + ch)
        elif o < 0x20:
            i = "\b\f\n\r\t".find(ch)
            out.append("\\" + "bfnrt"[i] if i >= 0 else "\\u%04x" % o)
        else:
            out.append(ch)
    out.append('"')
    return "".join(out)


def canonical(v):
    """JSON with keys sorted, separators ``,`` and ``:``, text as UTF-8 (not escaped): the same on every board."""
    if v is None:
        return "null"
    if v is True:
        return "true"
    if v is False:
        return "false"
    if isinstance(v, str):
        return _esc(v)
    if isinstance(v, (int, float)):
        return repr(v)
    if isinstance(v, (list, tuple)):
        return "[" + ",".join([canonical(x) for x in v]) + "]"
    if isinstance(v, dict):
        return "{" + ",".join([_esc(k) + ":" + canonical(v[k]) for k in sorted(v.keys())]) + "}"
    raise ValueError("cannot write %r as a setting" % (v,))
