"""Journal benchmark, in MicroPython on littlefs over a counted RAM block device the size of a Pico's filesystem
(352 blocks of 4 KiB, 256-byte programs, as the rp2 port mounts it): bytes per sample, days per MB at 10 s,
syncs, programs and erases per day, and the projected flash life at the default durability window.

Flash life assumes 100 000 erase cycles per block (the issue's figure) with wear levelled over the whole
filesystem (littlefs moves metadata pairs every few hundred erases and allocates data blocks across free space);
life = blocks × cycles ÷ erases per day. For comparison the same day is logged by appending every sample to a
large file with a sync (the straightforward design), measured in the same run.

    python tests/bench/bench_fw_journal.py [--quick]
"""

from __future__ import annotations

import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from support.fwharness import results, run_mp  # noqa: E402

SCRIPT = r"""
import sys
from boards.simkit import SimKit
DAYS = float(sys.argv[1])
INTERVAL = int(sys.argv[2])
WINDOW = int(sys.argv[3])
kit = SimKit(blocks=352, settings={"interval_ms": INTERVAL, "durability_ms": WINDOW, "warmup_ms": 2000},
             optics={"led_counts": 3000, "dark_counts": 120, "noise_counts": 2, "stray": 0.002, "ambient_counts": 30})
lg = kit.lg
j = lg.journal
dev = kit.dev
saves = [0]
appends = [0]
so, ap = j.save_open, j.append
def s1(rec):
    saves[0] += 1
    so(rec)
def a1(rec, force=False):
    appends[0] += 1
    return ap(rec, force)
j.save_open = s1
j.append = a1
kit.request(b"1 start")
kit.run_ms(10000)
h0, p0, b0, e0, n0 = j.head, dev.progs, dev.prog_bytes, dev.erases, lg.samples
saves[0] = appends[0] = 0
ms = int(DAYS * 86400000)
kit.run_ms(ms)
kit.request(b"2 flush")
n = lg.samples - n0
print("samples=%d" % n)
print("journal_bytes=%d" % (j.head - h0))
print("progs=%d" % (dev.progs - p0))
print("prog_bytes=%d" % (dev.prog_bytes - b0))
print("erases=%d" % (dev.erases - e0))
print("saves=%d" % saves[0])
print("appends=%d" % appends[0])
print("days=%f" % DAYS)
print("blocks=352")
"""

NAIVE = r"""
import sys, vfs
from boards.simflash import RamBlockDevice
DAYS = float(sys.argv[1])
dev = RamBlockDevice(352)
vfs.VfsLfs2.mkfs(dev, progsize=256)
vfs.mount(vfs.VfsLfs2(dev, progsize=256), "/flash")
f = open("/flash/seg", "ab")
rec = bytes(32)  # a one-sample SAMPLES record is 32 bytes (29 of framing, 3 of sample)
n = int(DAYS * 8640)
e0 = dev.erases
for i in range(n):
    if i % 500 == 0:  # rotate 16 KiB segments, as the journal does
        f.close()
        f = open("/flash/seg%d" % (i // 500), "ab")
    f.write(rec)
    f.flush()
print("naive_erases=%d" % (dev.erases - e0))
print("naive_samples=%d" % n)
"""

CYCLES = 100_000


def measure(days: float, interval: int, window: int) -> dict[str, float]:
    r = results(run_mp(SCRIPT, str(days), str(interval), str(window), heap="8M", timeout=3600))
    return {k: float(v) for k, v in r.items()}


def run(quick: bool) -> list[dict]:
    days = 0.25 if quick else 2.0
    d = measure(days, 10_000, 10_000)
    fast = measure(days / 10, 1_000, 10_000)
    naive = {k: float(v) for k, v in results(run_mp(NAIVE, str(days), heap="8M", timeout=3600)).items()}
    bps = d["journal_bytes"] / d["samples"]
    bps_fast = fast["journal_bytes"] / fast["samples"]
    per_day = 1 / d["days"]
    erases_day = d["erases"] * per_day
    syncs_day = (d["saves"] + d["appends"]) * per_day
    life_years = d["blocks"] * CYCLES / erases_day / 365.25
    naive_erases_day = naive["naive_erases"] / d["days"]
    naive_life = d["blocks"] * CYCLES / naive_erases_day / 365.25
    days_per_mb = 1e6 / (bps * 8640)
    return [
        {"name": "fw bytes per sample (1 channel, 10 s, default window)", "value": round(bps, 2), "goal": "<= 4",
         "ok": bps <= 4},
        {"name": "fw bytes per sample (1 channel, 1 s)", "value": round(bps_fast, 2), "goal": "<= 4",
         "ok": bps_fast <= 4},
        {"name": "fw days per MB at 10 s", "value": round(days_per_mb, 1), "goal": ">= 30", "ok": days_per_mb >= 30},
        {"name": "fw syncs per day at the default window", "value": round(syncs_day), "goal": "(reported)",
         "ok": True},
        {"name": "fw programs per day", "value": round(d["progs"] * per_day), "goal": "(reported)", "ok": True},
        {"name": "fw bytes programmed per day", "value": round(d["prog_bytes"] * per_day), "goal": "(reported)",
         "ok": True},
        {"name": "fw erases per day", "value": round(erases_day), "goal": "(reported)", "ok": True},
        {"name": "fw projected flash life, years (352 blocks x 100k cycles, levelled)", "value": round(life_years, 1),
         "goal": ">= 10", "ok": life_years >= 10},
        {"name": "fw erases per day, append+sync per sample (comparison)", "value": round(naive_erases_day),
         "goal": "(reported)", "ok": True},
        {"name": "fw flash life ratio: journal vs append+sync per sample", "value": round(life_years / naive_life, 2),
         "goal": "> 1", "ok": life_years > naive_life},
    ]


if __name__ == "__main__":  # the same as: python tests/bench/run.py --only NAME [--quick] [--json]
    from run import script

    sys.exit(script(__file__))
