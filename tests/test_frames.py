"""Host side of the schema test vectors: the host codec must produce and read the exact bytes in schema/vectors.

The vectors are the contract with the firmware (whose tests read the same files in MicroPython).
"""

import zlib

import pytest
from hypothesis import given, settings, strategies as st

from nightcell import frames as F
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
