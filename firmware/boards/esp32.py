"""The ``esp32`` profile: a TSL2591 I2C light sensor (our driver) instead of the ESP32's non-linear ADC.

Defaults (hardware_notes/wiring.md): TSL2591 at 0x29 on SDA GPIO21 / SCL GPIO22, LED GPIO25, second LED GPIO26,
DS18B20 GPIO4, button GPIO0 (the BOOT button), status LED GPIO2. A channel's ``adc`` is the sensor channel
(0 visible + infrared, 1 infrared). ``machine`` and friends are passed in, never imported here.

Usage::

    board = Esp32Board(machine, port, time, os)
    board.configure(settings)
"""

from micropython import const
from boards.pico import PicoBoard
from boards.tsl2591 import TSL2591

MAIN_LED = const(25)
SECOND_LED = const(26)
PROBE_PIN = const(4)
BUTTON_PIN = const(0)
STATUS_LED = const(2)
# what the esp32 profile uses where the settings file says nothing (the file's defaults describe a Pico). One
# TSL2591 conversion (100 ms integration: 5 periods of 50 Hz, 6 of 60 Hz) already averages; it gives both sensor
# channels, so a dark and a light value take two conversions (~0.24 s), not 16 reads × 2 × 120 ms (~3.9 s).
DEFAULTS = {"board": "esp32", "channels": [{"name": "main", "led": MAIN_LED, "adc": 0}], "button_pin": BUTTON_PIN,
            "status_led": STATUS_LED, "reads": 1, "settle_ms": 0}


class Esp32Board(PicoBoard):
    name = "esp32"

    def __init__(self, machine, port, time, os, wdt=None, onewire=None, ds18x20=None, esp32=None):
        PicoBoard.__init__(self, machine, port, time, os, "esp32", wdt, onewire, ds18x20)
        self._esp32 = esp32
        self.sensor = None
        self._bus = None
        self._address = 0
        self._fresh = 0  # bit per sensor channel: its value of the last conversion is not read yet

    def _inputs(self, settings):
        m = self.machine
        i2c = settings["i2c"]
        self._bus = m.I2C(0, sda=m.Pin(i2c["sda"]), scl=m.Pin(i2c["scl"]), freq=400000)
        self._address = i2c["address"]
        self._adc = [ch["adc"] for ch in settings["channels"]]
        if settings["reference_adc"] is not None:
            self._adc.append(1)  # the sensor's infrared channel stands in; a second sensor is not supported
        self.fault = None
        try:
            self._connect()
        except OSError as e:  # a loose or dead sensor must not stop the board: retried at the next read
            self.fault = str(e)

    def _connect(self):
        s = TSL2591(self._bus, self._address, self.sleep_ms)
        s.configure()
        self.sensor = s
        self.fault = None
        return s

    def _drive(self, i, on):
        PicoBoard._drive(self, i, on)
        self._fresh = 0  # the light changed: the next read needs a new conversion

    def read(self, ch):
        """One conversion gives both sensor channels: a second channel read under the same light uses it."""
        s = self.sensor or self._connect()
        sc = self._adc[ch]
        bit = 1 << sc
        if not self._fresh & bit:
            try:
                s.convert()
            except OSError:
                self.sensor = None  # configured again before the next read (the sensor may have lost power)
                raise
            self._fresh = 3
        self._fresh &= ~bit
        return s.values[sc]

    def conversion_ms(self):
        return 100 * (self.sensor.integration + 1) + 20 if self.sensor else 120

    def full_scale(self, ch):
        return self.sensor.full_scale() if self.sensor else 37888

    def chip_temp_centi(self):
        if self._esp32 is None or not hasattr(self._esp32, "raw_temperature"):
            return -32768
        return int((self._esp32.raw_temperature() - 32) * 500 / 9)  # °F → centi-°C

