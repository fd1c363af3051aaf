"""The settings table is written once, in schema/settings.json; everything else agrees with it.

- firmware/nightcell_fw/ranges.py is what schema/write_ranges.py writes from it now (the firmware's copy);
- schema/settings_default.json and the table of schema/settings.md give the same defaults and ranges;
- the firmware, in MicroPython, accepts every range's ends and refuses one step beyond them.
"""

from __future__ import annotations

import json
import re
import sys

from support.fwharness import FIRMWARE, SCHEMA, results, run_mp

TABLE = json.loads((SCHEMA / "settings.json").read_text(encoding="utf-8"))
SETTINGS = TABLE["settings"]


def test_the_firmware_copy_is_what_the_generator_writes_now():
    sys.path.insert(0, str(SCHEMA))
    try:
        import write_ranges
    finally:
        sys.path.pop(0)
    assert (FIRMWARE / "nightcell_fw" / "ranges.py").read_text(encoding="utf-8") == write_ranges.render(TABLE), \
        "firmware/nightcell_fw/ranges.py is out of date: run python schema/write_ranges.py"


def test_defaults_file_and_the_settings_page_agree_with_the_table():
    defaults = json.loads((SCHEMA / "settings_default.json").read_text(encoding="utf-8"))
    assert defaults == {k: d["default"] for k, d in SETTINGS.items()}
    rows = {}
    for line in (SCHEMA / "settings.md").read_text(encoding="utf-8").splitlines():
        cells = [c.strip() for c in line.strip().strip("|").split("|")]
        if len(cells) == 4 and cells[0] in SETTINGS:
            rows[cells[0]] = cells
    assert set(rows) == set(SETTINGS), sorted(set(SETTINGS) ^ set(rows))
    for key, d in SETTINGS.items():
        if d["type"] in ("integer", "number"):
            got = rows[key][3].replace(" ", "").replace("\u202f", "")
            m = re.fullmatch(r"([\d.]+)–([\d.]+)", got) or re.fullmatch(r"≥([\d.]+)", got)
            assert m, (key, rows[key][3])
            assert float(m.group(1)) == d["min"], key
            if m.lastindex == 2:
                assert float(m.group(2)) == d["max"], key
            assert float(rows[key][2]) == d["default"], key


def test_the_firmware_accepts_each_range_end_and_refuses_one_step_beyond():
    cases = []
    for key, d in SETTINGS.items():
        if d["type"] == "integer":
            cases += [(key, d["min"], True), (key, d["max"], True), (key, d["min"] - 1, False),
                      (key, d["max"] + 1, False)]
        elif d["type"] == "number":
            cases += [(key, d["min"], True), (key, d["max"], True), (key, d["min"] * 0.99, False),
                      (key, d["max"] * 1.01, False)]
    script = "from nightcell_fw import settings as S\n" + "".join(
        f"try:\n    S.check({k!r}, {v!r})\n    print('{i}=1')\nexcept ValueError:\n    print('{i}=0')\n"
        for i, (k, v, _) in enumerate(cases))
    res = results(run_mp(script))
    for i, (key, value, ok) in enumerate(cases):
        assert res[str(i)] == ("1" if ok else "0"), (key, value)


def test_the_host_reads_the_same_table_and_setup_checks_its_ranges():
    from nightcell import cli
    from nightcell.wire import settings

    assert settings.table() == TABLE  # the installed copy (package data) is the file in schema/
    for key in ("interval_ms", "warmup_ms", "durability_ms"):
        assert cli.SETTING_RANGES_MS[key] == (SETTINGS[key]["min"], SETTINGS[key]["max"])
    assert cli.SETTING_RANGES["reads"] == (SETTINGS["reads"]["min"], SETTINGS["reads"]["max"])
    assert cli.SETTING_RANGES["path_cm"] == (SETTINGS["path_cm"]["min"], SETTINGS["path_cm"]["max"])
    assert cli.LABEL_MAX_BYTES == SETTINGS["label"]["max_bytes"]
    assert cli.MAX_CHANNELS == SETTINGS["channels"]["max_items"]
