"""The demo: the whole job on two simulated boards, with no hardware.

Scenario (our own, invented for the demo only — not measured data of any real dye): a class follows a violet dye
fading in alkali on two benches. Each bench calibrates its colorimeter with a blank and five dye standards. Bench A
then runs the fading at three hydroxide concentrations at 25 °C; bench B at one hydroxide concentration at 15, 25
and 35 °C. The host is unplugged while each run logs; the power to bench B fails in the middle of its 15 °C run and
comes back. At the end the host syncs each board once into one database, records the conditions from the class's
bench sheet, fits every run (first order, towards a final absorbance), the order in hydroxide, Arrhenius and Eyring, and writes
a study report and one report per run. The firmware is the real one, in MicroPython's unix interpreter when
installed (else CPython), behind pseudo-terminals, with accelerated clocks; the two benches run side by side.

All invented numbers live in ``DemoScenario``; the end-to-end test treats them as the truth the fits must recover.
"""

from __future__ import annotations

import math
import shutil
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

from ..render import report as _report
from .analyse import RESUME_SOURCE, analyse_study, set_run_condition
from .export import study_report
from ..errors import DeviceNotFound, InputError, NightcellError
from ..wire.link import Board
from ..sim.board import SimulatedBoard, micropython_command
from ..store.database import Store
from ..science.study import GAS_CONSTANT
from ..store.sync import sync_board
from ..render import numbers as _n

__all__ = ["DemoScenario", "PlannedRun", "DemoOutcome", "run_demo", "VirtualClock", "SAFETY"]

SAFETY = ("Safety: hydroxide solutions are corrosive and dyes stain and may be harmful — wear eye protection and "
          "gloves, wipe spills at once, and dispose of waste as your local rules require. Do not look into the LED. "
          "Charge and use power banks as their maker says. Follow your institution's rules and work under "
          "qualified supervision.")


class VirtualClock:
    """The host's clock, accelerated like the simulated boards': Unix seconds that run ``speed`` times faster."""

    def __init__(self, speed: float, start_unix: float | None = None):
        self.speed = speed
        self.start_unix = time.time() if start_unix is None else start_unix
        self.m0 = time.monotonic()

    def __call__(self) -> float:
        return self.start_unix + (time.monotonic() - self.m0) * self.speed

    def sleep(self, board_seconds: float) -> None:
        time.sleep(board_seconds / self.speed)


@dataclass(frozen=True)
class PlannedRun:
    """One run on the class's bench sheet."""

    bench: int                 # 0 = bench A, 1 = bench B
    hydroxide_M: float
    temperature_C: float
    power_cut: bool = False    # the power fails in the middle of this run


@dataclass
class DemoScenario:
    """The demo's invented numbers, in one place (the end-to-end test uses them as the truth)."""

    devices: tuple[str, str] = ("d3e00000000000a1", "d3e00000000000b2")
    benches: tuple[str, str] = ("bench A", "bench B")
    speed: float = 250.0                 # board ms per real ms (a reading every 20 ms of real time)
    interval_s: float = 5.0
    epsilon_per_uM_cm: float = 0.087     # absorbance per µM per cm of the invented dye
    path_cm: float = 1.0
    standards_uM: tuple[float, ...] = (2.0, 4.0, 6.0, 8.0, 10.0)
    start_uM: float = 9.0                # dye at the start of every run
    a_inf: float = 0.035                 # a faint product colour: the final absorbance is not zero
    k_ref_per_s: float = 0.004           # pseudo-first-order k at the reference hydroxide and temperature
    ref_hydroxide_M: float = 0.020
    ref_temperature_C: float = 25.0
    order_hydroxide: float = 1.0
    ea_J_per_mol: float = 57_000.0
    half_lives_logged: float = 4.5       # each run logs this many half-lives
    power_cut_at: float = 0.45           # fraction of the run logged before the power fails
    power_off_s: float = 120.0           # board seconds without power
    runs: tuple[PlannedRun, ...] = (
        PlannedRun(0, 0.010, 25.0), PlannedRun(0, 0.020, 25.0), PlannedRun(0, 0.040, 25.0),
        PlannedRun(1, 0.020, 15.0, power_cut=True), PlannedRun(1, 0.020, 25.0), PlannedRun(1, 0.020, 35.0),
    )
    seed: int = 2026
    optics: dict[str, float] = field(default_factory=lambda: {
        "led_counts": 3000.0, "dark_counts": 60.0, "noise_counts": 8.0, "stray": 0.001, "ambient_counts": 40.0})

    def k_true(self, run: PlannedRun) -> float:
        """The k the simulated cuvette follows: k_ref · ([OH⁻]/ref)^n · exp(−Ea/R · (1/T − 1/T_ref))."""
        t, t_ref = run.temperature_C + 273.15, self.ref_temperature_C + 273.15
        return (self.k_ref_per_s * (run.hydroxide_M / self.ref_hydroxide_M) ** self.order_hydroxide
                * math.exp(-self.ea_J_per_mol / GAS_CONSTANT * (1.0 / t - 1.0 / t_ref)))

    def run_seconds(self, run: PlannedRun) -> float:
        return self.half_lives_logged * math.log(2.0) / self.k_true(run)

    def label(self, run: PlannedRun) -> str:
        return f"violet fading, {run.hydroxide_M * 1000:g} mM hydroxide, {run.temperature_C:g} C"

    @property
    def a0(self) -> float:
        return self.epsilon_per_uM_cm * self.path_cm * self.start_uM


@dataclass
class DemoOutcome:
    out: Path
    db: Path
    report: Path
    figures: list[Path]
    interpreter: str
    summary: dict[str, Any] = field(default_factory=dict)
    seconds: float = 0.0
    run_reports: list[Path] = field(default_factory=list)


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
            time.sleep(0.1)


class _Bench:
    """One bench: its simulated board and the class's steps on it, run in a thread beside the other bench."""

    def __init__(self, sc: DemoScenario, index: int, workdir: Path, db: Path, interpreter: str,
                 clock: VirtualClock):
        self.sc = sc
        self.db = db
        self.index = index
        self.name = sc.benches[index]
        self.device = sc.devices[index]
        self.clock = clock
        self.runs = [r for r in sc.runs if r.bench == index]
        self.sim = SimulatedBoard(workdir, device=self.device, speed=sc.speed, seed=sc.seed + 17 * index,
                                  interpreter=interpreter, optics=sc.optics,
                                  settings={"interval_ms": int(sc.interval_s * 1000), "durability_ms": 10000,
                                            "label": self.name, "path_cm": sc.path_cm, "marker_samples": 32})
        for stale in (self.sim.flash_path, self.sim.cell_path):
            if stale.is_dir():
                shutil.rmtree(stale)
            elif stale.exists():
                stale.unlink()
        self.error: BaseException | None = None
        self.power_cut: dict[str, Any] = {}
        self.say: Callable[[str], None] = lambda text: None  # progress, from this bench's thread
        self.sync: dict[str, Any] = {}

    def _anchor(self, board: Board) -> None:
        """Give the board the host's time, advanced by half a measured round trip (as sync does)."""
        t0 = time.monotonic()
        board.status()
        half = (time.monotonic() - t0) / 2 * self.clock.speed
        board.anchor(int(round((self.clock() + half) * 1000)))

    def calibrate(self, board: Board) -> None:
        sim, sc = self.sim, self.sc
        self._anchor(board)
        sim.set_cell({"absorbance": 0.0})
        board.mark("dark", "lid on, LED off")
        board.mark("blank", "dilute alkali, no dye")
        sim.set_cell({"opaque": True})
        board.mark("opaque", "opaque block in the holder: stray light")
        for c in sc.standards_uM:
            sim.set_cell({"absorbance": sc.epsilon_per_uM_cm * sc.path_cm * c})
            board.mark("standard", f"dye {c:g} uM", value=f"{c:g}")

    def log_run(self, board: Board, run: PlannedRun, last: bool) -> Board:
        """Mix, start, unplug, let the board log alone (through a power cut if planned), plug back, stop."""
        sim, sc = self.sim, self.sc
        sim.set_cell({"reaction": {"a0": sc.a0, "a_inf": sc.a_inf, "k_per_s": sc.k_true(run),
                                   "since_unix": time.time()}})
        board.start(sc.label(run))
        board.close()
        sim.unplug()
        length = sc.run_seconds(run)
        self.say(f"{self.name}: run '{sc.label(run)}' logging with the host unplugged ({length / 60:.0f} min of "
                 f"board time)" + (", power cut planned in the middle" if run.power_cut else ""))
        if run.power_cut:
            self.clock.sleep(length * sc.power_cut_at)
            sim.power_cut()
            self.clock.sleep(sc.power_off_s)
            sim.start()
            self.clock.sleep(length * (1.0 - sc.power_cut_at) - sc.power_off_s)
        else:
            self.clock.sleep(length)
        sim.plug()
        board = _open_board(sim.url)
        info = board.hello()
        if run.power_cut:
            self.power_cut = {"run": sc.label(run), "bench": self.name, "boot_after": int(info["boot"]),
                              "running_after_restart": bool(info["running"])}
        if info["running"]:
            board.stop()
        if not last:
            # Anchors far apart fit a boot's clock rate well; two close together (this one and the sync's) would
            # fit it badly, so the last plug-in leaves the anchor to the sync: a boot with one anchor borrows the
            # rate of the board's longest fitted boot.
            self._anchor(board)
        return board

    def __call__(self) -> None:
        try:
            self.sim.start()
            board = _open_board(self.sim.url)
            try:
                self.calibrate(board)
                self.say(f"{self.name}: dark, blank, opaque and {len(self.sc.standards_uM)} standards measured")
                for i, run in enumerate(self.runs):
                    board = self.log_run(board, run, last=i == len(self.runs) - 1)
                self.say(f"{self.name}: all runs logged; plugged in to sync")
                with Store.open(self.db) as store:
                    summary = sync_board(board, store, clock=self.clock)
                self.sync = summary.to_dict()
            finally:
                board.close()
        except BaseException as exc:  # noqa: BLE001 — handed to the main thread, which raises it
            self.error = exc
        finally:
            self.sim.stop()


def _power_cut_facts(store: Store, device: str, before: dict[str, Any]) -> dict[str, Any]:
    """What the firmware journaled after the restart: the boot, its reset cause, a resume mark, recovery events."""
    facts = dict(before)
    boot = before.get("boot_after")
    if boot is None:
        return facts
    row = store.boot(device, boot)
    facts["reset_cause"] = None if row is None else int(row["reset_cause"])
    resumed = store.resume_marks(device, boot, RESUME_SOURCE)
    facts["resume_marks"] = [f"{boot}:{seq}" for seq in resumed]
    facts["events"] = store.event_texts(device, boot)
    facts["samples_after_restart"] = store.sample_count(device, boot, channel=0)
    if resumed:
        facts["what_happened"] = ("the board restarted, noted on its own that it was resuming the run, and went on "
                                  f"logging it: {facts['samples_after_restart']} readings after the restart")
    else:
        facts["what_happened"] = ("the board restarted but did not resume the run "
                                  f"({facts['samples_after_restart']} readings after the restart): the run ends at "
                                  "the power cut and is analysed from the readings before it")
    return facts


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
    Store.open(db_path).close()  # create and migrate once, before two syncs share the file
    clock = VirtualClock(sc.speed)
    benches = [_Bench(sc, i, out / "boards", db_path, interpreter, clock) for i in range(len(sc.benches))]
    say(f"two simulated boards ({benches[0].sim.interpreter}, clocks ×{sc.speed:g}): {len(sc.runs)} runs on the "
        "bench sheet, each logged with the host unplugged; the power to bench B fails in the middle of one run")
    for b in benches:
        b.say = say
    threads = [threading.Thread(target=b, name=b.name, daemon=True) for b in benches]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    for b in benches:
        if b.error is not None:
            if isinstance(b.error, NightcellError):
                raise b.error
            raise RuntimeError(f"{b.name}: {b.error!r}; see {b.sim.log_path}") from b.error
    for b in benches:
        say(f"{b.name}: synced {b.sync['records']} records ({b.sync['bytes']} bytes) into {db_path}")

    with Store.open(db_path) as store:
        source = "demo scenario: the class's bench sheet (invented numbers)"
        planned: dict[tuple[str, str], PlannedRun] = {(sc.devices[r.bench], sc.label(r)): r for r in sc.runs}
        for run in store.runs():
            p = planned.get((run.device, run.label))
            if p is None:
                continue
            set_run_condition(store, run, "temperature_K", p.temperature_C + 273.15, source)
            set_run_condition(store, run, "conc_hydroxide_M", p.hydroxide_M, source)
        say("analysing: every run's rate laws, the order in hydroxide and the activation energy ...")
        study = analyse_study(store)
        say(f"drawing the report: one page per run ({len(study.runs)}) and the study page ...")
        cut_bench = next((b for b in benches if b.power_cut), None)
        cut = _power_cut_facts(store, cut_bench.device, cut_bench.power_cut) if cut_bench else {}
        rows = []
        for it in study.runs:
            p = planned[(it.run.device, it.run.label)]
            rows.append({"run": it.run.key, "label": it.run.label, "bench": sc.benches[p.bench],
                         "hydroxide_M": p.hydroxide_M, "temperature_C": p.temperature_C,
                         "k_per_s": it.k, "k_se_per_s": it.k_se, "k_true_per_s": sc.k_true(p),
                         "boots": it.analysis.boots, "points": len(it.analysis.time_s)})
            store.save_result("rate", it.run.label, it.fit.inputs, it.to_dict())
        for device in sc.devices:
            cal = next((it.calibration for it in study.runs if it.run.device == device and it.calibration), None)
            if cal is not None:
                store.save_result("calibration", f"{device} dye standards", cal.inputs, cal.to_dict())
        order = study.order("hydroxide")
        store.save_result("orders", "order in hydroxide from k", order.inputs, study.orders["hydroxide"].to_dict())
        if study.arrhenius is not None:
            store.save_result("arrhenius", "k against temperature", study.arrhenius.inputs, study.arrhenius.to_dict())
        if study.eyring is not None:
            store.save_result("eyring", "k against temperature", study.eyring.inputs, study.eyring.to_dict())
        n_samples = store.sample_count(channel=0)
        study_prov = {"database": str(db_path), "devices": ", ".join(sc.devices),
                      "firmware interpreter": benches[0].sim.interpreter, "readings (channel 0)": n_samples,
                      "condition source": source,
                      **{f"sync of {b.name}": f"{b.sync['records']} records, {b.sync['bytes']} bytes, acknowledged to "
                                             f"{b.sync['acked_to']}" for b in benches},
                      **{f"device {d['device']}": f"{d['label'] or ''}, board profile {d['board']}, firmware "
                                                   f"{d['firmware']}" for d in store.devices()}}
        pm = _report.plus_minus
        truth_rows = [(r["label"], r["bench"], pm(r["k_per_s"], r["k_se_per_s"]), f"{r['k_true_per_s']:.5g}",
                       f"{(r['k_per_s'] - r['k_true_per_s']) / r['k_se_per_s']:+.2f}") for r in rows]
        ea = study.arrhenius.extra if study.arrhenius is not None else {}
        truth_rows.append(("order in hydroxide", "", pm(order.values["order"], order.stderr["order"]),
                           f"{sc.order_hydroxide:g}",
                           f"{(order.values['order'] - sc.order_hydroxide) / order.stderr['order']:+.2f}"))
        if ea:
            truth_rows.append(("Ea (kJ mol⁻¹)", "", pm(ea["Ea_kJ_per_mol"], ea["Ea_se_kJ_per_mol"]),
                               f"{sc.ea_J_per_mol / 1000:g}",
                               f"{(ea['Ea_kJ_per_mol'] - sc.ea_J_per_mol / 1000) / ea['Ea_se_kJ_per_mol']:+.2f}"))
        extra = [{"title": "The scenario's own numbers against what the fits recovered",
                  "text": "The demo's cuvettes follow invented rate constants; a fit is good when it lands within a "
                          "few of its standard errors of them (the last column, in standard errors).",
                  "html": _report.html_table(["quantity", "bench", "recovered ± SE", "scenario", "difference / SE"],
                                         truth_rows)},
                 {"title": "The power cut", "text": cut.get("what_happened", "no power cut in this scenario")
                  + (f". Events journaled at the restart: {'; '.join(cut['events'])}." if cut.get("events") else "")}]
        intro = ("A demonstration on two simulated boards running the real nightcell firmware; the scenario and every "
                 "number in it are invented. A class followed a violet dye fading in alkali: bench A at three "
                 "hydroxide concentrations at 25 °C, bench B at 15, 25 and 35 °C. Each bench took a blank and five "
                 "standards, logged its runs with the host unplugged, and bench B lost power in the middle of its "
                 "15 °C run. The host then synced each board once into one database.\n\n" + SAFETY)
        written = study_report(store, out, study=study, name="report",
                               title="nightcell demo — a dye fading in alkali", intro=intro, provenance=study_prov,
                               extra_sections=extra, unit="µM",
                               page_name=lambda run: _report.safe_filename(
                                   f"{sc.benches[planned[(run.device, run.label)].bench]}-{run.label}"))
    run_files, figures = written.run_pages, written.figures
    _report.write_csv(out / "runs.csv", list(rows[0]), [[r[k] if k != "boots" else " ".join(map(str, r[k]))
                                                        for k in rows[0]] for r in rows])
    summary: dict[str, Any] = {
        "interpreter": benches[0].sim.interpreter,
        "samples": n_samples,
        "runs": rows,
        "order_hydroxide": order.values["order"], "order_hydroxide_se": order.stderr["order"],
        "order_hydroxide_true": sc.order_hydroxide,
        "ea_kJ_per_mol": ea.get("Ea_kJ_per_mol"), "ea_se_kJ_per_mol": ea.get("Ea_se_kJ_per_mol"),
        "ea_true_kJ_per_mol": sc.ea_J_per_mol / 1000,
        "power_cut": cut,
        "syncs": [b.sync for b in benches],
        "run_reports": [str(p) for p in run_files],
    }
    if study.eyring is not None:
        summary["dH_kJ_per_mol"] = study.eyring.values["dH_J_per_mol"] / 1000
        summary["dS_J_per_mol_K"] = study.eyring.values["dS_J_per_mol_K"]
    outcome = DemoOutcome(out, db_path, written.page, figures, benches[0].sim.interpreter, summary,
                          time.monotonic() - t_start, run_files)
    for r in rows:
        restarts = len(r["boots"]) - 1
        say(f"  {r['bench']}, {r['hydroxide_M'] * 1000:g} mM, {r['temperature_C']:g} °C: "
            f"k = {_n.measured(r['k_per_s'], r['k_se_per_s'], 's⁻¹')} (scenario {r['k_true_per_s']:.4g} s⁻¹"
            + (f"; the board restarted {restarts} time(s) during the run)" if restarts else ")"))
    say(f"order in hydroxide {_n.measured(order.values['order'], order.stderr['order'])} (scenario "
        f"{sc.order_hydroxide:g})")
    if study.arrhenius is not None:
        say(f"{_n.activation_energy(study.arrhenius.values['Ea_J_per_mol'], study.arrhenius.stderr['Ea_J_per_mol'])}"
            f" (scenario {sc.ea_J_per_mol / 1000:g} kJ mol⁻¹)")
    if cut:
        say(f"power cut: {cut['what_happened']}")
    say(f"report: {written.page} (one page per run in {out / 'runs'})")
    say(f"database: {db_path} — open it with `sqlite3 {db_path}` or any SQLite browser; try the views "
        "sample_readings, mark_readings, run_condition_readings and boot_overview")
    say(SAFETY)
    return outcome
