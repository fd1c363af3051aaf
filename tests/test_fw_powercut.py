"""Power cuts at the N-th flash program or erase, in MicroPython, on littlefs over a RAM block device.

A realistic run (1-s samples, marks, notes, anchors, flushes, host reads and acknowledgements, segment rotation)
is cut again and again: the block device stops, or tears the operation in flight, at a random program or erase;
the board then remounts, recovers and resumes. After every cut the script checks: the filesystem mounts, every
record of the journal reads back whole with a good CRC (0 unreadable journals), the new boot wrote its BOOT record,
no (boot, seq) appears twice, every sample taken more than the durability window before the cut is on the board or
already with the host, and its counts are the ones the sampler produced. The final journal is then decoded again in
CPython with the host's reference codec (host/nightcell/wire/frames.py).

The benchmark tests/bench/bench_fw_powercut.py runs the same campaign with ≥ 2000 cuts.
"""

from __future__ import annotations

from support.fwharness import results, run_mp
from nightcell.wire import frames as F

CAMPAIGN = r"""
import sys, struct, random, binascii
from boards.simkit import SimKit, PowerCut
from nightcell_fw import records as R

CUTS = int(sys.argv[1])
SEED = int(sys.argv[2])
DUMP = sys.argv[3] if len(sys.argv) > 3 and sys.argv[3] != "-" else None
INTERVAL = int(sys.argv[4]) if len(sys.argv) > 4 else 1000
WINDOW = int(sys.argv[5]) if len(sys.argv) > 5 else 3000
IMAGE = sys.argv[6] if len(sys.argv) > 6 else None  # where to write the raw flash at the end
MARGIN = 200        # board ms a mark or a reply may delay the schedule
random.seed(SEED)

def uv(b, i):
    n = 0; sh = 0
    while True:
        x = b[i]; i += 1
        n |= (x & 0x7F) << sh
        if not x & 0x80:
            return n, i
        sh += 7

def sv(b, i):
    z, i = uv(b, i)
    return (z >> 1) if not z & 1 else -((z + 1) >> 1), i

def records(buf, start):
    # yields (position, kind, boot, seq, record bytes); asserts every record is whole and checks out
    i = 0
    while i < len(buf):
        assert buf[i] == 0xC5, "no record at position %d" % (start + i)
        n = buf[i + 2] | buf[i + 3] << 8
        rec = buf[i:i + n + 8]
        assert len(rec) == n + 8, "record cut short at %d" % (start + i)
        assert R.crc32(rec[:n + 4]) == struct.unpack_from("<I", rec, n + 4)[0], "bad crc at %d" % (start + i)
        boot, seq = struct.unpack_from("<II", rec, 4)
        yield start + i, rec[1], boot, seq, rec
        i += n + 8

def samples(rec):
    boot, seq = struct.unpack_from("<II", rec, 4)
    ch, opt, count = rec[22], rec[23], rec[24]
    i = 25; d = l = 0
    for k in range(count):
        z, i = uv(rec, i)
        dd, i = sv(rec, i); dl, i = sv(rec, i)
        d += dd; l += dl
        yield (boot, seq + k), (d, l)

truth = {}      # (boot, seq) -> (scheduled ms on the virtual clock, dark, light)
host = {}       # what the host has read and stored before acknowledging
open_keys = {}  # samples neither with the host nor excused by an earlier cut (lost inside its window)
kit = SimKit(blocks=40, settings={"interval_ms": INTERVAL, "durability_ms": WINDOW, "segment_bytes": 2048,
                                  "warmup_ms": 0, "marker_samples": 2, "reads": 4, "settle_ms": 2}, cuts=True)

def hook():
    lg = kit.lg
    blk = lg.block
    add = blk.add
    def spy(late, flags, dark, light, temp):
        k = (lg.boot_id, blk.seq + blk.count)
        truth[k] = (kit.clock.t - late, dark[0], light[0])
        open_keys[k] = 1
        add(late, flags, dark, light, temp)
    blk.add = spy

def read_all(upto=None):
    j = kit.lg.journal
    buf = bytearray(4096)
    pos = j.tail
    out = []
    while True:
        start, n = j.read(pos, 4096, memoryview(buf))
        if n == 0:
            break
        assert start == pos, (start, pos)
        out.extend(records(bytes(buf[:n]), start))
        pos = start + n
    assert pos == j.head, (pos, j.head)
    return out

def check(t_cut, boot):
    recs = read_all()
    seen = {}
    boots = [r for r in recs if r[1] == R.KIND_BOOT]
    assert boots and boots[-1][2] == boot, "no BOOT record for boot %d" % boot
    for pos, kind, b, s, rec in recs:
        keys = [k for k, v in samples(rec)] if kind == R.KIND_SAMPLES else [(b, s)]
        for k in keys:
            assert k not in seen, "duplicate record %r" % (k,)
            seen[k] = 1
        if kind == R.KIND_SAMPLES:
            for k, v in samples(rec):
                assert k in truth, "sample %r was never taken" % (k,)
                assert truth[k][1:] == v, "sample %r counts changed" % (k,)
    lost = 0
    count = 0
    for k in list(open_keys):
        if k not in seen and k not in host:
            age = t_cut - truth[k][0]
            count += 1
            del open_keys[k]  # lost young in this cut: it may not come back later either
            assert age < WINDOW + MARGIN, "sample %r taken %d ms before the cut is lost" % (k, age)
            lost = max(lost, age)
    return lost, count, len(recs)

def sync_and_ack():
    recs = read_all()
    if len(recs) < 4:
        return
    upto = recs[len(recs) // 2][0]
    for pos, kind, b, s, rec in recs:
        if pos < upto and kind == R.KIND_SAMPLES:
            for k, v in samples(rec):
                host[k] = v
                if k in open_keys:
                    del open_keys[k]
    r = kit.request(b"90 ack %d %08x" % (upto, R.crc32(b"ack %d" % upto)))
    assert r[2] == 1, r

def action():
    x = random.random()
    if x < 0.45:
        kit.run_ms(random.randint(INTERVAL // 2, 8 * INTERVAL))
    elif x < 0.55:
        kit.request(b"91 note n%d" % random.randint(0, 99))
    elif x < 0.62:
        kit.request(b"92 blank")
    elif x < 0.67:
        kit.request(b"93 standard 0.%d std" % random.randint(1, 9))
    elif x < 0.74:
        kit.request(b"94 anchor %d" % (1796131200000 + kit.clock.t))
    elif x < 0.80:
        kit.request(b"95 flush")
    elif x < 0.90:
        sync_and_ack()
    elif x < 0.95:
        if kit.lg.running:
            kit.request(b"96 stop")
    else:
        kit.request(b"97 hello")
    if not kit.lg.running:
        kit.request(b"98 start")

hook()
kit.request(b"1 start")
cuts = torn = boot_cuts = 0
segments = {}
worst_count = 0
worst = 0
max_recs = 0
while cuts < CUTS:
    kit.dev.cut_at = kit.dev.ops + random.randint(1, 80)
    kit.dev.tear = random.random() < 0.5
    try:
        while True:
            action()
    except PowerCut:
        pass
    t_cut = kit.clock.t
    kit.dev.cut_at = -1
    cuts += 1
    torn += kit.dev.tear
    while True:
        # power returns; sometimes it fails again while the board is still booting
        if random.random() < 0.1:
            kit.dev.cut_at = kit.dev.ops + random.randint(1, 12)
            kit.dev.tear = random.random() < 0.5
        try:
            kit.power_cycle()
            kit.dev.cut_at = -1
            break
        except PowerCut:
            boot_cuts += 1
            kit.dev.cut_at = -1
    hook()
    lost, count, n = check(t_cut, kit.lg.boot_id)
    worst_count = max(worst_count, count)
    for st in kit.lg.journal.starts:
        segments[st] = 1
    worst = max(worst, lost)
    max_recs = max(max_recs, n)
    if not kit.lg.running:
        kit.request(b"99 start")

kit.request(b"100 flush")
recs = read_all()
print("cuts=%d" % cuts)
print("torn=%d" % torn)
print("boot_cuts=%d" % boot_cuts)
print("boots=%d" % kit.lg.boot_id)
print("samples_taken=%d" % len(truth))
print("worst_lost_ms=%d" % worst)
print("window_ms=%d" % WINDOW)
print("worst_lost_samples=%d" % worst_count)
print("interval_ms=%d" % INTERVAL)
print("segments=%d" % len(segments))
print("tail=%d" % kit.lg.journal.tail)
print("head=%d" % kit.lg.journal.head)
print("blocks=%d" % (len(kit.dev.data) // 4096))
if IMAGE:
    f = open(IMAGE, "wb")  # the flash as the board leaves it: no unmount, files still open, as at a power cut
    f.write(kit.dev.data)
    f.close()
if DUMP:
    f = open(DUMP, "wb")
    for pos, kind, b, s, rec in recs:
        f.write(rec)
    f.close()
    f = open(DUMP + ".truth", "w")
    for k in truth:
        if True:
            f.write("%d %d %d %d\n" % (k[0], k[1], truth[k][1], truth[k][2]))
    f.close()
"""


def run_campaign(cuts: int, seed: int, dump: str | None = None, interval_ms: int = 1000,
                 window_ms: int = 3000, image: str | None = None) -> dict[str, str]:
    args = [str(cuts), str(seed), dump or "-", str(interval_ms), str(window_ms), *([image] if image else [])]
    return results(run_mp(CAMPAIGN, *args, timeout=1800))


def test_power_cut_campaign_slice(tmp_path):
    dump = str(tmp_path / "journal.bin")
    res = run_campaign(200, 20261201, dump)
    assert int(res["cuts"]) == 200
    assert int(res["boots"]) >= 201
    assert int(res["torn"]) > 20  # both kinds of cut happened
    assert int(res["worst_lost_ms"]) < 3000 + 200
    assert int(res["tail"]) > 0  # acknowledged segments were trimmed
    assert int(res["segments"]) > 20  # the journal rotated through many segments
    assert int(res["boot_cuts"]) > 5  # some cuts hit the boot and its recovery
    # the final journal decodes with the host's reference codec, and every sample not yet handed to the host
    # that is in it has the sampler's counts
    data = open(dump, "rb").read()
    recs = list(F.iter_records(data, 0))
    assert len(data) == sum(r.size for r in recs)
    truth = {}
    for line in open(dump + ".truth"):
        b, s, d, li = map(int, line.split())
        truth[(b, s)] = (d, li)
    got = {(r.boot, s.seq): (s.dark[0], s.light[0]) for r in recs for s in r.samples()}
    assert got and all(truth[k] == v for k, v in got.items())
    boots = [r.boot for r in recs if r.kind == F.KIND_BOOT]
    assert boots == sorted(boots)
