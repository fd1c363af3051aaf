"""Our driver for the TSL2591 I2C light sensor (used by the ``esp32`` profile instead of the ESP32's ADC).

Register map and bits are from the sensor's datasheet as recalled [memory — check against the datasheet before
relying on a value]: command byte 0xA0 | register; ENABLE 0x00 (PON bit 0, AEN bit 1); CONTROL 0x01 (gain in bits
5:4, integration time in bits 2:0, 100 ms per step from 0 = 100 ms); ID 0x12 reads 0x50; STATUS 0x13 (AVALID bit 0);
channel 0 (visible + infrared) at 0x14–0x15, channel 1 (infrared) at 0x16–0x17. A 100 ms integration saturates at
37888 counts, longer ones at 65535.

Every ``read`` returns a fresh conversion: the ADC is restarted and the driver waits for AVALID, so a read after
switching the LED never sees light from before the switch. Waiting is done through the ``sleep_ms`` passed in, which
feeds the watchdog.

Usage::

    s = TSL2591(i2c, 0x29, sleep_ms)
    s.configure(gain=1, integration=0)      # medium gain, 100 ms
    counts = s.read(0)                       # channel 0 of a fresh conversion
"""

from micropython import const

_CMD = const(0xA0)
_ENABLE = const(0x00)
_CONTROL = const(0x01)
_ID = const(0x12)
_STATUS = const(0x13)
_C0 = const(0x14)
_PON = const(0x01)
_AEN = const(0x02)
_AVALID = const(0x01)
DEVICE_ID = const(0x50)


class TSL2591:
    def __init__(self, i2c, address, sleep_ms):
        self.i2c = i2c
        self.address = address
        self.sleep_ms = sleep_ms
        self.buf = bytearray(4)
        self.one = bytearray(1)
        self.integration = 0
        self.values = [0, 0]
        try:
            found = self._get(_ID)
        except OSError as e:  # nothing acknowledges the address (ENODEV, ETIMEDOUT): say what to check
            found = "no answer, %s" % e
        if found != DEVICE_ID:
            raise OSError("no TSL2591 answers at I2C address 0x%02x (%s): check SDA/SCL wiring and the address"
                          % (address, found))

    def _get(self, reg):
        self.i2c.readfrom_mem_into(self.address, _CMD | reg, self.one)
        return self.one[0]

    def _set(self, reg, v):
        self.one[0] = v
        self.i2c.writeto_mem(self.address, _CMD | reg, self.one)

    def configure(self, gain=1, integration=0):
        self.integration = integration
        self._set(_CONTROL, ((gain & 3) << 4) | (integration & 7))
        self._set(_ENABLE, _PON | _AEN)

    def full_scale(self):
        return 37888 if self.integration == 0 else 65535

    def convert(self):
        """Restart the ADC and wait for a complete integration; fills ``values`` with both channels."""
        self._set(_ENABLE, _PON)
        self._set(_ENABLE, _PON | _AEN)
        wait = 100 * (self.integration + 1) + 20
        self.sleep_ms(wait)
        for _ in range(20):
            if self._get(_STATUS) & _AVALID:
                break
            self.sleep_ms(10)
        else:
            raise OSError("the TSL2591 never finished a conversion: check its power and wiring")
        self.i2c.readfrom_mem_into(self.address, _CMD | _C0, self.buf)
        b = self.buf
        self.values[0] = b[0] | (b[1] << 8)
        self.values[1] = b[2] | (b[3] << 8)

    def read(self, ch):
        self.convert()
        return self.values[ch]
