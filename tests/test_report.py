"""Per-run and per-study reports: self-contained HTML, figures also as PNG and SVG, hostile labels kept inert, and
figures that draw what the fits say (checked against published values and reference libraries)."""

from __future__ import annotations

import base64
import math
import re
import xml.etree.ElementTree as ET

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pytest  # noqa: E402
from numpy.testing import assert_allclose  # noqa: E402
from scipy import stats  # noqa: E402

from nightcell.render import report  # noqa: E402
from nightcell.science import study  # noqa: E402
from nightcell.tasks.analyse import (  # noqa: E402
    analyse_run,
    analyse_study,
    calibrate_from_store,
    run_conditions,
    run_provenance,
    set_run_condition,
)
from nightcell.errors import InputError  # noqa: E402
from test_analyse import DEV, N2O5_K, N2O5_T, UNIX0, RunBuilder, _plateau  # noqa: E402

HOSTILE = "<script>alert(1)</script>'; DROP TABLE samples;--"
HOSTILE_MATH = HOSTILE + " costs $5 and $6 \\"


def _hostile_store(store, n_runs: int = 1, label: str = HOSTILE_MATH):
    rb = RunBuilder(store)
    rb.boot(1, UNIX0, settings={"interval_ms": 10000, "label": label})
    rb.anchor(1, 1.0)
    rb.mark(1, 2.0, "blank", 0.0, label=label)
    for c in (2.0, 4.0, 6.0, 8.0, 10.0):
        rb.mark(1, 3.0 + c, "standard", 0.087 * c + 0.002 * math.sin(c), value=f"{c:g}", label=label)
    t = 100.0
    for i in range(n_runs):
        rb.mark(1, t, "run_start", label=label if i == 0 else f"{label} #{i}")
        times = t + 2.0 + np.arange(0.0, 1200.0, 10.0)
        a = _plateau(times - times[0], 0.78, 0.035, 0.004 * (1 + i))
        a = a + 0.003 * np.sin(times / 37.0)  # a little structure so residuals are not all zero
        rb.samples(1, times, a)
        rb.mark(1, times[-1] + 1.0, "run_stop")
        t = times[-1] + 20.0
    rb.anchor(1, t)
    rb.commit()
    return store


def _assert_self_contained_and_inert(page: str) -> None:
    assert "http://" not in page and "https://" not in page
    assert "<script" not in page.lower()
    assert not re.search(r"<(link|iframe|object|embed)\b", page, re.I)
    srcs = re.findall(r"src='([^']*)'", page)
    assert srcs, "the report embeds its figures"
    for src in srcs:
        assert src.startswith("data:image/png;base64,")
        assert base64.b64decode(src.split(",", 1)[1])[:8] == b"\x89PNG\r\n\x1a\n"
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in page
    assert "DROP TABLE samples;--" in page  # shown as text


def _assert_figure_pair(png_path, svg_path) -> None:
    assert png_path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    root = ET.fromstring(svg_path.read_bytes())  # well-formed XML
    assert root.tag.endswith("svg")
    assert not [el for el in root.iter() if el.tag.endswith("script")]


def test_run_report_with_a_hostile_label_is_inert_self_contained_and_complete(store, tmp_path):
    _hostile_store(store)
    before = store.count("samples")
    run = store.runs(DEV)[0]
    assert run.label == HOSTILE_MATH  # stored as the text it is
    cal = calibrate_from_store(store, DEV)
    a = analyse_run(store, run, calibration=cal)
    set_run_condition(store, run, "temperature_K", 298.15, HOSTILE)
    prov = run_provenance(store, a, cal)
    files = report.run_report(a, tmp_path / "out", calibration=cal, provenance=prov,
                              conditions=run_conditions(store)[run.key], name=run.label)
    assert store.count("samples") == before and "samples" in store.db.table_names()
    # the file name is made safe; the page sits in the folder asked for
    assert files.html.parent == tmp_path / "out" and "<" not in files.html.name and "/" not in files.html.stem
    page = files.html.read_text(encoding="utf-8")
    _assert_self_contained_and_inert(page)
    assert len(re.findall(r"<img ", page)) == 2  # absorbance with fit and residuals; calibration
    for needed in ("standard error", "Rate laws ranked", "first order, towards a final absorbance", "Provenance",
                   "firmware 0.1.0", "interval_ms", "298.15", "Limit of detection", "blank", "Glossary"):
        assert needed in page, needed
    # the fit in the one order (render.fit_layout): the answer first, the runs test only in the detail
    heads = ["The answer: ", "How well the law fits", "Parameters", "Rate laws ranked", "Detail", "Glossary"]
    at = [page.index(f"<h2>{h}") for h in heads]
    assert at == sorted(at)
    assert page.index("runs-test p") > page.index("<h2>Detail") and "plateau" not in page.lower()
    pngs = sorted(p for p in files.figures if p.suffix == ".png")
    svgs = sorted(p for p in files.figures if p.suffix == ".svg")
    assert len(pngs) == len(svgs) == 2
    for png, svg in zip(pngs, svgs):
        assert png.stem == svg.stem
        _assert_figure_pair(png, svg)
    # no half-written files left behind
    assert not list((tmp_path / "out").glob("*.part"))


def test_study_report_links_run_pages_and_keeps_labels_inert(store, tmp_path):
    _hostile_store(store, n_runs=3)
    for i, run in enumerate(store.runs(DEV)):
        set_run_condition(store, run, "temperature_K", 298.15, "sheet")
        set_run_condition(store, run, "conc_hydroxide_M", 0.01 * (1 + i), "sheet")
    s = analyse_study(store)
    assert len(s.runs) == 3 and "hydroxide" in s.orders
    pages = {it.run.key: f"runs/{report.safe_filename(it.run.label)}.html" for it in s.runs}
    pages[s.runs[0].run.key] = "javascript:alert(1)"
    files = report.study_report(s, tmp_path, intro=HOSTILE, provenance={"note": HOSTILE}, run_pages=pages)
    page = files.html.read_text(encoding="utf-8")
    _assert_self_contained_and_inert(page)
    assert "javascript:" not in page  # a link is a relative file name or nothing
    hrefs = re.findall(r"href='([^']*)'", page)
    assert len(hrefs) == 2 and all(h.startswith("runs/") and h.endswith(".html") and ":" not in h for h in hrefs)
    assert "Order in hydroxide" in page and "Calibration of" in page
    stems = {p.stem for p in files.figures}
    assert {"study-runs", "study-order-hydroxide", f"study-calibration-{DEV}"} <= stems
    for stem in stems:
        _assert_figure_pair(tmp_path / f"{stem}.png", tmp_path / f"{stem}.svg")


def test_report_into_a_file_path_is_refused_and_writes_nothing(store, tmp_path):
    _hostile_store(store)
    a = analyse_run(store, store.runs(DEV)[0])
    target = tmp_path / "taken"
    target.write_text("keep me")
    with pytest.raises(InputError, match="is a file: give a folder for the report"):
        report.run_report(a, target)
    assert target.read_text() == "keep me"
    assert {p.name for p in tmp_path.iterdir()} <= {"taken", "test.db", "test.db-shm", "test.db-wal"}


def test_arrhenius_plot_draws_the_published_n2o5_line():
    fit = study.arrhenius(N2O5_T, N2O5_K)
    fig, ax = plt.subplots()
    try:
        assert report.plot_arrhenius(fit, ax=ax) is ax
        line = [ln for ln in ax.get_lines() if ln.get_linestyle() == "-"][0]
        x, y = line.get_xdata(), line.get_ydata()
        slope = (y[-1] - y[0]) / (x[-1] - x[0])  # d ln k / d(1000/T) = −Ea/(1000·R)
        # N2O5 decomposition (Daniels & Johnston 1921 [memory for the table]): Ea = 102.9 ± 0.5 kJ/mol [reproduced]
        assert_allclose(-slope * 1000 * study.GAS_CONSTANT / 1000, 102.9, atol=0.05)
        # the points are the table's ln k at 1000/T
        pts = ax.containers[0].lines[0]
        assert_allclose(pts.get_xdata(), 1000 / N2O5_T)
        assert_allclose(pts.get_ydata(), np.log(N2O5_K))
        assert any("Ea 102.9 ± 0.5 kJ/mol" in t.get_text() for t in ax.get_legend().get_texts())
    finally:
        plt.close(fig)
    fe = study.eyring(N2O5_T, N2O5_K)
    fig, ax = plt.subplots()
    try:
        report.plot_arrhenius(fe, ax=ax)
        pts = ax.containers[0].lines[0]
        assert_allclose(pts.get_ydata(), np.log(N2O5_K / N2O5_T))
    finally:
        plt.close(fig)


def test_order_plot_draws_the_fitted_power_law():
    # synthetic rates with a known order of 1.5 and a little scatter (scipy.stats.linregress as the reference)
    c = np.array([0.01, 0.02, 0.04, 0.08])
    r = 0.3 * c**1.5 * np.array([1.01, 0.99, 1.02, 0.985])
    st = study.orders(r, {"acid": c})
    fig, ax = plt.subplots()
    try:
        assert report.plot_orders(st, ax=ax, reactant="acid") is ax
        assert ax.get_xscale() == "log" and ax.get_yscale() == "log"
        line = [ln for ln in ax.get_lines() if ln.get_linestyle() == "-"][0]
        x, y = line.get_xdata(), line.get_ydata()
        slope = (math.log(y[-1]) - math.log(y[0])) / (math.log(x[-1]) - math.log(x[0]))
        ref = stats.linregress(np.log(c), np.log(r))
        assert_allclose(slope, ref.slope, rtol=1e-9)
        assert "[acid]" in ax.get_xlabel()
    finally:
        plt.close(fig)


def test_plain_text_keeps_dollars_literal_in_figures(tmp_path):
    fig, ax = plt.subplots()
    try:
        ax.set_title(report.plain_text(HOSTILE_MATH))
        report.save_figure(fig, tmp_path / "t.png")  # would raise a mathtext parse error on "$5 and $"
        assert ax.get_title() == HOSTILE_MATH.replace("$", r"\$")
    finally:
        plt.close(fig)


@pytest.mark.parametrize("value, se", [(1.00022, 0.00124106), (57.074, 0.0674), (0.0019990, 1.7e-6),
                                       (346.7, 0.3), (-107.666, 0.292317), (0.5, 0.25)])
def test_plus_minus_rounds_like_the_uncertainties_library(value, se):
    unc = pytest.importorskip("uncertainties")
    # uncertainties' "two significant digits on the uncertainty" format (reference library from the package index)
    ref = format(unc.ufloat(value, se), ".2u").replace("+/-", " ± ")
    assert report.plus_minus(value, se) == ref


def test_plus_minus_uses_one_power_of_ten_far_from_one():
    assert report.plus_minus(1.234e-7, 5.1e-9) == "(1.234 ± 0.051)×10⁻⁷"
    assert report.plus_minus(3.989e7, 1.1e6) == "(3.99 ± 0.11)×10⁷"
    assert report.plus_minus(float("nan"), 1.0) == "—"
    assert report.plus_minus(2.5, float("nan")) == "2.5"


def test_a_dense_series_is_thinned_for_drawing_only_keeping_each_slices_extremes():
    """Drawing a dense series keeps the lowest and highest point of every time slice (checked point by point
    against a plain loop) plus evenly spaced ones; a sparse series is drawn whole. (Invented noise: a drawing
    check, not a science one.)"""
    rng = np.random.default_rng(7)
    n = 60_000
    t = np.cumsum(rng.uniform(0.5, 1.5, n))
    a = rng.normal(0.5, 0.01, n)
    a[12_345] = 0.9  # an outlier must be drawn
    assert report.thin_for_drawing(t[:report.DRAW_LIMIT], a[:report.DRAW_LIMIT]) is None
    keep = report.thin_for_drawing(t, a)
    assert keep is not None and np.all(np.diff(keep) > 0) and keep.size <= 3 * report.DRAW_SLICES
    assert 12_345 in keep
    slot = np.minimum(((t - t.min()) * (report.DRAW_SLICES / (t.max() - t.min()))).astype(int),
                      report.DRAW_SLICES - 1)
    drawn = set(keep.tolist())
    for s in range(0, report.DRAW_SLICES, 37):
        idx = np.flatnonzero(slot == s)
        assert idx[np.argmin(a[idx])] in drawn and idx[np.argmax(a[idx])] in drawn, s
    shuffled = rng.permutation(n)  # times out of order take the sorting path: the same extremes
    back = shuffled[report.thin_for_drawing(t[shuffled], a[shuffled])]
    assert {int(np.argmin(a)), int(np.argmax(a))} <= set(back.tolist())


def test_a_run_of_a_hundred_thousand_readings_draws_small_files_that_say_they_are_thinned(tmp_path):
    """The figure of a long run is a few hundred kB in either format (goal: ≤ 2 MB, issue 17), its text says the
    drawing is thinned, and the fit it shows was made from every reading."""
    from nightcell.science import kinetics

    rng = np.random.default_rng(3)
    t = np.arange(100_000) * 2.0
    a = _plateau(t, 0.8, 0.1, 0.004) + rng.normal(0, 0.003, t.size)
    fit = kinetics.fit_model(t, a, "first_order_to_final")
    assert fit.n == t.size
    fig, ax, rax = report._two_panel()
    report.plot_run(t, a, fit, ax=ax, resid_ax=rax, title="long")
    png = report._figure_files(fig, tmp_path / "long", [])
    svg = (tmp_path / "long.svg").read_bytes()
    assert len(png) < 2e6 and len(svg) < 2e6, (len(png), len(svg))
    assert b"thinned" in svg


@pytest.mark.parametrize("level", [0.90, 0.99])
def test_calibration_plot_draws_the_prediction_band_at_the_calibrations_level(level):
    from nightcell.science.calibration import fit_calibration

    # synthetic standards (invented numbers); the band's half-width at the mean concentration is
    # t(level, dof)·s_y/x·sqrt(1 + 1/n) for a straight line (the textbook prediction interval, common practice)
    x = np.array([0.0, 2.0, 4.0, 6.0, 8.0, 10.0])
    y = 0.004 + 0.075 * x + np.array([0.002, -0.001, 0.0015, -0.002, 0.001, -0.0005])
    cal = fit_calibration(x, y, level=level)
    fig, ax = plt.subplots()
    try:
        report.plot_calibration(cal, ax=ax)
        assert f"{100 * level:g} % prediction band" in [t.get_text() for t in ax.get_legend().get_texts()]
        verts = ax.collections[0].get_paths()[0].vertices
        at_mean = verts[np.argmin(np.abs(verts[:, 0] - x.mean()))]
        half = stats.t.ppf(0.5 + level / 2, x.size - 2) * cal.residual_sd * math.sqrt(1 + 1 / x.size)
        centre = cal.intercept + cal.slope * at_mean[0]
        assert_allclose(abs(at_mean[1] - centre), half, rtol=2e-2)  # the grid point nearest the mean
    finally:
        plt.close(fig)


def test_calibration_plot_marks_an_unknown_on_the_curve_with_its_interval():
    from nightcell.science.calibration import fit_calibration

    # synthetic standards (invented numbers), as above; the unknown's value and interval are the calibration's own
    # inverse prediction (checked against reference values in tests/test_calibration.py)
    x = np.array([0.0, 2.0, 4.0, 6.0, 8.0, 10.0])
    y = 0.004 + 0.075 * x + np.array([0.002, -0.001, 0.0015, -0.002, 0.001, -0.0005])
    cal = fit_calibration(x, y)
    p = cal.predict([0.83])  # beyond the last standard: the axis must reach the interval's end
    fig, ax = plt.subplots()
    try:
        report.plot_calibration(cal, ax=ax, unknowns=[("first reading of run 1", 0.83, p)])
        diamonds = [ln for ln in ax.lines if ln.get_marker() == "D"]
        assert len(diamonds) == 1
        assert_allclose(diamonds[0].get_xydata(), [[p.value, 0.83]])
        bar = ax.containers[0].lines[2][0].get_segments()[0]  # the horizontal error bar of the errorbar container
        assert_allclose(bar, [[p.ci_low, 0.83], [p.ci_high, 0.83]])
        assert "unknown, 95 % interval" in [t.get_text() for t in ax.get_legend().get_texts()]
        assert [t.get_text() for t in ax.texts] == ["first reading of run 1"]
        assert ax.collections[0].get_paths()[0].vertices[:, 0].max() >= p.ci_high  # the band reaches it too
        ax.clear()
        report.plot_calibration(cal, ax=ax, unknowns=[("run a", 0.83, p), ("run b", 0.83, p)])  # at one point
        assert [t.get_text() for t in ax.texts] == ["1", "2"]
        assert ax.texts[0].xyann != ax.texts[1].xyann  # numbered down a column, not on top of each other
    finally:
        plt.close(fig)


def test_run_and_study_reports_mark_each_runs_first_reading_on_its_calibration(store, tmp_path, monkeypatch):
    _hostile_store(store, n_runs=2)
    for i, run in enumerate(store.runs(DEV)):
        set_run_condition(store, run, "temperature_K", 298.15, "sheet")
        set_run_condition(store, run, "conc_hydroxide_M", 0.01 * (1 + i), "sheet")
    drawn = []
    real = report.plot_calibration

    def spy(cal, *args, unknowns=(), **kw):
        drawn.append([(name, a, float(p.value)) for name, a, p in unknowns])
        return real(cal, *args, unknowns=unknowns, **kw)

    monkeypatch.setattr(report, "plot_calibration", spy)
    cal = calibrate_from_store(store, DEV)
    run = store.runs(DEV)[0]
    a = analyse_run(store, run, calibration=cal)
    report.run_report(a, tmp_path / "one", calibration=cal, name="one")
    first = a.absorbance[np.flatnonzero(a.flags == 0)[0]]
    (((name, absorbance, value),),) = drawn
    assert name.startswith("first reading of") and absorbance == first
    assert_allclose(value, cal.predict([first]).value)
    drawn.clear()
    s = analyse_study(store)
    report.study_report(s, tmp_path / "study")
    (marked,) = drawn
    assert len(marked) == len(s.runs) == 2  # both runs read through the one calibration of the bench


def test_six_runs_are_told_apart_by_marker_and_line_as_well_as_colour_and_the_legend_covers_no_data(
        store, tmp_path, monkeypatch):
    """Six runs in the study's figure: each its own colour, marker and (with its neighbours) line style, so the runs
    stay apart in greyscale and for colour-blind readers (common practice: never colour alone); the legend stands
    beside the axes, never over the readings."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    _hostile_store(store, n_runs=6)
    for i, run in enumerate(store.runs(DEV)):
        set_run_condition(store, run, "temperature_K", 298.15, "sheet")
        set_run_condition(store, run, "conc_hydroxide_M", 0.01 * (1 + i), "sheet")
    s = analyse_study(store)
    assert len(s.runs) == 6
    seen = {}
    real = report._figure_files

    def keep(fig, stem, figs):
        if stem.name == "study-runs":  # look before the figure is saved and let go
            ax = fig.axes[0]
            points = [ln for ln in ax.get_lines() if ln.get_linestyle() in ("None", "none", "")]
            renderer = FigureCanvasAgg(fig).get_renderer()
            seen.update(points=points, curves=[ln for ln in ax.get_lines() if ln not in points],
                        legend=fig.legends[0].get_window_extent(renderer), axes=ax.get_window_extent(renderer))
        return real(fig, stem, figs)

    monkeypatch.setattr(report, "_figure_files", keep)
    report.study_report(s, tmp_path)
    points, curves = seen["points"], seen["curves"]
    assert len(points) == len(curves) == 6
    assert len({ln.get_marker() for ln in points}) == 6  # greyscale: the markers alone tell the runs apart
    assert len({ln.get_color() for ln in points}) == 6
    assert all(c.get_linestyle() != d.get_linestyle() for c, d in zip(curves, curves[1:]))
    assert not seen["legend"].overlaps(seen["axes"])
    assert [report.run_style(i)["marker"] for i in range(8)] == list(report.RUN_MARKERS)
    assert len({(report.run_style(i)["color"], report.run_style(i)["marker"]) for i in range(64)}) == 64
