"""Boot a real board: settings → board profile → logger, with the watchdog running and the reset cause logged.

Copy ``main.py``, ``nightcell_fw/`` and ``boards/`` to the board (the host's deploy command does it, or
``mpremote cp -r``). Ctrl-C (what mpremote sends on connect) stops the loop cleanly: the LEDs go off, the journal
is synced, and the REPL is yours; but the watchdog, once started, cannot be stopped on an RP2040, so the board resets
within ~8 s and logs again. To copy files, first send the ``hold`` request (the host's deploy does): the board
journals it, writes ``/nc_hold`` and resets; the next boot finds the file, removes it, and stays in the REPL with
no watchdog and no logger — once; the following reset logs again.

Never reformat: the rp2 boot script reformats a filesystem that fails to mount, and the journal is written so that
littlefs always mounts (whole-record appends with sync, atomic renames); do not add code here that could change that.
"""

import os
import sys
import time

import machine

from nightcell_fw import settings as S
from nightcell_fw.logger import Logger, HOLD_FILE

_WDT_MS = 8000  # the RP2040's limit is about 8.3 s


def _port():
    from boards.ports import StdioPort
    return StdioPort()


def _board_name(raw):
    if raw and raw.get("board") in S.BOARDS:
        return raw["board"]
    return "esp32" if sys.platform == "esp32" else "pico"


def _optional(name):
    try:
        return __import__(name)
    except ImportError:
        return None


def build(name, wdt, settings):
    ow = _optional("onewire")
    ds = _optional("ds18x20")
    if name == "esp32":
        from boards.esp32 import Esp32Board
        board = Esp32Board(machine, _port(), time, os, wdt, ow, ds, _optional("esp32"))
    else:
        from boards.pico import PicoBoard
        board = PicoBoard(machine, _port(), time, os, name, wdt, ow, ds)
    board.configure(settings)
    return board


def main():
    raw = S.read_raw("/settings.json")
    name = _board_name(raw)
    base = None
    if name == "esp32":
        from boards.esp32 import DEFAULTS
        base = S.validate(DEFAULTS)
    settings, problem = S.load("/settings.json", base)
    wdt = machine.WDT(timeout=_WDT_MS)
    try:
        board = build(name, wdt, settings)
    except (ValueError, OSError) as e:  # pins that cannot be used: fall back to the safe defaults
        problem = "settings.json pins unusable, safe defaults used: %s" % e
        settings = base or S.defaults()
        board = build(_board_name(None), wdt, settings)
    lg = Logger(board, settings, problem, "")
    lg.boot()
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
