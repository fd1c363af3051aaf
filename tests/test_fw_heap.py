"""Heap use of the logger over a 10 000-sample run, in MicroPython: peak above idle and growth.

Goals from the firmware issue: peak ≤ 20 KB above idle, zero growth. Idle is the live heap after boot and the first
sample of a run (every buffer the firmware keeps is allocated by then). The run includes marks, notes, anchors,
flushes, host reads and acknowledgements every 1000 samples. The firmware is loaded from .mpy, as on a board.

- Growth, on littlefs: live heap (after a full collection) at the end − the same after the first 1000 samples and
  one round of every request (what that first round adds over idle is reported as first use).
- Peak: the collector runs before every loop turn, and the live heap then plus every byte the turn allocates
  (garbage included) bounds the turn's peak from above. This is measured with the journal on a host folder: on
  littlefs every flash access here goes through a Python block device, whose call frames are heap garbage that a
  board's C flash driver does not make. What an open file costs on littlefs beyond a host folder (its cache and
  state, measured here in MicroPython on littlefs mounted as the board mounts it: 256-byte programs), times the
  files the logger holds open at once (3), is added to the measured peak.
"""

import subprocess

from support.fwharness import FIRMWARE, results, run_mp
from test_fw_compile import SOURCES, _mpy_cross

HEAP = r"""
import sys, gc
N = int(sys.argv[1])
MODE = sys.argv[2]
folder = sys.argv[3] if len(sys.argv) > 3 else None
from boards.simkit import SimKit, IntegerBoard
from nightcell_fw import records as R
buf = bytearray(4096)
kit = SimKit(blocks=40, settings={"interval_ms": 1000, "warmup_ms": 0}, board_class=IntegerBoard, folder=folder)
kit.request(b"1 start")
kit.run_ms(1000)
lg = kit.lg
pos = 0
mv = memoryview(buf)
kit.port.sent = bytearray(64)
gc.collect()
idle = gc.mem_alloc()
peak = 0
warm = 0
cp = 1000
while lg.samples < N:
    n0 = lg.samples
    if MODE == "peak":
        gc.collect()
    lg.run(1)
    if MODE == "peak":
        a = gc.mem_alloc() - idle
        if a > peak:
            peak = a
    if lg.samples >= cp:
        cp += 1000
        for line in (b"7 blank", b"8 note n", b"9 anchor 1796131200000", b"10 flush", b"11 status"):
            if MODE == "peak":
                gc.collect()
            kit.request(line)
            if MODE == "peak":
                a = gc.mem_alloc() - idle
                if a > peak:
                    peak = a
        kit.port.sent = None
        kit.port.sent = bytearray(64)
        while True:  # the host reads everything, then acknowledges it
            s, n = lg.journal.read(pos, 4096, mv)
            if not n:
                break
            pos = s + n
        kit.request(b"12 ack %d %08x" % (pos, R.crc32(b"ack %d" % pos)))
        kit.port.sent = None
        kit.port.sent = bytearray(64)
        if not warm:
            gc.collect()
            warm = gc.mem_alloc()
gc.collect()
end = gc.mem_alloc()
print("samples=%d" % lg.samples)
print("idle_bytes=%d" % idle)
print("first_use=%d" % (warm - idle))
print("growth=%d" % (end - warm))
print("peak_above_idle=%d" % peak)
print("tail=%d" % lg.journal.tail)
"""

OPEN_FILES = 3  # the segment being appended, the open-block file, one reader

LFS_FILE = r"""
import gc, os, sys
try:
    import vfs
except ImportError:
    vfs = os
from boards.simflash import RamBlockDevice
dev = RamBlockDevice(64)
vfs.VfsLfs2.mkfs(dev, progsize=256)
vfs.mount(vfs.VfsLfs2(dev, progsize=256), "/flash")  # as the rp2 port mounts its flash
def per_file(prefix):
    files = []
    gc.collect()
    before = gc.mem_alloc()
    for i in range(3):
        files.append(open(prefix + str(i), "ab"))
    gc.collect()
    after = gc.mem_alloc()
    for f in files:
        f.close()
    return (after - before) // 3
print("lfs=%d" % per_file("/flash/f"))
print("host=%d" % per_file(sys.argv[1] + "/f"))
"""


def lfs_file_extra(folder) -> int:
    """Heap an open file holds on littlefs beyond one in a host folder, in bytes (measured in MicroPython)."""
    res = results(run_mp(LFS_FILE, str(folder)))
    return int(res["lfs"]) - int(res["host"])


def compile_firmware(lib) -> list[str]:
    """Compile the firmware to .mpy, as it would be frozen or installed on a board (no compiler on the heap)."""
    for src in SOURCES:
        if src.parent == FIRMWARE:
            continue
        out = lib / src.relative_to(FIRMWARE).with_suffix(".mpy")
        out.parent.mkdir(parents=True, exist_ok=True)
        subprocess.run([_mpy_cross(), "-o", str(out), str(src)], check=True, cwd=str(FIRMWARE))
    return [str(lib)]


def run_heap(samples: int, mode: str, path: list[str], folder: str | None = None) -> dict[str, str]:
    args = [str(samples), mode] + ([folder] if folder else [])
    return results(run_mp(HEAP, *args, heap="600K", timeout=1200, path=path, with_sources=False))


def test_heap_growth_is_zero_over_10000_samples_on_littlefs(tmp_path):
    res = run_heap(10000, "growth", compile_firmware(tmp_path / "lib"))
    assert int(res["samples"]) >= 10000 and int(res["tail"]) > 0
    assert int(res["growth"]) == 0, res
    assert int(res["first_use"]) <= 4096, res  # one-off: the first mark, health record, acknowledgement


def test_heap_peak_within_20kb_of_idle(tmp_path):
    flash = tmp_path / "flash"
    flash.mkdir()
    res = run_heap(10000, "peak", compile_firmware(tmp_path / "lib"), str(flash))
    assert int(res["samples"]) >= 10000
    peak = int(res["peak_above_idle"]) + lfs_file_extra(tmp_path) * OPEN_FILES
    assert peak <= 20 * 1024, res


def test_an_open_littlefs_file_holds_its_cache(tmp_path):
    # littlefs on MicroPython gives each open file a cache of 4 × max(read, prog size) = 1 KiB with 256-byte
    # programs (from memory of MicroPython's vfs_lfs), plus littlefs's file state: the measured extra holds both
    extra = lfs_file_extra(tmp_path)
    assert 1024 <= extra <= 2048, extra
