"""An optional DS18B20 solution-temperature probe on one-wire, read without ever waiting for a conversion.

A conversion takes up to 750 ms, so the probe starts one, and the next request (normally the next sample) reads it
and starts another: the value logged with a sample is at most one interval old. The one-wire and DS18B20 drivers
are MicroPython's own (``onewire``, ``ds18x20``), passed in by the board profile.

Usage::

    probe = Probe(onewire, ds18x20, machine.Pin(22), time)
    probe.temperature_centi()      # None until the first conversion is done, or when no sensor answers
"""

from micropython import const

_CONVERT_MS = const(750)


class Probe:
    def __init__(self, onewire, ds18x20, pin, time):
        self.time = time
        self.ds = ds18x20.DS18X20(onewire.OneWire(pin))
        self.roms = self.ds.scan()
        self.started = None
        self.last = None
        self._start()

    def _start(self):
        if self.roms:
            try:
                self.ds.convert_temp()
                self.started = self.time.ticks_ms()
            except OSError:
                self.started = None

    def temperature_centi(self):
        if self.started is None:
            self._start()
            return None
        if self.time.ticks_diff(self.time.ticks_ms(), self.started) < _CONVERT_MS:
            return self.last
        try:
            t = self.ds.read_temp(self.roms[0])
            self.last = None if t is None or t == 85.0 else int(round(t * 100))  # 85 °C is the power-up value
        except (OSError, Exception):  # a loose wire gives CRC errors: log "no reading", never stop
            self.last = None
        self._start()
        return self.last
