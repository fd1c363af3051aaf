"""Host side of the schema test vectors: the host codec must produce and read the exact bytes in schema/vectors.

The vectors are the contract with the firmware (whose tests read the same files in MicroPython).
"""

import zlib

import pytest
from hypothesis import given, settings, strategies as st

from nightcell.wire import frames as F
from nightcell.errors import ProtocolError


def test_records_encode_to_the_vector_bytes(vectors):
    for v in vectors["records"]["records"]:
        raw = F.encode_record(v["kind"], v["boot"], v["seq"], v["uptime_ms"], v["fields"])
        assert raw.hex() == v["hex"], v["name"]


def test_records_decode_from_the_vector_bytes(vectors):
    for v in vectors["records"]["records"]:
        rec, end = F.decode_record(bytes.fromhex(v["hex"]))
        assert end == len(v["hex"]) // 2
        assert (rec.kind, rec.boot, rec.seq, rec.uptime_ms) == (v["kind"], v["boot"], v["seq"], v["uptime_ms"])
        for key, value in v["fields"].items():
            if key == "samples":
                got = [{k: s[k] for k in value[i]} for i, s in enumerate(rec.fields["samples"])]
                assert got == value
            else:
                assert rec.fields[key] == value, (v["name"], key)


def test_crc_is_ieee_crc32():
    # CRC-32/ISO-HDLC check value for "123456789" is 0xCBF43926 (the standard check value of this CRC).
    assert zlib.crc32(b"123456789") == 0xCBF43926


def test_damaged_record_is_refused(vectors):
    raw = bytearray.fromhex(vectors["records"]["records"][1]["hex"])
    raw[10] ^= 0x01
    with pytest.raises(ProtocolError, match="CRC does not match"):
        F.decode_record(bytes(raw))


def test_iter_records_stops_before_a_partial_tail(vectors):
    recs = [bytes.fromhex(v["hex"]) for v in vectors["records"]["records"]]
    stream = b"".join(recs)
    got = list(F.iter_records(stream + recs[0][:7], start_position=100))
    assert len(got) == len(recs)
    assert got[0].position == 100
    assert got[1].position == 100 + len(recs[0])


def test_reply_vectors_roundtrip(vectors):
    reader = F.ReplyReader()
    for v in vectors["protocol"]["replies"]:
        assert F.encode_reply(v["kind"], v["tag"], bytes.fromhex(v["payload_hex"])).hex() == v["hex"]
        reader.feed(b"garbage\r\nTraceback (most recent call last):\n" + bytes.fromhex(v["hex"]))
    frames = list(reader.frames())
    assert [(f.kind, f.tag, f.payload.hex()) for f in frames] == [
        (v["kind"], v["tag"], v["payload_hex"]) for v in vectors["protocol"]["replies"]]


def test_request_vectors(vectors):
    for v in vectors["protocol"]["requests"]:
        assert F.encode_request(v["tag"], v["verb"], *v["args"]).decode("ascii") == v["line"]
    for q in vectors["protocol"]["quotes"]:
        assert F.quote_text(q["text"]) == q["quoted"]
        assert F.unquote_text(q["quoted"]) == q["text"]


sample = st.fixed_dictionaries({
    "late_ms": st.integers(0, 10**6), "flags": st.integers(0, 3),
    "dark": st.lists(st.integers(0, 4095 * 256), min_size=2, max_size=2),
    "light": st.lists(st.integers(0, 4095 * 256), min_size=2, max_size=2),
    "temp_centi": st.one_of(st.none(), st.integers(-5000, 15000)),
})


@settings(max_examples=200, deadline=None)
@given(st.lists(sample, min_size=1, max_size=60), st.integers(0, 2**32 - 1), st.integers(0, 2**32 - 1))
def test_samples_roundtrip(samples, boot, uptime):
    fields = {"interval_ms": 1000, "reads": 256, "channels": 2, "options": 1, "samples": samples}
    rec, _ = F.decode_record(F.encode_record(F.KIND_SAMPLES, boot, 5, uptime, fields))
    assert rec.fields["samples"] == samples


@settings(max_examples=300, deadline=None)
@given(st.binary(max_size=300))
def test_reply_reader_never_crashes_on_garbage(data):
    r = F.ReplyReader()
    r.feed(data)
    for frame in r.frames():
        assert frame.kind in (F.REPLY_OK, F.REPLY_ERR, F.REPLY_DATA)


@settings(max_examples=300, deadline=None)
@given(st.binary(max_size=200))
def test_decode_record_rejects_or_decodes(data):
    try:
        F.decode_record(data)
    except ProtocolError:
        pass


@settings(max_examples=150, deadline=None)
@given(st.lists(st.lists(sample, min_size=1, max_size=40), min_size=1, max_size=6), st.booleans(),
       st.integers(1, 2))
def test_vectorised_sample_decode_equals_the_record_decoder(blocks, with_temp, channels):
    """The batch decoder (numpy) must give exactly what the one-record decoder gives, across many blocks."""
    lazy = []
    eager = []
    for b, samples in enumerate(blocks):
        samples = [dict(s, dark=s["dark"][:channels], light=s["light"][:channels]) for s in samples]
        fields = {"interval_ms": 500, "reads": 16, "channels": channels, "options": int(with_temp),
                  "samples": samples}
        raw = F.encode_record(F.KIND_SAMPLES, 1, 1000 * b, 0, fields)
        lazy.append(F.decode_record(raw, lazy_samples=True)[0])
        eager.append(F.decode_record(raw)[0])
    (cols,) = F.sample_columns(lazy)
    got = []
    for i in range(len(cols.record)):
        t = None if cols.temp_centi is None else int(cols.temp_centi[i])
        got.append((int(cols.record[i]), int(cols.index[i]), int(cols.late_ms[i]), int(cols.flags[i]),
                    cols.dark[i].tolist(), cols.light[i].tolist(), None if t == F.NO_TEMPERATURE else t))
    want = []
    for r, rec in enumerate(eager):
        for i, s in enumerate(rec.fields["samples"]):
            want.append((r, i, s["late_ms"], s["flags"], s["dark"], s["light"],
                         s.get("temp_centi") if with_temp else None))
    assert got == want


def test_vectorised_decode_refuses_a_wrong_sample_count():
    fields = {"interval_ms": 500, "reads": 16, "channels": 1, "options": 0,
              "samples": [{"late_ms": 0, "flags": 0, "dark": [1], "light": [2]}] * 3}
    raw = bytearray(F.encode_record(F.KIND_SAMPLES, 1, 0, 0, fields))
    raw[4 + 20] = 4  # count 3 -> 4, CRC fixed so only the structure is wrong
    raw[-4:] = zlib.crc32(bytes(raw[:-4])).to_bytes(4, "little")
    rec = F.decode_record(bytes(raw), lazy_samples=True)[0]
    with pytest.raises(ProtocolError, match="sample count"):
        F.sample_columns([rec])


def test_peek_header_sees_a_data_frame_before_its_payload(vectors):
    frame = F.encode_reply(F.REPLY_DATA, 77, (4096).to_bytes(4, "little") + b"\xc5" * 100)
    r = F.ReplyReader()
    r.feed(b"noise" + frame[:20])
    assert list(r.frames()) == []
    assert r.peek_header() == (F.REPLY_DATA, 77, 104, (4096).to_bytes(4, "little"))
    r.feed(frame[20:])
    (got,) = list(r.frames())
    assert got.data() == (4096, b"\xc5" * 100)


def test_ack_and_anchor_carry_their_check_on_the_wire(vectors):
    # the check is the CRC-32 of "<verb> <value>" (schema/protocol.md); the vector was made by the same rule
    lines = {v["verb"]: v["line"] for v in vectors["protocol"]["requests"] if len(v["args"]) == 2
             and v["verb"] in ("ack", "anchor")}
    assert lines["ack"] == f"6 ack 4096 {zlib.crc32(b'ack 4096'):08x}\n"
    assert F.check_field("anchor", 1796131200123) == lines["anchor"].split()[-1]

    from nightcell.errors import DeviceTimeout
    from nightcell.wire.link import Board, Transport

    sent = []

    class Capture(Transport):
        def send(self, line):
            sent.append(line)

        def frames_until(self, deadline):
            return None

    board = Board(Capture(port=None, url="capture://"), timeout=0.01, retries=1)
    for call in (lambda: board.ack(4096), lambda: board.anchor(1796131200123)):
        with pytest.raises(DeviceTimeout):
            call()
    assert sent[0].split(b" ", 1)[1] == b"ack 4096 " + F.check_field("ack", 4096).encode() + b"\n"
    assert sent[1].endswith(F.check_field("anchor", 1796131200123).encode() + b"\n")
