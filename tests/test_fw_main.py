"""firmware/main.py itself, run by the MicroPython unix interpreter on a board-like filesystem.

A real board runs main.py from the root of its flash: the test mounts a temporary folder at ``/`` (MicroPython's
``os.VfsPosix``), copies the firmware there as deploy would, and gives main.py a ``machine`` module whose ``WDT``
writes down that the watchdog was started and then stops the script (a board's pins are not there to go further).

What is checked is the boot choice of schema/protocol.md's ``hold``: with the hold file present the board stays in
the REPL with no watchdog and removes the file; the boot after that starts the watchdog again; a board never held
starts it at once.
"""

from __future__ import annotations

import os
import re
import select
import shutil
import subprocess
import time
from pathlib import Path

from support.fwharness import FIRMWARE, micropython

WDT_STOP = 42

# The stand-in for the board's ``machine``: only what main.py touches before the watchdog starts.
MACHINE = f"""
class WDT:
    def __init__(self, timeout):
        with open("/wdt_started", "w") as f:
            f.write(str(timeout))
        raise SystemExit({WDT_STOP})
"""

BOOT = """
import os, sys
os.umount("/")
os.mount(os.VfsPosix({root!r}), "/")
os.chdir("/")
sys.path[:] = ["/"]
import fake_machine
sys.modules["machine"] = fake_machine
# os.rename on a VfsPosix mounted with a root folder fails in this unix build (both paths come out as the second):
# the firmware sees an os whose rename copies and removes, which is enough here (no power is cut in these tests)
class _Os:
    pass
_os = _Os()
for _n in dir(os):
    setattr(_os, _n, getattr(os, _n))
def _rename(a, b):
    with open(a, "rb") as f:
        data = f.read()
    with open(b, "wb") as f:
        f.write(data)
    os.remove(a)
_os.rename = _rename
sys.modules["os"] = _os
exec(open("/main.py").read(), {{"__name__": "__main__"}})
"""


def _board(tmp_path: Path) -> Path:
    root = tmp_path / "flash"
    root.mkdir()
    shutil.copy(FIRMWARE / "main.py", root / "main.py")
    for package in ("nightcell_fw", "boards"):
        shutil.copytree(FIRMWARE / package, root / package, ignore=shutil.ignore_patterns("__pycache__"))
    (root / "fake_machine.py").write_text(MACHINE)
    return root


def _boot(tmp_path: Path, root: Path) -> subprocess.CompletedProcess:
    script = tmp_path / "boot.py"
    script.write_text(BOOT.format(root=str(root)))
    return subprocess.run([micropython(), str(script)], capture_output=True, text=True, timeout=60,
                          stdin=subprocess.DEVNULL)


def test_a_held_board_starts_no_watchdog_once_then_logs_again(tmp_path):
    root = _board(tmp_path)
    (root / "nc_hold").write_text("held by the host\n")  # what the firmware's hold request leaves (test_fw_sim)

    held = _boot(tmp_path, root)
    assert held.returncode == 0, held.stderr
    assert "held for maintenance" in held.stdout
    assert not (root / "wdt_started").exists(), "a held board must not start the watchdog"
    assert not (root / "nc_hold").exists(), "the hold is for one boot: main.py removes the file first"

    again = _boot(tmp_path, root)
    assert again.returncode == WDT_STOP, again.stdout + again.stderr
    assert (root / "wdt_started").read_text() == "8000"  # main.py's _WDT_MS, under the RP2040's ~8.3 s limit


def test_a_board_never_held_starts_the_watchdog_at_once(tmp_path):
    root = _board(tmp_path)
    boot = _boot(tmp_path, root)
    assert boot.returncode == WDT_STOP, boot.stdout + boot.stderr
    assert "held" not in boot.stdout
    assert (root / "wdt_started").read_text() == "8000"


# -- safe mode, and no boot loop ------------------------------------------------------------------------------------

# A board's ``machine`` with pins, ADC, I2C and a watchdog that only writes down its feeds: main.py runs for real.
# ``/pins_low`` lists the pins held low (a jumper to GND); ``/i2c_dead`` makes the I2C bus answer nothing.
BOARD_MACHINE = """
import os, time
def _exists(p):
    try:
        os.stat(p)
        return True
    except OSError:
        return False
LOW = []
if _exists("/pins_low"):
    LOW = [int(x) for x in open("/pins_low").read().split()]
PWRON_RESET = 1
WDT_RESET = 3
class Pin:
    IN = 0; OUT = 1; PULL_UP = 2
    def __init__(self, id, mode=None, pull=None, value=None):
        self.id = id
    def value(self, v=None):
        if v is None:
            return 0 if self.id in LOW else 1
class ADC:
    def __init__(self, src):
        pass
    def read_u16(self):
        return 1000 << 4
class I2C:
    def __init__(self, bus, sda=None, scl=None, freq=None):
        pass
    def readfrom_mem_into(self, addr, reg, buf):
        raise OSError(19)
    def writeto_mem(self, addr, reg, buf):
        raise OSError(19)
class WDT:
    def __init__(self, timeout):
        with open("/wdt_started", "w") as f:
            f.write(str(timeout))
    def feed(self):
        pass
def unique_id():
    return b"\\x01\\x02\\x03\\x04\\x05\\x06\\x07\\x08"
def reset_cause():
    return PWRON_RESET
def reset():
    raise SystemExit(0)
"""


def _real_board(tmp_path: Path) -> Path:
    root = _board(tmp_path)
    (root / "fake_machine.py").write_text(BOARD_MACHINE)
    return root


def _safe_pin(name: str) -> int:
    text = (FIRMWARE / "boards" / "choose.py").read_text()
    const = {"pico": "PICO_SAFE_PIN", "esp32": "ESP32_SAFE_PIN"}[name]
    return int(re.search(const + r" = const\((\d+)\)", text).group(1))


def test_the_safe_mode_pin_held_low_starts_no_logger_and_no_watchdog(tmp_path):
    # the pin is the one hardware_notes/wiring.md documents for a Pico (a test of the notes checks the same text)
    pin = _safe_pin("pico")
    assert f"GP{pin}" in (FIRMWARE.parent / "hardware_notes" / "wiring.md").read_text()
    root = _real_board(tmp_path)
    (root / "pins_low").write_text(f"{pin}\n")
    boot = _boot(tmp_path, root)
    assert boot.returncode == 0, boot.stdout + boot.stderr  # main.py returned: the REPL is free
    assert f"safe mode (pin {pin} held low)" in boot.stdout
    assert not (root / "wdt_started").exists(), "safe mode must not start the watchdog"
    assert not (root / "nc").exists(), "safe mode must not start the logger (no journal is opened)"

    (root / "pins_low").write_text("")  # jumper removed: the next boot logs (its watchdog starts)
    (root / "fake_machine.py").write_text(MACHINE)
    again = _boot(tmp_path, root)
    assert again.returncode == WDT_STOP and (root / "wdt_started").exists()


def _frames(proc: subprocess.Popen, want: int, timeout: float) -> list:
    from nightcell.wire import frames as F

    reader = F.ReplyReader()
    got: list = []
    end = time.monotonic() + timeout
    while len(got) < want and time.monotonic() < end:
        r, _, _ = select.select([proc.stdout], [], [], 0.2)
        if r:
            data = os.read(proc.stdout.fileno(), 65536)
            if not data:
                break
            reader.feed(data)
            got.extend(reader.frames())
    return got


def _journal(root: Path) -> list:
    from nightcell.wire import frames as F

    recs = []
    for seg in sorted((root / "nc").glob("s*")):
        recs.extend(F.iter_records(seg.read_bytes(), int(seg.name[1:], 16)))
    return recs


def _start_main(tmp_path: Path, root: Path) -> subprocess.Popen:
    script = tmp_path / "boot.py"
    script.write_text(BOOT.format(root=str(root)))
    return subprocess.Popen([micropython(), str(script)], stdin=subprocess.PIPE, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE)


def test_main_with_a_dead_sensor_keeps_answering_and_journals_the_error(tmp_path):
    from nightcell.wire import frames as F

    root = _real_board(tmp_path)
    (root / "settings.json").write_text('{"board": "esp32", "interval_ms": 1000, "warmup_ms": 0}')
    proc = _start_main(tmp_path, root)
    try:
        proc.stdin.write(b"1 hello\n2 start\n3 blank\n")
        proc.stdin.flush()
        first = _frames(proc, 3, 20)
        time.sleep(3.5)  # failing samples at 1 s and 3 s: each back-off interval gives one record
        proc.stdin.write(b"4 status\n")
        proc.stdin.flush()
        last = _frames(proc, 1, 20)
        proc.stdin.close()  # end of file on the link: the firmware's port stops the program
        proc.wait(20)
    finally:
        proc.kill()
    kinds = [(f.tag, f.kind) for f in first + last]
    assert kinds == [(1, F.REPLY_OK), (2, F.REPLY_OK), (3, F.REPLY_ERR), (4, F.REPLY_OK)], kinds
    assert "no TSL2591 answers" in first[2].text()
    assert (root / "wdt_started").read_text() == "8000"
    errors = [r for r in _journal(root) if r.kind == F.KIND_EVENT and r.fields["code"] == 1]
    assert errors and "no TSL2591 answers" in errors[0].fields["text"]
    assert 2 <= len(errors) <= 4, [e.fields["text"] for e in errors]  # boot, blank (repeat), 1 s, 3 s: rate-limited


def test_a_logger_that_cannot_start_answers_err_retries_with_backoff_then_logs(tmp_path):
    from nightcell.wire import frames as F

    root = _real_board(tmp_path)
    (root / "nc").write_text("not a folder")  # the journal cannot be opened: the one error it cannot journal
    proc = _start_main(tmp_path, root)
    try:
        proc.stdin.write(b"1 hello\n")
        proc.stdin.flush()
        refused = _frames(proc, 1, 20)
        (root / "nc").unlink()  # the next try (after 1 s, then 2 s ...) finds the flash usable
        deadline = time.monotonic() + 20
        answered = []
        tag = 2
        while time.monotonic() < deadline and not any(f.kind == F.REPLY_OK for f in answered):
            proc.stdin.write(b"%d hello\n" % tag)
            proc.stdin.flush()
            answered += _frames(proc, 1, 2)
            tag += 1
        proc.stdin.close()
        proc.wait(20)
    finally:
        proc.kill()
    assert refused and refused[0].kind == F.REPLY_ERR and "the board cannot start" in refused[0].text()
    assert "tries again in 1 s" in refused[0].text()
    ok = [f for f in answered if f.kind == F.REPLY_OK]
    assert ok and ok[0].json()["boot"] >= 1
    assert (root / "wdt_started").read_text() == "8000"
