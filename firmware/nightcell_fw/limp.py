"""The board while the logger cannot start: it answers every request with ERR (saying why and when it tries
again), feeds the watchdog and blinks code 4, instead of resetting into the same failure every 8 s.

Owns nothing on flash: what failed is journaled by the logger when it can be (a journal that cannot be opened is
the one failure it cannot journal; the ERR replies and the blink code say it then).

Usage (``main.py``)::

    limp = Limp(port, feed, time, status_pin)
    limp.wait(2000, "OSError: ...")        # answers and blinks for 2 s, then main.py tries again
"""

from nightcell_fw.link import LineReader, Frames, parse, NO_TAG
from nightcell_fw.signals import Signals, CODE_ERROR
from nightcell_fw.clock import ticks_diff


class Lamp:
    """The status LED as ``Signals`` drives it (a pin, or nothing)."""

    def __init__(self, pin):
        self.pin = pin
        self.has_status_led = pin is not None

    def status_led(self, on):
        if self.pin is not None:
            self.pin.value(1 if on else 0)


class Limp:
    def __init__(self, port, feed, time, pin=None):
        self.lines = LineReader(port)
        self.out = Frames(port)
        self.feed = feed
        self.time = time
        self.signals = Signals(Lamp(pin))
        self.signals.set(CODE_ERROR)
        self.answered = 0

    def wait(self, ms, text):
        t = self.time
        start = t.ticks_ms()
        reply = "the board cannot start: %s; it tries again in %d s (see hardware_notes: safe mode)" % (text, ms // 1000)
        while True:
            self.feed()
            now = t.ticks_ms()
            if ticks_diff(now, start) >= ms:
                return
            line = self.lines.poll()
            if line is not None:
                try:
                    tag = parse(line)[0]
                except ValueError:
                    tag = NO_TAG
                self.out.err(tag, reply)
                self.answered += 1
                continue
            self.signals.error_at = now  # keep code 4 on for as long as the board limps
            self.signals.show(now)
            t.sleep_ms(20)
