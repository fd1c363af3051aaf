"""One measurement: LED off → settle → summed dark reads; each LED on → settle → summed light reads.

Owns the order of LED switching and reading. The board does the hardware (``led``, ``read``, ``full_scale``,
``sleep_ms``); values are sums of ``reads`` raw counts per channel, kept in lists allocated once. A reference
photodiode, when fitted, is one more channel, lit by the first channel's LED.

Usage::

    s = Sampler(board)
    s.configure(reads=16, settle_ms=5, channels=1, dark_limit=200)
    flags = s.measure()            # bit 0 saturated, bit 1 ambient unstable
    s.dark[0], s.light[0]
"""

from micropython import const

SATURATED = const(1)
UNSTABLE = const(2)


class Sampler:
    def __init__(self, board):
        self.board = board
        self.dark = [0, 0, 0, 0, 0]
        self.light = [0, 0, 0, 0, 0]
        self.avg_dark = [0, 0, 0, 0, 0]
        self.avg_light = [0, 0, 0, 0, 0]
        self._prev_dark = [0, 0, 0, 0, 0]
        self._have_prev = False
        self.reads = 16
        self.settle_ms = 5
        self.channels = 1
        self.dark_limit = 200

    def configure(self, reads, settle_ms, channels, dark_limit):
        self.reads = reads
        self.settle_ms = settle_ms
        self.channels = channels
        self.dark_limit = dark_limit
        self._have_prev = False

    def restart(self):
        """Forget the previous dark value (a new run, or a gap in the schedule)."""
        self._have_prev = False

    def _sum(self, ch):
        b = self.board
        fs = b.full_scale(ch)
        s = 0
        sat = 0
        for _ in range(self.reads):
            v = b.read(ch)
            if v >= fs:
                sat = SATURATED
            s += v
        return s, sat

    def measure(self, lit=True):
        """Fill ``dark``/``light``; with ``lit`` False the light reads are taken with the LEDs still off."""
        b = self.board
        n = self.channels
        flags = 0
        b.leds_off()
        b.sleep_ms(self.settle_ms)
        for c in range(n):
            self.dark[c], sat = self._sum(c)
            flags |= sat
        c = 0
        while c < n:
            led = b.led_of(c)
            if lit:
                b.led(led, True)
                b.sleep_ms(self.settle_ms)
            # channels sharing this LED (the reference photodiode) are read while it is on
            while c < n and b.led_of(c) == led:
                self.light[c], sat = self._sum(c)
                flags |= sat
                c += 1
            if lit:
                b.led(led, False)
        limit = self.dark_limit
        prev = self._prev_dark
        for c in range(n):
            if self._have_prev and abs(self.dark[c] - prev[c]) > limit:
                flags |= UNSTABLE
            prev[c] = self.dark[c]
        self._have_prev = True
        return flags

    def average(self, samples, lit=True):
        """Measure ``samples`` times and keep the rounded mean sums in ``avg_dark``/``avg_light``."""
        n = self.channels
        for c in range(n):
            self.avg_dark[c] = 0
            self.avg_light[c] = 0
        flags = 0
        for _ in range(samples):
            flags |= self.measure(lit)
            self.board.feed()
            for c in range(n):
                self.avg_dark[c] += self.dark[c]
                self.avg_light[c] += self.light[c]
        half = samples // 2
        for c in range(n):
            self.avg_dark[c] = (self.avg_dark[c] + half) // samples
            self.avg_light[c] = (self.avg_light[c] + half) // samples
        self._have_prev = False
        return flags & SATURATED
