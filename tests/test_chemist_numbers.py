"""Numbers a chemist can defend (issue 12 §3–§5): calibration sets, units, honest intervals, one rule for Ea's SE,
the same weights for a CSV and a stored run, the rise-to-a-final-value law checked against NIST StRD Misra1a
through the CLI, a run rescued with a named blank, windows on stored runs.

Check values come from outside the project and are named beside each check (shared/REFERENCES.md). NIST's
higher-difficulty datasets of the same form (y = b1·(1 − exp(−b2·x))) are not on this machine in a form whose
certified values can be verified here, so only Misra1a (lower difficulty) is checked against certified values;
poor starts on Misra1a must either reach the certified values or fail with a message. Data built here for the
sets and windows are invented for the test (they check bookkeeping, not chemistry).
"""

from __future__ import annotations

import json
import re
import math
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from numpy.testing import assert_allclose

from nightcell.cli import cli
from nightcell.science import kinetics, study
from nightcell.tasks.analyse import _per_run_scale, calibrate_from_store, label_tokens

from test_analyse import DEV, N2O5_K, N2O5_T, UNIX0, RunBuilder
from test_bad_input import make_db
from test_fitting import MISRA_X, MISRA_Y

# NIST StRD Misra1a: starts and certified values (shared/REFERENCES.md, Regression — NIST StRD)
MISRA_STARTS = ((500.0, 1e-4), (250.0, 5e-4))
MISRA_B = (2.3894212918e02, 5.5015643181e-04)
MISRA_SD = (2.7070075241e00, 7.2668688436e-06)
MISRA_RSS = 1.2455138894e-01


def _run(*args) -> tuple[int, str]:
    r = CliRunner().invoke(cli, [str(a) for a in args], env={"COLUMNS": "200"})
    return r.exit_code, r.output


def _misra_csv(tmp_path: Path) -> Path:
    p = tmp_path / "misra1a.csv"
    p.write_text("time_s,absorbance\n" + "".join(f"{float(x)!r},{float(y)!r}\n" for x, y in zip(MISRA_X, MISRA_Y)))
    return p


# -- §5: the rise to a final value, against NIST StRD Misra1a through the CLI ------------------------------------

@pytest.mark.parametrize("start", MISRA_STARTS, ids=["NIST start 1", "NIST start 2"])
def test_misra1a_through_the_cli_from_both_nist_starts(tmp_path, start):
    # NIST StRD Misra1a, y = b1·(1 − exp(−b2·x)) = first_order_rise_to_final with A0 held at 0 (shared/REFERENCES.md).
    # Its y values (10–82) are not absorbances, so the %T guard needs --accept-suspect.
    code, out = _run("rate", _misra_csv(tmp_path), "--model", "first_order_rise_to_final", "--a0", "0",
                     "--start", f"A_rise={start[0]}", "--start", f"k={start[1]}", "--accept-suspect", "--json")
    assert code == 0, out
    fit = json.loads(out)["detail"]["first_order_rise_to_final"]  # the full fit record (render.fit_layout)
    assert fit["success"] and fit["extra"]["start_used"] == "given"
    # goal of shared/REFERENCES.md: parameters and RSS to at least 6 significant digits, SDs to 4
    assert_allclose([fit["values"]["A_rise"], fit["values"]["k"]], MISRA_B, rtol=1e-6)
    assert_allclose(fit["rss"], MISRA_RSS, rtol=1e-6)
    assert_allclose([fit["stderr"]["A_rise"], fit["stderr"]["k"]], MISRA_SD, rtol=1e-4)
    assert fit["dof"] == 12
    text = _run("rate", _misra_csv(tmp_path), "--model", "first_order_rise_to_final", "--a0", "0", "--start",
                f"A_rise={start[0]}", "--start", f"k={start[1]}", "--accept-suspect")[1]
    assert "95 % interval = value ± t·SE, t = 2.179 with 12 degrees of freedom" in text, text


@pytest.mark.parametrize("start", [(1.0, 1.0), (1e6, 1e-9), (-100.0, -1e-3), (238.0, 1e-7), (10.0, 10.0)])
def test_misra1a_from_a_poor_start_reaches_the_certified_values_or_fails_clearly(tmp_path, start):
    code, out = _run("rate", _misra_csv(tmp_path), "--model", "first_order_rise_to_final", "--a0", "0",
                     "--start", f"A_rise={start[0]}", "--start", f"k={start[1]}", "--accept-suspect", "--json")
    if code == 0:  # a success must be the certified answer (NIST StRD Misra1a), never another point
        fit = json.loads(out)["detail"]["first_order_rise_to_final"]
        assert_allclose([fit["values"]["A_rise"], fit["values"]["k"]], MISRA_B, rtol=1e-6)
        assert_allclose(fit["rss"], MISRA_RSS, rtol=1e-6)
    else:
        assert code == 5 and "first_order_rise_to_final:" in out, out


def test_a_rise_that_is_still_straight_is_a_failure_not_a_final_value(tmp_path):
    # a straight line has no final value: the law cannot separate A_rise from k (common practice: fit zero order)
    p = tmp_path / "line.csv"
    t = np.arange(0.0, 100.0, 5.0)
    p.write_text("time_s,absorbance\n" + "".join(f"{x},{0.1 + 0.002 * x}\n" for x in t))
    code, out = _run("rate", p, "--model", "first_order_rise_to_final", "--a0", "0.1")
    assert code == 5 and "first_order_rise_to_final:" in out, out
    assert "still nearly straight" in out or "singular" in out or "did not converge" in out, out


def test_rise_law_with_a0_free_recovers_a_simulated_product_curve():
    # invented data with known parameters: product formation A = 0.05 + 0.7·(1 − e^(−0.01 t)), noise 0.003 A
    rng = np.random.default_rng(3)
    t = np.arange(0.0, 600.0, 5.0)
    a = 0.05 + 0.7 * -np.expm1(-0.01 * t) + rng.normal(0.0, 0.003, t.size)
    fit = kinetics.fit_model(t, a, "first_order_rise_to_final")
    for name, true in (("A0", 0.05), ("A_rise", 0.7), ("k", 0.01)):
        lo, hi = fit.confint(name)
        assert lo - 2 * fit.se(name) <= true <= hi + 2 * fit.se(name), (name, fit.values)
    assert fit.extra["A_final"] == pytest.approx(fit.param("A0") + fit.param("A_rise"))
    assert fit.extra["half_life_s"] == pytest.approx(math.log(2) / fit.param("k"))


# -- §4: models ranked by AICc ---------------------------------------------------------------------------------

def test_models_are_ranked_by_aicc_with_delta(tmp_path):
    rng = np.random.default_rng(8)
    t = np.arange(0.0, 120.0, 10.0)  # 12 points: n small, the correction matters
    a = 0.1 + 0.6 * np.exp(-0.02 * t) + rng.normal(0.0, 0.004, t.size)
    comparison = kinetics.fit_all(t, a)
    aicc = {m: r.aic + 2 * len(r.names) * (len(r.names) + 1) / (r.n - len(r.names) - 1)
            for m, r in comparison.results.items()}  # Burnham & Anderson's AICc, written out
    assert comparison.ranking == sorted(aicc, key=aicc.get)
    best = min(aicc.values())
    assert comparison.delta_aicc == pytest.approx({m: v - best for m, v in aicc.items()})
    assert "ΔAICc" in comparison.report() and comparison.to_dict()["ranked_by"] == "AICc"


# -- §4: one rule for Ea's SE ----------------------------------------------------------------------------------

def test_ea_se_is_the_same_in_the_arrhenius_command_and_the_study(tmp_path):
    # Arrhenius worked example, N2O5 decomposition (Daniels & Johnston 1921 [memory for the table]; Ea = 102.9 ±
    # 0.5 kJ/mol [reproduced], shared/REFERENCES.md). Three temperatures: 1 dof, t = 12.7.
    T, k = N2O5_T[1:4], N2O5_K[1:4]
    k_se = 0.02 * k
    p = tmp_path / "k.csv"
    p.write_text("temperature_K,k,k_se\n" + "".join(f"{a},{float(b)!r},{float(c)!r}\n" for a, b, c in zip(T, k, k_se)))
    code, out = _run("arrhenius", p, "--json")
    assert code == 0, out
    command = json.loads(out)["arrhenius"]
    in_study = study.arrhenius(T, k, k_se)
    _per_run_scale(in_study)  # what the study report applies
    assert in_study.se("Ea_J_per_mol") == pytest.approx(command["stderr"]["Ea_J_per_mol"], rel=1e-12)
    assert "Birge ratio" in command["extra"]["se_rule"] and "n − 2 dof" in command["extra"]["se_rule"]
    text = _run("arrhenius", p)[1]
    assert "t = 12.71 with 1 degree(s) of freedom" in text and command["extra"]["se_rule"] in text, text


# -- §4: the same weights for a CSV and a stored run ------------------------------------------------------------

def test_refitting_an_exported_run_gives_the_same_k_and_se(tmp_path):
    db = make_db(tmp_path / "class.db")
    assert _run("export", "--db", db, "--out", tmp_path / "csv")[0] == 0
    exported = next((tmp_path / "csv").glob("*-absorbance.csv"))
    code, out = _run("rate", "--db", db, "--model", "first_order_to_final", "--json")
    assert code == 0, out
    stored = json.loads(out)["detail"]["first_order_to_final"]
    code, out = _run("rate", exported, "--model", "first_order_to_final", "--json")
    assert code == 0, out
    refit = json.loads(out)["detail"]["first_order_to_final"]
    assert refit["inputs"]["weights"] == "the CSV's weight column"
    assert_allclose(refit["values"]["k"], stored["values"]["k"], rtol=1e-9)
    assert_allclose(refit["stderr"]["k"], stored["stderr"]["k"], rtol=1e-6)


def test_t_start_and_t_end_work_on_stored_runs(tmp_path):
    db = make_db(tmp_path / "class.db")
    code, out = _run("rate", "--db", db, "--model", "first_order_to_final", "--t-start", "10", "--t-end", "60",
                     "--json")
    assert code == 0, out
    fit = json.loads(out)["detail"]["first_order_to_final"]
    assert fit["n"] == 26 and fit["inputs"]["window_s"] == [10.0, 60.0]  # samples every 2 s from 0 s: 10 … 60 s
    code, out = _run("rate", "--db", db, "--t-start", "60", "--t-end", "10")
    assert code == 2 and "--t-end 10 must be after --t-start 60" in out


def test_a_run_can_be_read_against_a_named_blank(tmp_path):
    db = make_db(tmp_path / "class.db", blanks=(0.0, 0.0))
    code, out = _run("rate", "--db", db, "--blank", "1:3", "--json")
    assert code == 0, out
    data = json.loads(out)
    blank = data["detail"]["readings_from"]["blank"]
    assert (blank["seq"], blank["rule"]) == (3, "named by the user")
    code, out = _run("rate", "--db", db, "--blank", "water")
    assert code == 2 and "2 blanks are labelled 'water'" in out and "give the key of the one you mean" in out, out


# -- §3 and §4: calibration sets and units ----------------------------------------------------------------------

@pytest.fixture
def two_sets(store):
    rb = RunBuilder(store)
    rb.boot(1, UNIX0, settings={"interval_ms": 10000, "path_cm": 1.0})
    rb.anchor(1, 1.0)
    rb.mark(1, 5.0, "blank", 0.0, label="water")                                   # seq 3
    for i, c in enumerate((2, 4, 6)):
        rb.mark(1, 6.0 + i, "standard", 0.1 * c, value=str(c), label="dye unit=µM")  # an older session's slope
    rb.mark(1, 20.0, "run_start", label="first")
    rb.samples(1, np.arange(30.0, 200.0, 10.0), 0.05 + 0.6 * np.exp(-0.01 * np.arange(0.0, 170.0, 10.0)))
    rb.mark(1, 210.0, "run_stop")
    rb.mark(1, 300.0, "blank", 0.0, label="water")                                 # a new set begins
    for i, c in enumerate((1, 2, 3, 4)):
        rb.mark(1, 301.0 + i, "standard", 0.2 * c, value=str(c), label="dye unit=µM")
    rb.mark(1, 320.0, "run_start", label="second")
    rb.samples(1, np.arange(330.0, 500.0, 10.0), 0.05 + 0.6 * np.exp(-0.01 * np.arange(0.0, 170.0, 10.0)))
    rb.mark(1, 510.0, "run_stop")
    rb.anchor(1, 520.0)
    rb.commit()
    with store.write():
        store.touch_device(DEV, board="sim", firmware="0.1.0", label="bench")
    return store


def test_calibrate_uses_the_latest_set_lists_its_standards_and_keeps_the_choice(two_sets):
    code, out = _run("calibrate", "--db", two_sets.path, "--path-cm", "1")
    assert code == 0, out
    assert "calibration set: after blank 1:26 (4 standards; other sets: after blank 1:3)" in out, out
    assert "standards used: 'dye' = 1 µM, 'dye' = 2 µM, 'dye' = 3 µM, 'dye' = 4 µM" in out  # mark keys: --detail
    assert "standards' marks: 1:27, 1:28, 1:29, 1:30" in _run("calibrate", "--db", two_sets.path, "--detail")[1]
    # slope 0.2 A per µM in 1 cm ⇒ ε = 0.2 / 1e-6 = 2.0e5 L mol⁻¹ cm⁻¹ (Beer–Lambert, common practice)
    assert "molar absorptivity: 2000" in out and "L mol^-1 cm^-1 (standards in µM)" in out, out
    eps = json.loads(_run("calibrate", "--db", two_sets.path, "--path-cm", "1", "--json")[1])["molar_absorptivity"]
    assert eps["value"] == pytest.approx(2.0e5, rel=1e-3)
    assert " µM, LOQ = " in out and "— convention: LOD = 3.3σ/S, LOQ = 10σ/S (ICH Q2; S the slope), σ = the " \
        "residual SD s_y/x" in out, out
    data = json.loads(_run("calibrate", "--db", two_sets.path, "--json")[1])
    assert data["calibration"]["values"]["slope"] == pytest.approx(0.2, rel=1e-3)
    inputs = data["calibration"]["inputs"]
    assert inputs["set"] == "after blank 1:26" and [s["value"] for s in inputs["standards_used"]] == list("1234")
    row = two_sets.conn.execute("SELECT inputs_json FROM results WHERE id = ?", (data["result_id"],)).fetchone()
    assert json.loads(row[0])["set"] == "after blank 1:26"  # the choice is in the saved result's provenance


def test_a_named_set_and_the_set_before_a_run(two_sets):
    code, out = _run("calibrate", "--db", two_sets.path, "--set", "1:3", "--json")
    assert code == 0, out
    assert json.loads(out)["calibration"]["values"]["slope"] == pytest.approx(0.1, rel=1e-3)
    first = [r for r in two_sets.runs(DEV) if r.label == "first"][0]
    cal = calibrate_from_store(two_sets, DEV, before=(first.start_boot, first.start_seq))
    assert cal.inputs["set"] == "after blank 1:3" and cal.unit == "µM"
    code, out = _run("calibrate", "--db", two_sets.path, "--set", "week9")
    assert code == 2 and "no calibration set 'week9'" in out


def test_units_that_do_not_convert_give_no_molar_absorptivity(tmp_path):
    p = tmp_path / "std.csv"
    p.write_text("concentration,absorbance\n0,0.002\n2,0.151\n4,0.299\n6,0.452\n8,0.598\n")
    code, out = _run("calibrate", p, "--unit", "mg/L", "--path-cm", "1")
    assert code == 0, out
    assert "molar absorptivity not given: the unit mg/L does not convert to mol/L" in out
    code, out = _run("calibrate", p, "--unit", "mM", "--path-cm", "1", "--reading", "0.3")
    # every concentration with its unit, rounded by its uncertainty (render.numbers)
    assert code == 0 and "L mol^-1 cm^-1 (standards in mM)" in out and re.search(r"\d ± [\d.]+ mM", out), out


def test_linear_range_line_says_what_it_tests_for_each_model(tmp_path):
    p = tmp_path / "std.csv"
    p.write_text("concentration,absorbance\n0,0.002\n2,0.151\n4,0.299\n6,0.452\n8,0.598\n10,0.741\n")
    out = _run("calibrate", p)[1]
    assert "linear range: does the line need an added curvature term over the standards' range?" in out, out
    out = _run("calibrate", p, "--quadratic")[1]
    assert "linear range: does the quadratic need an added cubic term over the standards' range?" in out, out


def test_unit_and_set_travel_in_the_standard_label():
    # schema/records.md: a standard's label may carry unit=… and set=… tokens
    assert label_tokens("dye 2 unit=µM set=week2") == ("dye 2", {"unit": "µM", "set": "week2"})
    assert label_tokens("plain") == ("plain", {})


def test_rise_law_on_a_stored_run(tmp_path):
    # invented product-formation run (A rises to a final value); fitted with A0 free from the grid start
    db = make_db(tmp_path / "rise.db", curve=lambda i: 0.05 + 0.5 * -math.expm1(-0.05 * i))
    code, out = _run("rate", "--db", db, "--model", "first_order_rise_to_final", "--json")
    assert code == 0, out
    fit = json.loads(out)["detail"]["first_order_rise_to_final"]
    assert fit["values"]["k"] == pytest.approx(0.025, rel=0.02)  # 0.05 per sample, a sample every 2 s
    assert fit["extra"]["A_final"] == pytest.approx(0.55, abs=0.01)
    code, out = _run("rate", "--db", db, "--model", "first_order_rise_to_final", "--a0", "0")
    assert code == 2 and "export the run" in out


def test_standard_journals_its_unit_and_set_in_the_label():
    # the board is a fake on a pty that answers hello and the mark; the request line is what the board would get
    from test_bad_input import HELLO, FakePort
    from nightcell.wire import frames as F

    def board(line: bytes) -> bytes:
        tag, verb = line.decode("ascii").split(" ")[:2]
        if verb == "hello":
            return F.encode_reply(F.REPLY_OK, int(tag), json.dumps(dict(HELLO, running=False)).encode())
        reply = {"boot": 1, "seq": 9, "reads": 16, "dark": [1600], "light": [40000]}
        return F.encode_reply(F.REPLY_OK, int(tag), json.dumps(reply).encode())

    port = FakePort(board)
    try:
        code, out = _run("standard", "--port", port.path, "2.0", "--label", "dye", "--unit", "µM", "--set", "week2")
    finally:
        port.close()
    assert code == 0, out
    sent = [ln for ln in port.lines if b" standard " in ln]
    assert sent and sent[0].endswith(b" standard 2.0 dye%20unit=%C2%B5M%20set=week2"), port.lines
    assert label_tokens("dye unit=µM set=week2") == ("dye", {"unit": "µM", "set": "week2"})


def test_a_blocked_blank_at_capture_can_be_confirmed():
    from test_bad_input import FakePort, blocked_blank_board

    port = FakePort(blocked_blank_board)
    try:
        code, out = _run("blank", "--port", port.path, "--accept-suspect")
    finally:
        port.close()
    assert code == 0 and "suspect blank kept as confirmed (--accept-suspect): channel 0: light 105.9" in out, out
