"""The journal: an append-only stream of self-checking records in segment files, recovered at every boot.

Owns everything written under its folder. Positions are byte offsets in the logical stream since the journal was
made; a segment file is named by the position of its first byte (``s`` + 8 hex digits), records never span
segments, and only the newest segment is ever written. Every append is one whole record followed by a file sync,
so littlefs keeps either the old or the new file. The open sample block is kept durable in a small file
(``open``) that littlefs stores inline in its metadata, which costs a fifth of a block erase per save instead of a
whole one; it is appended to the stream when the block closes, or at the next boot if power was cut first.

Must never: modify a written record, delete anything the host has not acknowledged, overwrite unacknowledged data
when flash is full (it stops and says so), or leave a file half-renamed (a torn tail is cut by copying the valid
prefix to ``tmp`` and renaming it over the segment).

Usage::

    j = Journal("/nc", free_bytes, rand32, segment_bytes=16384)
    report = j.open()              # recovery: torn bytes cut, open block restored
    pos = j.append(record_bytes)   # durable when it returns
    start, n = j.read(pos, 4096, out)
    j.trim(acknowledged_position)
"""

from micropython import const
import os
import struct
from nightcell_fw.records import parse_header, crc32, KIND_EVENT, KIND_SAMPLES, MAX_PAYLOAD

_SCRATCH = const(256)
BLOCK_RESERVE = const(8 * 4096)  # free space kept for littlefs itself (metadata, copy-on-write, the tail copy)


class JournalFull(Exception):
    pass


def _exists(path):
    try:
        os.stat(path)
        return True
    except OSError:
        return False


class Journal:
    def __init__(self, root, free_bytes, rand32, segment_bytes=16384):
        self.root = root
        self._free = free_bytes
        self._rand32 = rand32
        self.segment_bytes = segment_bytes
        self.scratch = bytearray(_SCRATCH)
        self.smv = memoryview(self.scratch)
        self.starts = []
        self.seg_size = 0  # size of the newest segment
        self.head = 0
        self.tail = 0
        self.jid = 0
        self.full = False
        self.pending_left = False  # an open block from before a power cut still waits for room
        self._f = None
        self._pf = None
        self._hint = -1
        self._hint_off = 0
        # the last record of the stream, as found at boot
        self.last_kind = 0
        self.last_boot = 0
        self.last_seq = -1
        self.last_code = 0

    def _p(self, name):
        if name == "open":
            # alone in a folder of its own: measured on littlefs, saving it beside an inline segment that is open
            # for appending costs a block erase per save; alone, about 0.06
            return self.root + "/o/open"
        return self.root + "/" + name

    def _seg(self, start):
        return self._p("s%08x" % start)

    def reserve(self):
        return BLOCK_RESERVE + self.segment_bytes

    def free_bytes(self):
        return max(0, self._free() - self.reserve())

    # -- small files, replaced atomically ---------------------------------------------------------------------------

    def _put_small(self, name, data):
        tmp = self._p(name + ".new")
        f = open(tmp, "wb")
        try:
            f.write(data)
        finally:
            f.close()
        os.rename(tmp, self._p(name))

    def _get_small(self, name):
        try:
            f = open(self._p(name), "rb")
        except OSError:
            return None
        try:
            return f.read()
        finally:
            f.close()

    def forget(self, name):
        try:
            os.remove(self._p(name))
        except OSError:
            pass

    def next_boot(self):
        """Count this start: the boot counter on flash, never below a boot already in the journal."""
        b = self._get_small("boot")
        n = struct.unpack("<I", b)[0] if b and len(b) == 4 else 0
        n = max(n, self.last_boot) + 1
        self._put_small("boot", struct.pack("<I", n))
        return n

    # -- opening and recovery ---------------------------------------------------------------------------------------

    def open(self):
        """Find the segments, cut a torn tail, restore an open block; returns (torn_bytes, restored_samples)."""
        for d in (self.root, self.root + "/o"):
            try:
                os.mkdir(d)
            except OSError:
                pass
        for junk in ("tmp", "id.new", "boot.new", "run.new"):
            if _exists(self._p(junk)):
                os.remove(self._p(junk))
        starts = []
        for name in os.listdir(self.root):
            if len(name) == 9 and name[0] == "s":
                starts.append(int(name[1:], 16))
        starts.sort()
        self.starts = starts
        b = self._get_small("id")
        if b and len(b) == 4:
            self.jid = struct.unpack("<I", b)[0]
        else:
            self.jid = self._rand32()
            self._put_small("id", struct.pack("<I", self.jid))
        torn = 0
        if starts:
            last = starts[-1]
            size = os.stat(self._seg(last))[6]
            valid = self._scan(last, size)
            if valid < size:
                self._cut(last, valid)
                torn = size - valid
            if valid == 0 and len(starts) > 1:
                prev = starts[-2]
                self._scan(prev, last - prev)
            self.seg_size = valid
            self.head = last + valid
            self.tail = starts[0]
        restored = self._restore_open()
        return torn, restored

    def _scan(self, start, size):
        """Length of the valid prefix of a segment; remembers its last record."""
        f = open(self._seg(start), "rb")
        mv = self.smv
        off = 0
        try:
            while off + 8 <= size:
                f.seek(off)
                got = f.readinto(mv)
                if got < 4:
                    break
                kind, rsize = parse_header(mv)
                if not kind or off + rsize > size or not self._crc_ok(f, off, rsize, got):
                    break
                self.last_kind = kind
                self.last_boot, self.last_seq = struct.unpack_from("<II", mv, 4)
                self.last_code = mv[16] if kind == KIND_EVENT else 0
                off += rsize
        finally:
            f.close()
        return off

    def _crc_ok(self, f, off, rsize, got):
        """Check the crc of the record at ``off`` whose first ``got`` bytes are in scratch (kept there)."""
        mv = self.smv
        body = rsize - 4
        if got >= rsize:
            return crc32(mv[:body]) == struct.unpack_from("<I", mv, body)[0]
        crc = crc32(mv[:got])
        done = got
        tmp = bytearray(4)  # only at boot and on damage, never per sample
        head = bytes(mv[:20])
        while done < body:
            n = min(_SCRATCH, body - done)
            f.seek(off + done)
            f.readinto(mv[:n])
            crc = crc32(mv[:n], crc)
            done += n
        f.seek(off + body)
        f.readinto(tmp)
        mv[:20] = head
        return crc == struct.unpack("<I", tmp)[0]

    def _cut(self, start, valid):
        """Replace a segment by its first ``valid`` bytes: copy to ``tmp``, then rename over it."""
        src = open(self._seg(start), "rb")
        dst = open(self._p("tmp"), "wb")
        mv = self.smv
        try:
            done = 0
            while done < valid:
                n = src.readinto(mv[:min(_SCRATCH, valid - done)])
                dst.write(mv[:n])
                done += n
        finally:
            src.close()
            dst.close()
        os.rename(self._p("tmp"), self._seg(start))

    def _restore_open(self):
        """Append the open block saved before a power cut, unless the stream already has it."""
        data = self._get_small("open")
        if data is None:
            return 0
        restored = 0
        if len(data) >= 8:
            kind, rsize = parse_header(data)
            if kind == KIND_SAMPLES and rsize <= len(data):
                boot, seq = struct.unpack_from("<II", data, 4)
                ok = crc32(memoryview(data)[:rsize - 4]) == struct.unpack_from("<I", data, rsize - 4)[0]
                have = self.last_boot > boot or self.last_boot == boot and self.last_seq >= seq
                if ok and not have:
                    try:
                        self.append(memoryview(data)[:rsize])
                    except JournalFull:
                        self.pending_left = True
                        return 0
                    self.last_kind = KIND_SAMPLES
                    self.last_boot = boot
                    self.last_seq = seq
                    restored = data[24]
        os.remove(self._p("open"))
        return restored

    # -- writing ----------------------------------------------------------------------------------------------------

    def append(self, rec, force=False):
        """Append one whole record and sync; returns its position. Raises JournalFull when flash is short."""
        n = len(rec)
        if self.full and not force:
            raise JournalFull()
        room = self._free() - n
        if room < (self.reserve() // 2 if force else self.reserve()):
            self.full = True
            raise JournalFull()
        if self.seg_size and self.seg_size + n > self.segment_bytes:
            self._close_segment()
            self.starts.append(self.head)
            self.seg_size = 0
        if not self.starts:
            self.starts.append(self.head)
        if self._f is None:
            self._f = open(self._seg(self.starts[-1]), "ab")
        try:
            self._f.write(rec)
            self._f.flush()
        except OSError:
            self._close_segment()
            self.full = True
            raise JournalFull()
        pos = self.head
        self.head += n
        self.seg_size += n
        return pos

    def _close_segment(self):
        if self._f is not None:
            f = self._f
            self._f = None
            f.close()

    def save_open(self, rec):
        """Make the open block durable: rewrite the small ``open`` file with the block's sealed record."""
        if self.pending_left:
            return  # an older block still waits there; its samples come first
        if self._pf is None:
            self._pf = open(self._p("open"), "wb")
        f = self._pf
        f.seek(0)
        f.write(rec)
        f.flush()

    def close(self):
        self._close_segment()
        if self._pf is not None:
            self._pf.close()
            self._pf = None

    # -- reading and trimming ---------------------------------------------------------------------------------------

    def read(self, pos, max_bytes, out):
        """Copy whole records from ``pos`` (or the tail, if older) into ``out``; returns (start position, bytes)."""
        if pos < self.tail:
            pos = self.tail
        if pos >= self.head:
            return pos, 0
        starts = self.starts
        i = len(starts) - 1
        while starts[i] > pos:
            i -= 1
        start = starts[i]
        end = starts[i + 1] if i + 1 < len(starts) else self.head
        f = open(self._seg(start), "rb")
        try:
            off = pos - start
            if pos != self._hint:
                off = self._boundary(f, 0, off, end - start)
                if off >= end - start:  # pos lies in the last record of this segment: go to the next one
                    f.close()
                    f = None
                    return self.read(end, max_bytes, out) if end < self.head else (self.head, 0)
            total = 0
            hdr = self.smv[:4]
            while off + total < end - start:
                f.seek(off + total)
                f.readinto(hdr)
                kind, rsize = parse_header(hdr)
                if not kind:
                    if total:
                        break
                    raise ValueError("journal damaged at position %d" % (start + off))
                if total + rsize > max_bytes:
                    if not total:
                        raise ValueError("the record at position %d is %d bytes: ask for at least that many"
                                         % (start + off, rsize))
                    break
                total += rsize
            f.seek(off)
            f.readinto(out[:total])
            self._hint = start + off + total
            return start + off, total
        finally:
            if f is not None:
                f.close()

    def _boundary(self, f, off, want, size):
        """The first record boundary at or after ``want`` within a segment, walking headers from ``off``."""
        hdr = self.smv[:4]
        while off < want and off < size:
            f.seek(off)
            f.readinto(hdr)
            kind, rsize = parse_header(hdr)
            if not kind:
                raise ValueError("journal damaged at position %d" % off)
            off += rsize
        return off

    def trim(self, pos):
        """Delete whole segments that lie entirely before ``pos``; returns how many. ``pos`` must be durable."""
        if pos > self.head:
            raise ValueError("position %d is past the durable head %d: read and store up to it first"
                             % (pos, self.head))
        gone = 0
        while len(self.starts) > 1 and self.starts[1] <= pos:
            os.remove(self._seg(self.starts[0]))
            self.starts.pop(0)
            gone += 1
        if self.starts:
            self.tail = self.starts[0]
        if gone and self.full and self._free() >= self.reserve() + 4096:
            self.full = False
            if self.pending_left:
                self.pending_left = False
                self._restore_open()
        return gone
