"""End to end: the demo runs the real firmware on two simulated boards side by side, logs with the host unplugged,
survives a power cut in the middle of a run, syncs each board once into one database, analyses and reports.

The scenario's numbers are invented for the demo (host/nightcell/tasks/demo.py, DemoScenario); here they are the truth the
fits must recover, within the uncertainty each fit states. One demo run serves every test in this module.
"""

from __future__ import annotations

import json
import math
import re
import sqlite3

import pytest

from nightcell.tasks.demo import DemoScenario, run_demo

SC = DemoScenario()


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo")
    said: list[str] = []
    outcome = run_demo(out, say=said.append)
    con = sqlite3.connect(f"file:{outcome.db}?mode=ro", uri=True)
    yield outcome, said, con
    con.close()


def test_demo_writes_the_database_the_study_report_and_one_report_per_run(demo):
    outcome, _, _ = demo
    out = outcome.out
    assert outcome.report == out / "report.html"
    assert (out / "nightcell.db").stat().st_size > 10_000
    assert len(outcome.run_reports) == len(SC.runs)
    for page in outcome.run_reports:
        assert page.parent == out / "runs" and page.stat().st_size > 10_000
    # every figure exists as PNG and as SVG
    stems = {p.with_suffix("") for p in outcome.figures}
    # per run its absorbance; per board its calibration (drawn once for its runs' pages, once for the study);
    # the study: every run, the order plot, the Arrhenius plot
    assert len(stems) == len(SC.runs) + 2 * len(SC.devices) + 3
    for page in outcome.run_reports:
        assert page.with_name(page.stem + "-absorbance.svg") in outcome.figures
    for stem in stems:
        assert stem.with_suffix(".png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
        assert b"<svg" in stem.with_suffix(".svg").read_bytes()[:2000]
    assert (out / "runs.csv").read_text().count("\n") == len(SC.runs) + 1
    json.dumps(outcome.summary, allow_nan=False)  # the CLI prints it with --json


def test_demo_says_where_the_report_is_and_how_to_open_the_database(demo):
    outcome, said, _ = demo
    text = "\n".join(said)
    assert f"report: {outcome.report}" in text
    assert f"sqlite3 {outcome.db}" in text and "SQLite browser" in text
    assert "sample_readings" in text and "mark_readings" in text
    assert "Safety:" in text and "qualified supervision" in text


def test_each_board_journaled_its_calibration_and_runs(demo):
    _, _, con = demo
    for bench, device in enumerate(SC.devices):
        marks = dict(con.execute("SELECT mark, count(*) FROM marks WHERE device = ? AND source = 0 GROUP BY mark",
                                 (device,)).fetchall())
        n_runs = sum(1 for r in SC.runs if r.bench == bench)
        assert marks == {"dark": 1, "blank": 1, "opaque": 1, "standard": len(SC.standards_uM),
                         "run_start": n_runs, "run_stop": n_runs}, device
    # one sync per board, into one database
    assert con.execute("SELECT device, count(*) FROM sync_sessions GROUP BY device").fetchall() == \
        [(d, 1) for d in sorted(SC.devices)]


def _skipped(con, device, after=(0, 0), before=(1 << 62, 0)) -> int:
    """Samples a board says it skipped (late events, schema/records.md: "N samples skipped: ...") between two keys."""
    texts = con.execute("SELECT text FROM events WHERE device = ? AND code = 6 AND (boot, seq) > (?, ?) AND "
                        "(boot, seq) < (?, ?)", (device, *after, *before)).fetchall()
    return sum(int(re.match(r"(\d+) samples skipped", t).group(1)) for (t,) in texts)


def test_every_reading_is_placed_in_wall_clock_time(demo):
    _, _, con = demo
    total = con.execute("SELECT count(*) FROM sample_readings").fetchone()[0]
    placed = con.execute("SELECT count(*) FROM sample_readings WHERE wall_clock_unix_s IS NOT NULL").fetchone()[0]
    # a loaded computer may make a board skip samples (it journals how many): at least half of the plan is there
    planned = sum(SC.run_seconds(r) for r in SC.runs) / SC.interval_s
    assert total == placed >= 0.5 * planned  # the power-cut test checks that every gap is explained
    # the boot before the power cut had one anchor and borrows the drift of the board's longest fitted boot
    qualities = {r[0] for r in con.execute("SELECT quality FROM boot_clocks")}
    assert qualities <= {"fitted", "borrowed"}


def test_the_power_cut_run_continues_across_boots(demo):
    outcome, _, con = demo
    cut = outcome.summary["power_cut"]
    planned = [r for r in SC.runs if r.power_cut][0]
    device = SC.devices[planned.bench]
    assert cut["boot_after"] == 2 and cut["reset_cause"] == 0  # the sim board reports "power on"
    # what the firmware did after the restart: it resumed the run by itself and journaled a run_start of its own
    assert cut["running_after_restart"] is True
    assert cut["resume_marks"], cut["what_happened"]
    label = con.execute("SELECT label FROM marks WHERE device = ? AND source = 2 AND mark = 'run_start'",
                        (device,)).fetchone()[0]
    assert label == SC.label(planned)
    row = [r for r in outcome.summary["runs"] if r["label"] == SC.label(planned)][0]
    assert row["boots"] == [1, 2]
    # the board takes every sample it has power for, or journals that it skipped it (a late event with the count,
    # when a loaded computer holds the simulated board back): in each boot, the samples plus the skipped ones fill
    # the span of uptime they cover. Never more samples than the plan; the restart itself costs some (the simulated
    # clock runs on while the firmware starts again, faster than real time).
    expected = (SC.run_seconds(planned) - SC.power_off_s) / SC.interval_s
    start = con.execute("SELECT boot, seq FROM marks WHERE device = ? AND source = 0 AND mark = 'run_start' AND "
                        "label = ?", (device, SC.label(planned))).fetchone()
    stop = con.execute("SELECT boot, seq FROM marks WHERE device = ? AND mark = 'run_stop' AND (boot, seq) > (?, ?) "
                       "ORDER BY boot, seq LIMIT 1", (device, *start)).fetchone()
    for boot in (1, 2):
        lo, hi = max(tuple(start), (boot, 0)), min(tuple(stop), (boot + 1, 0))
        n, first, last = con.execute(
            "SELECT count(*), min(uptime_ms), max(uptime_ms) FROM samples WHERE device = ? AND channel = 0 AND "
            "(boot, seq) > (?, ?) AND (boot, seq) < (?, ?)", (device, *lo, *hi)).fetchone()
        span = (last - first) / (SC.interval_s * 1000) + 1
        skipped = _skipped(con, device, lo, hi)
        assert span - 2 <= n + skipped <= span + 1, (boot, n, skipped, span)
    assert 0.5 * expected <= row["points"] <= expected + 2
    before, after = (con.execute("SELECT count(*) FROM samples WHERE device = ? AND boot = ? AND channel = 0",
                                 (device, b)).fetchone()[0] for b in (1, 2))
    assert before > 0.3 * expected and after > 0.3 * expected


def test_conditions_come_from_the_bench_sheet_and_name_their_source(demo):
    _, _, con = demo
    rows = con.execute("SELECT quantity, count(*), min(source) FROM run_condition_readings "
                       "GROUP BY quantity").fetchall()
    assert {(q, n) for q, n, _ in rows} == {("temperature_K", len(SC.runs)), ("conc_hydroxide_M", len(SC.runs))}
    assert all("bench sheet" in s for _, _, s in rows)


def test_demo_recovers_each_runs_rate_constant_within_its_stated_uncertainty(demo):
    outcome, _, _ = demo
    rows = outcome.summary["runs"]
    assert len(rows) == len(SC.runs)
    for r in rows:
        # 4 SE: six runs are checked, so the family-wise false-alarm rate stays below 0.1 %
        assert abs(r["k_per_s"] - r["k_true_per_s"]) <= 4 * r["k_se_per_s"], r
        assert r["k_se_per_s"] / r["k_per_s"] < 0.01, r


def test_demo_recovers_the_order_in_hydroxide_and_the_activation_energy(demo):
    outcome, _, _ = demo
    s = outcome.summary
    assert abs(s["order_hydroxide"] - SC.order_hydroxide) <= 3 * s["order_hydroxide_se"]
    assert s["order_hydroxide_se"] < 0.05
    assert abs(s["ea_kJ_per_mol"] - SC.ea_J_per_mol / 1000) <= 3 * s["ea_se_kJ_per_mol"]
    assert s["ea_se_kJ_per_mol"] < 2.0
    # Eyring on the same runs: Ea − ΔH‡ = R·T for one step (standard relation; T between 288 and 308 K)
    diff = s["ea_kJ_per_mol"] - s["dH_kJ_per_mol"]
    assert 8.314e-3 * 288 - 0.3 <= diff <= 8.314e-3 * 308 + 0.3


def test_study_report_is_self_contained_and_tells_the_story(demo):
    outcome, _, _ = demo
    page = outcome.report.read_text(encoding="utf-8")
    assert "http://" not in page and "https://" not in page and "<script" not in page
    assert len(re.findall(r"<img [^>]*src='data:image/png;base64,", page)) >= 5
    for needed in ("Order in hydroxide", "Temperature dependence", "Eyring", "standard error", "The power cut",
                   "Safety", "invented", "qualified supervision"):
        assert needed in page, needed
    hrefs = re.findall(r"href='([^']*)'", page)
    assert sorted(hrefs) == sorted(f"runs/{p.name}" for p in outcome.run_reports)
    for page_path in outcome.run_reports:
        run_page = page_path.read_text(encoding="utf-8")
        assert "http://" not in run_page and "https://" not in run_page
        assert "Provenance" in run_page and "settings" in run_page and "stray-light fraction" in run_page


def test_results_are_stored_with_their_inputs(demo):
    _, _, con = demo
    kinds = dict(con.execute("SELECT kind, count(*) FROM results GROUP BY kind").fetchall())
    assert kinds == {"rate": len(SC.runs), "calibration": len(SC.devices), "orders": 1, "arrhenius": 1, "eyring": 1}
    for (inputs,) in con.execute("SELECT inputs_json FROM results WHERE kind = 'rate'"):
        doc = json.loads(inputs)
        assert doc["blank_rule"] and doc["run"].count(":") == 2 and not math.isnan(float(doc["points_used"]))


# -- the demo's database through the commands a class would type afterwards ------------------------------------------

def _cli(*args):
    from click.testing import CliRunner

    from nightcell.cli import cli

    return CliRunner().invoke(cli, [str(a) for a in args])


def test_study_report_command_on_the_demo_database(demo, tmp_path):
    outcome, _, _ = demo
    db = tmp_path / "copy.db"
    src = sqlite3.connect(outcome.db)
    dst = sqlite3.connect(db)
    src.backup(dst)
    src.close()
    dst.close()
    r = _cli("report", "--db", db, "--study", "--out", tmp_path / "rep", "--json")
    assert r.exit_code == 0, r.output
    files = json.loads(r.output)["files"]
    assert files[0].endswith("study.html")
    pages = [f for f in files if f.endswith(".html")]
    assert len(pages) == 1 + len(SC.runs)
    study = (tmp_path / "rep" / "study.html").read_text(encoding="utf-8")
    assert "Arrhenius" in study and "hydroxide" in study
    # the conditions the demo recorded can be listed, changed with their source named, and are refused when bad
    r = _cli("list", "conditions", "--db", db, "--json")
    conds = json.loads(r.output)
    assert len(conds) == len(SC.runs)
    key = sorted(conds)[0]
    r = _cli("condition", "--db", db, "--run", key, "--temperature-c", "25.5", "--source", "probe check", "--json")
    assert r.exit_code == 0, r.output
    got = json.loads(r.output)["conditions"]["temperature_K"]
    assert got == {"value": pytest.approx(298.65), "source": "probe check"}
    r = _cli("condition", "--db", db, "--run", key, "--temperature-k", "25")
    assert r.exit_code == 2 and "kelvin" in r.output
    r = _cli("condition", "--db", db, "--run", key, "--conc", "hydroxide")
    assert r.exit_code == 2 and "REACTANT=MOLAR" in r.output
    r = _cli("report", "--db", db, "--study", "--all", "--out", tmp_path / "x")
    assert r.exit_code == 2 and "one of --run, --all or --study" in r.output


def test_demo_tells_what_it_is_doing_during_its_long_steps(demo):
    _, said, _ = demo
    text = "\n".join(said)
    # each bench's unattended runs, then the analysis and the report: no long silence (issue: ~12 s, then ~9 s)
    for step in ("standards measured", "logging with the host unplugged", "plugged in to sync", "analysing:",
                 "drawing the report"):
        assert step in text, step
    assert text.index("analysing:") < text.index("drawing the report") < text.index("report: ")
    # every number printed with its unit, rounded by its uncertainty; Ea the one way (render.numbers)
    assert re.search(r"k = \d\.\d+ ± 0\.0+\d\d s⁻¹", text) and re.search(r"Ea = \d+\.\d+ ± \d\.\d+ kJ mol⁻¹", text)


def test_study_page_names_benches_and_calibrations_by_label(demo):
    outcome, _, _ = demo
    page = outcome.report.read_text(encoding="utf-8")
    runs_table = page[page.index("<h2>Runs</h2>"):page.index("</table>", page.index("<h2>Runs</h2>"))]
    assert "<th>bench</th>" in runs_table and runs_table.count("<td>bench A</td>") == 3
    assert runs_table.count("<td>bench B</td>") == 3
    assert "Calibration of bench A" in page and "Calibration of bench B" in page
    for device in SC.devices:  # hex ids only in the provenance
        assert device not in page[:page.index("<h2>Provenance</h2>")]
    # two runs with the same label on two benches are told apart by their links
    links = re.findall(r"<a href='[^']*'>([^<]*)</a>", page)
    assert len(links) == len(set(links)) == len(SC.runs)
    assert "plateau" not in page.lower()


def test_report_files_have_the_users_normal_permissions(demo):
    import os

    outcome, _, _ = demo
    mask = os.umask(0o022)
    os.umask(mask)
    for path in [outcome.report, *outcome.run_reports, *outcome.figures[:4]]:
        assert path.stat().st_mode & 0o777 == 0o666 & ~mask, path  # not 0600 as a private temporary file is


_PAGE_CONTENT = """() => ({
    images: [...document.images].map(i => ({loaded: i.complete && i.naturalWidth > 0, alt: i.alt})),
    scripts: document.scripts.length,
    headings: [...document.querySelectorAll('h1, h2')].map(h => h.innerText)})"""


def test_every_report_page_reads_in_a_real_browser_at_1280_and_800_px_with_no_script(demo):
    """The study page and every run page in the system's headless Chromium with JavaScript switched off (no script
    needed to read them): nothing wider than the window at 1280 and at 800 px (the provenance table wraps), every
    image loads, and the headings are there to read."""
    from support.dashboard import WIDEST_ELEMENT_JS, browser, browser_missing

    if browser_missing() is not None:
        pytest.skip(browser_missing())
    outcome, _, _ = demo
    pages = [outcome.report, *outcome.run_reports]
    with browser() as chromium:
        for width in (1280, 800):
            context = chromium.new_context(java_script_enabled=False, viewport={"width": width, "height": 900})
            try:
                page = context.new_page()
                for path in pages:
                    page.goto(path.resolve().as_uri())
                    got = page.evaluate(WIDEST_ELEMENT_JS) | page.evaluate(_PAGE_CONTENT)
                    where = f"{path.name} at {width} px"
                    assert got["scripts"] == 0, where
                    assert got["scroll"] <= width and got["worst"]["right"] <= width + 0.5, (where, got["worst"])
                    assert got["images"] and all(i["loaded"] for i in got["images"]), (where, got["images"])
                    assert "Provenance" in got["headings"] or path == outcome.report, (where, got["headings"])
                    assert len(got["headings"]) >= 4, (where, got["headings"])
                    if path == pages[-1]:
                        page.screenshot(path=str(outcome.out / f"{path.stem}-{width}.png"), full_page=True)
            finally:
                context.close()
