"""The verbs of the link protocol (``schema/protocol.md``): parse arguments, act through the logger, reply.

Owns what each request means and how it is answered. Every request gets exactly one reply; a bad request gets
``ERR`` with a message that says what to do and changes nothing. Replies are the only writes to the port.

Usage::

    commands.handle(logger, b"7 status")
"""

import json
from nightcell_fw import VERSION, records as R
from nightcell_fw.records import crc32
from nightcell_fw.link import parse, unquote, OK, MAX_READ, NO_TAG
from nightcell_fw.journal import JournalFull


def _int(text, name, lo, hi):
    if not text or len(text) > 20 or not all(c in "0123456789" for c in text):
        raise ValueError("%s must be a whole number, not %r" % (name, text))
    v = int(text)
    if not lo <= v <= hi:
        raise ValueError("%s must be from %d to %d" % (name, lo, hi))
    return v


def _nargs(args, lo, hi, usage):
    if not lo <= len(args) <= hi:
        raise ValueError("usage: %s" % usage)


def _checked(verb, args, usage, required=False):
    """The value of a request that must not be misread (``ack`` may delete, ``anchor`` sets the clock). Its last
    argument is the CRC-32 of ``"<verb> <value>"`` in 8 lower-case hex digits; a damaged digit is refused. ``ack``
    must carry it: the board trims only up to a position it has verified (noise that damaged a digit and also
    dropped the check would otherwise pass)."""
    _nargs(args, 2 if required else 1, 2, usage)
    if len(args) == 2 and args[1] != "%08x" % crc32(("%s %s" % (verb, args[0])).encode()):
        raise ValueError("check field does not match: the request was damaged on the way; send it again")
    return args[0]


def _label(args, i):
    return unquote(args[i]) if len(args) > i else ""


def _json(d):
    return json.dumps(d).encode("utf-8")


def _mark_reply(lg, res):
    seq, reads, n = res
    s = lg.sampler
    return {"boot": lg.boot_id, "seq": seq, "reads": reads, "dark": s.avg_dark[:n], "light": s.avg_light[:n]}


def _room(lg, d):
    """What the host needs to plan a run: free bytes, bytes per sample measured, time until full, measurement time."""
    bps, full_in = lg.growth()
    d["bytes_per_sample"] = bps
    d["full_in_s"] = full_in
    d["measure_ms"] = lg.measure_ms()
    d["channels"] = lg.board.channels
    return d


def _hello(lg, tag, args):
    _nargs(args, 0, 0, "hello")
    j = lg.journal
    return _room(lg, {"protocol": 1, "device": lg.board.device_id(), "board": lg.board.name, "firmware": VERSION,
            "boot": lg.boot_id, "uptime_ms": lg.now(), "journal": j.jid, "head": j.head, "tail": j.tail,
            "running": lg.running, "label": lg.settings["label"], "interval_ms": lg.settings["interval_ms"],
            "free_bytes": j.free_bytes(), "settings_crc": lg.settings_crc})


def _anchor(lg, tag, args):
    host_ms = _int(_checked("anchor", args, "anchor <host_unix_ms> [check]"), "host_unix_ms", 0, (1 << 64) - 1)
    lg.close_block()
    seq = lg.seq
    up = lg.now()
    lg.write(R.anchor(lg.enc, lg.boot_id, seq, up, host_ms))
    return {"boot": lg.boot_id, "seq": seq, "uptime_ms": up}


def _measure(kind, lit=True):
    def verb(lg, tag, args):
        _nargs(args, 0, 1, "%s [label]" % _MARK_NAMES[kind])
        return _mark_reply(lg, lg.mark(kind, 0, _label(args, 0), "", True, lit))
    return verb


def _standard(lg, tag, args):
    _nargs(args, 1, 2, "standard <value> [label]")
    v = args[0]
    try:
        float(v)
    except ValueError:
        raise ValueError("the standard's value must be a decimal number as typed, e.g. 0.250, not %r" % v)
    if len(v) > 32 or not all(c in "0123456789.+-eE" for c in v):
        raise ValueError("the standard's value must be a decimal number as typed, e.g. 0.250, not %r" % v)
    return _mark_reply(lg, lg.mark(R.MARK_STANDARD, 0, _label(args, 1), v))


def _start(lg, tag, args):
    _nargs(args, 0, 1, "start [label]")
    return {"boot": lg.boot_id, "seq": lg.start_run(0, _label(args, 0))}


def _stop(lg, tag, args):
    _nargs(args, 0, 0, "stop")
    return {"boot": lg.boot_id, "seq": lg.stop_run(0)}


def _note(lg, tag, args):
    _nargs(args, 1, 1, "note <text>")
    return {"boot": lg.boot_id, "seq": lg.mark(R.MARK_NOTE, 0, unquote(args[0]), "", measure=False)[0]}


def _flush(lg, tag, args):
    _nargs(args, 0, 0, "flush")
    lg.close_block()
    return {"head": lg.journal.head}


def _read(lg, tag, args):
    _nargs(args, 2, 2, "read <position> <max_bytes>")
    pos = _int(args[0], "position", 0, 0xFFFFFFFF)
    n = _int(args[1], "max_bytes", 1, MAX_READ)
    lg.out.data(tag, lg.journal, pos, n)
    return None


def _ack(lg, tag, args):
    pos = _int(_checked("ack", args, "ack <position> <check>", True), "position", 0, 0xFFFFFFFF)
    j = lg.journal
    if j.trim(pos):
        lg.event(R.EVENT_TRIMMED, "tail %d" % j.tail)
        if not j.full:
            lg.signals.clear(3)
    return {"tail": j.tail}


def _status(lg, tag, args):
    _nargs(args, 0, 0, "status")
    j = lg.journal
    last = None
    if lg.last_seq >= 0:
        n = lg.board.channels
        s = lg.sampler
        last = {"seq": lg.last_seq, "dark": s.dark[:n], "light": s.light[:n], "reads": lg.settings["reads"]}
    return _room(lg, {"uptime_ms": lg.now(), "running": lg.running, "samples": lg.samples, "last": last,
                      "head": j.head, "tail": j.tail, "free_bytes": j.free_bytes(), "used_bytes": j.head - j.tail,
                      "interval_ms": lg.settings["interval_ms"], "full": j.full, "missed_full": lg.missed_full})


def _set(lg, tag, args):
    _nargs(args, 2, 2, "set <key> <value>")
    from nightcell_fw.settings import parse_value
    key = args[0]
    later = lg.change(key, parse_value(key, unquote(args[1])))
    return {"settings": json.loads(lg.text), "settings_crc": lg.settings_crc, "after_reset": later}


def _reset(lg, tag, args):
    _nargs(args, 0, 0, "reset")
    lg.out.ok(tag, b"{}")
    lg.reset()
    return None


def _hold(lg, tag, args):
    _nargs(args, 0, 0, "hold")
    lg.out.ok(tag, b"{}")
    lg.reset(hold=True)
    return None


_MARK_NAMES = {R.MARK_DARK: "dark", R.MARK_BLANK: "blank", R.MARK_OPAQUE: "opaque"}
VERBS = {
    "hello": _hello, "anchor": _anchor, "dark": _measure(R.MARK_DARK, False), "blank": _measure(R.MARK_BLANK),
    "standard": _standard, "opaque": _measure(R.MARK_OPAQUE), "start": _start, "stop": _stop, "note": _note,
    "flush": _flush, "read": _read, "ack": _ack, "status": _status, "set": _set, "reset": _reset,
    "hold": _hold,
}


def handle(lg, line):
    """Answer one request line (``LineReader`` problems included)."""
    out = lg.out
    try:
        tag, verb, args = parse(line) if line else (NO_TAG, "", ())
    except ValueError as e:
        out.err(NO_TAG, str(e))
        return
    if lg.lines.problem:
        out.err(tag, lg.lines.problem)
        return
    fn = VERBS.get(verb)
    if fn is None:
        out.err(tag, "unknown command %r: the commands are %s" % (verb, " ".join(sorted(VERBS))))
        return
    try:
        res = fn(lg, tag, args)
    except JournalFull:
        out.err(tag, "flash is full: sync the journal and acknowledge it, then try again")
        return
    except ValueError as e:
        out.err(tag, str(e))
        return
    except Exception as e:  # noqa: BLE001 — answer, then journal it like any loop error
        out.err(tag, "the board failed: %s: %s (journaled)" % (type(e).__name__, e))
        lg.on_error(e)
        return
    if res is not None:
        out.reply(OK, tag, _json(res))
