"""The deadline schedule and the wrapping tick counter, in MicroPython.

The tick arithmetic is checked against plain modular arithmetic (ticks wrap at 2^30 ms like an RP2040's — a fact of
the platform stated in the MicroPython docs for ``time.ticks_ms``, recalled [memory]). The schedule is driven through
10^6 samples across a ticks wrap with random lateness and occasional stalls longer than an interval: every sample's
scheduled time must be exactly first + k·interval (zero cumulative drift), lateness must be what was injected, and
missed slots must be counted, not moved.
"""

from support.fwharness import results, run_mp

SCHEDULE = r"""
import sys, random
from nightcell_fw.clock import Uptime, Schedule, ticks_diff, ticks_add, PERIOD
N = int(sys.argv[1])
random.seed(5)
# ticks arithmetic against modular arithmetic
for _ in range(20000):
    a = random.getrandbits(30); d = random.randint(-(1 << 29), (1 << 29) - 1)
    b = ticks_add(a, d)
    assert 0 <= b < PERIOD and ticks_diff(b, a) == d, (a, d, b)

class Ticks:
    def __init__(self, t): self.t = t
    def __call__(self): return self.t & (PERIOD - 1)
tk = Ticks(PERIOD - 3600 * 1000)     # the counter wraps one board hour in
up = Uptime(tk)
sch = Schedule()
interval = 1000
sch.start(up.tick() + 2000, interval)
taken = 0
skipped = 0
wraps = 0
last_ticks = tk()
stall_at = {N // 3: 2500, N // 2: 7200, (2 * N) // 3: 999}
k = 0
while taken < N:
    now = up.tick()
    wait = sch.until(now)
    if wait > 0:
        tk.t += wait          # the loop sleeps exactly until the deadline ...
        continue
    t = sch.take(now)
    if sch.skipped:
        skipped += sch.skipped
        k += sch.skipped
    assert t == sch.first + k * interval, (taken, t)
    assert now - t == (now - t) % interval  # late by less than one interval, never moved
    k += 1
    taken += 1
    late = random.randint(0, 40) if taken % 97 else 300
    late = stall_at.get(taken, late)
    tk.t += late              # ... and wakes late by a random amount, sometimes by more than an interval
    if tk() < last_ticks:
        wraps += 1
    last_ticks = tk()
drift = (sch.next_time() - interval) - (sch.first + (k - 1) * interval)
print("taken=%d" % taken)
print("skipped=%d" % skipped)
print("wraps=%d" % wraps)
print("drift=%d" % drift)
print("uptime=%d" % up.tick())
print("expected_uptime=%d" % (tk.t - (PERIOD - 3600 * 1000)))
"""


def test_ticks_math_and_a_million_samples_across_the_wrap_with_zero_drift():
    res = results(run_mp(SCHEDULE, "1000000", timeout=600))
    assert res["taken"] == "1000000"
    assert int(res["wraps"]) >= 1
    assert res["drift"] == "0"
    # stalls of 2500, 7200 and 999 ms after a sample (plus ≤ 40 ms of lateness) leave the next slot 1500, 6200
    # and −1 ms behind: 1, 6 and 0 whole slots are missed, and the sample after them is taken late
    assert res["skipped"] == str(1 + 6 + 0)
    assert res["uptime"] == res["expected_uptime"]  # uptime keeps counting through the wrap


def test_logger_samples_across_a_ticks_wrap_without_drift():
    script = r"""
from boards.simkit import SimKit
import struct
start = (1 << 30) - 5 * 60 * 1000       # the board's ticks wrap five minutes into the run
kit = SimKit(blocks=48, ticks_start_ms=start, settings={"interval_ms": 10000, "warmup_ms": 0})
kit.request(b"1 start")
kit.run_ms(3 * 3600 * 1000)
kit.request(b"2 flush")
buf = bytearray(4096)
pos = 0
firsts = []
while True:
    s, n = kit.lg.journal.read(pos, 4096, memoryview(buf))
    if not n:
        break
    i = 0
    while i < n:
        L = buf[i + 2] | buf[i + 3] << 8
        if buf[i + 1] == 2:
            boot, seq, up = struct.unpack_from("<III", buf, i + 4)
            iv = struct.unpack_from("<I", buf, i + 16)[0]
            firsts.append((seq, up, iv, buf[i + 24]))
        i += L + 8
    pos = s + n
total = sum(f[3] for f in firsts)
# each block starts exactly where the one before it ends: the previous start + count · interval
ok = all(firsts[i][1] == firsts[i - 1][1] + firsts[i - 1][3] * firsts[i - 1][2] for i in range(1, len(firsts)))
print("samples=%d" % total)
print("aligned=%d" % ok)
print("blocks=%d" % len(firsts))
"""
    res = results(run_mp(script, timeout=300))
    assert int(res["samples"]) >= 3 * 360 - 1
    assert res["aligned"] == "1"  # every block starts exactly on first + k·interval, after the wrap too
    assert int(res["blocks"]) >= 2
