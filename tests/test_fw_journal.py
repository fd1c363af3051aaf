"""The journal's edges, in MicroPython on littlefs: flash full, a torn tail, acknowledgement and trim, reads from
odd positions, and the durability window (how often the open block is saved). Expected behaviour is the firmware
issue's and schema/protocol.md's; decoding on the CPython side uses the host's reference codec."""

from support.fwharness import results, run_mp

COMMON = r"""
import struct, os
from boards.simkit import SimKit
from nightcell_fw import records as R

def frames(buf):
    out = []
    i = 0
    while i < len(buf):
        kind, tag, n = struct.unpack_from("<BHH", buf, i + 2)
        out.append((kind, bytes(buf[i + 7:i + 7 + n])))
        i += 11 + n
    return out

def reply(kit, line):
    return frames(kit.request(line))[0]

def walk(kit):
    # (kind, boot, seq, count, code) of every record, checking CRCs
    j = kit.lg.journal
    buf = bytearray(4096)
    pos = j.tail
    out = []
    while True:
        s, n = j.read(pos, 4096, memoryview(buf))
        if not n:
            return out
        i = 0
        while i < n:
            L = buf[i + 2] | buf[i + 3] << 8
            assert R.crc32(buf[i:i + L + 4]) == struct.unpack_from("<I", buf, i + L + 4)[0]
            b, q = struct.unpack_from("<II", buf, i + 4)
            out.append((buf[i + 1], b, q, buf[i + 24] if buf[i + 1] == 2 else 1, buf[i + 16] if buf[i + 1] == 5 else 0))
            i += L + 8
        pos = s + n

def sample_seqs(recs):
    out = []
    for k, b, q, c, code in recs:
        if k == 2:
            out.extend([(b, q + i) for i in range(c)])
    return out
"""

FULL = COMMON + r"""
kit = SimKit(blocks=24, settings={"interval_ms": 1000, "warmup_ms": 0, "durability_ms": 1000, "segment_bytes": 2048,
                                  "reads": 256})
kit.request(b"1 start")
t = 0
while not kit.lg.journal.full and t < 400:
    kit.run_ms(60000)
    t += 1
kit.run_ms(600000)
recs = walk(kit)
seqs = sample_seqs(recs)
st = reply(kit, b"2 status")
print("full=%d" % kit.lg.journal.full)
print("status_full=%d" % (b'"full": true' in st[1]))
print("missed=%d" % kit.lg.missed_full)
print("event4=%d" % sum(1 for r in recs if r[0] == 5 and r[4] == 4))
chain = [r for r in recs if r[1] == 1]
print("contiguous=%d" % all(chain[i + 1][2] == chain[i][2] + chain[i][3] for i in range(len(chain) - 1)))
print("mark_err=%d" % reply(kit, b"3 note x")[0])
# the filesystem still mounts and the journal survives a power cycle while full
kit.power_cycle()
recs2 = walk(kit)
print("kept=%d" % (sample_seqs(recs2)[:len(seqs)] == seqs))
# the run was going when the power went: the board carries on with it (skipping samples while full)
print("still_running=%d" % kit.lg.running)
# the host stores everything and acknowledges it: logging resumes
head = kit.lg.journal.head
r = reply(kit, b"5 ack %d %08x" % (head, R.crc32(b"ack %d" % head)))
print("ack_kind=%d" % r[0])
print("freed=%d" % (not kit.lg.journal.full))
n0 = kit.lg.samples
kit.run_ms(30000)
print("resumed=%d" % (kit.lg.samples - n0))
"""


def test_flash_full_stops_logging_keeps_data_and_resumes_after_ack():
    res = results(run_mp(FULL, timeout=600))
    assert res["full"] == "1" and res["status_full"] == "1"
    assert int(res["missed"]) > 0  # samples were not logged, not written over old ones
    assert res["event4"] == "1"
    assert res["contiguous"] == "1"  # every record logged before the stop is still there: no seq is missing
    assert res["mark_err"] == "2"  # a note cannot be journaled: ERR, not silence
    assert res["kept"] == "1" and res["still_running"] == "1"
    assert res["ack_kind"] == "1" and res["freed"] == "1"
    assert int(res["resumed"]) >= 25


TORN = COMMON + r"""
kit = SimKit(blocks=32, settings={"interval_ms": 1000, "warmup_ms": 0, "segment_bytes": 4096})
kit.request(b"1 start")
kit.run_ms(300000)
kit.request(b"2 flush")
before = walk(kit)
j = kit.lg.journal
last = j.starts[-1]
name = "/flash/nc/s%08x" % last
size = os.stat(name)[6]
j.close()
# a record whose write was torn: header and half a payload, then the power goes
f = open(name, "ab")
f.write(b"\xc5\x02\x40\x00" + b"\x07" * 30)
f.close()
kit.power_cycle()
after = walk(kit)
print("same=%d" % (after[:len(before)] == before))
print("size_back=%d" % (after[len(before)][0] == 1))  # the new boot's records follow the last whole record
print("event3=%d" % sum(1 for r in after if r[0] == 5 and r[4] == 3 and r[1] == 2))
print("boot2=%d" % sum(1 for r in after if r[0] == 1 and r[1] == 2))
print("junk=%d" % sum(1 for n in os.listdir("/flash/nc") if n in ("tmp",)))
"""


def test_torn_tail_is_cut_back_to_the_last_whole_record_never_more():
    res = results(run_mp(TORN, timeout=600))
    assert res == {"same": "1", "size_back": "1", "event3": "1", "boot2": "1", "junk": "0"}


ACK_READ = COMMON + r"""
kit = SimKit(blocks=48, settings={"interval_ms": 1000, "warmup_ms": 0, "segment_bytes": 1024})
kit.request(b"1 start")
kit.run_ms(2400000)
kit.request(b"2 flush")
j = kit.lg.journal
head = j.head
starts = list(j.starts)
print("segments=%d" % len(starts))
r = reply(kit, b"3 ack %d %08x" % (head + 1, R.crc32(b"ack %d" % (head + 1))))
print("beyond_kind=%d" % r[0])
print("beyond_tail=%d" % j.tail)
mid = starts[3] + 5    # inside the fourth segment: only the first three may go
r = reply(kit, b"4 ack %d %08x" % (mid, R.crc32(b"ack %d" % mid)))
print("ack_tail=%d" % (j.tail == starts[3]))
print("deleted=%d" % (len(starts) - len(j.starts)))
# read from inside a record: the reply starts at the next record boundary
r = reply(kit, b"5 read %d 4096" % (starts[4] + 3))
pos = struct.unpack_from("<I", r[1])[0]
print("mid_read_kind=%d" % r[0])
print("mid_read_boundary=%d" % (pos > starts[4] and r[1][4] == 0xC5))
# read below the tail: from the tail
r = reply(kit, b"6 read 0 4096")
print("below_tail=%d" % (struct.unpack_from("<I", r[1])[0] == j.tail))
# a max_bytes smaller than the next record
r = reply(kit, b"7 read %d 8" % j.tail)
print("small_max_kind=%d" % r[0])
print("small_max_text=%s" % r[1].decode())
r = reply(kit, b"8 read %d 4096" % j.head)  # the head now (the trim journaled an EVENT 8)
print("at_head_len=%d" % len(r[1]))
"""


def test_ack_trims_only_whole_acknowledged_segments_and_reads_find_boundaries():
    res = results(run_mp(ACK_READ, timeout=600))
    assert int(res["segments"]) >= 6
    assert res["beyond_kind"] == "2" and res["beyond_tail"] == "0"  # ack past the durable head: ERR, nothing trimmed
    assert res["ack_tail"] == "1" and res["deleted"] == "3"
    assert res["mid_read_kind"] == "3" and res["mid_read_boundary"] == "1"
    assert res["below_tail"] == "1"
    assert res["small_max_kind"] == "2" and "ask for at least" in res["small_max_text"]
    assert res["at_head_len"] == "4"  # an empty DATA: just the position


WINDOW = COMMON + r"""
import sys
interval, window = int(sys.argv[1]), int(sys.argv[2])
kit = SimKit(blocks=48, settings={"interval_ms": interval, "warmup_ms": 0, "durability_ms": window})
j = kit.lg.journal
saves = [0]
orig = j.save_open
def counted(rec):
    saves[0] += 1
    orig(rec)
j.save_open = counted
kit.request(b"1 start")
kit.run_ms(interval * 100 + interval // 2)
print("samples=%d" % kit.lg.samples)
print("saves=%d" % saves[0])
"""


def test_durability_window_sets_how_often_the_open_block_is_saved():
    every = results(run_mp(WINDOW, "10000", "10000"))  # the defaults: one sample per window
    assert every["samples"] == "101" and int(every["saves"]) >= 99  # every sample saved (less the block closes)
    batch = results(run_mp(WINDOW, "1000", "10000"))
    # 1-s samples, 10-s window: one save per 10 samples
    assert batch["samples"] == "101" and 8 <= int(batch["saves"]) <= 11
