"""From stored raw rows to science: choose the blank, turn counts into absorbance, fit calibrations and runs.

This is the glue between the store and the pure science modules (optics, calibration, kinetics): it reads raw
rows, applies a *recorded rule* for every choice (which blank, which calibration, which window) and returns
results that name their inputs, so each number can be traced back to raw counts. It never talks to a board and
never draws.

It also owns the conditions of a run that the people running it know (temperature, starting concentrations:
the ``run_conditions`` table, each entry naming its source) and the study-level glue: every run with its conditions
and its fitted rate constant, then orders (``study.orders`` on k against concentration, and on initial rates) and
the temperature dependence (``study.arrhenius``, ``study.eyring``).

Example::

    with Store.open("class.db") as store:
        cal = calibrate_from_store(store, device)
        for run in store.runs(device):
            result = analyse_run(store, run, calibration=cal)
        set_run_condition(store, run, "temperature_K", 298.15, source="bench sheet")
        study = analyse_study(store)
"""

from __future__ import annotations

import bisect
import json
import math
import re
import time
from dataclasses import dataclass, field
from collections import abc as _abc
from typing import Any, Sequence

import numpy as np

from ..science import calibration as _calibration
from ..science import kinetics as _kinetics
from ..science import optics as _optics
from ..science import study as _study
from ..render.numbers import local_time, measured
from ..errors import AnalysisError, InputError, SuspectData
from ..science.fitting import FitResult, jsonable
from ..store.database import Run, Store
from .names import device_name, not_found

__all__ = ["BlankChoice", "ReadingKeys", "RunAnalysis", "choose_blank", "standards_from_store",
           "calibrate_from_store", "standard_sets", "label_tokens", "ACCEPT_HINT",
           "run_series", "analyse_run", "run_bounds", "set_run_condition", "run_conditions", "run_provenance",
           "RunSummary", "StudyAnalysis", "analyse_study", "CONDITION_PATTERN", "RESUME_SOURCE", "initial_rate_of",
           "k_and_temperature"]

RESUME_SOURCE = 2
"""MARK source of a run_start the board journals by itself when it resumes a run after a restart."""

CONDITION_PATTERN = re.compile(r"^(temperature_K|conc_[a-z][a-z0-9_]*_M)$")
"""Names of run conditions: ``temperature_K``, or ``conc_<reactant>_M`` (mol/L at the start of the run)."""

BLANK_RULE = "nearest preceding blank mark of the same device and channel"
AFTER_RULE = "no blank before the run: the first blank mark after it (same device and channel)"
ACCEPT_HINT = "pass --accept-suspect to use it anyway"
"""How every guard's refusal ends: the one option that confirms suspect data (the flag is kept on the result)."""


@dataclass
class BlankChoice:
    """The blank a result rests on, and the rule that chose it."""

    device: str
    boot: int
    seq: int
    channel: int
    light: float
    dark: float
    rule: str
    stray: float = 0.0
    stray_mark: str | None = None
    warnings: list[str] = field(default_factory=list)
    suspect: list[str] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        return jsonable(dict(self.__dict__))

    @property
    def stray_text(self) -> str:
        if self.stray_mark is None:
            return "no opaque mark before it: stray light not corrected"
        return (f"stray-light fraction {self.stray:.3g} from opaque mark {self.stray_mark} ({STRAY_RULE}; its own "
                "uncertainty is not carried into standard errors)")


STRAY_RULE = "nearest preceding opaque mark of the same device, read against the same blank"


def _stray(store: Store, device: str, before: tuple[int, int] | None, channel: int, b: "BlankChoice") -> None:
    """Fill in the blank's stray-light fraction from the nearest opaque mark before ``before`` (if any).

    An opaque mark is a reading with the light path blocked; what still arrives is stray light, which makes high
    absorbances read low (A_obs = −log10((T + s)/(1 + s))). Correcting by ``optics.correct_stray`` keeps a run's
    curve exponential.
    """
    m = _mark_before(store, device, "opaque", before)
    if m is None:
        return
    light, dark = _mark_means(store, m, channel)
    b.stray = _optics.stray_fraction_from_opaque(light, dark, b.light, b.dark)
    b.stray_mark = f"{m['boot']}:{m['seq']}"


def _absorbance(light: Any, dark: Any, b: "BlankChoice") -> "_optics.OpticsResult":
    """Absorbance against the blank, stray light corrected when an opaque mark gave its fraction."""
    res = _optics.absorbance(light, dark, b.light, b.dark, stray=b.stray)
    if b.stray > 0:
        corrected = np.asarray(_optics.correct_stray(res.absorbance, b.stray), dtype=float)
        flags = res.flags | np.where(np.isfinite(res.absorbance) & ~np.isfinite(corrected),
                                     _optics.FLAG_BEYOND_STRAY, 0)
        res = _optics.OpticsResult(res.transmittance, corrected, flags, res.signal, res.reference, res.stray,
                                   res.ceiling, res.message)
    return res


def _with_counts(store: Store, mark: dict[str, Any] | None) -> dict[str, Any] | None:
    return None if mark is None else store.with_counts(mark)


def _mark_before(store: Store, device: str, kind: str, before: tuple[int, int] | None) -> dict[str, Any] | None:
    """The last ``kind`` mark of a device before (boot, seq) ``before`` (the last of all when None), or None.

    From the store's list of that kind's marks (read once while the database is unchanged), so finding the blank
    of each run in a database of many runs does not read every earlier mark each time.
    """
    keys = store.mark_keys(device, kind)
    i = len(keys) if before is None else bisect.bisect_left(keys, (int(before[0]), int(before[1])))
    if i == 0:
        return None
    boot, seq = keys[i - 1]
    return _with_counts(store, store.mark(device, boot, seq))


def describe_mark(store: Store, device: str, key: tuple[int, int] | None) -> str:
    """A mark as a person knows it: its kind, label and local time (``the run 'fading 1' started 2026-12-01 14:20
    CET``); the mark key (boot:seq) only when it has neither label nor time."""
    if key is None:
        return "the end of the journal"
    r = store.mark_reading(device, int(key[0]), int(key[1]))
    if r is None:
        return f"record {key[0]}:{key[1]}"
    kind = {"run_start": "the start of run", "run_stop": "the stop of run"}.get(r["mark"], f"the {r['mark']}")
    when = _when(r)
    what = f"{kind} {r['label']!r}" if r["label"] else kind
    return f"{what}{' of ' + when if when else ''}" if when or r["label"] else f"{kind} {key[0]}:{key[1]}"


def _when(reading: dict[str, Any]) -> str:
    return local_time(reading["wall_clock_utc"], seconds=False) if reading["wall_clock_utc"] else ""


def _mark_when(store: Store, device: str, key: tuple[int, int]) -> str:
    """When a mark was taken, in local time (``2026-12-01 14:20 CET``), or "" when its time is not known."""
    r = store.mark_reading(device, int(key[0]), int(key[1]))
    return _when(r) if r is not None else ""


def _mark_means(store: Store, mark: dict[str, Any], channel: int) -> tuple[float, float]:
    if mark["reads"] <= 0 or channel >= len(mark["light"]):
        what = describe_mark(store, mark["device"], (mark["boot"], mark["seq"]))
        raise AnalysisError(f"{what} has no counts for light channel {channel}: choose another --channel")
    return mark["light"][channel] / mark["reads"], mark["dark"][channel] / mark["reads"]


def _mark_after(store: Store, device: str, kind: str, after: tuple[int, int]) -> dict[str, Any] | None:
    """The first ``kind`` mark of a device after (boot, seq) ``after``, or None."""
    keys = store.mark_keys(device, kind)
    i = bisect.bisect_right(keys, (int(after[0]), int(after[1])))
    if i >= len(keys):
        return None
    boot, seq = keys[i]
    return _with_counts(store, store.mark(device, boot, seq))


_KEY = re.compile(r"^\s*(\d+):(\d+)\s*$")


def _named_blank(store: Store, device: str, blank: tuple[int, int] | str) -> dict[str, Any]:
    """The blank mark named by (boot, seq), by its key text ``boot:seq``, or by its label."""
    where = f"device {device_name(store, device)}"
    if isinstance(blank, str):
        key = _KEY.match(blank)
        if key is None:
            rows = store.marks_labelled(device, "blank", blank)
            if not rows:
                labels = [m["label"] for m in store.marks(device, "blank")]
                raise InputError(not_found(f"no blank labelled {blank!r} on {where}", blank, labels,
                                           "list blanks with `nightcell list blanks` and give its label or key "
                                           "(boot:seq)"))
            if len(rows) > 1:
                taken = [(_mark_when(store, device, (r["boot"], r["seq"])) or "at a time not known",
                          f"{r['boot']}:{r['seq']}") for r in rows]
                raise InputError(f"{len(rows)} blanks are labelled {blank!r} on {where}: give the key of the one "
                                 f"you mean ({'; '.join(f'taken {when}: --blank {key}' for when, key in taken)})")
            return _with_counts(store, rows[0])
        blank = (int(key.group(1)), int(key.group(2)))
    chosen = store.mark(device, blank[0], blank[1], "blank")
    if chosen is None:
        raise InputError(f"no blank {blank[0]}:{blank[1]} on {where}: list blanks with `nightcell list blanks` "
                         "and give its label")
    return _with_counts(store, chosen)


def _earlier_blank_signals(store: Store, device: str, mark: dict[str, Any], channel: int, most: int = 10) -> list:
    """light − dark per read of up to ``most`` blanks of the device before ``mark``."""
    keys = store.mark_keys(device, "blank")
    i = bisect.bisect_left(keys, (int(mark["boot"]), int(mark["seq"])))
    out = []
    for boot, seq in keys[max(0, i - most):i]:
        row = store.mark(device, boot, seq)
        if row is not None:
            m = store.with_counts(row)
            if m["reads"] > 0 and channel < len(m["light"]):
                light, dark = _mark_means(store, m, channel)
                out.append(light - dark)
    return out


def choose_blank(store: Store, device: str, before: tuple[int, int] | None = None, channel: int = 0,
                 blank: tuple[int, int] | str | None = None, *, accept_suspect: bool = False) -> BlankChoice:
    """The blank for readings of ``device`` taken at (boot, seq) ``before``: the nearest preceding blank mark;
    when there is none, the first blank after it (with a warning); or the one named by ``blank`` — (boot, seq),
    its key ``"boot:seq"`` or its label. ``AnalysisError`` when there is none at all.

    A blank that looks wrong (``optics.blank_problems``: blocked, or far below the board's earlier blanks) raises
    ``SuspectData`` unless ``accept_suspect``; then the problem is kept in ``suspect`` and the warnings.
    """
    warnings: list[str] = []
    if blank is not None:
        m = _named_blank(store, device, blank)
        rule = "named by the user"
        if before is not None and (m["boot"], m["seq"]) > (int(before[0]), int(before[1])):
            warnings.append(f"{describe_mark(store, device, (m['boot'], m['seq']))} was taken after the readings "
                            "it is used for; the cell may have changed in between (LED warmth, cuvette position)")
    else:
        m = _mark_before(store, device, "blank", before)
        rule = BLANK_RULE
        if m is None and before is not None:
            m = _mark_after(store, device, "blank", before)
            rule = AFTER_RULE
            if m is not None:
                warnings.append(f"no blank before {describe_mark(store, device, before)}: absorbance is read "
                                f"against {describe_mark(store, device, (m['boot'], m['seq']))}, taken after; the "
                                "cell may have changed in between — take a blank before each run, or name one with "
                                "--blank")
        if m is None:
            raise AnalysisError(f"device {device_name(store, device)} has no blank before "
                                f"{describe_mark(store, device, before)}: take a blank first (`nightcell blank`) "
                                "or name one")
    light, dark = _mark_means(store, m, channel)
    problems = _optics.blank_problems(light, dark, _earlier_blank_signals(store, device, m, channel))
    if problems:
        shown = describe_mark(store, device, (m["boot"], m["seq"]))
        if not accept_suspect:
            raise SuspectData(f"{shown} looks wrong: {problems[0]} — clear the light path and take a new blank, "
                              f"name another with --blank, or {ACCEPT_HINT}")
        warnings += [f"{shown} looks wrong but is used as confirmed (--accept-suspect): {p}" for p in problems]
    choice = BlankChoice(device, m["boot"], m["seq"], channel, light, dark, rule, warnings=warnings,
                         suspect=problems)
    _stray(store, device, before, channel, choice)
    return choice


_TOKEN = re.compile(r"(?:^|\s)(unit|set)=(\S+)")


def label_tokens(label: str) -> tuple[str, dict[str, str]]:
    """A standard's label without its ``unit=…``/``set=…`` tokens (schema/records.md), and the tokens."""
    tokens = {k: v for k, v in _TOKEN.findall(label or "")}
    return _TOKEN.sub("", label or "").strip(), tokens


SET_RULE = ("a calibration set is the standards taken after one blank with no run started between them, or the "
            "standards that share a set=NAME label; by default the latest set before the run (or the latest of "
            "all), else the one named with --set")


def standard_sets(store: Store, device: str) -> tuple[list[dict[str, Any]], list[str]]:
    """The device's standards grouped into calibration sets (``SET_RULE``), in journal order, and the standards
    left out (negative or non-numeric values), each with the reason.

    Each set: ``name``, ``how`` (the rule that formed it), ``marks`` (the standard rows, each with ``shown_label``,
    ``unit`` and ``concentration``), ``first`` and ``last`` (boot, seq).
    """
    sets: dict[str, dict[str, Any]] = {}
    left_out: list[str] = []
    after = "before any blank"
    for m in store.marks(device):
        kind, key = m["mark"], f"{m['boot']}:{m['seq']}"  # a set's name says the key --set takes
        if kind == "blank":
            after = f"after blank {key}"
            continue
        if kind == "run_start" and m.get("source") != RESUME_SOURCE:
            after = f"after run start {key} (no new blank)"
            continue
        if kind != "standard":
            continue
        shown, tokens = label_tokens(m["label"])
        try:
            c = float(m["value"])
        except (TypeError, ValueError):
            left_out.append(f"{describe_mark(store, device, (m['boot'], m['seq']))} has value {m['value']!r}, "
                            "not a number")
            continue
        if not math.isfinite(c) or c < 0:
            left_out.append(f"{describe_mark(store, device, (m['boot'], m['seq']))} has a concentration of "
                            f"{m['value']} (not a physical amount): left out")
            continue
        name = f"set {tokens['set']}" if "set" in tokens else after
        one = sets.setdefault(name, {"name": name, "how": "labelled set=" + tokens["set"] if "set" in tokens
                                     else "standards " + after, "marks": [], "first": (m["boot"], m["seq"])})
        one["marks"].append(dict(m, shown_label=shown, unit=tokens.get("unit", ""), concentration=c))
        one["last"] = (m["boot"], m["seq"])
    return sorted(sets.values(), key=lambda st: st["last"]), left_out


def _set_names(st: dict[str, Any]) -> tuple[str, ...]:
    """What --set takes for a set: its name, or the name without "set " or "after blank "."""
    return st["name"], st["name"].removeprefix("set "), st["name"].removeprefix("after blank ")


def _pick_set(store: Store, sets: list[dict[str, Any]], name: str | None, before: tuple[int, int] | None,
              device: str) -> dict:
    if not sets:
        raise AnalysisError(f"device {device_name(store, device)} has no standards: record some with "
                            "`nightcell standard`")
    if name is not None:
        wanted = name.strip()
        for st in sets:
            if wanted in _set_names(st):
                return st
        raise InputError(not_found(f"no calibration set {name!r} on device {device_name(store, device)}", wanted,
                                   [min(_set_names(st), key=len) for st in sets],
                                   f"its sets are {'; '.join(repr(st['name']) for st in sets)}"))
    if before is not None:
        earlier = [st for st in sets if st["last"] < (int(before[0]), int(before[1]))]
        if earlier:
            return earlier[-1]
    return sets[-1]


def standards_from_store(store: Store, device: str, channel: int = 0, *, set_name: str | None = None,
                         before: tuple[int, int] | None = None, accept_suspect: bool = False) -> dict[str, Any]:
    """Concentration and absorbance of the standards of one calibration set (``SET_RULE``), each against its own
    blank, with the set's name, the standards' labels, values and unit."""
    sets, left_out = standard_sets(store, device)
    chosen = _pick_set(store, sets, set_name, before, device)
    conc, absorb, ids, blanks, strays, listing, warnings = [], [], [], [], [], [], []
    units = sorted({m["unit"] for m in chosen["marks"] if m["unit"]})
    if len(units) > 1:
        raise InputError(f"the standards of {chosen['name']} carry different units ({', '.join(units)}): "
                         "calibrate each unit as its own set (set=NAME in the label)")
    for m in chosen["marks"]:
        b = choose_blank(store, device, (m["boot"], m["seq"]), channel, accept_suspect=accept_suspect)
        warnings += b.warnings
        light, dark = _mark_means(store, m, channel)
        res = _absorbance([light], [dark], b)
        conc.append(m["concentration"])
        absorb.append(float(res.absorbance[0]))
        ids.append(f"{m['boot']}:{m['seq']}")
        blanks.append(f"{b.boot}:{b.seq}")
        strays.append(b.stray_text)
        listing.append({"mark": ids[-1], "label": m["shown_label"], "value": m["value"], "unit": m["unit"]})
    return {"concentration": np.array(conc), "absorbance": np.array(absorb), "marks": ids, "blanks": blanks,
            "stray": strays, "set": chosen["name"], "set_how": chosen["how"], "listing": listing,
            "unit": units[0] if units else "", "other_sets": [st["name"] for st in sets if st is not chosen],
            "left_out": left_out, "warnings": list(dict.fromkeys(warnings))}


def calibrate_from_store(store: Store, device: str, channel: int = 0, *, set_name: str | None = None,
                         before: tuple[int, int] | None = None, unit: str | None = None,
                         accept_suspect: bool = False, **options: Any) -> _calibration.CalibrationResult:
    """Fit a calibration to one calibration set of a device's standards (``SET_RULE``; options go to
    ``fit_calibration``). ``unit`` gives the concentration unit when the standards carry none."""
    std = standards_from_store(store, device, channel, set_name=set_name, before=before,
                               accept_suspect=accept_suspect)
    if len(std["concentration"]) == 0:
        raise AnalysisError(f"device {device_name(store, device)} has no standards: record some with "
                            "`nightcell standard`")
    if unit and std["unit"] and unit != std["unit"]:
        raise InputError(f"--unit {unit} but the standards of {std['set']} were recorded in {std['unit']}: "
                         "leave --unit out, or give the same unit")
    inputs = {"device": device, "channel": channel, "standards": std["marks"], "blanks": std["blanks"],
              "blank_rule": BLANK_RULE, "stray_light": sorted(set(std["stray"])), "set": std["set"],
              "set_rule": SET_RULE, "standards_used": std["listing"], "other_sets": std["other_sets"],
              "left_out": std["left_out"], "warnings": std["warnings"]}
    return _calibration.fit_calibration(std["concentration"], std["absorbance"], inputs=inputs,
                                        unit=unit or std["unit"], accept_suspect=accept_suspect, **options)


class ReadingKeys(_abc.Sequence):
    """The (boot, seq) of each reading of a run, kept as two integer arrays (``boot``, ``seq``).

    Reads as a sequence of ``(boot, seq)`` tuples (``keys[0]``, ``keys[-1]``, iteration, ``len``), made one at a
    time when asked for, so a run of a million readings holds two arrays rather than a million tuples.
    """

    def __init__(self, boot: np.ndarray, seq: np.ndarray):
        self.boot = np.asarray(boot, dtype=np.int64)
        self.seq = np.asarray(seq, dtype=np.int64)

    def __len__(self) -> int:
        return int(self.seq.size)

    def __getitem__(self, i: Any) -> Any:
        if isinstance(i, slice):
            return ReadingKeys(self.boot[i], self.seq[i])
        return int(self.boot[i]), int(self.seq[i])

    def __iter__(self) -> Any:
        return zip(self.boot.tolist(), self.seq.tolist()) if self.seq.size <= 100_000 else (
            (int(b), int(q)) for b, q in zip(self.boot, self.seq))

    def __eq__(self, other: object) -> bool:
        if isinstance(other, ReadingKeys):
            return bool(np.array_equal(self.boot, other.boot) and np.array_equal(self.seq, other.seq))
        if isinstance(other, (list, tuple)):
            return len(other) == len(self) and all(a == tuple(b) for a, b in zip(self, other))
        return NotImplemented

    def __repr__(self) -> str:
        return f"ReadingKeys({len(self)} readings)"


@dataclass
class RunAnalysis:
    """A run's absorbance series, the fits of every candidate model, and where it all came from."""

    run: Run
    blank: BlankChoice
    time_s: np.ndarray
    absorbance: np.ndarray
    flags: np.ndarray
    seqs: "ReadingKeys | list[tuple[int, int]]"
    time_basis: str
    fits: dict[str, Any]
    best: str
    concentration: np.ndarray | None = None
    calibration_id: str | None = None
    warnings: list[str] = field(default_factory=list)
    boots: list[int] = field(default_factory=list)
    resumed_at: list[tuple[int, int]] = field(default_factory=list)
    end_rule: str = ""
    channel: int = 0

    def flag_counts(self) -> dict[str, int]:
        """How many readings carry each flag (a reading may carry several)."""
        return {name: int(np.count_nonzero(self.flags & bit)) for bit, name in _optics.FLAG_NAMES.items()
                if np.any(self.flags & bit)}

    def to_dict(self) -> dict[str, Any]:
        return {
            "run": self.run.to_dict(),
            "blank": self.blank.to_dict(),
            "time_basis": self.time_basis,
            "points": int(len(self.time_s)),
            "flagged": int(np.count_nonzero(self.flags)),
            "flag_counts": self.flag_counts(),
            "best_model": self.best,
            "fits": {name: fit.to_dict() for name, fit in self.fits.items()},
            "calibration": self.calibration_id,
            "warnings": list(self.warnings),
            "boots": list(self.boots),
            "resumed_at": [f"{b}:{q}" for b, q in self.resumed_at],
            "end_rule": self.end_rule,
            "channel": self.channel,
        }


def run_bounds(store: Store, run: Run) -> dict[str, Any]:
    """Where a run's readings end, and where the board resumed it by itself after a restart.

    Returns ``end`` (boot, seq) — the run_stop mark, or when the run was never stopped the next run's start (or
    None: every later reading of the device) — with the ``rule`` that chose it, and ``resumed``: the (boot, seq) of
    each run_start the board journaled itself (source 2) inside the run.
    """
    start = (run.start_boot, run.start_seq)
    end = None if run.stop_boot is None else (run.stop_boot, run.stop_seq)
    rule = "the run's stop mark"
    resumed: list[tuple[int, int]] = []
    # run_start marks after the start, in order (one range scan, not every mark of the device)
    for boot, seq, source in store.run_starts_after(run.device, run.start_boot, run.start_seq):
        key = (boot, seq)
        if end is not None and key >= end:
            break
        if source == RESUME_SOURCE:
            resumed.append(key)
            continue
        if end is None:
            end = key
            rule = f"no stop mark: the run ends where the next run starts ({describe_mark(store, run.device, key)})"
        break
    if end is None:
        rule = "no stop mark: every later reading of the device"
    return {"end": end, "rule": rule, "resumed": resumed}


def run_series(store: Store, run: Run, channel: int = 0, blank: tuple[int, int] | str | None = None, *,
               accept_suspect: bool = False) -> dict[str, Any]:
    """Time (s from the first sample), absorbance and flags of a run, with the blank and time basis used
    (``choose_blank``: the blank before the run, else the first after it, or the one named)."""
    cols = store.run_sample_columns(run, channel)
    bounds = run_bounds(store, run)
    warnings = []
    if run.stop_boot is None:
        if bounds["end"] is not None:
            eb, es = bounds["end"]
            before_end = (cols["boot"] < eb) | ((cols["boot"] == eb) & (cols["seq"] < es))
            cols = {k: (v[before_end] if isinstance(v, np.ndarray) else v) for k, v in cols.items()}
        warnings.append("the run has no stop mark (stopped by a power cut, or still going when synced): "
                        + bounds["rule"])
    if cols["seq"].size == 0:
        raise AnalysisError(f"run {run.key} ({run.label!r}) has no samples yet: sync the board first")
    b = choose_blank(store, run.device, (run.start_boot, run.start_seq), channel, blank,
                     accept_suspect=accept_suspect)
    warnings += b.warnings
    light = cols["light"] / cols["reads"]
    dark = cols["dark"] / cols["reads"]
    res = _absorbance(light, dark, b)
    flags = res.flags.copy()
    flags |= np.where(cols["flags"] & 1, _optics.FLAG_SATURATED, 0)
    boot_col = cols["boot"]
    boots = _boots_of(boot_col)
    if len(boots) > 1:
        when = [_mark_when(store, run.device, k) for k in bounds["resumed"]]
        how = ("the board resumed it by itself" + (f" at {', '.join(w for w in when if w)}" if any(when) else "")
               if when else "no resume mark was found")
        warnings.append(f"the board restarted {len(boots) - 1} time(s) during the run ({how}); readings are placed "
                        "in time by the clock of each start")
    clocks = cols["clocks"]
    up = cols["uptime_ms"]
    keep = None
    if all(bt in clocks for bt in boots):
        t = _wall_clock(boot_col, up, boots, clocks)
        basis = "wall clock from anchors (" + ", ".join(sorted({clocks[bt][2] for bt in boots})) + ")"
    elif len(boots) == 1:
        t = up / 1000.0
        basis = "board uptime (no clock anchor yet)"
    else:
        keep = np.isin(boot_col, [bt for bt in boots if bt in clocks])
        if not keep.any():
            raise AnalysisError(f"run {run.label or run.key!r} spans {len(boots)} boots (restarts) with no clock "
                                "anchors: connect the board and "
                                "sync so its time can be placed")
        warnings.append("samples from boots without a clock anchor were left out")
        boot_col, up = boot_col[keep], up[keep]
        t = _wall_clock(boot_col, up, [bt for bt in boots if bt in clocks], clocks)
        res_a, flags = res.absorbance[keep], flags[keep]
        res = _optics.OpticsResult(res.transmittance[keep], res_a, flags, res.signal[keep], res.reference,
                                   res.stray, res.ceiling, res.message)
        basis = "wall clock from anchors (partial)"
    seq_col = cols["seq"] if keep is None else cols["seq"][keep]
    t = t - t[0]
    return {"time_s": t, "absorbance": res.absorbance, "flags": flags, "blank": b, "time_basis": basis,
            "seqs": ReadingKeys(boot_col, seq_col), "warnings": warnings,
            "boots": boots if keep is None else _boots_of(boot_col), "resumed": bounds["resumed"],
            "end_rule": bounds["rule"]}


def _boots_of(boot_col: np.ndarray) -> list[int]:
    """The distinct boots of a run's samples, in order (most runs have one)."""
    if boot_col.size and boot_col[0] == boot_col[-1] and (boot_col == boot_col[0]).all():
        return [int(boot_col[0])]
    return sorted(int(v) for v in np.unique(boot_col))


def _wall_clock(boot: np.ndarray, uptime_ms: np.ndarray, boots: list[int],
                clocks: dict[int, tuple[float, float, str]]) -> np.ndarray:
    """Wall-clock seconds of each sample from its boot's clock (the same arithmetic as the ``sample_readings``
    view: unix_at_zero + rate·uptime_ms/1000)."""
    if len(boots) == 1:
        zero, rate, _ = clocks[boots[0]]
        return zero + rate * uptime_ms / 1000.0
    zero = np.empty(boot.size)
    rate = np.empty(boot.size)
    for bt in boots:
        sel = boot == bt
        zero[sel], rate[sel] = clocks[bt][0], clocks[bt][1]
    return zero + rate * uptime_ms / 1000.0


def analyse_run(store: Store, run: Run, *, channel: int = 0, calibration: Any = None,
                blank: tuple[int, int] | str | None = None, models: tuple[str, ...] | None = None,
                t_start: float | None = None, t_end: float | None = None,
                accept_suspect: bool = False) -> RunAnalysis:
    """Absorbance of a run against its blank, every candidate rate model fitted, the best by AICc.

    ``t_start``/``t_end`` (s from the run's first sample) leave out readings outside that window, as they do for a
    CSV; ``blank`` names the blank (``choose_blank``)."""
    s = run_series(store, run, channel, blank, accept_suspect=accept_suspect)
    t = s["time_s"]
    if t_start is not None and t_end is not None and not t_end > t_start:
        raise InputError(f"--t-end {t_end:g} must be after --t-start {t_start:g}")
    inside = np.ones(t.size, dtype=bool)
    if t_start is not None:
        inside &= t >= t_start
    if t_end is not None:
        inside &= t <= t_end
    ok = (s["flags"] == 0) & inside
    if np.count_nonzero(ok) < 4:
        raise AnalysisError(f"run {run.key} has {np.count_nonzero(ok)} clean points"
                            + (" in the window" if t_start is not None or t_end is not None else "")
                            + ": too few to fit a rate")
    a = s["absorbance"]
    inputs = {"run": run.key, "device": run.device, "channel": channel,
              "blank": f"{s['blank'].boot}:{s['blank'].seq}", "blank_rule": s["blank"].rule,
              "stray_light": s["blank"].stray_text,
              "time_basis": s["time_basis"], "weights": "T^2 (count noise about constant)",
              "left_out": "flagged readings", "window_s": [t_start, t_end]}
    if s["blank"].suspect:
        inputs["suspect_blank"] = s["blank"].suspect
    # Absorbance is noisier where less light gets through: weight by 1/var(A) ∝ T², else intervals are too narrow.
    weights = np.where(ok, np.nan_to_num(10.0 ** (-2.0 * np.nan_to_num(a, nan=0.0))), 0.0)
    comparison = _kinetics.fit_all(t, a, inputs=inputs, mask=~ok, weights=weights,
                                  **({"models": models} if models else {}))
    fit_map = dict(comparison.results)
    best = comparison.ranking[0]
    out = RunAnalysis(run, s["blank"], s["time_s"], s["absorbance"], s["flags"], s["seqs"], s["time_basis"],
                      fit_map, best, warnings=s["warnings"], boots=s["boots"], resumed_at=s["resumed"],
                      end_rule=s["end_rule"], channel=channel)
    if calibration is not None:
        slope = calibration.slope
        intercept = calibration.intercept
        out.concentration = (s["absorbance"] - intercept) / slope
        out.calibration_id = str(calibration.inputs.get("device", "")) + " standards " + \
            ",".join(calibration.inputs.get("standards", []))
    return out


# -- the conditions of a run ----------------------------------------------------------------------------------------

def _run_of(store: Store, run: Run | str) -> Run:
    if isinstance(run, Run):
        return run
    runs = store.runs()
    for r in runs:
        if r.key == run:
            return r
    raise InputError(not_found(f"no run {run!r} in {store.path}", run, [r.label for r in runs],
                               "give a run key device:boot:seq (see `nightcell list runs --json`)"))


TEMPERATURE_SENSE_K = (243.15, 383.15)
"""Temperatures a cuvette of solution can have (−30 to 110 °C, common practice); outside needs --accept-suspect."""
CONCENTRATION_SENSE_M = 20.0
"""No solute is above ~20 mol/L (pure water is 55 mol/L of itself); more needs --accept-suspect."""


def set_run_condition(store: Store, run: Run | str, quantity: str, value: float, source: str, *,
                      now: float | None = None, accept_suspect: bool = False, check_only: bool = False) -> None:
    """Record one condition of a run (``temperature_K`` or ``conc_<reactant>_M``) and where it came from.

    A second entry for the same run and quantity replaces the first (conditions are typed-in knowledge, not raw
    data). Raises ``InputError`` (saying what to type) for an unknown quantity, a value that is not a positive
    number, a temperature that looks like Celsius, an empty source or a run the store does not hold.
    """
    if not isinstance(quantity, str) or not CONDITION_PATTERN.match(quantity):
        raise InputError(f"condition {quantity!r} is not one nightcell knows: use temperature_K, or conc_<reactant>_M "
                         "with a lower-case reactant name (e.g. conc_hydroxide_M)")
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{quantity} must be a number, not {value!r}") from None
    if not math.isfinite(v) or v <= 0:
        raise InputError(f"{quantity} must be a positive number, not {value!r}")
    if quantity == "temperature_K" and not 150.0 <= v <= 600.0:
        raise InputError(f"temperature_K {v:g} is not a plausible temperature in kelvin: "
                         "give kelvin (°C + 273.15)")
    lo, hi = TEMPERATURE_SENSE_K
    if quantity == "temperature_K" and not lo <= v <= hi and not accept_suspect:
        raise InputError(f"a run at {v - 273.15:.1f} °C ({v:g} K) is outside what a cuvette of solution can be "
                         f"({lo - 273.15:.0f} to {hi - 273.15:.0f} °C): check the value (°C or K?), or "
                         "pass --accept-suspect to record it anyway")
    if quantity.startswith("conc_") and v > CONCENTRATION_SENSE_M and not accept_suspect:
        raise InputError(f"{quantity} {v:g} mol/L is more than any solution holds ({CONCENTRATION_SENSE_M:g} mol/L): "
                         "give mol/L (not mmol/L), or pass --accept-suspect to record it anyway")
    if not isinstance(source, str) or not source.strip():
        raise InputError("say where the condition comes from (e.g. 'bench sheet', 'probe mean')")
    if check_only:
        return
    r = _run_of(store, run)
    if store.mark(r.device, r.start_boot, r.start_seq, kind="run_start") is None:
        raise InputError(f"no run starts at {r.key} in {store.path}: sync the board first, or check the run key")
    store.record_run_condition(r.device, r.start_boot, r.start_seq, quantity, v, source.strip(),
                               time.time() if now is None else now)


def run_conditions(store: Store, run: Run | str | None = None) -> dict[str, dict[str, dict[str, Any]]]:
    """Recorded conditions by run key: ``{key: {quantity: {"value": v, "source": text}}}``."""
    key: tuple = ()
    if run is not None:
        r = _run_of(store, run)
        key = (r.device, r.start_boot, r.start_seq)
    out: dict[str, dict[str, dict[str, Any]]] = {}
    for dev, boot, seq, q, v, src in store.run_condition_rows(*key):
        out.setdefault(f"{dev}:{boot}:{seq}", {})[q] = {"value": float(v), "source": src}
    return out


_RESET_CAUSES = {0: "power on", 1: "watchdog", 2: "hard reset", 3: "reset requested by the host"}


def run_notes(store: Store, analysis: RunAnalysis) -> list[dict[str, Any]]:
    """Notes journaled during a run (``nightcell note`` or the board's button), placed on the run's time axis.

    A note sits between two readings in the journal; it is given the time of the reading just before it (at most one
    sample interval early). Returns ``[{"time_s", "text", "mark"}]`` in journal order; the mark key is for detail.
    """
    run = analysis.run
    seqs = analysis.seqs
    if not seqs:
        return []
    first, last = seqs[0], seqs[-1]
    out = []
    for m in store.marks(run.device, "note"):
        key = (m["boot"], m["seq"])
        if not (first <= key <= last):
            continue
        i = bisect.bisect_right(seqs, key) - 1
        out.append({"time_s": float(analysis.time_s[max(i, 0)]), "text": m["label"] or m["value"] or "",
                    "mark": f"{key[0]}:{key[1]}"})
    return out


def run_provenance(store: Store, analysis: RunAnalysis, calibration: Any = None) -> dict[str, Any]:
    """Where a run's numbers come from: device, firmware, boots, clocks, blank, calibration, settings and conditions.

    Plain types only (strings and numbers), ready for a provenance table or JSON.
    """
    run = analysis.run
    dev = store.device(run.device)
    prov: dict[str, Any] = {"device": run.device, "run": run.key, "run label": run.label, "channel": analysis.channel}
    if dev is not None:
        prov["device label"] = dev["label"] or ""
    boots = analysis.boots or [run.start_boot]
    for b in boots:
        row = store.boot(run.device, b)
        clock = store.boot_clock(run.device, b)
        if row is not None:
            cause = row["reset_cause"]
            prov[f"boot {b}"] = (f"firmware {row['firmware']} on board profile {row['board']}; started by "
                                 f"{_RESET_CAUSES.get(cause, 'cause %d' % cause)}")
        prov[f"boot {b} clock"] = "no clock" if clock is None else f"{clock['quality']} ({clock['anchors']} anchors)"
    if analysis.resumed_at:
        prov["resumed by the board at"] = ", ".join("%d:%d" % k for k in analysis.resumed_at)
    prov["end of run"] = analysis.end_rule
    b = analysis.blank
    prov["blank"] = (f"mark {b.boot}:{b.seq}, {b.light:.2f} light and {b.dark:.2f} dark counts per read "
                     f"({b.rule})")
    prov["stray light"] = b.stray_text
    prov["time basis"] = analysis.time_basis
    prov["first reading"] = "%d:%d" % analysis.seqs[0]
    prov["last reading"] = "%d:%d" % analysis.seqs[-1]
    if calibration is not None:
        set_text = f"set {calibration.inputs['set']!r}, " if calibration.inputs.get("set") else ""
        per = getattr(calibration, "unit", "") or "unit"
        prov["calibration"] = (f"slope {measured(calibration.slope, calibration.slope_se, f'A per {per}')} from "
                               f"{set_text}standards "
                               f"{', '.join(calibration.inputs.get('standards', []))} "
                               f"(blanks {', '.join(calibration.inputs.get('blanks', []))})")
    settings = store.settings_before(run.device, run.start_boot, run.start_seq)
    if settings is not None:
        prov["settings"] = f"record {settings['boot']}:{settings['seq']}: {settings['json']}"
    for q, c in run_conditions(store, run).get(run.key, {}).items():
        prov[f"condition {q}"] = f"{c['value']:g} ({c['source']})"
    return prov


# -- several runs: orders and temperature dependence ------------------------------------------------------------

@dataclass
class RunSummary:
    """One run of a study: its conditions, its analysis, the fit its k comes from, and its initial rate."""

    run: Run
    conditions: dict[str, float]
    sources: dict[str, str]
    analysis: RunAnalysis
    fit: FitResult
    initial: FitResult | None = None
    calibration: Any = None

    @property
    def k(self) -> float:
        return float(self.fit.values["k"])

    @property
    def k_se(self) -> float:
        return float(self.fit.stderr["k"])

    def to_dict(self) -> dict[str, Any]:
        return jsonable({
            "run": self.run.key, "label": self.run.label, "conditions": self.conditions, "sources": self.sources,
            "model": self.fit.model, "k_per_s": self.k, "k_se_per_s": self.k_se,
            "half_life_s": self.fit.extra.get("half_life_s"), "half_life_se_s": self.fit.extra.get("half_life_se_s"),
            "A0": self.fit.values.get("A0"), "A_inf": self.fit.values.get("A_inf"),
            "initial_rate_A_per_s": None if self.initial is None else self.initial.values["rate"],
            "initial_rate_se_A_per_s": None if self.initial is None else self.initial.stderr["rate"],
            "boots": self.analysis.boots, "points": int(len(self.analysis.time_s)), "best_model": self.analysis.best,
        })


@dataclass
class StudyAnalysis:
    """Several runs together.

    Attributes
    ----------
    runs : every run analysed, with its conditions.
    orders : reactant → ``study.OrderStudy`` of the pseudo-first-order k against that reactant's concentration.
    initial_orders : the same from initial rates (dA/dt at the start of each run).
    arrhenius, eyring : fits of k against temperature (None when the runs do not allow one).
    used : fit name → run keys it used. skipped : run key or fit name → why it was left out. rules : how runs were
    chosen and how standard errors were scaled.
    """

    runs: list[RunSummary]
    model: str
    orders: dict[str, _study.OrderStudy] = field(default_factory=dict)
    initial_orders: dict[str, _study.OrderStudy] = field(default_factory=dict)
    arrhenius: FitResult | None = None
    eyring: FitResult | None = None
    used: dict[str, list[str]] = field(default_factory=dict)
    skipped: dict[str, str] = field(default_factory=dict)
    rules: dict[str, str] = field(default_factory=dict)

    def order(self, reactant: str) -> FitResult:
        """The log–log fit of k against one reactant (parameters ``ln_rate_at_1`` and ``order``)."""
        try:
            return self.orders[reactant].per_reactant[reactant]
        except KeyError:
            why = self.skipped.get("order " + reactant, "no run records its concentration")
            raise AnalysisError(f"no order fit for {reactant!r}: {why}") from None

    def to_dict(self) -> dict[str, Any]:
        return jsonable({
            "model": self.model,
            "runs": [r.to_dict() for r in self.runs],
            "orders": {k: v.to_dict() for k, v in self.orders.items()},
            "initial_orders": {k: v.to_dict() for k, v in self.initial_orders.items()},
            "arrhenius": None if self.arrhenius is None else self.arrhenius.to_dict(),
            "eyring": None if self.eyring is None else self.eyring.to_dict(),
            "used": self.used, "skipped": self.skipped, "rules": self.rules,
        })


SCALE_RULE = ("standard errors rest on each run's own k standard error (weights 1/(se/k)² on ln k), scaled by the "
              "runs' own scatter (the Birge ratio sqrt(χ²/dof), up or down: the NIST/statsmodels convention), with "
              "95 % intervals from Student t with the fit's n − 2 degrees of freedom — the same rule as the "
              "arrhenius command")


def _per_run_scale(fit: FitResult) -> None:
    """Record the one rule for standard errors of fits over runs (``SCALE_RULE``; ``study.SE_RULE``): the scale
    estimated from the residuals, as ``linear_lstsq`` already gives it — nothing is rescaled here."""
    s2 = fit.residual_sd ** 2
    if s2 > 0 and math.isfinite(s2):
        fit.extra["birge_ratio"] = math.sqrt(s2)
    fit.extra["scale_rule"] = SCALE_RULE


def _pick_group(items: list[RunSummary], key: Any, level: Any) -> list[RunSummary] | None:
    """The largest set of runs sharing ``key`` in which ``level`` takes ≥ 2 values over ≥ 3 runs."""
    groups: dict[Any, list[RunSummary]] = {}
    for it in items:
        groups.setdefault(key(it), []).append(it)
    good = [g for g in groups.values() if len(g) >= 3 and len({level(it) for it in g}) >= 2]
    if not good:
        return None
    return max(good, key=lambda g: (len({level(it) for it in g}), len(g)))


def analyse_study(store: Store, runs: Sequence[Run] | None = None, *, model: str = "first_order_to_final",
                  channel: int = 0, level: float = 0.95) -> StudyAnalysis:
    """Every run with its recorded conditions → per-run k (``model``) → orders and Arrhenius/Eyring (study.py).

    Orders: for each reactant, the largest set of runs at one temperature and one level of every other reactant
    over which that reactant takes two or more levels (≥ 3 runs); log k against log concentration. The same runs'
    initial rates give a second estimate (valid as an order when every run starts from the same amount of the
    species followed). Temperature: the largest set of runs at one level of every reactant over two or more
    temperatures (≥ 3 runs). Runs without a temperature or any concentration are listed in ``skipped``.
    """
    runs = list(store.runs() if runs is None else runs)
    conds = run_conditions(store)
    cals: dict[str, Any] = {}
    out = StudyAnalysis([], model, rules={"scale": SCALE_RULE})
    for run in runs:
        c = conds.get(run.key, {})
        if "temperature_K" not in c or not any(q.startswith("conc_") for q in c):
            out.skipped[run.key] = ("no recorded temperature_K and starting concentration: record the run's "
                                    "temperature_K and conc_<reactant>_M (analyse.set_run_condition) first")
            continue
        try:
            cals[run.key] = calibrate_from_store(store, run.device, channel, before=(run.start_boot, run.start_seq),
                                                 level=level)
        except AnalysisError:
            cals[run.key] = None
        try:
            a = analyse_run(store, run, channel=channel, calibration=cals[run.key])
        except AnalysisError as exc:
            out.skipped[run.key] = f"not analysed: {exc}"
            continue
        if model not in a.fits:
            out.skipped[run.key] = f"model {model} could not be fitted to this run"
            continue
        ok = a.flags == 0
        try:
            ini = _kinetics.initial_rate(a.time_s, a.absorbance, mask=~ok, inputs={"run": run.key})
        except AnalysisError:
            ini = None
        out.runs.append(RunSummary(run, {q: v["value"] for q, v in c.items()},
                                   {q: v["source"] for q, v in c.items()}, a, a.fits[model], ini,
                                   cals[run.key]))
    items = out.runs
    reactants = sorted({q for it in items for q in it.conditions if q.startswith("conc_")})

    def level(it: RunSummary, q: str) -> float:
        return round(math.log(it.conditions[q]), 6) if q in it.conditions else math.nan

    def temp(it: RunSummary) -> float:
        return round(it.conditions["temperature_K"], 2)

    for q in reactants:
        name = q[len("conc_"):-len("_M")]
        have = [it for it in items if q in it.conditions]
        others = [o for o in reactants if o != q]
        group = _pick_group(have, lambda it: (temp(it),) + tuple(level(it, o) for o in others),
                            lambda it: level(it, q))
        if group is None:
            out.skipped[f"order {name}"] = ("no set of ≥ 3 runs at one temperature varies it over ≥ 2 levels while "
                                            "the other reactants stay at one level")
            continue
        keys = [it.run.key for it in group]
        conc = {name: [it.conditions[q] for it in group]}
        st = _study.orders([it.k for it in group], conc, [it.k_se for it in group],
                           inputs={"runs": keys, "what": f"k ({model}) against [{name}]"})
        for f in [st.joint, *st.per_reactant.values()]:
            _per_run_scale(f)
        out.orders[name] = st
        out.used[f"order {name}"] = keys
        ini = [it for it in group if it.initial is not None]
        if len(ini) >= 3:
            try:
                st2 = _study.orders([it.initial.values["rate"] for it in ini],
                                    {name: [it.conditions[q] for it in ini]},
                                    [it.initial.stderr["rate"] for it in ini],
                                    inputs={"runs": [it.run.key for it in ini],
                                            "what": f"initial rate dA/dt against [{name}]"})
                for f in [st2.joint, *st2.per_reactant.values()]:
                    _per_run_scale(f)
                out.initial_orders[name] = st2
            except AnalysisError as exc:
                out.skipped[f"initial-rate order {name}"] = str(exc)
            except InputError as exc:
                out.skipped[f"initial-rate order {name}"] = str(exc)
    out.rules["orders"] = ("per reactant: the largest set of ≥ 3 runs at one temperature and one level of every "
                           "other reactant, over ≥ 2 levels of it; ln k against ln concentration")
    group = _pick_group(items, lambda it: tuple(level(it, q) for q in reactants), temp)
    out.rules["temperature"] = ("the largest set of ≥ 3 runs at one level of every reactant over ≥ 2 temperatures; "
                                "ln k against 1/T (Arrhenius) and ln(k/T) against 1/T (Eyring)")
    if group is None:
        out.skipped["arrhenius"] = "no set of ≥ 3 runs at the same concentrations spans ≥ 2 temperatures"
    else:
        keys = [it.run.key for it in group]
        T = [it.conditions["temperature_K"] for it in group]
        k = [it.k for it in group]
        kse = [it.k_se for it in group]
        try:
            out.arrhenius = _study.arrhenius(T, k, kse, inputs={"runs": keys})
            out.eyring = _study.eyring(T, k, kse, inputs={"runs": keys})
            for f in (out.arrhenius, out.eyring):
                _per_run_scale(f)
            out.used["arrhenius"] = keys
            out.used["eyring"] = keys
        except AnalysisError as exc:
            out.skipped["arrhenius"] = str(exc)
    return out


def initial_rate_of(store: Any, run: Any, channel: int, window: tuple[float, float] | None, *,
                    blank: tuple[int, int] | str | None = None, accept_suspect: bool = False) -> Any:
    """The run's initial rate (``window`` in s, or chosen automatically), flagged readings left out, with its inputs
    (the blank by ``choose_blank``, or the one named)."""
    s = run_series(store, run, channel, blank, accept_suspect=accept_suspect)
    inputs = {"run": run.key, "device": run.device, "channel": channel,
              "blank": f"{s['blank'].boot}:{s['blank'].seq}", "blank_rule": s["blank"].rule,
              "time_basis": s["time_basis"], "left_out": "flagged readings"}
    return _kinetics.initial_rate(s["time_s"], s["absorbance"], window, mask=s["flags"] != 0, inputs=inputs)


def k_and_temperature(store: Any, run: Any, channel: int, model: str) -> tuple[float, float, float | None]:
    """k and its SE from the run's fit of ``model``, and the run's mean solution temperature (K) if it has one."""
    analysis = analyse_run(store, run, channel=channel, models=(model,))
    fit = analysis.fits[model]
    temps = [r["temp_centi"] for r in store.run_samples(run, channel) if r["temp_centi"] is not None]
    t_k = float(np.mean(temps)) / 100.0 + 273.15 if temps else None
    return float(fit.values["k"]), float(fit.stderr["k"]), t_k
