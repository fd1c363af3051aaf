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
# what the esp32 profile uses where the settings file says nothing (the file's defaults describe a Pico)
DEFAULTS = {"board": "esp32", "channels": [{"name": "main", "led": MAIN_LED, "adc": 0}], "button_pin": BUTTON_PIN,
            "status_led": STATUS_LED}


class Esp32Board(PicoBoard):
    name = "esp32"

    def __init__(self, machine, port, time, os, wdt=None, onewire=None, ds18x20=None, esp32=None):
        PicoBoard.__init__(self, machine, port, time, os, "esp32", wdt, onewire, ds18x20)
        self._esp32 = esp32
        self.sensor = None

    def _inputs(self, settings):
        m = self.machine
        i2c = settings["i2c"]
        bus = m.I2C(0, sda=m.Pin(i2c["sda"]), scl=m.Pin(i2c["scl"]), freq=400000)
        self.sensor = TSL2591(bus, i2c["address"], self.sleep_ms)
        self.sensor.configure()
        self._adc = [ch["adc"] for ch in settings["channels"]]
        if settings["reference_adc"] is not None:
            self._adc.append(1)  # the sensor's infrared channel stands in; a second sensor is not supported

    def read(self, ch):
        return self.sensor.read(self._adc[ch])

    def full_scale(self, ch):
        return self.sensor.full_scale()

    def chip_temp_centi(self):
        if self._esp32 is None or not hasattr(self._esp32, "raw_temperature"):
            return -32768
        return int((self._esp32.raw_temperature() - 32) * 500 / 9)  # °F → centi-°C

