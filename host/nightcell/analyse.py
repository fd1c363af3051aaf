"""From stored raw rows to science: choose the blank, turn counts into absorbance, fit calibrations and runs.

This is the glue between the store and the pure science modules (optics, calibration, kinetics): it reads raw
rows, applies a *recorded rule* for every choice (which blank, which calibration, which window) and returns
results that name their inputs, so each number can be traced back to raw counts. It never talks to a board and
never draws.

Example::

    with Store.open("class.db") as store:
        cal = calibrate_from_store(store, device)
        for run in store.runs(device):
            result = analyse_run(store, run, calibration=cal)
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from . import calibration as _calibration
from . import kinetics as _kinetics
from . import optics as _optics
from .errors import AnalysisError, InputError
from .store import Run, Store

__all__ = ["BlankChoice", "RunAnalysis", "choose_blank", "standards_from_store", "calibrate_from_store",
           "run_series", "analyse_run"]

BLANK_RULE = "nearest preceding blank mark of the same device and channel"


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

    def to_dict(self) -> dict[str, Any]:
        return dict(self.__dict__)


def _mark_means(mark: dict[str, Any], channel: int) -> tuple[float, float]:
    if mark["reads"] <= 0 or channel >= len(mark["light"]):
        raise AnalysisError(f"mark {mark['boot']}:{mark['seq']} has no counts for channel {channel}")
    return mark["light"][channel] / mark["reads"], mark["dark"][channel] / mark["reads"]


def choose_blank(store: Store, device: str, before: tuple[int, int] | None = None, channel: int = 0,
                 blank: tuple[int, int] | None = None) -> BlankChoice:
    """The blank for readings of ``device`` taken at (boot, seq) ``before``: the nearest preceding blank mark,
    or the one named by ``blank`` = (boot, seq). ``AnalysisError`` when there is none."""
    blanks = store.marks(device, "blank")
    if blank is not None:
        chosen = [m for m in blanks if (m["boot"], m["seq"]) == tuple(blank)]
        if not chosen:
            raise InputError(f"no blank {blank[0]}:{blank[1]} on device {device}: list blanks with `nightcell list`")
        m = chosen[0]
        rule = "named by the user"
    else:
        earlier = [m for m in blanks if before is None or (m["boot"], m["seq"]) < tuple(before)]
        if not earlier:
            raise AnalysisError(f"device {device} has no blank before {before}: take a blank first "
                                "(`nightcell blank`) or name one")
        m = earlier[-1]
        rule = BLANK_RULE
    light, dark = _mark_means(m, channel)
    return BlankChoice(device, m["boot"], m["seq"], channel, light, dark, rule)


def standards_from_store(store: Store, device: str, channel: int = 0) -> dict[str, Any]:
    """Concentration and absorbance of every standard mark of a device, each against its own blank."""
    conc, absorb, ids, blanks = [], [], [], []
    for m in store.marks(device, "standard"):
        try:
            c = float(m["value"])
        except ValueError as exc:
            raise AnalysisError(f"standard {m['boot']}:{m['seq']} has value {m['value']!r}, not a number") from exc
        b = choose_blank(store, device, (m["boot"], m["seq"]), channel)
        light, dark = _mark_means(m, channel)
        res = _optics.absorbance([light], [dark], b.light, b.dark)
        conc.append(c)
        absorb.append(float(res.absorbance[0]))
        ids.append(f"{m['boot']}:{m['seq']}")
        blanks.append(f"{b.boot}:{b.seq}")
    return {"concentration": np.array(conc), "absorbance": np.array(absorb), "marks": ids, "blanks": blanks}


def calibrate_from_store(store: Store, device: str, channel: int = 0, **options: Any) -> _calibration.CalibrationResult:
    """Fit a calibration to the standards a device recorded (options go to ``fit_calibration``)."""
    std = standards_from_store(store, device, channel)
    if len(std["concentration"]) == 0:
        raise AnalysisError(f"device {device} has no standards: record some with `nightcell standard`")
    inputs = {"device": device, "channel": channel, "standards": std["marks"], "blanks": std["blanks"],
              "blank_rule": BLANK_RULE}
    return _calibration.fit_calibration(std["concentration"], std["absorbance"], inputs=inputs, **options)


@dataclass
class RunAnalysis:
    """A run's absorbance series, the fits of every candidate model, and where it all came from."""

    run: Run
    blank: BlankChoice
    time_s: np.ndarray
    absorbance: np.ndarray
    flags: np.ndarray
    seqs: list[tuple[int, int]]
    time_basis: str
    fits: dict[str, Any]
    best: str
    concentration: np.ndarray | None = None
    calibration_id: str | None = None
    warnings: list[str] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        return {
            "run": self.run.to_dict(),
            "blank": self.blank.to_dict(),
            "time_basis": self.time_basis,
            "points": int(len(self.time_s)),
            "flagged": int(np.count_nonzero(self.flags)),
            "best_model": self.best,
            "fits": {name: fit.to_dict() for name, fit in self.fits.items()},
            "calibration": self.calibration_id,
            "warnings": list(self.warnings),
        }


def run_series(store: Store, run: Run, channel: int = 0, blank: tuple[int, int] | None = None) -> dict[str, Any]:
    """Time (s from the first sample), absorbance and flags of a run, with the blank and time basis used."""
    rows = store.run_samples(run, channel)
    if not rows:
        raise AnalysisError(f"run {run.key} ({run.label!r}) has no samples yet: sync the board first")
    b = choose_blank(store, run.device, (run.start_boot, run.start_seq), channel, blank)
    light = np.array([r["light"] / r["reads"] for r in rows])
    dark = np.array([r["dark"] / r["reads"] for r in rows])
    res = _optics.absorbance(light, dark, b.light, b.dark)
    flags = res.flags.copy()
    board_flags = np.array([r["flags"] for r in rows])
    flags |= np.where(board_flags & 1, _optics.FLAG_SATURATED, 0)
    warnings = []
    boots = sorted({r["boot"] for r in rows})
    clocked = all(r["unix_at_zero"] is not None for r in rows)
    if clocked:
        t = np.array([r["unix_at_zero"] + r["rate"] * r["uptime_ms"] / 1000.0 for r in rows])
        basis = "wall clock from anchors (" + ", ".join(sorted({r["quality"] for r in rows})) + ")"
    elif len(boots) == 1:
        t = np.array([r["uptime_ms"] / 1000.0 for r in rows])
        basis = "board uptime (no clock anchor yet)"
    else:
        keep = np.array([r["unix_at_zero"] is not None for r in rows])
        if not keep.any():
            raise AnalysisError(f"run {run.key} spans boots {boots} with no clock anchors: connect the board and "
                                "sync so its time can be placed")
        warnings.append("samples from boots without a clock anchor were left out")
        rows = [r for r, k in zip(rows, keep) if k]
        t = np.array([r["unix_at_zero"] + r["rate"] * r["uptime_ms"] / 1000.0 for r in rows])
        res_a, flags = res.absorbance[keep], flags[keep]
        res = _optics.OpticsResult(res.transmittance[keep], res_a, flags, res.signal[keep], res.reference,
                                   res.stray, res.ceiling, res.message)
        basis = "wall clock from anchors (partial)"
    t = t - t[0]
    return {"time_s": t, "absorbance": res.absorbance, "flags": flags, "blank": b, "time_basis": basis,
            "seqs": [(r["boot"], r["seq"]) for r in rows], "warnings": warnings}


def analyse_run(store: Store, run: Run, *, channel: int = 0, calibration: Any = None,
                blank: tuple[int, int] | None = None, models: tuple[str, ...] | None = None) -> RunAnalysis:
    """Absorbance of a run against its blank, every candidate rate model fitted, the best by AIC."""
    s = run_series(store, run, channel, blank)
    ok = s["flags"] == 0
    if np.count_nonzero(ok) < 4:
        raise AnalysisError(f"run {run.key} has {np.count_nonzero(ok)} clean points: too few to fit a rate")
    t = s["time_s"]
    a = s["absorbance"]
    inputs = {"run": run.key, "device": run.device, "channel": channel,
              "blank": f"{s['blank'].boot}:{s['blank'].seq}", "blank_rule": s["blank"].rule,
              "time_basis": s["time_basis"], "weights": "T^2 (count noise about constant)",
              "left_out": "flagged readings"}
    # Absorbance is noisier where less light gets through: weight by 1/var(A) ∝ T², else intervals are too narrow.
    weights = np.where(ok, np.nan_to_num(10.0 ** (-2.0 * np.nan_to_num(a, nan=0.0))), 0.0)
    comparison = _kinetics.fit_all(t, a, inputs=inputs, mask=~ok, weights=weights,
                                  **({"models": models} if models else {}))
    fit_map = dict(comparison.results)
    best = comparison.ranking[0]
    out = RunAnalysis(run, s["blank"], s["time_s"], s["absorbance"], s["flags"], s["seqs"], s["time_basis"],
                      fit_map, best, warnings=s["warnings"])
    if calibration is not None:
        slope = calibration.slope
        intercept = calibration.intercept
        out.concentration = (s["absorbance"] - intercept) / slope
        out.calibration_id = str(calibration.inputs.get("device", "")) + " standards " + \
            ",".join(calibration.inputs.get("standards", []))
    return out
