"""The words and screens a teacher reads: numbers rounded by their uncertainty with their units (one formatter,
checked against worked examples), local time with the zone named, devices and runs by label, tables in 80 columns,
NIGHTCELL_DB for every --db, runs by number, and plain words before the trade's tools' jargon."""

from __future__ import annotations

import json
import re
import time

import pytest
from click.testing import CliRunner

from nightcell.cli import cli
from nightcell.render import numbers as n

from test_bad_input import DEVICE, RUN_LABEL, make_db  # noqa: E402  (the bad-input table's database)


# -- one formatter ---------------------------------------------------------------------------------------------------

def test_gum_worked_example_rounds_the_value_to_its_uncertainty():
    # JCGM 100:2008 (GUM) §7.2.2 [memory for the section]: m_s = 100.021 47 g with u_c = 0.35 mg
    assert n.measured(100.02147, 0.00035, "g") == "100.02147 ± 0.00035 g"
    # the same rule with the uncertainty given to more digits than two: rounded to two significant digits
    assert n.measured(100.021472, 0.000348, "g") == "100.02147 ± 0.00035 g"


@pytest.mark.parametrize("value, se", [(1.00022, 0.00124106), (57.074, 0.0674), (0.0019990, 1.7e-6),
                                       (346.7, 0.3), (-107.666, 0.292317), (0.5, 0.25), (0.5, 0.0996),
                                       (0.019869, 5.54722e-05)])
def test_rounding_matches_the_uncertainties_library(value, se):
    unc = pytest.importorskip("uncertainties")
    # the uncertainties package's ".2u" format (two significant digits on the uncertainty; reference library)
    assert n.measured(value, se) == format(unc.ufloat(value, se), ".2u").replace("+/-", " ± ")


def test_rounding_carries_and_rounds_to_tens_and_far_from_one():
    assert n.measured(0.5, 0.0996) == "0.50 ± 0.10"          # 0.0996 rounds up to 0.10: one place coarser
    assert n.measured(12345.6, 99.7) == "12350 ± 100"        # the value to tens, as the uncertainty
    assert n.measured(1.234e-7, 5.1e-9, "M") == "(1.234 ± 0.051)×10⁻⁷ M"
    assert n.measured(0.0198690, 5.54722e-05, "s⁻¹") == "0.019869 ± 0.000055 s⁻¹"
    assert n.interval(0.019760, 0.019982, 5.5e-5, "s⁻¹") == "0.019760 to 0.019982 s⁻¹"
    assert n.measured(float("nan"), 1.0) == "—" and n.measured(2.5, None, "s") == "2.5 s"
    assert n.activation_energy(52312.0, 1234.0) == "Ea = 52.3 ± 1.2 kJ mol⁻¹"


# -- the commands on a database --------------------------------------------------------------------------------------

@pytest.fixture()
def db(tmp_path):
    return make_db(tmp_path / "class.db")


def _cli(*args, env=None):
    return CliRunner().invoke(cli, [str(a) for a in args], env=env or {})


def test_times_are_local_with_the_zone_named(db, monkeypatch):
    monkeypatch.setenv("TZ", "CET-1CEST,M3.5.0,M10.5.0/3")  # a POSIX zone rule: needs no zone database
    time.tzset()
    try:
        out = _cli("list", "runs", "--db", db, env={"COLUMNS": "80"}).output
        started = json.loads(_cli("list", "runs", "--db", db, "--json").output)[0]["started_utc"]
        assert re.search(r"\d\d:\d\d CET", out), out
        # stored in UTC; shown one hour later in CET
        hh = int(started[11:13])
        assert f"{(hh + 1) % 24:02d}:{started[14:16]} CET" in out
        assert n.local_time(0) == "1970-01-01 01:00:00 CET"
    finally:
        monkeypatch.delenv("TZ")
        time.tzset()


@pytest.mark.parametrize("what", ["runs", "devices", "blanks", "results", "calibrations"])
def test_tables_fit_80_columns_and_name_devices_by_label(db, what):
    assert _cli("calibrate", "--db", db).exit_code == 0
    assert _cli("rate", "--db", db, "--run", "1").exit_code == 0  # a run by its number in `list runs`
    out = _cli("list", what, "--db", db, env={"COLUMNS": "80"}).output
    assert max(len(line) for line in out.splitlines()) <= 80, out
    if what == "runs":
        assert "#1" in out and RUN_LABEL in out  # the number --run takes, whole on one line
    if what in ("runs", "blanks", "calibrations", "results"):
        assert DEVICE not in out, out  # the device by its label (or none); the id only in devices and --json


def test_nightcell_db_is_honoured_by_the_analysis_commands(db, tmp_path):
    env = {"NIGHTCELL_DB": str(db)}
    cal = _cli("calibrate", env=env)
    assert cal.exit_code == 0 and f"saved in {db} as result" in cal.output
    rate = _cli("rate", "--run", RUN_LABEL, env=env)
    assert rate.exit_code == 0 and f"saved in {db} as result" in rate.output
    for command in ("orders", "arrhenius"):
        r = _cli(command, env=env)
        assert r.exit_code == 2 and f"no run in {db} has a recorded" in r.output, r.output
    # a CSV typed on the command line wins over the variable
    csv_file = tmp_path / "run.csv"
    csv_file.write_text("time_s,absorbance\n" + "".join(f"{t},{0.8 * 0.99 ** t}\n" for t in range(0, 200, 10)))
    r = _cli("rate", csv_file, env=env)
    assert r.exit_code == 0 and "saved in" not in r.output


def test_orders_and_arrhenius_take_the_recorded_conditions(db):
    # one run only: the conditions are found, and the count of runs is what is missing (a clear message, exit 2)
    assert _cli("condition", "--db", db, "--run", RUN_LABEL, "--temperature-c", "25", "--conc",
                "hydroxide=0.02").exit_code == 0
    for command in ("orders", "arrhenius"):
        r = _cli(command, "--db", db)
        assert r.exit_code == 2 and "only 1 run(s)" in r.output and "this needs at least 3" in r.output, r.output
        assert "Traceback" not in r.output and "AssertionError" not in r.output


def test_rate_prints_k_with_its_unit_and_jargon_only_behind_detail(db):
    out = _cli("rate", "--db", db).output
    assert re.search(r"k = [\d.]+ ± [\d.]+ s⁻¹", out)
    for jargon in ("runs-test", "AIC ", "boot", "1:", "journal"):
        assert jargon not in out, jargon
    detail = _cli("rate", "--db", db, "--detail").output
    assert "runs-test p" in detail and "blank mark 1:" in detail and "run key" in detail
