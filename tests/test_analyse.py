"""From stored raw rows to science: the blank rule, a run that continues across a power-cut boot, run conditions and
the study glue (conditions → per-run k → orders and Arrhenius).

The raw rows here are built by hand (``RunBuilder``), with counts computed from the Beer–Lambert definition
A = −log10((I − I_dark)/(I0 − I0_dark)) (common practice, no single source), so every expected number is known
exactly or comes from a reference library (scipy) applied to the same arrays.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.optimize import curve_fit

from nightcell.science import study
from nightcell.tasks.analyse import (
    BLANK_RULE,
    analyse_run,
    analyse_study,
    calibrate_from_store,
    choose_blank,
    run_conditions,
    run_provenance,
    run_series,
    set_run_condition,
    standards_from_store,
)
from nightcell.errors import AnalysisError, InputError
from nightcell.render.numbers import local_time
from nightcell.store.clocks import rebuild_clocks

DEV = "a0b1c2d3e4f50607"
READS = 16
DARK = 100.0
LED = 3000.0
UNIX0 = 1_800_000_000.0

# Arrhenius worked example, N2O5 decomposition (Daniels & Johnston 1921, as reprinted in physical-chemistry
# textbooks [memory for the table]); Ea = 102.9 ± 0.5 kJ/mol [reproduced] (shared/REFERENCES.md, Kinetics).
N2O5_T = np.array([273.0, 298.0, 308.0, 318.0, 328.0, 338.0])
N2O5_K = np.array([7.87e-7, 3.46e-5, 1.35e-4, 4.98e-4, 1.50e-3, 4.87e-3])


class RunBuilder:
    """Raw rows of one device, as a board would journal them, inserted into a store."""

    def __init__(self, store, device: str = DEV):
        self.store = store
        self.device = device
        self.rows: dict[str, list[tuple]] = {t: [] for t in ("boots", "samples", "marks", "mark_counts", "anchors",
                                                                "settings_records")}
        self.seq: dict[int, int] = {}
        self.up: dict[int, int] = {}

    def boot(self, boot: int, unix_at_zero: float, settings: dict | None = None) -> None:
        self.seq[boot] = 0
        self.up[boot] = 0
        self.zero = {**getattr(self, "zero", {}), boot: unix_at_zero}
        self.rows["boots"].append((self.device, boot, 0, 0, 0, 1234, "0.1.0", "sim", None, None))
        self.rows["settings_records"].append((self.device, boot, 1, 0, json.dumps(settings or {"interval_ms": 10000})))
        self.seq[boot] = 2

    def _next(self, boot: int, at_s: float) -> tuple[int, int]:
        seq = self.seq[boot]
        self.seq[boot] += 1
        up = int(round(at_s * 1000))
        assert up >= self.up[boot]
        self.up[boot] = up
        return seq, up

    def anchor(self, boot: int, at_s: float) -> None:
        seq, up = self._next(boot, at_s)
        self.rows["anchors"].append((self.device, boot, seq, up, int(round((self.zero[boot] + at_s) * 1000))))

    def mark(self, boot: int, at_s: float, kind: str, absorbance: float | None = 0.0, *, label: str = "",
             value: str = "", source: int = 0, led: float = LED) -> int:
        seq, up = self._next(boot, at_s)
        reads = 0 if kind in ("run_start", "run_stop") else READS
        self.rows["marks"].append((self.device, boot, seq, up, kind, source, reads, label, value))
        if reads:
            light = DARK if absorbance is None else DARK + led * 10.0 ** (-absorbance)
            self.rows["mark_counts"].append((self.device, boot, seq, 0, int(round(DARK * READS)),
                                             int(round(light * READS))))
        return seq

    def samples(self, boot: int, times_s: np.ndarray, absorbance: np.ndarray) -> None:
        for t, a in zip(times_s, absorbance):
            seq, up = self._next(boot, float(t))
            self.rows["samples"].append((self.device, boot, seq, 0, up, 0, 0, READS, int(round(DARK * READS)),
                                         int(round((DARK + LED * 10.0 ** (-a)) * READS)), None))

    def commit(self) -> None:
        with self.store.write():
            self.store.insert_rows(self.rows)
            rebuild_clocks(self.store, self.device)
        self.rows = {t: [] for t in self.rows}


def _plateau(t, a0, a_inf, k):
    return a_inf + (a0 - a_inf) * np.exp(-k * t)


def _absorbance_from_counts(store, device: str, boot_seqs: list[tuple[int, int]], blank: tuple[int, int]):
    """A from the stored integer counts by the definition, independently of nightcell's optics."""
    bl = store.conn.execute("SELECT dark, light FROM mark_counts WHERE device=? AND boot=? AND seq=?",
                            (device, *blank)).fetchone()
    out = []
    for b, q in boot_seqs:
        d, li = store.conn.execute("SELECT dark, light FROM samples WHERE device=? AND boot=? AND seq=? AND channel=0",
                                   (device, b, q)).fetchone()
        out.append(-math.log10((li - d) / (bl[1] - bl[0])))
    return np.array(out)


# -- the blank rule ---------------------------------------------------------------------------------------------

@pytest.fixture
def two_blanks(store):
    rb = RunBuilder(store)
    rb.boot(1, UNIX0)
    rb.anchor(1, 1.0)
    rb.mark(1, 5.0, "blank", 0.0, led=3000.0)          # seq 3
    rb.mark(1, 8.0, "standard", 0.40, value="4")        # against the first blank
    rb.mark(1, 20.0, "blank", 0.0, led=2500.0)          # seq 5: the LED dimmed; a fresh blank
    rb.mark(1, 25.0, "run_start", label="after the second blank")
    rb.samples(1, np.arange(30.0, 330.0, 10.0), 0.05 + 0.6 * np.exp(-0.01 * np.arange(0.0, 300.0, 10.0)))
    rb.mark(1, 340.0, "run_stop")
    rb.anchor(1, 345.0)
    rb.commit()
    return store


def test_blank_rule_takes_the_nearest_preceding_blank(two_blanks):
    store = two_blanks
    run = store.runs(DEV)[0]
    b = choose_blank(store, DEV, (run.start_boot, run.start_seq))
    assert (b.boot, b.seq) == (1, 5) and b.rule == BLANK_RULE
    assert_allclose(b.light - b.dark, 2500.0, rtol=1e-9)
    std = choose_blank(store, DEV, (1, 4))
    assert (std.boot, std.seq) == (1, 3)
    # the standard is read against its own (first) blank: A = 0.40 back from the counts (rounding only); against
    # the later, dimmer blank it would read 0.40 − log10(3000/2500) = 0.32
    std_points = standards_from_store(store, DEV)
    assert std_points["blanks"] == ["1:3"]
    assert_allclose(std_points["absorbance"], [0.40], atol=1e-4)
    series = run_series(store, run)
    assert (series["blank"].boot, series["blank"].seq) == (1, 5)


def test_a_named_blank_overrides_the_rule_and_a_missing_one_is_a_clear_error(two_blanks):
    store = two_blanks
    b = choose_blank(store, DEV, (1, 6), blank=(1, 3))
    assert (b.boot, b.seq, b.rule) == (1, 3, "named by the user")
    with pytest.raises(InputError, match=r"no blank 1:99 on device a0b1c2d3e4f50607: list blanks with "
                                         r"`nightcell list blanks` and give its label"):
        choose_blank(store, DEV, (1, 6), blank=(1, 99))
    # no blank before: the first blank after, with a warning that says so (issue 12 §5: a run can be rescued)
    after = choose_blank(store, DEV, (1, 2))
    assert (after.boot, after.seq) == (1, 3) and "no blank before the run" in after.rule
    assert any("taken after" in w for w in after.warnings)
    # named by its key text or its label
    assert (choose_blank(store, DEV, (1, 6), blank="1:3").seq, choose_blank(store, DEV, (1, 6), blank="1:5").seq) \
        == (3, 5)
    with pytest.raises(InputError, match="no blank labelled 'tap water'"):
        choose_blank(store, DEV, (1, 6), blank="tap water")
    with pytest.raises(AnalysisError, match="take a blank first"):
        choose_blank(store, "ffff000000000000", (1, 2))


# -- a run that continues across a power-cut boot -------------------------------------------------------------

K_TRUE, A0, A_INF = 0.004, 0.75, 0.04
GAP_S = 150.0  # the board was off this long


@pytest.fixture
def cut_run(store):
    """Boot 1: blank, run start, 40 readings, power lost. Boot 2 (150 s later): the board's own run_start
    (source 2), 50 readings, the host's stop. Boot 1 has one anchor (it borrows boot 2's rate), boot 2 two."""
    rb = RunBuilder(store)
    rb.boot(1, UNIX0)
    rb.anchor(1, 1.0)
    rb.mark(1, 2.0, "dark", None)
    rb.mark(1, 3.0, "blank", 0.0)
    rb.mark(1, 10.0, "run_start", label="fading across a power cut")
    t1 = np.arange(12.0, 412.0, 10.0)  # reaction time = board time − 12 s in boot 1
    rb.samples(1, t1, _plateau(t1 - 12.0, A0, A_INF, K_TRUE))
    cut_at = t1[-1] + 5.0
    zero2 = UNIX0 + cut_at + GAP_S  # boot 2 begins after the gap
    rb.boot(2, zero2)
    rb.mark(2, 0.5, "run_start", label="fading across a power cut", source=2)
    rb.anchor(2, 1.0)  # the host came back soon after the restart, and synced later (at 700 s, below):
    t2 = np.arange(2.5, 502.5, 10.0)
    rb.samples(2, t2, _plateau(t2 + (zero2 - UNIX0) - 12.0, A0, A_INF, K_TRUE))
    rb.mark(2, 510.0, "run_stop")
    rb.anchor(2, 700.0)  # anchors far enough apart (>= 600 s) to fit a drift
    rb.commit()
    store.cut_gap_s = float((zero2 + t2[0]) - (UNIX0 + t1[-1]))
    return store


def test_a_run_resumed_after_a_power_cut_is_one_run_across_two_boots(cut_run):
    store = cut_run
    runs = store.runs(DEV)
    assert len(runs) == 1
    run = runs[0]
    assert (run.start_boot, run.stop_boot) == (1, 2)
    a = analyse_run(store, run)
    assert a.boots == [1, 2]
    assert a.resumed_at == [(2, 2)]
    assert len(a.time_s) == 40 + 50
    # readings keep their wall-clock spacing across the cut: the gap is the time the board was off plus the
    # restart (boot 1 borrows boot 2's fitted rate, exactly 1 here, so to rounding of the ms anchors)
    i = 40
    assert_allclose(a.time_s[i] - a.time_s[i - 1], store.cut_gap_s, atol=2e-3)
    # the restart in plain words, the resume named by its local time (the mark key 2:2 stays in --json)
    resumed = local_time(store.mark_reading(DEV, 2, 2)["wall_clock_utc"], seconds=False)
    restart = [w for w in a.warnings if "restarted" in w]
    assert restart == [f"the board restarted 1 time(s) during the run (the board resumed it by itself at {resumed}); "
                       "readings are placed in time by the clock of each start"], a.warnings
    assert a.to_dict()["resumed_at"] == ["2:2"]
    # absorbance equals the definition applied to the stored counts
    assert_allclose(a.absorbance, _absorbance_from_counts(store, DEV, a.seqs, (a.blank.boot, a.blank.seq)),
                    rtol=0, atol=1e-12)
    fit = a.fits["first_order_to_final"]
    # scipy.optimize.curve_fit on the same points and weights (reference library)
    w = 10.0 ** (-2.0 * a.absorbance)
    p, cov = curve_fit(_plateau, a.time_s, a.absorbance, p0=[0.7, 0.05, 0.003], sigma=1.0 / np.sqrt(w))
    assert_allclose(fit.values["k"], p[2], rtol=1e-6)
    assert_allclose(fit.stderr["k"], math.sqrt(cov[2, 2]), rtol=1e-4)
    # and the counts were made from K_TRUE: integer rounding is the only noise
    assert_allclose(fit.values["k"], K_TRUE, rtol=2e-3)


def test_the_same_readings_split_into_two_runs_would_lose_the_continuation(cut_run):
    """If the board's own run_start (source 2) were a new run, the run would end at the cut: the store's run list
    must treat it as a continuation (the rule the demo's power cut rests on)."""
    store = cut_run
    marks = store.marks(DEV, "run_start")
    assert [m["source"] for m in marks] == [0, 2]
    assert len(store.runs(DEV)) == 1


def test_provenance_names_the_boots_the_clocks_and_the_resume(cut_run):
    store = cut_run
    run = store.runs(DEV)[0]
    a = analyse_run(store, run)
    prov = run_provenance(store, a)
    assert prov["resumed by the board at"] == "2:2"
    assert prov["boot 1 clock"] == "borrowed (1 anchors)"
    assert prov["boot 2 clock"] == "fitted (2 anchors)"
    assert "firmware 0.1.0" in prov["boot 2"]
    assert prov["settings"].startswith("record 1:1: ")
    json.dumps(prov)


def test_a_run_never_stopped_ends_where_the_next_run_starts(store):
    rb = RunBuilder(store)
    rb.boot(1, UNIX0)
    rb.anchor(1, 1.0)
    rb.mark(1, 2.0, "blank", 0.0)
    rb.mark(1, 5.0, "run_start", label="first, power lost, not resumed")
    rb.samples(1, np.arange(10.0, 210.0, 10.0), 0.5 * np.exp(-0.01 * np.arange(0.0, 200.0, 10.0)) + 0.1)
    rb.boot(2, UNIX0 + 400.0)
    rb.anchor(2, 1.0)
    rb.mark(2, 5.0, "run_start", label="second")
    rb.samples(2, np.arange(10.0, 110.0, 10.0), np.full(10, 0.3))
    rb.mark(2, 120.0, "run_stop")
    rb.commit()
    first, second = store.runs(DEV)
    assert first.stop_boot is None
    s = run_series(store, first)
    assert len(s["time_s"]) == 20 and s["boots"] == [1]
    started = local_time(store.mark_reading(DEV, 2, 3)["wall_clock_utc"], seconds=False)
    assert any(f"ends where the next run starts (the start of run 'second' of {started})" in w
               for w in s["warnings"]), s["warnings"]
    assert not any("2:3" in w for w in s["warnings"])
    assert len(run_series(store, second)["time_s"]) == 10


# -- run conditions ---------------------------------------------------------------------------------------------

def test_conditions_are_recorded_with_their_source_and_replaced_when_typed_again(cut_run):
    store = cut_run
    run = store.runs(DEV)[0]
    raw_before = {t: store.count(t) for t in ("samples", "marks", "anchors")}
    set_run_condition(store, run, "temperature_K", 298.15, "bench sheet")
    set_run_condition(store, run.key, "conc_hydroxide_M", 0.02, "bench sheet")
    set_run_condition(store, run, "temperature_K", 299.15, "probe mean")
    got = run_conditions(store)[run.key]
    assert got == {"temperature_K": {"value": 299.15, "source": "probe mean"},
                   "conc_hydroxide_M": {"value": 0.02, "source": "bench sheet"}}
    row = store.query("SELECT run_key, temperature_C FROM run_condition_readings WHERE quantity='temperature_K'")[0]
    assert row["run_key"] == run.key
    assert_allclose(row["temperature_C"], 26.0, atol=1e-9)
    assert {t: store.count(t) for t in raw_before} == raw_before


@pytest.mark.parametrize("quantity, value, source, message", [
    ("temperature", 298.0, "s", "use temperature_K, or conc_<reactant>_M"),
    ("conc_OH_M", 0.1, "s", "lower-case reactant name"),
    ("temperature_K", 25.0, "s", r"give kelvin \(°C \+ 273.15\)"),
    ("conc_hydroxide_M", -0.1, "s", "must be a positive number"),
    ("conc_hydroxide_M", "lots", "s", "must be a number"),
    ("conc_hydroxide_M", 0.1, "  ", "say where the condition comes from"),
])
def test_bad_conditions_are_refused_with_what_to_do_and_nothing_written(cut_run, quantity, value, source, message):
    store = cut_run
    run = store.runs(DEV)[0]
    with pytest.raises(InputError, match=message):
        set_run_condition(store, run, quantity, value, source)
    assert store.count("run_conditions") == 0


def test_a_condition_for_a_run_that_is_not_there_is_refused(cut_run):
    with pytest.raises(InputError, match="give a run key device:boot:seq"):
        set_run_condition(cut_run, f"{DEV}:9:9", "temperature_K", 300.0, "s")
    # a label typed where the key belongs, with a typo: the closest run label is offered
    with pytest.raises(InputError, match=r"; did you mean 'fading across a power cut'\? Give a run key"):
        set_run_condition(cut_run, "fading acros a power cut", "temperature_K", 300.0, "s")


# -- several runs: conditions → k → order and Arrhenius ------------------------------------------------------------

@pytest.fixture
def study_store(store):
    """Six runs at one hydroxide level whose k are the N2O5 table's at its six temperatures, and two more at 298 K
    with hydroxide halved and doubled and k in proportion (first order by construction)."""
    rb = RunBuilder(store)
    rb.boot(1, UNIX0)
    rb.anchor(1, 1.0)
    rb.mark(1, 2.0, "blank", 0.0)
    for c, v in ((2.0, 0.1), (4.0, 0.2), (6.0, 0.3), (8.0, 0.4)):
        rb.mark(1, 3.0 + c, "standard", v, value=f"{c:g}")
    plan = [(T, 0.02, k) for T, k in zip(N2O5_T, N2O5_K)]
    k298 = N2O5_K[1]
    plan += [(298.0, 0.01, k298 / 2), (298.0, 0.04, k298 * 2)]
    t = 100.0
    keys = []
    for T, c, k in plan:
        length = 4.0 * math.log(2.0) / k
        rb.mark(1, t, "run_start", label=f"T {T:g} K, hydroxide {c:g} M")
        times = t + 1.0 + np.linspace(0.0, length, 60)
        rb.samples(1, times, _plateau(times - times[0], 0.8, 0.03, k))
        rb.mark(1, times[-1] + 1.0, "run_stop")
        keys.append((T, c))
        t = times[-1] + 10.0
    rb.anchor(1, t)
    rb.commit()
    for run, (T, c) in zip(store.runs(DEV), keys):
        set_run_condition(store, run, "temperature_K", T, "test table")
        set_run_condition(store, run, "conc_hydroxide_M", c, "test table")
    return store


def test_study_recovers_the_n2o5_activation_energy_from_runs(study_store):
    s = analyse_study(study_store)
    assert len(s.runs) == 8 and not [k for k in s.skipped if k.count(":") == 2]
    assert len(s.used["arrhenius"]) == 6
    ea = s.arrhenius.extra
    # N2O5 decomposition (Daniels & Johnston 1921 [memory for the table]): Ea = 102.9 ± 0.5 kJ/mol [reproduced].
    # The runs' k carry their own (tiny, near-equal relative) SEs, so the weighted fit sits within rounding of the
    # textbook's unweighted one and the Birge-ratio scale brings the SE back to the scatter's.
    assert_allclose(ea["Ea_kJ_per_mol"], 102.9, atol=0.3)
    assert_allclose(ea["Ea_se_kJ_per_mol"], 0.5, atol=0.1)
    assert ea["birge_ratio"] > 1.0
    # Eyring on the same runs: Ea − ΔH‡ ≈ R·T̄ (standard relation for a unimolecular step; loose)
    dh = s.eyring.values["dH_J_per_mol"]
    assert_allclose(ea["Ea_kJ_per_mol"] * 1000 - dh, study.GAS_CONSTANT * N2O5_T.mean(), rtol=0.05)


def test_study_finds_first_order_in_hydroxide_from_k_and_from_initial_rates(study_store):
    s = analyse_study(study_store)
    fit = s.order("hydroxide")
    assert len(s.used["order hydroxide"]) == 3
    # built with k ∝ [OH⁻] (synthetic data with a known order of 1)
    assert_allclose(fit.values["order"], 1.0, atol=3 * fit.stderr["order"] + 1e-3)
    assert fit.stderr["order"] < 0.01
    # initial rates of runs starting at the same absorbance scale with k: the same order, less precisely
    g = s.initial_orders["hydroxide"].per_reactant["hydroxide"]
    assert_allclose(g.values["order"], 1.0, atol=0.05)
    json.dumps(s.to_dict(), allow_nan=False)


def test_runs_without_conditions_are_left_out_and_say_why(study_store):
    store = study_store
    store.conn.execute("DELETE FROM run_conditions WHERE quantity = 'conc_hydroxide_M' AND start_seq = "
                       "(SELECT min(start_seq) FROM run_conditions)")
    s = analyse_study(store)
    assert len(s.runs) == 7
    (why,) = [v for k, v in s.skipped.items() if k.count(":") == 2]
    assert "no recorded temperature_K and starting concentration" in why


def test_calibration_and_run_share_the_blank_rule(study_store):
    cal = calibrate_from_store(study_store, DEV)
    # standards built at A = 0.05·c exactly (rounding of counts only)
    assert_allclose(cal.slope, 0.05, rtol=1e-4)
    assert cal.inputs["blank_rule"] == BLANK_RULE
    assert cal.inputs["stray_light"] == ["no opaque mark before it: stray light not corrected"]


def test_an_opaque_mark_corrects_stray_light(store):
    """With 1 % stray light a reading of true A = 1 reads about 4 % low (standard spectrophotometry result
    [memory], shared/REFERENCES.md, Photometry); an opaque mark measures s and the run is corrected."""
    s_frac = 0.01
    rb = RunBuilder(store)
    rb.boot(1, UNIX0)
    rb.anchor(1, 1.0)
    rb.mark(1, 2.0, "blank", 0.0)
    # an opaque block: only stray light arrives, T_obs = s/(1+s)
    rb.mark(1, 3.0, "opaque", -math.log10(s_frac / (1 + s_frac)))
    rb.mark(1, 4.0, "run_start", label="stray")
    observed = -np.log10((10.0 ** -1.0 + s_frac) / (1 + s_frac))
    assert_allclose(observed, 0.96, atol=0.01)  # about 4 % low
    rb.samples(1, np.arange(10.0, 110.0, 10.0), np.full(10, observed))
    rb.mark(1, 120.0, "run_stop")
    rb.commit()
    s = run_series(store, store.runs(DEV)[0])
    assert_allclose(s["blank"].stray, s_frac, rtol=2e-3)
    assert_allclose(s["absorbance"], 1.0, atol=2e-3)
    assert "opaque mark 1:4" in s["blank"].stray_text
