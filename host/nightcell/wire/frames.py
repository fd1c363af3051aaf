"""Journal records and link frames: encode and decode, exactly as ``schema/records.md`` and ``schema/protocol.md`` say.

This module owns the byte layouts on the host side. It never opens a port or a database; it turns bytes into plain
Python objects and back, and raises ``ProtocolError`` for bytes that do not fit.
"""

from __future__ import annotations

import json
import struct
import zlib
from dataclasses import dataclass, field
from typing import Any, Iterator, Sequence

import numpy as np

from ..errors import ProtocolError

__all__ = [
    "RECORD_MAGIC",
    "KIND_BOOT",
    "KIND_SAMPLES",
    "KIND_MARK",
    "KIND_ANCHOR",
    "KIND_EVENT",
    "KIND_SETTINGS",
    "KIND_HEALTH",
    "MARK_NAMES",
    "Record",
    "Sample",
    "encode_record",
    "decode_record",
    "iter_records",
    "SampleColumns",
    "sample_columns",
    "Reply",
    "REPLY_OK",
    "REPLY_ERR",
    "REPLY_DATA",
    "REPLY_SYNC",
    "encode_reply",
    "ReplyReader",
    "encode_request",
    "check_field",
    "quote_text",
    "unquote_text",
]

RECORD_MAGIC = 0xC5
KIND_BOOT = 0x01
KIND_SAMPLES = 0x02
KIND_MARK = 0x03
KIND_ANCHOR = 0x04
KIND_EVENT = 0x05
KIND_SETTINGS = 0x06
KIND_HEALTH = 0x07
KIND_NAMES = {
    KIND_BOOT: "boot",
    KIND_SAMPLES: "samples",
    KIND_MARK: "mark",
    KIND_ANCHOR: "anchor",
    KIND_EVENT: "event",
    KIND_SETTINGS: "settings",
    KIND_HEALTH: "health",
}
MARK_NAMES = {1: "dark", 2: "blank", 3: "standard", 4: "run_start", 5: "run_stop", 6: "note", 7: "opaque"}
MAX_PAYLOAD = 4096
NO_TEMPERATURE = -32768

_HEAD = struct.Struct("<III")
_REC_HDR = struct.Struct("<BBH")


@dataclass
class Sample:
    """One decoded sample: sums of ``reads`` ADC counts per channel, and where it sits in time."""

    seq: int
    uptime_ms: int
    late_ms: int
    flags: int
    dark: list[int]
    light: list[int]
    temp_centi: int | None = None


@dataclass
class Record:
    """One journal record; ``fields`` holds the kind-specific values named as in ``schema/records.md``."""

    kind: int
    boot: int
    seq: int
    uptime_ms: int
    fields: dict[str, Any] = field(default_factory=dict)
    position: int | None = None
    size: int | None = None
    payload: bytes | None = None
    """The payload bytes, kept when a SAMPLES record was decoded lazily (its samples are read on demand)."""

    @property
    def kind_name(self) -> str:
        return KIND_NAMES.get(self.kind, f"kind{self.kind}")

    def samples(self) -> list[Sample]:
        """The samples of a SAMPLES record, with their seq and scheduled+late uptime."""
        if self.kind != KIND_SAMPLES:
            return []
        if "samples" not in self.fields and self.payload is not None:
            self.fields = _decode_payload(self.kind, self.payload).fields
        f = self.fields
        out = []
        for i, s in enumerate(f["samples"]):
            out.append(
                Sample(
                    seq=self.seq + i,
                    uptime_ms=self.uptime_ms + i * f["interval_ms"] + s["late_ms"],
                    late_ms=s["late_ms"],
                    flags=s["flags"],
                    dark=list(s["dark"]),
                    light=list(s["light"]),
                    temp_centi=s.get("temp_centi"),
                )
            )
        return out


# -- varints -------------------------------------------------------------------------------------------------------


def _uvarint(n: int, out: bytearray) -> None:
    if n < 0:
        raise ValueError("uvarint of a negative number")
    while True:
        b = n & 0x7F
        n >>= 7
        if n:
            out.append(b | 0x80)
        else:
            out.append(b)
            return


def _svarint(n: int, out: bytearray) -> None:
    _uvarint(2 * n if n >= 0 else -2 * n - 1, out)


def _read_uvarint(buf: bytes, i: int) -> tuple[int, int]:
    n = 0
    shift = 0
    while True:
        if i >= len(buf):
            raise ProtocolError("record ends inside a number")
        b = buf[i]
        i += 1
        n |= (b & 0x7F) << shift
        if not b & 0x80:
            return n, i
        shift += 7
        if shift > 63:
            raise ProtocolError("number in record is too long")


def _read_svarint(buf: bytes, i: int) -> tuple[int, int]:
    z, i = _read_uvarint(buf, i)
    return (z >> 1) if not z & 1 else -((z + 1) >> 1), i


def _str8(s: str, out: bytearray) -> None:
    b = s.encode("utf-8")
    if len(b) > 255:
        raise ValueError("text longer than 255 bytes")
    out.append(len(b))
    out += b


def _str16(s: str, out: bytearray) -> None:
    b = s.encode("utf-8")
    out += struct.pack("<H", len(b))
    out += b


def _read_str8(buf: bytes, i: int) -> tuple[str, int]:
    if i >= len(buf):
        raise ProtocolError("record ends inside a text field")
    n = buf[i]
    return _text(buf, i + 1, n)


def _read_str16(buf: bytes, i: int) -> tuple[str, int]:
    if i + 2 > len(buf):
        raise ProtocolError("record ends inside a text field")
    (n,) = struct.unpack_from("<H", buf, i)
    return _text(buf, i + 2, n)


def _text(buf: bytes, i: int, n: int) -> tuple[str, int]:
    if i + n > len(buf):
        raise ProtocolError("record ends inside a text field")
    try:
        return bytes(buf[i : i + n]).decode("utf-8"), i + n
    except UnicodeDecodeError as exc:
        raise ProtocolError("text field is not UTF-8") from exc


# -- records -------------------------------------------------------------------------------------------------------


def encode_record(kind: int, boot: int, seq: int, uptime_ms: int, fields: dict[str, Any] | None = None) -> bytes:
    """Encode one journal record (header, payload and CRC) from its field values."""
    f = fields or {}
    p = bytearray(_HEAD.pack(boot, seq, uptime_ms & 0xFFFFFFFF))
    if kind == KIND_BOOT:
        p += struct.pack("<BI", f["reset_cause"], f["settings_crc"])
        _str8(f["firmware"], p)
        _str8(f["device"], p)
        _str8(f["board"], p)
    elif kind == KIND_SAMPLES:
        samples = f["samples"]
        channels = f["channels"]
        has_temp = bool(f.get("options", 0) & 1)
        p += struct.pack("<IHBBB", f["interval_ms"], f["reads"], channels, 1 if has_temp else 0, len(samples))
        prev_d = [0] * channels
        prev_l = [0] * channels
        prev_t = 0
        for s in samples:
            _uvarint(s["late_ms"] << 2 | s["flags"], p)
            for c in range(channels):
                _svarint(s["dark"][c] - prev_d[c], p)
                _svarint(s["light"][c] - prev_l[c], p)
                prev_d[c] = s["dark"][c]
                prev_l[c] = s["light"][c]
            if has_temp:
                t = s.get("temp_centi")
                t = NO_TEMPERATURE if t is None else t
                _svarint(t - prev_t, p)
                prev_t = t
    elif kind == KIND_MARK:
        dark = f.get("dark", [])
        light = f.get("light", [])
        p += struct.pack("<BBHB", f["mark"], f.get("source", 0), f.get("reads", 0), len(dark))
        for d, li in zip(dark, light):
            p += struct.pack("<II", d, li)
        _str8(f.get("label", ""), p)
        _str8(f.get("value", ""), p)
    elif kind == KIND_ANCHOR:
        p += struct.pack("<Q", f["host_unix_ms"])
    elif kind == KIND_EVENT:
        p.append(f["code"])
        _str16(f.get("text", ""), p)
    elif kind == KIND_SETTINGS:
        _str16(f["json"], p)
    elif kind == KIND_HEALTH:
        p += struct.pack("<hHH", f["chip_temp_centi"], f["free_kb"], f.get("vsys_mv", 0))
    else:
        raise ValueError(f"unknown record kind {kind}")
    if len(p) > MAX_PAYLOAD:
        raise ValueError("record payload longer than 4096 bytes")
    head = _REC_HDR.pack(RECORD_MAGIC, kind, len(p)) + bytes(p)
    return head + struct.pack("<I", zlib.crc32(head))


_BLOCK_HDR = struct.Struct("<IHBBB")
_SAMPLES_START = 12 + _BLOCK_HDR.size


def _decode_payload(kind: int, p: bytes, lazy_samples: bool = False) -> Record:
    if len(p) < 12:
        raise ProtocolError("record payload shorter than its head")
    boot, seq, uptime = _HEAD.unpack_from(p, 0)
    i = 12
    f: dict[str, Any] = {}
    if lazy_samples and kind == KIND_SAMPLES:
        # Only the block header now; the samples are decoded many blocks at a time by ``sample_columns``.
        if len(p) < _SAMPLES_START:
            raise ProtocolError("samples record is shorter than its fields")
        interval, reads, channels, options, count = _BLOCK_HDR.unpack_from(p, 12)
        if not 1 <= channels <= 4:
            raise ProtocolError(f"SAMPLES record with {channels} channels")
        f.update(interval_ms=interval, reads=reads, channels=channels, options=options, count=count)
        return Record(kind, boot, seq, uptime, f, payload=p)
    try:
        if kind == KIND_BOOT:
            f["reset_cause"], f["settings_crc"] = struct.unpack_from("<BI", p, i)
            i += 5
            f["firmware"], i = _read_str8(p, i)
            f["device"], i = _read_str8(p, i)
            f["board"], i = _read_str8(p, i)
        elif kind == KIND_SAMPLES:
            interval, reads, channels, options, count = struct.unpack_from("<IHBBB", p, i)
            i += 9
            if not 1 <= channels <= 4:
                raise ProtocolError(f"SAMPLES record with {channels} channels")
            f.update(interval_ms=interval, reads=reads, channels=channels, options=options)
            prev_d = [0] * channels
            prev_l = [0] * channels
            prev_t = 0
            samples = []
            for _ in range(count):
                z, i = _read_uvarint(p, i)
                s: dict[str, Any] = {"late_ms": z >> 2, "flags": z & 3}
                dark = []
                light = []
                for c in range(channels):
                    dd, i = _read_svarint(p, i)
                    dl, i = _read_svarint(p, i)
                    prev_d[c] += dd
                    prev_l[c] += dl
                    dark.append(prev_d[c])
                    light.append(prev_l[c])
                s["dark"] = dark
                s["light"] = light
                if options & 1:
                    dt, i = _read_svarint(p, i)
                    prev_t += dt
                    s["temp_centi"] = None if prev_t == NO_TEMPERATURE else prev_t
                samples.append(s)
            f["samples"] = samples
        elif kind == KIND_MARK:
            f["mark"], f["source"], f["reads"], channels = struct.unpack_from("<BBHB", p, i)
            i += 5
            dark = []
            light = []
            for _ in range(channels):
                d, li = struct.unpack_from("<II", p, i)
                i += 8
                dark.append(d)
                light.append(li)
            f["dark"] = dark
            f["light"] = light
            f["label"], i = _read_str8(p, i)
            f["value"], i = _read_str8(p, i)
        elif kind == KIND_ANCHOR:
            (f["host_unix_ms"],) = struct.unpack_from("<Q", p, i)
            i += 8
        elif kind == KIND_EVENT:
            f["code"] = p[i]
            i += 1
            f["text"], i = _read_str16(p, i)
        elif kind == KIND_SETTINGS:
            f["json"], i = _read_str16(p, i)
        elif kind == KIND_HEALTH:
            f["chip_temp_centi"], f["free_kb"], f["vsys_mv"] = struct.unpack_from("<hHH", p, i)
            i += 6
        else:
            raise ProtocolError(f"unknown record kind 0x{kind:02x}")
    except (struct.error, IndexError) as exc:
        raise ProtocolError(f"{KIND_NAMES.get(kind, kind)} record is shorter than its fields") from exc
    if i != len(p):
        raise ProtocolError(f"{KIND_NAMES.get(kind, kind)} record has {len(p) - i} unexpected trailing bytes")
    return Record(kind, boot, seq, uptime, f)


def decode_record(buf: bytes, offset: int = 0, *, lazy_samples: bool = False) -> tuple[Record, int]:
    """Decode the record starting at ``offset``; return it and the offset just past it.

    Raises ``ProtocolError`` for a bad magic, a short buffer, a CRC mismatch or a malformed payload. With
    ``lazy_samples`` a SAMPLES record keeps its payload bytes and is decoded later (``sample_columns``); its CRC is
    checked now all the same.
    """
    if len(buf) - offset < 8:
        raise ProtocolError("buffer ends before a whole record")
    magic, kind, length = _REC_HDR.unpack_from(buf, offset)
    if magic != RECORD_MAGIC:
        raise ProtocolError(f"no record starts here (byte 0x{magic:02x})")
    if length > MAX_PAYLOAD:
        raise ProtocolError(f"record claims {length} payload bytes (at most {MAX_PAYLOAD})")
    end = offset + 4 + length
    if end + 4 > len(buf):
        raise ProtocolError("buffer ends before a whole record")
    (crc,) = struct.unpack_from("<I", buf, end)
    if zlib.crc32(bytes(buf[offset:end])) != crc:
        raise ProtocolError("record CRC does not match: the journal bytes were damaged")
    rec = _decode_payload(kind, bytes(buf[offset + 4 : end]), lazy_samples)
    rec.size = end + 4 - offset
    return rec, end + 4


def iter_records(buf: bytes, start_position: int = 0, *, lazy_samples: bool = False) -> Iterator[Record]:
    """Decode consecutive whole records; stops before a trailing partial record (``ProtocolError`` for damage)."""
    i = 0
    while len(buf) - i >= 4:
        _, _, length = _REC_HDR.unpack_from(buf, i)
        if buf[i] == RECORD_MAGIC and length <= MAX_PAYLOAD and i + 8 + length > len(buf):
            return  # partial record at the end: the caller asks again from its position
        rec, nxt = decode_record(buf, i, lazy_samples=lazy_samples)
        rec.position = start_position + i
        yield rec
        i = nxt


@dataclass
class SampleColumns:
    """The samples of several SAMPLES records with one layout (channels, options), as columns.

    Row ``i`` is sample ``index[i]`` of ``records[record[i]]``; ``dark`` and ``light`` are (n, channels) sums of
    counts; ``temp_centi`` is None when the records carry no temperature, else an array where ``NO_TEMPERATURE``
    means "no reading".
    """

    records: list[Record]
    channels: int
    record: np.ndarray
    index: np.ndarray
    late_ms: np.ndarray
    flags: np.ndarray
    dark: np.ndarray
    light: np.ndarray
    temp_centi: np.ndarray | None


def sample_columns(records: Sequence[Record]) -> list[SampleColumns]:
    """Decode the samples of many SAMPLES records at once (numpy), one ``SampleColumns`` per layout.

    Decoding varints one by one in Python costs more than inserting the rows into SQLite; here every varint of a
    batch is decoded in a few vectorised passes. Raises ``ProtocolError`` when a record's samples do not fill its
    payload exactly.
    """
    groups: dict[tuple[int, int], list[Record]] = {}
    for r in records:
        if r.kind != KIND_SAMPLES:
            continue
        if r.payload is None:
            raise ValueError("sample_columns needs records decoded with lazy_samples=True")
        groups.setdefault((r.fields["channels"], r.fields["options"] & 1), []).append(r)
    return [_columns(recs, channels, has_temp) for (channels, has_temp), recs in groups.items()]


def _columns(recs: list[Record], channels: int, has_temp: int) -> SampleColumns:
    per = 1 + 2 * channels + has_temp
    sections = [r.payload[_SAMPLES_START:] for r in recs]  # type: ignore[index]
    counts = np.array([r.fields["count"] for r in recs], dtype=np.int64)
    lengths_b = np.array([len(x) for x in sections], dtype=np.int64)
    data = np.frombuffer(b"".join(sections), dtype=np.uint8)
    ends = np.flatnonzero(data < 0x80)  # the last byte of every varint
    want = counts * per
    if len(ends) != int(want.sum()) or (len(data) and (not len(ends) or ends[-1] != len(data) - 1)):
        raise ProtocolError("a samples record's numbers do not match its sample count")
    # Each record's last varint must end exactly where its payload ends.
    has = want > 0
    if np.any(lengths_b[~has] != 0):
        raise ProtocolError("a samples record with no samples has trailing bytes")
    if np.any(has):
        last_var = np.cumsum(want)[has] - 1
        sec_end = np.cumsum(lengths_b)[has] - 1
        if not np.array_equal(ends[last_var], sec_end):
            raise ProtocolError("a samples record's numbers do not match its sample count")
    starts = np.empty_like(ends)
    if len(ends):
        starts[0] = 0
        starts[1:] = ends[:-1] + 1
    nbytes = ends - starts + 1
    if len(nbytes) and int(nbytes.max()) > 9:
        raise ProtocolError("number in record is too long")
    values = np.zeros(len(ends), dtype=np.int64)
    for k in range(int(nbytes.max()) if len(nbytes) else 0):
        m = nbytes > k
        values[m] |= (data[starts[m] + k].astype(np.int64) & 0x7F) << (7 * k)
    n = int(counts.sum())
    v = values.reshape(n, per)
    z = v[:, 1:]
    delta = (z >> 1) ^ -(z & 1)
    total = np.cumsum(delta, axis=0)
    first = np.concatenate(([0], np.cumsum(counts)[:-1]))
    padded = np.vstack([np.zeros((1, per - 1), dtype=np.int64), total])
    absolute = total - np.repeat(padded[first], counts, axis=0)
    record = np.repeat(np.arange(len(recs)), counts)
    index = np.arange(n) - np.repeat(first, counts)
    return SampleColumns(
        records=recs, channels=channels, record=record, index=index,
        late_ms=v[:, 0] >> 2, flags=v[:, 0] & 3,
        dark=absolute[:, 0 : 2 * channels : 2], light=absolute[:, 1 : 2 * channels : 2],
        temp_centi=absolute[:, 2 * channels] if has_temp else None,
    )


# -- link frames ---------------------------------------------------------------------------------------------------

REPLY_SYNC = b"\xa7\x5c"
REPLY_OK = 0x01
REPLY_ERR = 0x02
REPLY_DATA = 0x03
MAX_REPLY_PAYLOAD = 4200
_REPLY_HDR = struct.Struct("<BHH")


@dataclass
class Reply:
    """One frame from the board: kind, the echoed tag and the payload bytes."""

    kind: int
    tag: int
    payload: bytes

    def json(self) -> Any:
        return json.loads(self.payload.decode("utf-8"))

    def text(self) -> str:
        return self.payload.decode("utf-8", "replace")

    def data(self) -> tuple[int, bytes]:
        """Position and journal bytes of a DATA reply."""
        if len(self.payload) < 4:
            raise ProtocolError("DATA reply without a position")
        (pos,) = struct.unpack_from("<I", self.payload, 0)
        return pos, self.payload[4:]


def encode_reply(kind: int, tag: int, payload: bytes) -> bytes:
    """Encode a reply frame (used by tests and vectors; the firmware has its own encoder)."""
    body = _REPLY_HDR.pack(kind, tag, len(payload)) + payload
    return REPLY_SYNC + body + struct.pack("<I", zlib.crc32(body))


class ReplyReader:
    """Finds reply frames in a byte stream, skipping garbage; feed bytes in, take frames out."""

    def __init__(self) -> None:
        self._buf = bytearray()
        self.skipped = 0

    def feed(self, data: bytes) -> None:
        self._buf += data

    def peek_header(self) -> tuple[int, int, int, bytes] | None:
        """(kind, tag, length, first payload bytes) of a frame still arriving at the front of the buffer, or None.

        Not yet checked by its CRC: a caller may use it to get ahead (ask for the next chunk early) but must act on
        the verified frame only. Call after ``frames()`` has skipped any garbage.
        """
        buf = self._buf
        if len(buf) < 11 or buf[:2] != REPLY_SYNC:
            return None
        kind, tag, length = _REPLY_HDR.unpack_from(buf, 2)
        if kind not in (REPLY_OK, REPLY_ERR, REPLY_DATA) or length > MAX_REPLY_PAYLOAD:
            return None
        return kind, tag, length, bytes(buf[7:11])

    def buffered(self) -> int:
        """Bytes received but not yet part of a whole frame."""
        return len(self._buf)

    def frames(self) -> Iterator[Reply]:
        buf = self._buf
        while True:
            i = buf.find(REPLY_SYNC)
            if i < 0:
                keep = 1 if buf[-1:] == REPLY_SYNC[:1] else 0
                self.skipped += len(buf) - keep
                del buf[: len(buf) - keep]
                return
            if i:
                self.skipped += i
                del buf[:i]
            if len(buf) < 7:
                return
            kind, tag, length = _REPLY_HDR.unpack_from(buf, 2)
            if kind not in (REPLY_OK, REPLY_ERR, REPLY_DATA) or length > MAX_REPLY_PAYLOAD:
                self.skipped += 1
                del buf[:1]
                continue
            end = 7 + length
            if len(buf) < end + 4:
                return
            (crc,) = struct.unpack_from("<I", buf, end)
            if zlib.crc32(bytes(buf[2:end])) != crc:
                self.skipped += 1
                del buf[:1]
                continue
            frame = Reply(kind, tag, bytes(buf[7:end]))
            del buf[: end + 4]
            yield frame


def quote_text(text: str) -> str:
    """Percent-encode a label for a request line (bytes outside 0x21–0x7E and ``%``)."""
    out = []
    for b in text.encode("utf-8"):
        if 0x21 <= b <= 0x7E and b != 0x25:
            out.append(chr(b))
        else:
            out.append(f"%{b:02X}")
    return "".join(out)


def unquote_text(text: str) -> str:
    """Inverse of ``quote_text``."""
    raw = bytearray()
    i = 0
    while i < len(text):
        if text[i] == "%":
            raw.append(int(text[i + 1 : i + 3], 16))
            i += 3
        else:
            raw += text[i].encode("ascii")
            i += 1
    return raw.decode("utf-8")


def check_field(verb: str, value: Any) -> str:
    """The check argument of ``ack`` and ``anchor``: CRC-32 of ``"<verb> <value>"`` as 8 lower-case hex digits, so
    the board refuses a value damaged on the way (schema/protocol.md)."""
    return f"{zlib.crc32(f'{verb} {value}'.encode('ascii')):08x}"


def encode_request(tag: int, verb: str, *args: Any) -> bytes:
    """One request line: ``<tag> <verb> [args]\\n`` in printable ASCII."""
    parts = [str(tag), verb]
    for a in args:
        s = str(a)
        if not s:
            continue
        parts.append(s)
    line = " ".join(parts)
    if any(not 0x20 <= ord(c) <= 0x7E for c in line):
        raise ValueError("request line must be printable ASCII: quote text with quote_text()")
    if len(line) + 1 > 250:
        raise ValueError("request line longer than 250 bytes")
    return (line + "\n").encode("ascii")
