"""The demo: the whole job on a simulated board, with no hardware.

Scenario (our own, invented for the demo only): a violet dye is calibrated with five standards, then fades in an
alkaline solution while the board logs on its own — the host is unplugged for the whole run — and the host comes
back, syncs, fits the calibration and the fading, and writes a report. The firmware is the real one, running in
MicroPython's unix interpreter when installed (else in CPython), behind a pseudo-terminal, with an accelerated clock.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

import numpy as np

from . import report as _report
from .analyse import analyse_run, calibrate_from_store
from .errors import DeviceNotFound, InputError
from .link import Board
from .simulate import SimulatedBoard, micropython_command
from .store import Store
from .sync import sync_board

__all__ = ["DemoScenario", "run_demo", "VirtualClock"]


class VirtualClock:
    """The host's clock, accelerated like the simulated board's: Unix seconds that run ``speed`` times faster."""

    def __init__(self, speed: float, start_unix: float | None = None):
        self.speed = speed
        self.start_unix = time.time() if start_unix is None else start_unix
        self.m0 = time.monotonic()

    def __call__(self) -> float:
        return self.start_unix + (time.monotonic() - self.m0) * self.speed

    def sleep(self, board_seconds: float) -> None:
        time.sleep(board_seconds / self.speed)


@dataclass
class DemoScenario:
    """The demo's invented numbers (kept here, in one place, and used by the end-to-end test as the truth)."""

    device: str = "d3e00000000000a1"
    speed: float = 120.0                 # board ms per real ms
    interval_s: float = 10.0
    epsilon_per_uM_cm: float = 0.087     # absorbance per µM per cm of the invented dye
    path_cm: float = 1.0
    standards_uM: tuple[float, ...] = (2.0, 4.0, 6.0, 8.0, 10.0)
    start_uM: float = 9.0
    k_per_s: float = 0.0045              # pseudo-first-order fading rate constant (true value)
    a_inf: float = 0.035                 # a faint product colour: the plateau is not zero
    run_s: float = 1200.0                # how long the board logs alone
    seed: int = 2026
    optics: dict[str, float] = field(default_factory=lambda: {
        "led_counts": 3000.0, "dark_counts": 60.0, "noise_counts": 8.0, "stray": 0.001, "ambient_counts": 40.0})


@dataclass
class DemoOutcome:
    out: Path
    db: Path
    report: Path
    figures: list[Path]
    interpreter: str
    summary: dict[str, Any] = field(default_factory=dict)
    seconds: float = 0.0


def _check_out(out: Path, force: bool) -> None:
    if out.exists() and not out.is_dir():
        raise InputError(f"{out} is a file: give --out a folder")
    if out.exists() and any(out.iterdir()) and not force:
        raise InputError(f"{out} is not empty: choose an empty or new folder, or add --force to overwrite the demo "
                         "files in it")
    out.mkdir(parents=True, exist_ok=True)


def _open_board(url: str, deadline_s: float = 20.0) -> Board:
    end = time.monotonic() + deadline_s
    while True:
        board = Board.open(url, timeout=2.0)
        try:
            board.hello(timeout=1.0)
            return board
        except DeviceNotFound:
            board.close()
            if time.monotonic() > end:
                raise
            time.sleep(0.2)


def run_demo(out: str | Path, *, force: bool = False, interpreter: str = "auto",
             say: Callable[[str], None] = print, scenario: DemoScenario | None = None) -> DemoOutcome:
    """Run the demo scenario into folder ``out``; return where everything is and the key figures."""
    t_start = time.monotonic()
    sc = scenario or DemoScenario()
    out = Path(out)
    _check_out(out, force)
    db_path = out / "nightcell.db"
    for stale in (db_path, out / "nightcell.db-wal", out / "nightcell.db-shm"):
        if stale.exists():
            stale.unlink()
    if interpreter == "auto" and micropython_command() is None:
        say("note: MicroPython's unix interpreter is not installed here; the firmware runs in CPython instead")
    sim = SimulatedBoard(out / "board", device=sc.device, speed=sc.speed, seed=sc.seed, interpreter=interpreter,
                         optics=sc.optics,
                         settings={"interval_ms": int(sc.interval_s * 1000), "durability_ms": 10000,
                                   "label": "demo bench", "path_cm": sc.path_cm, "marker_samples": 8})
    if sim.flash_path.exists() and force:
        import shutil

        if sim.flash_path.is_dir():
            shutil.rmtree(sim.flash_path)
        else:
            sim.flash_path.unlink()
    clock = VirtualClock(sc.speed)
    summary: dict[str, Any] = {"interpreter": sim.interpreter}
    sim.start()
    try:
        say(f"simulated board {sc.device} started ({sim.interpreter}, clock ×{sc.speed:g})")
        board = _open_board(sim.url)
        try:
            board.anchor(int(clock() * 1000))
            sim.set_cell({"absorbance": 0.0})
            board.mark("dark", "lid on, LED off")
            board.mark("blank", "alkaline solvent")
            for c in sc.standards_uM:
                sim.set_cell({"absorbance": sc.epsilon_per_uM_cm * sc.path_cm * c})
                board.mark("standard", f"dye {c:g} µM", value=f"{c:g}")
            say(f"dark, blank and {len(sc.standards_uM)} standards measured")
            a0 = sc.epsilon_per_uM_cm * sc.path_cm * sc.start_uM
            sim.set_cell({"reaction": {"a0": a0, "a_inf": sc.a_inf, "k_per_s": sc.k_per_s}})
            board.start("dye fading in alkali")
        finally:
            board.close()
        sim.unplug()
        say(f"run started; host unplugged while the board logs {sc.run_s / 60:g} board-minutes on its own")
        clock.sleep(sc.run_s)
        sim.plug()
        board = _open_board(sim.url)
        try:
            board.stop()
            with Store.open(db_path) as store:
                sync = sync_board(board, store, clock=clock)
        finally:
            board.close()
        say(f"synced {sync.records} records ({sync.bytes} bytes) into {db_path}")
    finally:
        sim.stop()

    with Store.open(db_path) as store:
        cal = calibrate_from_store(store, sc.device)
        runs = store.runs(sc.device)
        analysis = analyse_run(store, runs[-1], calibration=cal)
        cal_id = store.save_result("calibration", "dye standards", cal.inputs, cal.to_dict())
        run_id = store.save_result("rate", runs[-1].label, analysis.fits[analysis.best].inputs, analysis.to_dict())
        n_samples = store.count("samples")
    fit = analysis.fits["first_order_plateau"]
    pred = cal.predict(float(fit.values["A0"]))
    figures = _figures(out, cal, analysis, fit)
    summary.update({
        "samples": n_samples,
        "calibration_slope_per_uM": cal.slope,
        "calibration_slope_se": cal.slope_se,
        "lod_uM": cal.extra.get("lod"),
        "k_per_s": fit.values["k"],
        "k_se_per_s": fit.stderr["k"],
        "k_true_per_s": sc.k_per_s,
        "half_life_s": fit.extra.get("half_life_s"),
        "best_model": analysis.best,
        "start_concentration_uM": pred.value,
        "start_concentration_se_uM": pred.stderr,
        "result_ids": [cal_id, run_id],
    })
    report_path = out / "report.html"
    report_path.write_text(_html(sc, cal, analysis, fit, pred, figures, sync.to_dict()), encoding="utf-8")
    outcome = DemoOutcome(out, db_path, report_path, [p for p, _ in figures], sim.interpreter, summary,
                          time.monotonic() - t_start)
    say(f"calibration: slope {cal.slope:.5f} ± {cal.slope_se:.5f} A/µM, LOD {cal.extra.get('lod', float('nan')):.3g} µM")
    say(f"fading: k = {fit.values['k']:.4g} ± {fit.stderr['k']:.2g} s⁻¹ (scenario's true k {sc.k_per_s}); "
        f"best model by AIC: {analysis.best}")
    say(f"report: {report_path}")
    say(f"database: {db_path} (open it in any SQLite browser; try the view sample_readings)")
    return outcome


def _figures(out: Path, cal: Any, analysis: Any, fit: Any) -> list[tuple[Path, bytes]]:
    import matplotlib.pyplot as plt

    made = []
    fig, (ax, rax) = plt.subplots(2, 1, figsize=(6.4, 6.0), sharex=True, gridspec_kw={"height_ratios": [3, 1]})
    _report.plot_calibration(cal, ax=ax, resid_ax=rax, unit="(µM)")
    ax.set_title("Calibration with dye standards")
    p = _report.save_figure(fig, out / "calibration.png")
    made.append((p, _report.figure_png(fig)))
    plt.close(fig)
    fig, (ax, rax) = plt.subplots(2, 1, figsize=(6.4, 6.0), sharex=True, gridspec_kw={"height_ratios": [3, 1]})
    _report.plot_run(analysis.time_s, analysis.absorbance, fit, ax=ax, resid_ax=rax, flags=analysis.flags,
                     title=analysis.run.label)
    p = _report.save_figure(fig, out / "run.png")
    made.append((p, _report.figure_png(fig)))
    plt.close(fig)
    return made


def _html(sc: DemoScenario, cal: Any, analysis: Any, fit: Any, pred: Any, figures: list[tuple[Path, bytes]],
          sync: dict[str, Any]) -> str:
    half = fit.extra.get("half_life_s", math.nan)
    sections = [
        {"title": "What this is",
         "text": "A demonstration on a simulated board running the real nightcell firmware. The scenario is "
                 "invented for the demo: a violet dye calibrated with five standards, then fading in an alkaline "
                 "solution while the board logged alone."},
        {"title": "Calibration", "html": _report.fit_table(cal)
         + f"<p>LOD {cal.extra.get('lod', math.nan):.3g} µM, LOQ {cal.extra.get('loq', math.nan):.3g} µM "
           f"(σ from {cal.extra.get('sigma_source', 'residual')}).</p>",
         "figures": [figures[0][1]]},
        {"title": f"Run: {analysis.run.label}",
         "text": f"Time basis: {analysis.time_basis}. Blank: mark {analysis.blank.boot}:{analysis.blank.seq} "
                 f"({analysis.blank.rule}). Best model by AIC: {analysis.best}. Half-life {half:.4g} s. "
                 f"Starting concentration {pred.value:.4g} ± {pred.stderr:.2g} µM from the calibration.",
         "html": _report.fit_table(fit), "figures": [figures[1][1]]},
    ]
    prov = {"device": sc.device, "run": analysis.run.key, "blank": f"{analysis.blank.boot}:{analysis.blank.seq}",
            "records synced": sync["records"], "bytes synced": sync["bytes"],
            "points": len(analysis.time_s), "flagged points": int(np.count_nonzero(analysis.flags))}
    return _report.html_report("nightcell demo — dye fading", sections, prov)
