"""The ``pico`` profile (RP2040; also ``pico2``, RP2350): photodiode + transimpedance amplifier into the ADC.

Pins follow schema/settings_default.json and hardware_notes/wiring.md: ADC0 = GP26 (light), ADC1 = GP27
(reference photodiode, optional), LED GP15, second LED GP14, DS18B20 GP22, button GP16 to GND, status LED "LED".
``read_u16()`` returns the 12-bit conversion shifted up by 4; we undo it and store raw 12-bit counts. The chip
temperature (ADC channel 4) is a HEALTH trend only: it says how warm the board is, not the solution.

The ``machine`` module (and ``onewire``/``ds18x20`` when a probe is set) are passed in, never imported here.

Usage (what ``main.py`` does)::

    board = PicoBoard(machine, port, time, os)
    board.configure(settings)
"""

from micropython import const
from boards.base import Board

MAIN_LED = const(15)
SECOND_LED = const(14)
LIGHT_ADC = const(26)
REFERENCE_ADC = const(27)
PROBE_PIN = const(22)
BUTTON_PIN = const(16)
STATUS_LED = "LED"
_TEMP_CHANNEL = const(4)
_CAUSES = (("PWRON_RESET", 0), ("WDT_RESET", 1), ("SOFT_RESET", 2), ("DEEPSLEEP_RESET", 5))


class PicoBoard(Board):
    name = "pico"

    def __init__(self, machine, port, time, os, name="pico", wdt=None, onewire=None, ds18x20=None):
        Board.__init__(self, port)
        self.machine = machine
        self.time = time
        self.os = os
        self.name = name
        self.wdt = wdt
        self._onewire = onewire
        self._ds18x20 = ds18x20
        self._adc = []
        self._pins = []
        self._probe = None
        self._button = None
        self._status = None
        self._chip = None
        self._dither = []

    def configure(self, settings):
        Board.configure(self, settings)
        m = self.machine
        Pin = m.Pin
        self._pins = [Pin(ch["led"], Pin.OUT, value=0) for ch in settings["channels"]]
        self._inputs(settings)
        if settings["temp_pin"] is not None and self._onewire is not None:
            from boards.probe import Probe
            self._probe = Probe(self._onewire, self._ds18x20, Pin(settings["temp_pin"]), self.time)
        self.has_probe = settings["temp_pin"] is not None
        if settings["button_pin"] is not None:
            self._button = Pin(settings["button_pin"], Pin.IN, Pin.PULL_UP)
        self.has_button = self._button is not None
        if settings["status_led"] is not None:
            self._status = Pin(settings["status_led"], Pin.OUT, value=0)
        self.has_status_led = self._status is not None
        self.fast_poll = self.has_button or self.has_status_led
        self._dither = [Pin(p, Pin.OUT, value=0) for p in settings["dither_pins"]]
        self.dither_levels = 1 << len(self._dither)

    def _inputs(self, settings):
        m = self.machine
        self._adc = [m.ADC(m.Pin(ch["adc"])) for ch in settings["channels"]]
        if settings["reference_adc"] is not None:
            self._adc.append(m.ADC(m.Pin(settings["reference_adc"])))
        self._chip = m.ADC(_TEMP_CHANNEL)

    # -- measurement ------------------------------------------------------------------------------------------------

    def _drive(self, i, on):
        self._pins[i].value(1 if on else 0)

    def read(self, ch):
        return self._adc[ch].read_u16() >> 4

    def dither(self, level):
        i = 0
        for p in self._dither:
            p.value((level >> i) & 1)
            i += 1

    def full_scale(self, ch):
        return 4095

    def temperature(self):
        return self._probe.temperature_centi() if self._probe else None

    def chip_temp_centi(self):
        # RP2040 datasheet formula [memory]: T = 27 − (V − 0.706 V) / 0.001721 V/°C, V = counts · 3.3 / 4096
        if self._chip is None:
            return -32768
        v = (self._chip.read_u16() >> 4) * 3.3 / 4096
        return int((27 - (v - 0.706) / 0.001721) * 100)

    # -- people ----------------------------------------------------------------------------------------------------

    def button(self):
        return self._button is not None and self._button.value() == 0

    def status_led(self, on):
        if self._status is not None:
            self._status.value(1 if on else 0)

    # -- time, watchdog, link ---------------------------------------------------------------------------------------

    def ticks_ms(self):
        return self.time.ticks_ms()

    def feed(self):
        if self.wdt is not None:
            self.wdt.feed()

    def sleep_ms(self, ms):
        while ms > 0:  # long sleeps in steps, feeding the watchdog (≈ 8.3 s limit on RP2040)
            step = ms if ms < 1000 else 1000
            self.time.sleep_ms(step)
            self.feed()
            ms -= step

    def sleep_us(self, us):
        self.time.sleep_us(us)  # the rest between read pairs of one measurement: always well under a millisecond or so

    def wait_input(self, ms):
        self.port.wait(ms)

    # -- identity, storage, reset -----------------------------------------------------------------------------------

    def device_id(self):
        import binascii
        return binascii.hexlify(self.machine.unique_id()).decode()

    def reset_cause(self):
        c = self.machine.reset_cause()
        for name, code in _CAUSES:
            if getattr(self.machine, name, None) == c:
                return code
        return 4

    def fs_free(self):
        st = self.os.statvfs("/")
        return st[0] * st[3]

    def rand32(self):
        return int.from_bytes(self.os.urandom(4), "little")

    def reset(self):
        self.leds_off()
        self.machine.reset()
