"""Property tests (hypothesis) of every decoder and parser, on both sides of the link.

Host (CPython): the record layout (encode/decode round trips, lazy and eager decoding agree, any byte string either
decodes or raises ``ProtocolError``, any single flipped bit is caught), reply frames (round trip through garbage,
resynchronisation), request lines and percent-encoding, the CSV reader, the firmware's settings parser.

Firmware (MicroPython, through tests/support/fwharness.py): hypothesis draws batches of inputs, one MicroPython process
answers a whole batch, and the answers are compared with the host's reference codec — the record encoder (bytes
equal to ``frames.encode_record``), the request-line parser and ``unquote`` (they invert the host's
``encode_request`` and ``quote_text``), and the settings parser (the same verdict and the same canonical JSON as in
CPython, which the schema says must match Python's ``json`` with sorted keys and compact separators).

The reference for the layouts is schema/records.md, schema/protocol.md and schema/settings.md; the host codec is
itself pinned to the byte vectors of schema/vectors by tests/test_frames.py.
"""

from __future__ import annotations

import csv
import io
import json
import math
import struct
import sys
import zlib
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from nightcell.wire import frames as F
from nightcell.cli.analysis import read_columns
from nightcell.errors import InputError, ProtocolError

ROOT = Path(__file__).resolve().parent.parent
FAST = settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])
MP = settings(max_examples=6, deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])

u8 = st.integers(0, 0xFF)
u16 = st.integers(0, 0xFFFF)
u32 = st.integers(0, 0xFFFFFFFF)
text = st.text(alphabet=st.characters(blacklist_categories=("Cs",)), max_size=40)


def _fits(limit: int):
    return lambda s: len(s.encode("utf-8")) <= limit


str8 = text.filter(_fits(255))


@st.composite
def samples_fields(draw, max_samples: int = 40, value_bits: int = 24):
    channels = draw(st.integers(1, 4))
    has_temp = draw(st.booleans())
    value = st.integers(0, (1 << value_bits) - 1)
    n = draw(st.integers(1, max_samples))
    samples = []
    for _ in range(n):
        s = {"late_ms": draw(st.integers(0, 1 << 20)), "flags": draw(st.integers(0, 3)),
             "dark": [draw(value) for _ in range(channels)], "light": [draw(value) for _ in range(channels)]}
        if has_temp:
            s["temp_centi"] = draw(st.one_of(st.none(), st.integers(-5000, 15000)))
        samples.append(s)
    return {"interval_ms": draw(u32), "reads": draw(st.integers(1, 256)), "channels": channels,
            "options": 1 if has_temp else 0, "samples": samples}


@st.composite
def mark_fields(draw):
    c = draw(st.integers(0, 4))
    return {"mark": draw(st.integers(1, 7)), "source": draw(st.integers(0, 2)), "reads": draw(u16),
            "dark": [draw(u32) for _ in range(c)], "light": [draw(u32) for _ in range(c)],
            "label": draw(str8), "value": draw(str8)}


def record_fields():
    """(kind, fields) for every record kind of schema/records.md."""
    return st.one_of(
        st.tuples(st.just(F.KIND_BOOT), st.fixed_dictionaries({
            "reset_cause": st.integers(0, 5), "settings_crc": u32, "firmware": str8, "device": str8, "board": str8})),
        st.tuples(st.just(F.KIND_SAMPLES), samples_fields()),
        st.tuples(st.just(F.KIND_MARK), mark_fields()),
        st.tuples(st.just(F.KIND_ANCHOR), st.fixed_dictionaries({"host_unix_ms": st.integers(0, (1 << 64) - 1)})),
        st.tuples(st.just(F.KIND_EVENT), st.fixed_dictionaries({"code": st.integers(1, 8),
                                                                 "text": text.filter(_fits(400))})),
        st.tuples(st.just(F.KIND_SETTINGS), st.fixed_dictionaries({"json": text})),
        st.tuples(st.just(F.KIND_HEALTH), st.fixed_dictionaries({
            "chip_temp_centi": st.integers(-32768, 32767), "free_kb": u16, "vsys_mv": u16})),
    )


records = st.tuples(record_fields(), u32, u32, u32)  # (kind, fields), boot, seq, uptime


def _expected(kind: int, fields: dict) -> dict:
    """The fields as the decoder gives them back (a missing temperature reads back as None)."""
    if kind != F.KIND_SAMPLES:
        return fields
    out = dict(fields)
    out["samples"] = []
    for s in fields["samples"]:
        s = dict(s)
        if fields["options"] & 1:
            s.setdefault("temp_centi", None)
        out["samples"].append(s)
    return out


# -- the record layout (host) ----------------------------------------------------------------------------------------

@FAST
@given(records)
def test_record_round_trip(rec):
    (kind, fields), boot, seq, up = rec
    raw = F.encode_record(kind, boot, seq, up, fields)
    got, end = F.decode_record(raw)
    assert end == len(raw) and got.size == len(raw)
    assert (got.kind, got.boot, got.seq, got.uptime_ms) == (kind, boot, seq, up)
    assert got.fields == _expected(kind, fields)
    # the frame of schema/records.md: magic, kind, payload length, payload, crc32 of everything before it
    assert raw[0] == 0xC5 and raw[1] == kind and struct.unpack_from("<H", raw, 2)[0] == len(raw) - 8
    assert struct.unpack_from("<I", raw, len(raw) - 4)[0] == zlib.crc32(raw[:-4])


@FAST
@given(st.lists(st.tuples(samples_fields(max_samples=20, value_bits=32), u32, u32, u32), min_size=1, max_size=6))
def test_lazy_column_decoding_equals_the_record_by_record_decoding(blocks):
    raws = [F.encode_record(F.KIND_SAMPLES, b, s, u, f) for f, b, s, u in blocks]
    buf = b"".join(raws)
    eager = list(F.iter_records(buf))
    lazy = list(F.iter_records(buf, lazy_samples=True))
    want = {}
    for rec in eager:
        for i, s in enumerate(rec.fields["samples"]):
            want[(id(rec), i)] = s
    got_rows = []
    for cols in F.sample_columns(lazy):
        for row in range(len(cols.record)):
            r, i = int(cols.record[row]), int(cols.index[row])
            t = None if cols.temp_centi is None else int(cols.temp_centi[row])
            got_rows.append((lazy.index(cols.records[r]), i, cols.dark[row].tolist(), cols.light[row].tolist(),
                             int(cols.late_ms[row]), int(cols.flags[row]), t))
    expect_rows = []
    for k, rec in enumerate(eager):
        for i, s in enumerate(rec.fields["samples"]):
            t = s.get("temp_centi", "absent")
            t = None if t == "absent" else (F.NO_TEMPERATURE if t is None else t)
            expect_rows.append((k, i, s["dark"], s["light"], s["late_ms"], s["flags"], t))
    assert sorted(got_rows, key=repr) == sorted(expect_rows, key=repr)


@FAST
@given(st.binary(max_size=600), st.booleans())
def test_any_bytes_decode_or_raise_protocol_error(data, lazy):
    try:
        for rec in F.iter_records(data, lazy_samples=lazy):
            rec.samples()
    except ProtocolError:
        pass


@FAST
@given(records, st.data())
def test_a_flipped_bit_anywhere_is_caught(rec, data):
    (kind, fields), boot, seq, up = rec
    raw = bytearray(F.encode_record(kind, boot, seq, up, fields))
    bit = data.draw(st.integers(0, 8 * len(raw) - 1))
    raw[bit // 8] ^= 1 << (bit % 8)
    with pytest.raises(ProtocolError):
        F.decode_record(bytes(raw))


@FAST
@given(st.lists(records, min_size=1, max_size=5), st.data())
def test_a_torn_tail_stops_before_the_partial_record(recs, data):
    raws = [F.encode_record(k, b, s, u, f) for (k, f), b, s, u in recs]
    cut = data.draw(st.integers(1, len(raws[-1]) - 1))
    buf = b"".join(raws[:-1]) + raws[-1][:cut]
    got = list(F.iter_records(buf, 100))
    assert len(got) == len(raws) - 1
    assert [r.position for r in got] == [100 + sum(len(x) for x in raws[:i]) for i in range(len(got))]


# -- reply frames (host) ---------------------------------------------------------------------------------------------

frame = st.tuples(st.sampled_from([F.REPLY_OK, F.REPLY_ERR, F.REPLY_DATA]), u16, st.binary(max_size=300))
noise = st.binary(max_size=80).filter(lambda b: b"\xa7\x5c" not in b)


@FAST
@given(st.lists(st.tuples(noise, frame), max_size=6), st.lists(st.integers(1, 64), min_size=1, max_size=8))
def test_frames_come_back_through_garbage_in_any_chunking(pairs, cuts):
    stream = b"".join(g + F.encode_reply(k, t, p) for g, (k, t, p) in pairs)
    reader = F.ReplyReader()
    got = []
    i = 0
    j = 0
    while i < len(stream):
        n = cuts[j % len(cuts)]
        reader.feed(stream[i:i + n])
        got += list(reader.frames())
        i += n
        j += 1
    assert [(f.kind, f.tag, f.payload) for f in got] == [fr for _, fr in pairs]


@FAST
@given(st.binary(max_size=400), frame)
def test_any_garbage_is_passed_over_once_enough_bytes_follow(garbage, fr):
    # a stray sync word may announce up to 4200 bytes; once that many more have arrived the real frame is found
    reader = F.ReplyReader()
    reader.feed(garbage + F.encode_reply(*fr) + bytes(F.MAX_REPLY_PAYLOAD + 11))
    got = list(reader.frames())
    assert (fr[0], fr[1], fr[2]) in [(f.kind, f.tag, f.payload) for f in got]


@FAST
@given(text)
def test_quote_text_round_trip_and_stays_printable_without_spaces(s):
    q = F.quote_text(s)
    assert all(0x21 <= ord(c) <= 0x7E for c in q)
    assert F.unquote_text(q) == s


@FAST
@given(u16, st.sampled_from(["hello", "note", "start", "set", "standard"]), st.lists(text, max_size=3))
def test_request_lines_are_printable_ascii_of_at_most_250_bytes_or_refused(tag, verb, args):
    try:
        line = F.encode_request(tag, verb, *[F.quote_text(a) for a in args])
    except ValueError:
        assert len(" ".join([str(tag), verb, *[F.quote_text(a) for a in args if a]])) + 1 > 250
        return
    assert line.endswith(b"\n") and len(line) <= 250
    assert all(0x20 <= b <= 0x7E for b in line[:-1])


# -- CSV import (host) -----------------------------------------------------------------------------------------------

finite = st.floats(allow_nan=False, allow_infinity=False, width=64)


@FAST
@given(st.lists(st.tuples(finite, finite), min_size=1, max_size=30), st.booleans())
def test_csv_columns_round_trip(tmp_path_factory, rows, bom):
    path = tmp_path_factory.mktemp("csv") / "t.csv"
    buf = io.StringIO()
    w = csv.writer(buf)
    w.writerow(["concentration", "absorbance", "note"])
    for a, b in rows:
        w.writerow([repr(a), repr(b), "x,y"])
    path.write_bytes(("\ufeff" if bom else "").encode("utf-8") + buf.getvalue().encode("utf-8"))
    cols = read_columns(path, ["concentration", "absorbance"])
    assert cols["concentration"].tolist() == [a for a, _ in rows]
    assert cols["absorbance"].tolist() == [b for _, b in rows]


@FAST
@given(st.binary(max_size=300))
def test_csv_reader_on_any_bytes_gives_columns_or_a_clear_input_error(tmp_path_factory, data):
    path = tmp_path_factory.mktemp("csv") / "junk.csv"
    path.write_bytes(data)
    try:
        cols = read_columns(path, ["time_s", "absorbance"])
    except InputError as exc:
        assert str(path) in str(exc)
        return
    assert all(np.all(np.isfinite(v)) for v in cols.values())


# -- the firmware's settings parser, in CPython ----------------------------------------------------------------------

def _fw_settings():
    sys.path.insert(0, str(ROOT / "firmware"))
    try:
        import boards.cpy  # noqa: F401 — the const() shim
        from nightcell_fw import settings as fw_settings
    finally:
        sys.path.remove(str(ROOT / "firmware"))
    return fw_settings


json_values = st.recursive(
    st.none() | st.booleans() | st.integers(-(1 << 40), 1 << 40) | st.floats(allow_nan=False, allow_infinity=False)
    | text,
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(text, inner, max_size=4),
    max_leaves=12,
)
setting_keys = st.sampled_from(sorted(json.loads((ROOT / "schema" / "settings_default.json").read_text())) +
                               ["unknown", "interval", ""])


@st.composite
def valid_settings(draw):
    d = {}
    if draw(st.booleans()):
        d["interval_ms"] = draw(st.integers(200, 86_400_000))
    if draw(st.booleans()):
        d["label"] = draw(text.filter(_fits(32)))
    if draw(st.booleans()):
        d["path_cm"] = draw(st.sampled_from([0.01, 0.5, 1.0, 2, 10]))
    if draw(st.booleans()):
        d["channels"] = [{"name": f"c{i}", "led": draw(st.integers(0, 255)), "adc": draw(st.integers(0, 255))}
                         for i in range(draw(st.integers(1, 4)))]
    if draw(st.booleans()):
        d["status_led"] = draw(st.one_of(st.integers(0, 255), st.sampled_from(["LED", "GP25"])))
    return d


@FAST
@given(setting_keys, json_values)
def test_settings_check_accepts_or_says_what_to_fix(key, value):
    s = _fw_settings()
    try:
        s.check(key, value)
    except ValueError as exc:
        assert str(exc)
        return
    full = s.validate({key: value})
    assert s.validate(full) == full  # a checked value stays valid


@FAST
@given(valid_settings())
def test_settings_canonical_json_matches_python_json_and_round_trips(d):
    s = _fw_settings()
    full = s.validate(d)
    text_ = s.canonical(full)
    # schema/settings.md: keys sorted, separators , and :, text as UTF-8 rather than \\u escapes
    assert text_ == json.dumps(full, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    assert json.loads(text_) == full
    assert s.validate(json.loads(text_)) == full


@FAST
@given(st.binary(max_size=200))
def test_settings_file_of_any_bytes_never_stops_the_board(tmp_path_factory, data):
    s = _fw_settings()
    path = tmp_path_factory.mktemp("settings") / "settings.json"
    path.write_bytes(data)
    got, problem = s.load(str(path))
    assert problem is None or got == s.defaults()
    assert s.validate(got) == got


# -- the firmware's decoders and encoder, in MicroPython ---------------------------------------------------------------

from support.fwharness import ENCODE_RECORD  # noqa: E402  (MicroPython source of the record encoder dispatch)

MP_SCRIPT = r"""
import sys, json, binascii
from nightcell_fw import records as R
from nightcell_fw import settings as S
from nightcell_fw.block import SampleBlock
from nightcell_fw.link import parse, unquote
""" + ENCODE_RECORD + r"""
batch = json.loads(open(sys.argv[1]).read())
out = []
enc = R.Encoder()
for item in batch["records"]:
    k, f, b, s, u = item
    got, n = encode_record(enc, k, b, s, u, f)
    out.append(["rec", n if k == R.KIND_SAMPLES else k, binascii.hexlify(bytes(got)).decode()])
for line in batch["lines"]:
    try:
        tag, verb, args = parse(line.encode())
        res = [tag, verb, [unquote(a) for a in args]]
    except ValueError as e:
        res = "ERR " + str(e)
    out.append(["line", res])
for key, text in batch["settings"]:
    try:
        v = S.parse_value(key, text)
        S.check(key, v)
        res = S.canonical(S.validate({key: v}))
    except ValueError as e:
        res = "ERR"
    out.append(["set", res])
f = open(sys.argv[2], "w")  # a file, not stdout: the answers may hold characters that split lines
f.write(json.dumps(out))
f.close()
"""


def _run_firmware(batch: dict, tmp: Path) -> list:
    from support.fwharness import micropython, run_mp

    micropython()  # skips the test where MicroPython is not installed
    path = tmp / "batch.json"
    answers = tmp / "answers.json"
    path.write_text(json.dumps(batch, ensure_ascii=False), encoding="utf-8")
    run_mp(MP_SCRIPT, str(path), str(answers), timeout=120)
    return json.loads(answers.read_text(encoding="utf-8"))


fw_records = st.tuples(record_fields(), u32, u32, u32).filter(
    lambda r: r[0][0] != F.KIND_SETTINGS or len(r[0][1]["json"].encode("utf-8")) <= 1000)
request_args = st.lists(text, max_size=3)


@MP
@given(st.lists(fw_records, min_size=10, max_size=25),
       st.lists(st.tuples(u16, st.sampled_from(["hello", "note", "set", "standard", "ack", "bogus"]), request_args),
                min_size=10, max_size=25),
       st.lists(st.text(alphabet=st.characters(min_codepoint=0x20, max_codepoint=0x7E), max_size=60), max_size=15),
       st.lists(st.tuples(setting_keys, json_values.map(lambda v: json.dumps(v, ensure_ascii=False))), max_size=20)
       | valid_settings().map(lambda d: [(k, json.dumps(v, ensure_ascii=False)) for k, v in d.items()]))
def test_firmware_codecs_in_micropython_agree_with_the_host(tmp_path_factory, recs, requests, raw_lines,
                                                           setting_texts):
    lines, expect_lines = [], []
    for tag, verb, args in requests:
        quoted = [F.quote_text(a) for a in args]
        try:
            line = F.encode_request(tag, verb, *quoted)
        except ValueError:
            continue
        lines.append(line.decode("ascii")[:-1])
        expect_lines.append([tag, verb, [a for a in args if a]])
    lines += raw_lines
    batch = {"records": [[k, f, b, s, u] for (k, f), b, s, u in recs], "lines": lines,
             "settings": [[k, t] for k, t in setting_texts]}
    out = _run_firmware(batch, tmp_path_factory.mktemp("mp"))
    recs_out = [o for o in out if o[0] == "rec"]
    lines_out = [o[1] for o in out if o[0] == "line"]
    sets_out = [o[1] for o in out if o[0] == "set"]
    assert (len(recs_out), len(lines_out), len(sets_out)) == (len(recs), len(lines), len(setting_texts))
    # the record encoder: the firmware's bytes are the host reference codec's bytes, and decode back
    for ((kind, fields), boot, seq, up), (_, n, hexed) in zip(recs, recs_out):
        if kind == F.KIND_SAMPLES:
            fields = dict(fields, samples=fields["samples"][:n])
        if kind == F.KIND_HEALTH:
            fields = dict(fields)
        want = F.encode_record(kind, boot, seq, up, fields)
        assert hexed == want.hex(), (kind, fields)
    # the request-line parser inverts the host's encoder; any other printable line is parsed or refused
    for got, want in zip(lines_out, expect_lines):
        assert got == want
    for got, raw in zip(lines_out[len(expect_lines):], raw_lines):
        if isinstance(got, str):
            assert got.startswith("ERR request must start with a tag")
        else:
            tag = raw.split(" ")[0]
            assert got[0] == int(tag) and 0 <= got[0] <= 65535
    # the settings parser: the same verdict and the same canonical text as the same code in CPython
    s = _fw_settings()
    for (key, t), got in zip(setting_texts, sets_out):
        try:
            v = s.parse_value(key, t)
            s.check(key, v)
            want = s.canonical(s.validate({key: v}))
        except ValueError:
            want = "ERR"
        if want != "ERR" and got != "ERR" and isinstance(json.loads(want).get(key), float):
            assert json.loads(got) == json.loads(want)  # float text may differ between the interpreters
        else:
            assert got == want, (key, t)
