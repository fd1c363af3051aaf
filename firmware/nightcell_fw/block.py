"""The open SAMPLES block: consecutive samples delta-coded into one record, per ``schema/records.md``.

Owns the sample encoding. The block is a whole, sealed record after every ``add`` (length, count and crc patched),
so its bytes can be saved as they are for durability and appended to the journal when it closes. One buffer,
allocated once; ``add`` allocates nothing.

Usage::

    blk = SampleBlock()
    blk.open(boot, seq, uptime_ms, interval_ms, reads, channels, has_temp)
    blk.add(late_ms, flags, dark, light, temp_centi)   # dark/light: lists of per-channel sums
    if blk.full(): journal.append(blk.record())
"""

from micropython import const
import struct
from nightcell_fw.records import put_head, seal, KIND_SAMPLES, HEAD_SIZE

# Keep the whole record small enough to stay inline in littlefs metadata (measured: ~500 bytes with 4 KiB blocks
# and 256-byte programs), where rewriting it costs ~0.2 block erases instead of ~1.
BLOCK_BYTES = const(480)
MAX_COUNT = const(255)
NO_TEMP = const(-32768)
_OFF_COUNT = const(24)  # head (16) + interval u32 + reads u16 + channels u8 + options u8
_FIRST = const(25)
_WORST_BASE = const(5 + 3 + 4)  # late/flags varint, temperature varint, crc


class SampleBlock:
    def __init__(self, size=BLOCK_BYTES):
        self.buf = bytearray(size)
        self.mv = memoryview(self.buf)
        self.prev = [0] * 9  # dark/light per channel (up to 4), then temperature
        self.n = 0
        self.count = 0
        self.seq = 0
        self.uptime = 0
        self.channels = 1
        self.has_temp = False
        self.size = 0  # sealed record size, 0 when nothing is open
        self._worst = 0

    def open(self, boot, seq, uptime_ms, interval_ms, reads, channels, has_temp):
        put_head(self.buf, KIND_SAMPLES, boot, seq, uptime_ms)
        struct.pack_into("<IHBBB", self.buf, HEAD_SIZE, interval_ms, reads, channels, 1 if has_temp else 0, 0)
        self.n = _FIRST
        self.count = 0
        self.seq = seq
        self.uptime = uptime_ms
        self.channels = channels
        self.has_temp = has_temp
        self.size = 0
        p = self.prev
        for i in range(9):
            p[i] = 0
        self._worst = _WORST_BASE + 10 * channels

    def is_open(self):
        return self.n > 0

    def _uv(self, v):
        buf = self.buf
        n = self.n
        while v > 0x7F:
            buf[n] = (v & 0x7F) | 0x80
            v >>= 7
            n += 1
        buf[n] = v
        self.n = n + 1

    def _sv(self, v):
        self._uv(v << 1 if v >= 0 else ((-v) << 1) - 1)

    def add(self, late_ms, flags, dark, light, temp_centi):
        """Append one sample and reseal; the caller checks ``full()`` afterwards."""
        self._uv((late_ms << 2) | flags)
        p = self.prev
        for c in range(self.channels):
            d = dark[c]
            li = light[c]
            self._sv(d - p[2 * c])
            self._sv(li - p[2 * c + 1])
            p[2 * c] = d
            p[2 * c + 1] = li
        if self.has_temp:
            t = NO_TEMP if temp_centi is None else temp_centi
            self._sv(t - p[8])
            p[8] = t
        self.count += 1
        self.buf[_OFF_COUNT] = self.count
        self.size = seal(self.buf, self.n)

    def full(self):
        return self.count >= MAX_COUNT or self.n + self._worst > len(self.buf)

    def record(self):
        return self.mv[:self.size]

    def end_seq(self):
        return self.seq + self.count

    def close(self):
        self.n = 0
        self.size = 0
        self.count = 0
