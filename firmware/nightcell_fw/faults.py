"""Trouble on the board, kept within bounds: one error record per back-off interval, repeats counted in it.

Owns when a failing part is tried again and when an error is journaled. A fault (a sensor that does not answer, a
flash write that fails, any exception in a loop turn) starts a back-off of ``FIRST_MS`` that doubles at every new
failure up to ``MAX_MS``; while it lasts the loop takes no measurement (the slots are counted as skipped) but keeps
feeding the watchdog and answering the host. Only the first failure of each back-off interval is journaled; the
record says how many more happened since the record before. A success after the back-off clears it.

Usage::

    f = Faults()
    if f.failed(now_ms):             # True: journal one record now; f.repeats says how many it stands for
        journal(text, f.repeats)
    if f.waiting(now_ms): ...        # inside the back-off: do not try the failing part again yet
    f.clear()                        # after a success: returns the errors not yet journaled
"""

from micropython import const

FIRST_MS = const(1000)
MAX_MS = const(60000)


class Faults:
    def __init__(self):
        self.backoff = 0  # ms of the current back-off, 0 when nothing is wrong
        self.until = 0  # uptime ms at which the failing part may be tried again
        self.repeats = 0  # failures since the last journaled record (not journaled themselves)
        self.total = 0  # failures since boot
        self.records = 0  # error records journaled since boot

    def failed(self, now):
        """Count a failure at uptime ``now``; True when this one is to be journaled (the back-off has run out)."""
        self.total += 1
        if self.backoff and now < self.until:
            self.repeats += 1
            return False
        self.backoff = FIRST_MS if not self.backoff else min(self.backoff * 2, MAX_MS)
        self.until = now + self.backoff
        self.records += 1
        return True

    def journaled(self):
        """The count of unjournaled repeats a record now being written stands for (then zero)."""
        n = self.repeats
        self.repeats = 0
        return n

    def waiting(self, now):
        return self.backoff > 0 and now < self.until

    def clear(self):
        """A success: the back-off ends. Returns the failures since the last record (journal them if not 0)."""
        n = self.repeats
        self.backoff = 0
        self.repeats = 0
        return n
