"""One measurement, the same for every sample and every mark: short LED pulses, dark and light interleaved, the reads
spread over a window so that mains hum averages out.

Owns the order of LED switching and reading. The LED is off except during a pulse: each pulse is the LED on for
``settle_ms`` and then read, and the same pulses (same on-time, same spacing) make up every measurement, marks and
samples alike, so the LED's junction is at the same temperature for a blank and for a run. The ``reads`` raw counts
summed into each dark and light value are taken in ``pairs`` (LED off → settle → dark reads; each LED on → settle →
light reads → off) spaced evenly over ``window_ms``: 20 ms spans one period of 50 Hz mains, 100 ms five of 50 Hz and
six of 60 Hz. A pair needs (1 + LEDs) × ``settle_ms``; the window holds the most pairs that fit and divide
``reads`` (equal weights); with a window of 0 the reads come in one burst (the earlier firmware's only pattern). The board does the hardware (``led``, ``read``, ``full_scale``, ``sleep_ms``,
``sleep_us``); values are kept in lists allocated once. Where dither resistors are fitted (``dither_pins``), the
reads of each burst step through the dither offsets, the same steps in the dark and the light burst, so the offsets
cancel in light − dark while the RP2040's non-linear codes (near 512, 1536, 2560, 3584) are crossed by only a
fraction of the reads of a value instead of all of them at once.

Usage::

    s = Sampler(board)
    s.configure(reads=16, settle_ms=5, channels=1, dark_limit=200, window_ms=20)
    flags = s.measure()            # bit 0 saturated, bit 1 ambient unstable
    s.dark[0], s.light[0]
    s.duration_ms()                # how long one measurement takes on this board
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
        self.window_ms = 20
        self.channels = 1
        self.dark_limit = 200
        self.leds = 1
        self.pairs = 1
        self.rest_us = 0

    def configure(self, reads, settle_ms, channels, dark_limit, window_ms=20):
        self.reads = reads
        self.settle_ms = settle_ms
        self.window_ms = window_ms
        self.channels = channels
        self.dark_limit = dark_limit
        self._have_prev = False
        b = self.board
        leds = 1
        for c in range(channels):
            if b.led_of(c) + 1 > leds:
                leds = b.led_of(c) + 1
        self.leds = leds
        pair_us = (1 + leds) * settle_ms * 1000
        most = reads if pair_us == 0 else window_ms * 1000 // pair_us
        # the most pairs that fit and divide ``reads``: equal weights, so evenly spaced pairs cancel the hum
        pairs = max(1, min(reads, most))
        while reads % pairs:
            pairs -= 1
        self.pairs = pairs
        self.rest_us = max(0, window_ms * 1000 // pairs - pair_us)

    def duration_ms(self):
        """Board time one measurement takes: the pairs' settle waits and rests, plus the board's conversions."""
        conv = self.board.conversion_ms()
        pair = (1 + self.leds) * self.settle_ms
        # every read of a pair under one light is a conversion on a sensor that converts (one for all channels)
        per_pair = pair + conv * (1 + self.leds) * (self.reads // self.pairs)
        return self.pairs * per_pair + (self.pairs - 1) * self.rest_us // 1000

    def restart(self):
        """Forget the previous dark value (a new run, or a gap in the schedule)."""
        self._have_prev = False

    def _sum(self, ch, k):
        # with dither resistors fitted, read j of every burst is taken at offset j mod levels: the same offsets in
        # the dark and the light burst, so they cancel in light − dark while the codes each read lands on are spread
        b = self.board
        fs = b.full_scale(ch)
        levels = b.dither_levels
        s = 0
        sat = 0
        for j in range(k):
            if levels > 1:
                b.dither(j % levels)
            v = b.read(ch)
            if v >= fs:
                sat = SATURATED
            s += v
        return s, sat

    def measure(self, lit=True):
        """Fill ``dark``/``light``; with ``lit`` False the light reads are taken with the LEDs still off (same timing)."""
        b = self.board
        n = self.channels
        dark = self.dark
        light = self.light
        settle = self.settle_ms
        pairs = self.pairs
        k = self.reads // pairs
        flags = 0
        for c in range(n):
            dark[c] = 0
            light[c] = 0
        b.leds_off()
        for i in range(pairs):
            b.sleep_ms(settle)
            for c in range(n):
                v, sat = self._sum(c, k)
                dark[c] += v
                flags |= sat
            c = 0
            while c < n:
                led = b.led_of(c)
                if lit:
                    b.led(led, True)
                b.sleep_ms(settle)
                # channels sharing this LED (the reference photodiode) are read while it is on
                while c < n and b.led_of(c) == led:
                    v, sat = self._sum(c, k)
                    light[c] += v
                    flags |= sat
                    c += 1
                if lit:
                    b.led(led, False)
            if self.rest_us and i < pairs - 1:
                b.sleep_us(self.rest_us)
        if b.dither_levels > 1:
            b.dither(0)
        limit = self.dark_limit
        prev = self._prev_dark
        for c in range(n):
            if self._have_prev and abs(dark[c] - prev[c]) > limit:
                flags |= UNSTABLE
            prev[c] = dark[c]
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
