"""Regenerate the byte test vectors from the host's reference codec: python schema/vectors/generate.py

The vectors are committed; both the firmware tests (in MicroPython) and the host tests read them. Regenerate only
when the format version changes, and say so in the commit.
"""

import json
import pathlib

from nightcell.wire import frames as F

HERE = pathlib.Path(__file__).resolve().parent

RECORDS = [
    ("boot", F.KIND_BOOT, 7, 0, 12, {"reset_cause": 0, "settings_crc": 0x1234ABCD, "firmware": "0.1.0",
                                     "device": "e6614103e7452d2f", "board": "pico"}),
    ("samples_one_channel", F.KIND_SAMPLES, 7, 3, 60000, {
        "interval_ms": 10000, "reads": 16, "channels": 1, "options": 0,
        "samples": [
            {"late_ms": 0, "flags": 0, "dark": [1650], "light": [52400]},
            {"late_ms": 2, "flags": 0, "dark": [1641], "light": [52399]},
            {"late_ms": 1, "flags": 0, "dark": [1700], "light": [52000]},
            {"late_ms": 300, "flags": 1, "dark": [1650], "light": [65520]},
            {"late_ms": 0, "flags": 2, "dark": [0], "light": [0]},
        ]}),
    ("samples_two_channels_temperature", F.KIND_SAMPLES, 8, 100, 4294967000, {
        "interval_ms": 30000, "reads": 64, "channels": 2, "options": 1,
        "samples": [
            {"late_ms": 0, "flags": 0, "dark": [6600, 6500], "light": [200000, 150000], "temp_centi": 2512},
            {"late_ms": 5, "flags": 0, "dark": [6601, 6498], "light": [199000, 151000], "temp_centi": None},
            {"late_ms": 0, "flags": 0, "dark": [6599, 6505], "light": [198500, 150990], "temp_centi": -150},
        ]}),
    ("mark_standard", F.KIND_MARK, 7, 9, 123456, {"mark": 3, "source": 0, "reads": 128, "dark": [13200],
                                                  "light": [300100], "label": "dye 0.25 µM", "value": "0.250"}),
    ("mark_run_start_button", F.KIND_MARK, 7, 10, 130000, {"mark": 4, "source": 1, "reads": 0, "dark": [],
                                                           "light": [], "label": "", "value": ""}),
    ("anchor", F.KIND_ANCHOR, 7, 11, 130500, {"host_unix_ms": 1796131200123}),
    ("event", F.KIND_EVENT, 7, 12, 131000, {"code": 1, "text": "OSError: [Errno 28] ENOSPC"}),
    ("settings", F.KIND_SETTINGS, 7, 1, 15, {"json": "{\"interval_ms\":10000,\"reads\":16}"}),
    ("health", F.KIND_HEALTH, 7, 13, 300000, {"chip_temp_centi": -512, "free_kb": 1200, "vsys_mv": 5012}),
]


def main() -> None:
    recs = []
    for name, kind, boot, seq, up, fields in RECORDS:
        raw = F.encode_record(kind, boot, seq, up, fields)
        recs.append({"name": name, "kind": kind, "boot": boot, "seq": seq, "uptime_ms": up, "fields": fields,
                     "hex": raw.hex()})
    (HERE / "records.json").write_text(json.dumps({"format": 1, "records": recs}, indent=1, ensure_ascii=False) + "\n")

    requests = []
    for tag, verb, args in [(1, "hello", []), (2, "anchor", [1796131200123]), (3, "standard", ["0.250", F.quote_text("dye 0.25 µM")]),
                            (65535, "read", [4096, 4096]), (5, "note", [F.quote_text("100% done")]),
                            (6, "ack", [4096, F.check_field("ack", 4096)]),
                            (7, "anchor", [1796131200123, F.check_field("anchor", 1796131200123)])]:
        requests.append({"tag": tag, "verb": verb, "args": [str(a) for a in args],
                         "line": F.encode_request(tag, verb, *args).decode("ascii")})
    replies = []
    for kind, tag, payload in [(F.REPLY_OK, 1, b'{"protocol":1,"device":"e6614103e7452d2f"}'),
                               (F.REPLY_ERR, 9, b"unknown command 'hop'"),
                               (F.REPLY_DATA, 65535, (4096).to_bytes(4, "little") + bytes.fromhex(recs[0]["hex"])),
                               (F.REPLY_DATA, 3, (0).to_bytes(4, "little"))]:
        replies.append({"kind": kind, "tag": tag, "payload_hex": payload.hex(),
                        "hex": F.encode_reply(kind, tag, payload).hex()})
    quotes = [{"text": t, "quoted": F.quote_text(t)} for t in ["plain", "two words", "100%", "µM", "a\tb\nc"]]
    (HERE / "protocol.json").write_text(json.dumps({"protocol": 1, "requests": requests, "replies": replies,
                                                    "quotes": quotes}, indent=1, ensure_ascii=False) + "\n")


if __name__ == "__main__":
    main()
