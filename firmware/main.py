"""Boot a real board: settings → board profile → logger, with the watchdog running and the reset cause logged.

Copy ``main.py``, ``nightcell_fw/`` and ``boards/`` to the board (the host's deploy command does it, or
``mpremote cp -r``). Ctrl-C (what mpremote sends on connect) stops the loop cleanly: the LEDs go off, the journal
is synced, and the REPL is yours; but the watchdog, once started, cannot be stopped on an RP2040, so the board resets
within ~8 s and logs again. To copy files, first send the ``hold`` request (the host's deploy does): the board
journals it, writes ``/nc_hold`` and resets; the next boot finds the file, removes it, and stays in the REPL with
no watchdog and no logger — once; the following reset logs again.

Safe mode: a jumper from the safe-mode pin (GP20 on a Pico, GPIO32 on an ESP32; ``boards/choose.py``,
``hardware_notes/wiring.md``) to GND, held at boot, starts no logger and no watchdog and leaves the REPL free, for
as long as the jumper is there at each boot.

Never a boot loop: whatever fails after the watchdog starts (a sensor that does not answer, a journal that cannot
be opened, pins that cannot be used) is journaled when the journal can be written, shown by blink code 4, and
tried again with back-off (1 s doubling to 60 s) while the watchdog is fed and every request gets an answer.

Never reformat: the rp2 boot script reformats a filesystem that fails to mount, and the journal is written so that
littlefs always mounts (whole-record appends with sync, atomic renames); do not add code here that could change that.
"""

import os
import sys
import time

import machine

from nightcell_fw import settings as S
from nightcell_fw.logger import Logger, HOLD_FILE
from boards.choose import board_name, SAFE_PINS

_WDT_MS = 8000  # the RP2040's limit is about 8.3 s
_RETRY_MS = 1000  # first wait before a failed start is tried again; doubles up to _RETRY_MAX_MS
_RETRY_MAX_MS = 60000


def _port():
    from boards.ports import StdioPort
    return StdioPort()


def _board_name(raw):
    return board_name(raw, sys.platform, getattr(sys.implementation, "_machine", ""))


def _optional(name):
    try:
        return __import__(name)
    except ImportError:
        return None


def safe_mode(name):
    """The safe-mode pin's number when it is held low (pulled up inside, so an open pin never means safe mode),
    else None."""
    pin = SAFE_PINS.get(name)
    if pin is None:
        return None
    try:
        p = machine.Pin(pin, machine.Pin.IN, machine.Pin.PULL_UP)
        time.sleep_ms(2)  # let the pull-up charge the wire
        return pin if p.value() == 0 else None
    except Exception:  # noqa: BLE001 — a pin that cannot be read is not a request for safe mode
        return None


def build(name, wdt, settings):
    ow = _optional("onewire")
    ds = _optional("ds18x20")
    from boards.pico import PicoBoard
    if name != "esp32":
        board = PicoBoard(machine, _port(), time, os, name, wdt, ow, ds)
    else:
        from boards.esp32 import Esp32Board
        board = Esp32Board(machine, _port(), time, os, wdt, ow, ds, _optional("esp32"))
    board.configure(settings)
    return board


def _start(name, wdt):
    """(board, settings, problem) from the settings file, else from the profile's safe defaults."""
    base = None
    if name == "esp32":
        from boards.esp32 import DEFAULTS
        base = S.validate(DEFAULTS)
    settings, problem = S.load("/settings.json", base)
    try:
        return build(name, wdt, settings), settings, problem
    except (ValueError, OSError) as e:  # pins that cannot be used: fall back to the safe defaults
        problem = "settings.json pins unusable, safe defaults used: %s" % e
        settings = base or S.defaults()
        return build(name, wdt, settings), settings, problem


def _status_pin(raw):
    try:
        v = (raw or {}).get("status_led", S.DEFAULTS["status_led"])
        return machine.Pin(v, machine.Pin.OUT) if v is not None else None
    except Exception:  # noqa: BLE001
        return None


def main():
    raw = S.read_raw("/settings.json")
    name = _board_name(raw)
    pin = safe_mode(name)
    if pin is not None:
        print("nightcell: safe mode (pin %d held low): no logger, no watchdog; remove the jumper and reset to log"
              % pin)
        return
    wdt = machine.WDT(timeout=_WDT_MS)
    limp = None
    delay = _RETRY_MS
    while True:
        lg = None
        try:
            board, settings, problem = _start(name, wdt)
            lg = Logger(board, settings, problem, "")
            lg.boot()
            break
        except KeyboardInterrupt:
            raise
        except Exception as e:  # noqa: BLE001 — never a boot loop: journal if possible, answer, retry
            if lg is not None:
                lg.on_error(e)
                try:
                    lg.journal.close()
                except Exception:  # noqa: BLE001
                    pass
            if limp is None:
                from nightcell_fw.limp import Limp
                limp = Limp(_port(), wdt.feed, time, _status_pin(raw))
            limp.wait(delay, "%s: %s" % (type(e).__name__, e))
            delay = min(delay * 2, _RETRY_MAX_MS)
    limp = None
    try:
        lg.run()
    finally:
        board.leds_off()
        lg.close_block()
        lg.journal.close()


def held():
    """True once after the host asked for a hold (``hold`` verb): the file is removed first, so the next reset logs
    again even if nobody comes back. A held board runs no watchdog, so copying a firmware update cannot be cut short
    by a watchdog reset."""
    try:
        os.stat(HOLD_FILE)
    except OSError:
        return False
    try:
        os.remove(HOLD_FILE)
    except OSError:
        pass
    return True


if held():
    print("nightcell: held for maintenance; watchdog off; reset to log again")
else:
    main()
