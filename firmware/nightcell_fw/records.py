"""Journal record encoding, exactly as ``schema/records.md`` version 1 lays it out.

Owns the byte layout of records on the board side; never touches files or ports. One ``Encoder`` with one buffer
is allocated at start and reused for every non-sample record (sample blocks live in ``block.py``).

Usage::

    enc = Encoder()
    enc.begin(KIND_ANCHOR, boot, seq, uptime_ms)
    enc.u64(host_unix_ms)
    rec = enc.finish()          # memoryview of the whole record: header, payload, crc
"""

from micropython import const
import binascii
import struct

MAGIC = const(0xC5)
KIND_BOOT = const(1)
KIND_SAMPLES = const(2)
KIND_MARK = const(3)
KIND_ANCHOR = const(4)
KIND_EVENT = const(5)
KIND_SETTINGS = const(6)
KIND_HEALTH = const(7)

MARK_DARK = const(1)
MARK_BLANK = const(2)
MARK_STANDARD = const(3)
MARK_RUN_START = const(4)
MARK_RUN_STOP = const(5)
MARK_NOTE = const(6)
MARK_OPAQUE = const(7)

EVENT_EXCEPTION = const(1)
EVENT_SETTINGS_INVALID = const(2)
EVENT_RECOVERED = const(3)
EVENT_FLASH_FULL = const(4)
EVENT_RESET = const(5)
EVENT_LATE = const(6)
EVENT_SETTINGS_CHANGED = const(7)
EVENT_TRIMMED = const(8)

HEAD_SIZE = const(16)  # magic, kind, length, then boot, seq, uptime_ms
MAX_RECORD = const(1100)  # the largest record this firmware writes (settings JSON is the big one)
MAX_PAYLOAD = const(4096)  # the format's limit, for records read back


def crc32(data, crc=0):
    return binascii.crc32(data, crc) & 0xFFFFFFFF


def put_head(buf, kind, boot, seq, uptime_ms):
    """Write magic, kind and the 12-byte head; the length is patched by ``seal``."""
    struct.pack_into("<BBHIII", buf, 0, MAGIC, kind, 0, boot, seq, uptime_ms & 0xFFFFFFFF)


def seal(buf, n):
    """Patch the payload length of the record in ``buf[:n]`` and append its crc; return the total size."""
    struct.pack_into("<H", buf, 2, n - 4)
    struct.pack_into("<I", buf, n, crc32(memoryview(buf)[:n]))
    return n + 4


class Encoder:
    """Builds one record at a time in a buffer allocated once."""

    def __init__(self, size=MAX_RECORD):
        self.buf = bytearray(size)
        self.mv = memoryview(self.buf)
        self.n = 0

    def begin(self, kind, boot, seq, uptime_ms):
        put_head(self.buf, kind, boot, seq, uptime_ms)
        self.n = HEAD_SIZE
        return self

    def _room(self, k):
        if self.n + k + 4 > len(self.buf):
            raise ValueError("record too long")

    def u8(self, v):
        self._room(1)
        self.buf[self.n] = v & 0xFF
        self.n += 1

    def u16(self, v):
        self._room(2)
        struct.pack_into("<H", self.buf, self.n, v)
        self.n += 2

    def i16(self, v):
        self._room(2)
        struct.pack_into("<h", self.buf, self.n, v)
        self.n += 2

    def u32(self, v):
        self._room(4)
        struct.pack_into("<I", self.buf, self.n, v & 0xFFFFFFFF)
        self.n += 4

    def u64(self, v):
        self._room(8)
        struct.pack_into("<Q", self.buf, self.n, v)
        self.n += 8

    def raw(self, b):
        self._room(len(b))
        self.buf[self.n:self.n + len(b)] = b
        self.n += len(b)

    def str8(self, s):
        b = s.encode("utf-8") if isinstance(s, str) else s
        if len(b) > 255:
            b = clip_utf8(b, 255)
        self.u8(len(b))
        self.raw(b)

    def str16(self, s, limit=MAX_RECORD):
        b = s.encode("utf-8") if isinstance(s, str) else s
        if len(b) > limit:
            b = clip_utf8(b, limit)
        self.u16(len(b))
        self.raw(b)

    def finish(self):
        """Seal the record; return a memoryview of its bytes (valid until the next ``begin``)."""
        return self.mv[:seal(self.buf, self.n)]


def clip_utf8(b, limit):
    """Cut bytes to at most ``limit`` without splitting a UTF-8 character."""
    n = limit
    while n > 0 and (b[n] & 0xC0) == 0x80:
        n -= 1
    return b[:n]


# -- one function per kind, so callers and tests say what they write -----------------------------------------------


def boot(enc, boot_id, seq, up, reset_cause, settings_crc, firmware, device, board):
    enc.begin(KIND_BOOT, boot_id, seq, up)
    enc.u8(reset_cause)
    enc.u32(settings_crc)
    enc.str8(firmware)
    enc.str8(device)
    enc.str8(board)
    return enc.finish()


def mark(enc, boot_id, seq, up, kind, source, reads, dark, light, label, value):
    """``dark``/``light`` are per-channel sums (lists, may be empty when there is no measurement)."""
    enc.begin(KIND_MARK, boot_id, seq, up)
    enc.u8(kind)
    enc.u8(source)
    enc.u16(reads)
    enc.u8(len(dark))
    for i in range(len(dark)):
        enc.u32(dark[i])
        enc.u32(light[i])
    enc.str8(label)
    enc.str8(value)
    return enc.finish()


def anchor(enc, boot_id, seq, up, host_unix_ms):
    enc.begin(KIND_ANCHOR, boot_id, seq, up)
    enc.u64(host_unix_ms)
    return enc.finish()


def event(enc, boot_id, seq, up, code, text):
    enc.begin(KIND_EVENT, boot_id, seq, up)
    enc.u8(code)
    enc.str16(text, 400)
    return enc.finish()


def settings(enc, boot_id, seq, up, json_text):
    enc.begin(KIND_SETTINGS, boot_id, seq, up)
    enc.str16(json_text)
    return enc.finish()


def health(enc, boot_id, seq, up, chip_temp_centi, free_kb, vsys_mv):
    enc.begin(KIND_HEALTH, boot_id, seq, up)
    enc.i16(max(-32768, min(32767, chip_temp_centi)))
    enc.u16(min(free_kb, 0xFFFF))
    enc.u16(min(vsys_mv, 0xFFFF))
    return enc.finish()


def parse_header(b):
    """(kind, total size) of the record whose first 4 bytes are ``b``, or (0, 0) if no record starts there."""
    if b[0] != MAGIC:
        return 0, 0
    length = b[2] | (b[3] << 8)
    if length > MAX_PAYLOAD or length < 12:
        return 0, 0
    return b[1], length + 8
