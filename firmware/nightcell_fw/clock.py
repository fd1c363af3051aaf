"""Time on the board: a monotonic uptime built from a wrapping tick counter, and the deadline schedule of a run.

Owns wrap-safe tick arithmetic. The tick counter wraps at 2^30 ms (about 12.4 days), as on an RP2040, whatever
interpreter runs the code; uptime is accumulated from tick differences so it never wraps inside the firmware
(records store it modulo 2^32). ``tick()`` must be called at least every 2^29 ms; the main loop calls it every few
seconds at most.

Deadlines are kept in uptime milliseconds and advanced by exact integer steps (``first + k * interval``), so the
schedule never drifts, however late a sample is taken. A sample taken late is recorded as late; when whole slots
are missed, the next slot is the next one still ahead, and the caller is told how many were skipped.

Usage::

    up = Uptime(board.ticks_ms)
    sch = Schedule()
    sch.start(up.tick() + warmup_ms, interval_ms)
    late = sch.due(up.tick())       # -1 if not yet due, else ms late for slot sch.slot_time
"""

from micropython import const

PERIOD = const(1 << 30)
_MASK = const((1 << 30) - 1)
_HALF = const(1 << 29)


def ticks_diff(a, b):
    """a − b for ticks wrapping at 2^30, in [−2^29, 2^29)."""
    d = (a - b) & _MASK
    if d >= _HALF:
        d -= PERIOD
    return d


def ticks_add(t, ms):
    return (t + ms) & _MASK


class Uptime:
    def __init__(self, ticks_ms):
        self._ticks = ticks_ms
        self._last = ticks_ms()
        self.ms = 0

    def tick(self):
        """Current uptime in ms (monotonic, unbounded)."""
        now = self._ticks()
        d = ticks_diff(now, self._last)
        if d > 0:
            self.ms += d
            self._last = now
        return self.ms


class Schedule:
    def __init__(self):
        self.active = False
        self.first = 0
        self.interval = 1000
        self.index = 0  # slot number of the next sample
        self.skipped = 0

    def start(self, first_ms, interval_ms):
        self.active = True
        self.first = first_ms
        self.interval = interval_ms
        self.index = 0
        self.skipped = 0

    def stop(self):
        self.active = False

    def next_time(self):
        return self.first + self.index * self.interval

    def until(self, now):
        """ms until the next slot (≤ 0 when due)."""
        return self.next_time() - now

    def take(self, now):
        """Claim the due slot: returns its scheduled time; ``skipped`` says how many whole slots were missed."""
        t = self.next_time()
        late = now - t
        self.skipped = 0
        if late >= self.interval:
            self.skipped = late // self.interval
            self.index += self.skipped
            t = self.next_time()
        self.index += 1
        return t

    def rebase(self, interval_ms):
        """Change the interval from the next slot on, keeping the slot just taken as the new origin."""
        if self.index > 0:
            self.first += (self.index - 1) * self.interval
            self.index = 1
        self.interval = interval_ms
