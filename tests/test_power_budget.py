"""The power budget of hardware_notes/power.md, measured where it can be: the LED's duty cycle of each board profile
at its defaults, in MicroPython, from the LED pin's own switching (the board profiles with stand-in pins and a
stand-in TSL2591, tests/test_fw_boards.py), times the currents the table states. The currents are estimates from
datasheets as recalled [memory] and the table says so; the duty cycles and the arithmetic are checked here, and the
table in power.md must show what this test computes.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from support.fwharness import results, run_mp
from test_fw_boards import FAKES

NOTES = Path(__file__).resolve().parent.parent / "hardware_notes" / "power.md"

DUTY = FAKES + r"""
import sys
from nightcell_fw import settings as S
from nightcell_fw.logger import Logger
BOARD = sys.argv[1]
INTERVAL = int(sys.argv[2])
if BOARD == "esp32":
    from boards.esp32 import Esp32Board, DEFAULTS
    s = S.validate(dict(DEFAULTS, interval_ms=INTERVAL, warmup_ms=0))
    b = Esp32Board(Machine(), Port(), Clock, OS())
    led = 25
else:
    from boards.pico import PicoBoard
    s = S.validate({"interval_ms": INTERVAL, "warmup_ms": 0})
    b = PicoBoard(Machine(), Port(), Clock, OS())
    led = 15
b.configure(s)
lg = Logger(b, s, None, "/flash")
lg.boot()
lg.start_run(0, "")
t0 = Clock.t
Pin.log[led] = [(t0, 0)]
while Clock.t - t0 < 1200000:
    lg.run(1)
on = 0
since = None
for t, v in Pin.log[led][1:]:
    if v and since is None:
        since = t
    elif not v and since is not None:
        on += t - since
        since = None
print("duty=%.6f" % (on / (Clock.t - t0)))
print("samples=%d" % lg.samples)
"""

# Average supply current at 5 V, mA [memory: datasheets and typical board figures; estimates, not measurements]
BOARD_MA = {"pico": 22.0, "esp32": 50.0}   # the board running MicroPython's loop (Pico: RP2040 at 125 MHz,
#   ESP32 DevKit: 160 MHz, radio off, USB-serial bridge included)
LED_MA = 20.0                              # the LED drive of wiring.md while lit
FRONT_END_MA = {"pico": 0.2, "esp32": 0.3}  # op-amp (MCP6002 class, ~0.1 mA) and bias / TSL2591 (~0.3 mA active)
BANK_AH_AT_5V = 37.0 * 0.85 / 5.0          # a "10 000 mAh" bank: 37 Wh at 3.7 V, 85 % conversion [memory]
KEEP_ALIVE_MA = 7.0                        # a pulsed keep-alive load (power.md: about 5-10 mA on average)
OLD_DUTY = 0.994                           # LED on between samples (tests/test_fw_led.py measures 0.99393)


def _budget(board: str, duty: float, keep_alive: bool = False) -> tuple[float, float]:
    ma = BOARD_MA[board] + FRONT_END_MA[board] + LED_MA * duty + (KEEP_ALIVE_MA if keep_alive else 0.0)
    return ma, BANK_AH_AT_5V * 1000 / ma / 24


CASES = [("pico", 10000), ("pico", 1000), ("esp32", 10000), ("esp32", 1000)]


@pytest.fixture(scope="module")
def duties() -> dict[tuple[str, int], float]:
    out = {}
    for board, interval in CASES:
        res = results(run_mp(DUTY, board, str(interval)))
        assert int(res["samples"]) >= 1200000 // interval - 2
        out[board, interval] = float(res["duty"])
    return out


def test_led_duty_cycles_are_the_pulses_of_one_measurement_per_interval(duties):
    # the Pico's default measurement: 2 pairs × 5 ms lit = 10 ms per sample; the ESP32's: one 120 ms conversion lit
    assert duties["pico", 10000] == pytest.approx(10 / 10000, rel=0.02)
    assert duties["pico", 1000] == pytest.approx(10 / 1000, rel=0.02)
    assert duties["esp32", 10000] == pytest.approx(120 / 10000, rel=0.05)
    assert duties["esp32", 1000] == pytest.approx(120 / 1000, rel=0.05)


def test_the_power_note_shows_the_budget_this_test_computes(duties):
    text = NOTES.read_text(encoding="utf-8")
    rows = {}
    for line in text.splitlines():
        cells = [c.strip() for c in line.strip().strip("|").split("|")]
        if len(cells) >= 5 and cells[0] in ("Pico", "ESP32"):
            rows[(cells[0], cells[1])] = cells
    want = {}
    for (board, interval), duty in duties.items():
        name = "Pico" if board == "pico" else "ESP32"
        ma, days = _budget(board, duty)
        want[(name, f"pulsed, {interval // 1000} s")] = (f"{100 * duty:.1f} %", f"{ma:.0f} mA", f"{days:.1f} days")
    for board in ("pico", "esp32"):
        name = "Pico" if board == "pico" else "ESP32"
        ma, days = _budget(board, OLD_DUTY)
        want[(name, "LED on between samples (before)")] = (f"{100 * OLD_DUTY:.0f} %", f"{ma:.0f} mA", f"{days:.1f} days")
    for key, (duty, ma, days) in want.items():
        assert key in rows, f"power.md has no row {key}"
        cells = rows[key]
        assert cells[2] == duty and cells[3] == ma and cells[4] == days, (key, cells, (duty, ma, days))
    # the week: what a 10 000 mAh bank gives with the pulsed keep-alive a low-current bank needs
    ma, days = _budget("pico", duties["pico", 10000], keep_alive=True)
    assert f"{days:.1f} days" in text and f"{ma:.0f} mA" in text
    print({k: _budget(b, d) for (b, i), d in duties.items() for k in [(b, i)]})
