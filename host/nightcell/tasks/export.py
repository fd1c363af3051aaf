"""What leaves the database as files: CSV of raw and derived data, and one self-contained report page per run.

Owns: finding a run by what a user types (its key or its label), the CSV layouts written by ``nightcell export``,
and the per-run report pages of ``nightcell report`` (HTML with embedded figures, plus each figure as PNG and SVG).
Figures and HTML pieces come from ``report.py``; the numbers from ``analyse.py``. Every file is written to a
temporary name beside its target and renamed, so an interrupted export never leaves half a file. Nothing here
changes the database or talks to a board.

Example::

    with Store.open("class.db", create=False) as store:
        written = export_csv(store, "out/")
        pages = run_report(store, resolve_run(store, "fading 1"), "out/")
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterable, Sequence

from ..render import report as _report
from .analyse import analyse_run, calibrate_from_store, run_conditions, run_notes, run_provenance, run_series
from .names import not_found
from ..errors import AnalysisError, InputError, SuspectData
from ..science.optics import flag_names
from ..render.report import out_folder, write_atomic
from ..store.database import Run, Store

__all__ = ["resolve_run", "run_name", "device_stems", "export_csv", "run_report", "study_report", "Written", "write_atomic"]


def resolve_run(store: Store, text: str | None) -> Run:
    """The run whose key (``device:boot:seq``), label or number (``3`` or ``#3``, its place in ``nightcell list
    runs``) is ``text``; with None, the only run in the database. A label that is a number wins over the number.

    ``InputError`` (saying what to type) when nothing or more than one run matches.
    """
    runs = store.runs()
    if not runs:
        raise InputError(f"{store.path} holds no runs yet: start one with `nightcell start`, then `nightcell sync`")
    if text is None:
        if len(runs) == 1:
            return runs[0]
        raise InputError(f"{store.path} holds {len(runs)} runs: name one with --run KEY "
                         f"(see `nightcell list runs --db {store.path}`)")
    by_key = [r for r in runs if r.key == text]
    if by_key:
        return by_key[0]
    by_label = [r for r in runs if r.label == text]
    if len(by_label) == 1:
        return by_label[0]
    if len(by_label) > 1:
        numbers = [f"{runs.index(r) + 1}" for r in by_label]
        raise InputError(f"{len(by_label)} runs are labelled {text!r}: name one by its number "
                         f"({', '.join(numbers)}, as `nightcell list runs` shows them)")
    number = text[1:] if text.startswith("#") else text
    if number.isdigit() and 1 <= int(number) <= len(runs):  # the number `nightcell list runs` shows
        return runs[int(number) - 1]
    raise InputError(not_found(f"no run {text!r} in {store.path}", text,
                               [r.label for r in runs if r.label] + [r.key for r in runs],
                               f"give a run's key or label as `nightcell list runs --db {store.path}` shows it"))


def run_name(run: Run, device_stem: str | None = None) -> str:
    """A file name stem for a run: a safe stem of its label, its device's (``device_stem``, one of
    ``device_stems``: its label, else its id) and its boot and sequence (never cut off, so two runs never share a
    name), sanitised (never a path, never markup, valid on Windows)."""
    label = _report.safe_filename(run.label, default="run", limit=48).strip("-_.") or "run"
    device = device_stem or _report.safe_filename(run.device, limit=None)
    return f"{label}-{device}-{run.start_boot}-{run.start_seq}"


def device_stems(store: Store) -> dict[str, str]:
    """The file-name stem of every device in ``store`` (``report.device_stems``: its label, made safe and unique,
    else its id)."""
    return _report.device_stems({d["device"]: d["label"] for d in store.devices()})


@dataclass
class Written:
    """Files written and things skipped (with the reason)."""

    files: list[Path] = field(default_factory=list)
    skipped: list[str] = field(default_factory=list)
    page: Path | None = None  # a study's own page
    run_pages: list[Path] = field(default_factory=list)  # a study's page per run, in its order
    figures: list[Path] = field(default_factory=list)  # the PNG and SVG files among ``files``

    def to_dict(self) -> dict[str, Any]:
        return {"files": [str(f) for f in self.files], "skipped": list(self.skipped)}


def _csv(path: Path, headers: Sequence[str], rows: Iterable[Sequence[Any]]) -> Path:
    # report.write_csv writes a new temporary file beside the target and renames it; nothing is left on an error
    return _report.write_csv(path, headers, rows)


SAMPLE_COLUMNS = ("device", "boot", "seq", "channel", "uptime_ms", "wall_clock_unix_s", "late_ms", "flags", "reads",
                  "dark", "light", "temp_centi")
MARK_COLUMNS = ("device", "boot", "seq", "uptime_ms", "mark", "source", "label", "value", "channel", "reads", "dark",
                "light")
ABSORBANCE_COLUMNS = ("time_s", "absorbance", "flags", "flag_names", "boot", "seq", "blank", "time_basis", "weight")
"""``weight`` is the T² weight ``rate --db`` fits with (0 for flagged readings, which it leaves out), so
``nightcell rate`` on this file weighs the readings the same way and gives the same k and SE."""


def export_csv(store: Store, out: str | Path, runs: Sequence[Run] | None = None, channel: int = 0) -> Written:
    """Write ``marks.csv`` (every mark with its counts), and per run ``<name>-samples.csv`` (raw rows as stored,
    sums of ``reads`` ADC reads) and ``<name>-absorbance.csv`` (time from the first sample, absorbance against the
    run's blank, flags). A run with no blank or no samples is skipped with the reason."""
    out = out_folder(out)
    done = Written()
    rows = []
    for m in store.marks():
        for c, (d, li) in enumerate(zip(m["dark"], m["light"])):
            rows.append((m["device"], m["boot"], m["seq"], m["uptime_ms"], m["mark"], m["source"], m["label"],
                         m["value"], c, m["reads"], d, li))
        if not m["dark"]:
            rows.append((m["device"], m["boot"], m["seq"], m["uptime_ms"], m["mark"], m["source"], m["label"],
                         m["value"], "", m["reads"], "", ""))
    done.files.append(_csv(out / "marks.csv", MARK_COLUMNS, rows))
    stems = device_stems(store)
    for run in store.runs() if runs is None else runs:
        name = run_name(run, stems.get(run.device))
        samples = store.run_samples(run, channel)
        if not samples:
            done.skipped.append(f"run {run.key} ({run.label!r}): no samples stored yet")
            continue
        done.files.append(_csv(out / f"{name}-samples.csv", SAMPLE_COLUMNS, (
            (s["device"], s["boot"], s["seq"], s["channel"], s["uptime_ms"],
             None if s["unix_at_zero"] is None else s["unix_at_zero"] + s["rate"] * s["uptime_ms"] / 1000.0,
             s["late_ms"], s["flags"], s["reads"], s["dark"], s["light"], s["temp_centi"]) for s in samples)))
        try:
            series = run_series(store, run, channel)
        except AnalysisError as exc:
            done.skipped.append(f"absorbance of run {run.key} ({run.label!r}): {exc}")
            continue
        blank = f"{series['blank'].boot}:{series['blank'].seq}"
        done.files.append(_csv(out / f"{name}-absorbance.csv", ABSORBANCE_COLUMNS, (
            (float(t), float(a), int(f), " ".join(flag_names(int(f))), b, s, blank, series["time_basis"],
             repr(float(10.0 ** (-2.0 * a))) if f == 0 and math.isfinite(a) else 0)
            for t, a, f, (b, s) in zip(series["time_s"], series["absorbance"], series["flags"], series["seqs"]))))
    return done


def run_report(store: Store, run: Run, out: str | Path, channel: int = 0, *, cache: dict | None = None,
               blank: str | None = None, accept_suspect: bool = False, level: float = 0.95) -> Written:
    """One self-contained HTML page for a run (figures embedded), and its figures as PNG and SVG beside it.

    The run's absorbance comes from ``analyse_run`` (nearest preceding blank, every rate law, best by AICc). When its
    device recorded standards the calibration is fitted, shown, and used to give concentrations. The page itself is
    drawn by ``report.run_report``; this function gathers what it shows from the store. ``level``: the
    calibration's intervals and prediction band.
    """
    out = out_folder(out)
    done = Written()
    cal = None
    try:
        cal = calibrate_from_store(store, run.device, channel, before=(run.start_boot, run.start_seq),
                                   accept_suspect=accept_suspect, level=level)
    except SuspectData as exc:
        done.skipped.append(f"calibration for run {run.key}: {exc}")
    except AnalysisError:
        cal = None  # no standards (or none usable) on this device: the page shows absorbance only
    analysis = analyse_run(store, run, channel=channel, calibration=cal, blank=blank,
                           accept_suspect=accept_suspect)
    provenance = run_provenance(store, analysis, cal)
    conditions = run_conditions(store, run).get(run.key)
    stem = device_stems(store).get(run.device)
    files = _report.run_report(analysis, out, calibration=cal, provenance=provenance, conditions=conditions,
                               name=run_name(run, stem), cache=cache, notes=run_notes(store, analysis),
                               device_stem=stem)
    done.files += files.files
    return done


def study_report(store: Store, out: str | Path, channel: int = 0, *, level: float = 0.95, study: Any = None,
                 name: str = "study", title: str = "nightcell study report", intro: str = "",
                 provenance: dict[str, Any] | None = None, extra_sections: Sequence[dict[str, Any]] = (),
                 unit: str = "", page_name: Callable[[Run], str] | None = None) -> Written:
    """A study page (``<name>.html``) over every run with recorded conditions, linking one page per run (``runs/``).

    Orders and Arrhenius/Eyring come from ``analyse.analyse_study`` (or ``study``, one already made); runs without a
    recorded temperature and starting concentration are listed as skipped with what to record (``nightcell
    condition``). ``title``, ``intro``, ``provenance`` (instead of the database, run count and channel),
    ``extra_sections``, ``unit`` (of concentrations) and ``page_name`` (a run's page name; default ``run_name``)
    shape the pages.
    """
    from .analyse import analyse_study

    out = out_folder(out)
    done = Written()
    if study is None:
        study = analyse_study(store, channel=channel, level=level)
    if not study.runs:
        raise AnalysisError("no run has both a temperature_K and a conc_<reactant>_M recorded: record them with "
                            "`nightcell condition` first")
    conds = run_conditions(store)
    pages: dict[str, str] = {}
    cache: dict = {}
    stems = device_stems(store)
    for it in study.runs:
        prov = run_provenance(store, it.analysis, it.calibration)
        stem = stems.get(it.run.device)
        files = _report.run_report(it.analysis, out / "runs", calibration=it.calibration, provenance=prov,
                                   conditions=conds.get(it.run.key),
                                   name=page_name(it.run) if page_name else run_name(it.run, stem),
                                   cache=cache, unit=unit, notes=run_notes(store, it.analysis), device_stem=stem)
        pages[it.run.key] = f"runs/{files.html.name}"
        done.files += files.files
        done.run_pages.append(files.html)
        done.figures += [f for f in files.figures if f not in done.figures]
    if provenance is None:
        provenance = {"database": store.path, "runs": len(study.runs), "channel": channel}
    files = _report.study_report(study, out, name=name, title=title, intro=intro, provenance=provenance,
                                 run_pages=pages, extra_sections=extra_sections, unit=unit,
                                 device_labels={d["device"]: d["label"] for d in store.devices()})
    done.files = files.files + done.files
    done.page = files.html
    done.figures = files.figures + done.figures
    done.skipped += [f"run {key}: {why}" for key, why in study.skipped.items()]
    return done
