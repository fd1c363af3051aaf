"""Which profile a board runs when its settings do not say, and its safe-mode pin (``hardware_notes/wiring.md``).

Owns the names of the chips: an RP2350 (Pico 2) runs ``pico2``, an RP2040 ``pico``, an ESP32 ``esp32``. Pure
functions of what ``sys`` reports, so a test can give any answer.

Usage (``main.py``)::

    name = board_name(raw_settings, sys.platform, sys.implementation._machine)
    pin = SAFE_PINS[name]        # held low at boot: no logger, no watchdog, the REPL is free
"""

from micropython import const

from nightcell_fw.settings import BOARDS

PICO_SAFE_PIN = const(20)  # GP20, physical pin 26, beside a GND pin (28): one jumper shorts them
ESP32_SAFE_PIN = const(32)  # GPIO32: not a strapping pin, has an internal pull-up (GPIO0 would enter the ROM loader)
SAFE_PINS = {"pico": PICO_SAFE_PIN, "pico2": PICO_SAFE_PIN, "esp32": ESP32_SAFE_PIN, "sim": None}


def board_name(raw, platform, machine_text):
    """The profile: the settings' ``board`` when it is a known one, else the one the chip calls for."""
    if raw and raw.get("board") in BOARDS:
        return raw["board"]
    if platform == "esp32":
        return "esp32"
    if "RP2350" in (machine_text or ""):
        return "pico2"
    return "pico"
