"""How a run's rate-law fits are laid out for a person, the same on the command line, in the report and in ``--json``.

Owns: the order of a fit result — first the answer a chemist reports (the rate constant with its unit and interval,
and the half-life), then how well the law fits (the residuals in a sentence, and which law fits best and by how
much), then the full parameter table, then the laws ranked by ΔAICc; the runs test and the raw criteria only in the
detail. ``layout`` builds that as plain JSON (full precision, keys named for what they are); ``text`` writes it for
the terminal (numbers through ``render.numbers``). Must never: fit, read the store, or print.

How "by how much" is put in words (common practice for Akaike differences, no source given here): ΔAICc below 2 —
the data do not tell the two laws apart; 2 to 10 — the next law is clearly less supported; above 10 — the data rule
it out.
"""

from __future__ import annotations

import math
from typing import Any, Mapping

import numpy as np

from ..science.fitting import jsonable, t_quantile
from ..science import laws as _laws
from . import numbers as _n

__all__ = ["criterion", "layout", "ranked", "text", "verdict"]

LEVEL = 0.95


def criterion(fit: Any) -> float:
    """The ranking criterion of a fit: AICc where the fit has it (small samples), else AIC."""
    v = fit.extra.get("aicc") if isinstance(fit.extra, Mapping) else None
    return float(v) if v is not None and not (isinstance(v, float) and math.isnan(v)) else float(fit.aic)


def ranked(fits: Mapping[str, Any]) -> list[str]:
    """Law names, best (lowest AICc) first."""
    return sorted(fits, key=lambda m: criterion(fits[m]))


def _delta(d: float) -> str:
    """ΔAICc in words' precision: differences of a few units matter, decimals beyond one do not."""
    if not math.isfinite(d):
        return "∞"
    if d == 0:
        return "0 (best)"
    return f"{d:.0f}" if d >= 10 else f"{d:.1f}"


def _how_far(delta: float) -> str:
    if not math.isfinite(delta):
        return "the data rule it out"
    if delta < 2.0:
        return "the data do not tell the two apart"
    if delta <= 10.0:
        return "clearly less supported"
    return "the data rule it out"


def verdict(fits: Mapping[str, Any]) -> str:
    """One sentence: which law fits best and by how much."""
    order = ranked(fits)
    best = _laws.title(order[0])
    if len(order) == 1:
        return f"Only {best} was fitted."
    nxt = order[1]
    delta = criterion(fits[nxt]) - criterion(fits[order[0]])
    return (f"{best[0].upper() + best[1:]} fits best; the next, {_laws.title(nxt)}, is "
            f"{_delta(delta)} behind in AICc: {_how_far(delta)}.")


def _residuals_sentence(fit: Any) -> str:
    rt = fit.extra.get("runs_test", {}) or {}
    p = rt.get("p_value")
    if p is None:
        return "Too few residuals to judge their pattern."
    if p >= 0.05:
        return "The residuals scatter evenly about the curve."
    return ("The residuals run in long stretches on one side of the curve: this law misses the shape of the data "
            "(see --detail).")


def _param_row(fit: Any, name: str, law: Any) -> dict[str, Any]:
    v, se = fit.values[name], fit.stderr.get(name)
    half = t_quantile(LEVEL, fit.dof) * se if se is not None and math.isfinite(se) else math.nan
    unit = law.rate_unit if law is not None and name == law.rate_parameter else ""  # absorbances have no unit
    return {"name": name, "meaning": law.parameters.get(name, name) if law is not None else name,
            "value": v, "standard_error": se, "interval_95": [v - half, v + half], "unit": unit}


def layout(fits: Mapping[str, Any], failures: Mapping[str, str] | None = None, *,
           law: str | None = None) -> dict[str, Any]:
    """The ordered plain-JSON layout of one run's fits (module docstring); ``law`` picks the answer (default: the
    best by AICc)."""
    order = ranked(fits)
    chosen = law or order[0]
    fit = fits[chosen]
    info = _laws.describe(chosen)
    rate_name = info.rate_parameter if info is not None else ("k" if "k" in fit.values else "rate")
    rate = _param_row(fit, rate_name, info)
    answer: dict[str, Any] = {
        "law": chosen,
        "law_title": _laws.title(chosen),
        "rate_constant" if rate_name == "k" else "rate": {
            "value": rate["value"], "standard_error": rate["standard_error"], "unit": rate["unit"] or "s⁻¹",
            "interval_95": rate["interval_95"]},
    }
    if "half_life_s" in fit.extra:
        answer["half_life"] = {"value": fit.extra["half_life_s"], "standard_error": fit.extra["half_life_se_s"],
                               "unit": "s"}
    resid = np.asarray(getattr(fit, "residuals", ()), dtype=float)
    worst = int(np.argmax(np.abs(resid))) if resid.size else None  # a 10⁶-point run: one pass in numpy
    quality: dict[str, Any] = {
        "points": fit.n,
        "residual_sd": fit.residual_sd,
        "largest_residual": None if worst is None else float(resid[worst]),
        "largest_residual_at_s": None if worst is None or len(fit.x) != len(resid) else float(fit.x[worst]),
        "residual_unit": "absorbance",
        "residuals_in_words": _residuals_sentence(fit),
        "best_law_in_words": verdict(fits),
    }
    best_c = criterion(fits[order[0]])
    ranking = [{"law": m, "law_title": _laws.title(m), "delta_aicc": criterion(fits[m]) - best_c} for m in order]
    ranking += [{"law": m, "law_title": _laws.title(m), "not_fitted": why} for m, why in (failures or {}).items()]
    detail = {m: f.to_dict() for m, f in fits.items()}  # the full fit record of every law, as the library gives it
    return jsonable({
        "answer": answer,
        "how_well_it_fits": quality,
        "parameters": [_param_row(fit, n, info) for n in fit.names],
        "intervals": {"level": LEVEL, "rule": "value ± t·SE, Student t of the fit's degrees of freedom",
                      "t": t_quantile(LEVEL, fit.dof), "degrees_of_freedom": fit.dof},
        "laws_ranked": ranking,
        "detail": detail,
    })


def text(data: Mapping[str, Any], *, detail: bool = False) -> str:
    """The layout (``layout``'s result) as terminal text, every number rounded by its uncertainty with its unit."""
    a, q = data["answer"], data["how_well_it_fits"]
    lines = [f"answer: {a['law_title']}"]
    key = "rate_constant" if "rate_constant" in a else "rate"
    r = a[key]
    word = "k" if key == "rate_constant" else "rate dA/dt"
    lines.append(f"  {word} = {_n.measured(r['value'], r['standard_error'], r['unit'])}"
                 f"  (95 % interval {_n.interval(*r['interval_95'], r['standard_error'], r['unit'])})")
    if "half_life" in a:
        h = a["half_life"]
        lines.append(f"  half-life = {_n.measured(h['value'], h['standard_error'], 's')}")
    lines.append("how well it fits")
    res = f"  residual SD {_n.quantity(q['residual_sd'], 'absorbance', digits=2)} over {q['points']} readings"
    if q.get("largest_residual") is not None:
        res += f"; largest residual {_n.quantity(q['largest_residual'], digits=2)}"
        if q.get("largest_residual_at_s") is not None:
            res += f" at {_n.quantity(q['largest_residual_at_s'], 's', digits=3)}"
    lines += [res, f"  {q['residuals_in_words']}", f"  {q['best_law_in_words']}"]
    iv = data.get("intervals", {})
    lines.append("parameters (value ± standard error, 95 % interval = value ± t·SE"
                 + (f", t = {iv['t']:.4g} with {iv['degrees_of_freedom']} degrees of freedom)" if iv else ")"))
    width = max(len(p["meaning"]) for p in data["parameters"])
    for p in data["parameters"]:
        lines.append(f"  {p['meaning']:<{width}}  {p['name']:<5}  "
                     f"{_n.measured(p['value'], p['standard_error'], p['unit'])}  "
                     f"({_n.interval(*p['interval_95'], p['standard_error'], p['unit'])})")
    lines.append("laws ranked (ΔAICc: how far behind the best; lower is better)")
    for i, row in enumerate(data["laws_ranked"], start=1):
        if "not_fitted" in row:
            lines.append(f"  -  {row['law_title']}: not fitted ({row['not_fitted']})")
        else:
            lines.append(f"  {i}. {row['law_title']:<42} {_delta(row['delta_aicc'])}")
    if detail:
        lines.append("detail (criteria, runs test of the residual signs)")
        for m, d in data["detail"].items():
            if not isinstance(d, Mapping) or "aic" not in d:  # where the readings came from, printed by the caller
                continue
            rt = d.get("extra", {}).get("runs_test") or {}
            p = rt.get("p_value")
            lines.append(f"  {m}: AIC {_n.quantity(d['aic'])}, AICc {_n.quantity(d['extra'].get('aicc'))}, n {d['n']}, "
                         f"dof {d['dof']}, RSS {_n.quantity(d['rss'], digits=3)}, runs-test p "
                         f"{'n/a' if p is None else _n.quantity(p, digits=2)}")
    return "\n".join(lines)


_CAL_UNIT = "per unit of the standards' concentration"
_CAL_PARAMS = {"intercept": ("intercept", "absorbance"), "slope": ("slope", f"absorbance {_CAL_UNIT}"),
               "curvature": ("curvature", f"absorbance {_CAL_UNIT}²")}


def calibration_text(cal: Any, *, unit: str = "", detail: bool = False) -> str:
    """A calibration for the terminal: the curve, each coefficient rounded by its standard error with its unit, how
    well it fits, the limits of detection and quantification; the test statistics behind ``--detail``. ``unit`` is
    the standards' concentration unit where known."""
    ex = cal.extra
    per = f"per {unit}" if unit else _CAL_UNIT
    kind = {"line": "straight line", "quadratic": "quadratic"}.get(cal.model, cal.model)
    lines = [f"calibration: {kind}{' through the origin' if cal.through_origin else ''}, {cal.n} standards"]
    for name in cal.names:
        word, u = _CAL_PARAMS.get(name, (name, ""))
        u = u.replace(_CAL_UNIT, per)
        lines.append(f"  {word:<10} {_n.measured(cal.values[name], cal.stderr[name], u)}")
    lines.append(f"  residual SD {_n.quantity(cal.residual_sd, 'absorbance', digits=2)}; "
                 f"r = {ex['r']:.6f}")
    it = ex.get("intercept_test")
    if it:
        lines.append("  the intercept " + ("differs" if it["differs_from_zero"] else "does not differ")
                     + " from zero" + (f" (t = {it['t']:.2f}, p = {it['p_value']:.2g})" if detail else ""))
    lin = ex.get("linearity") or {}
    if lin:
        lines.append(f"  linear range: {lin['criterion'] + ': ' if lin.get('criterion') else ''}{lin['verdict']}")
    u = f" {unit}" if unit else " (in the standards' unit)"
    sigma = {"residual": "the residual SD s_y/x", "intercept": "the intercept's SE",
             "blank": "the SD of repeated blank readings"}.get(ex.get("sigma_source"), ex.get("sigma_source", ""))
    try:
        from ..science.calibration import LOD_RULE as rule
    except ImportError:  # pragma: no cover - older science rooms
        rule = "LOD = 3.3σ/S, LOQ = 10σ/S"
    lines.append(f"  LOD = {_n.quantity(ex.get('lod'), digits=2)}{u}, LOQ = {_n.quantity(ex.get('loq'), digits=2)}{u}"
                 f" — convention: {rule}, σ = {sigma}"
                 + (f" = {_n.quantity(ex['lod_sigma'], 'A', digits=2)}" if ex.get("lod_sigma") is not None else ""))
    if detail:
        lines.append(f"  detail: n {cal.n}, dof {cal.dof}, RSS {_n.quantity(cal.rss, digits=3)}, AIC "
                     f"{_n.quantity(cal.aic)}; straightness test: {lin.get('method', '')}")
    if not cal.success:
        lines.append(f"  NOT TRUSTED: {cal.message}")
    elif cal.message:
        lines.append(f"  note: {cal.message}")
    return "\n".join(lines)


def prediction_text(pred: Any, *, unit: str = "") -> str:
    """An unknown's concentration, rounded by its standard error, with its interval and unit."""
    return (f"unknown (mean of {pred.m} reading(s), absorbance {_n.quantity(pred.reading)}): "
            f"{_n.measured(pred.value, pred.stderr, unit)}, {pred.level:.0%} interval "
            f"{_n.interval(pred.ci_low, pred.ci_high, pred.stderr, unit)}"
            + ("" if unit else " (in the standards' unit)")
            + ("  (outside the standards' range)" if pred.extrapolated else ""))


def arrhenius_text(fit: Any, eyring: Any = None, *, detail: bool = False) -> str:
    """Ea the one way (``numbers.activation_energy``), then A and the Eyring parameters, each rounded by its
    standard error with its unit; the fit tables behind ``--detail``."""
    ea, ea_se = fit.values["Ea_J_per_mol"], fit.stderr["Ea_J_per_mol"]
    half = t_quantile(LEVEL, fit.dof) * ea_se / 1000.0
    lines = [f"activation energy from {fit.n} rate constants (Arrhenius: ln k against 1/T)",
             f"  {_n.activation_energy(ea, ea_se)}  (95 % interval "
             f"{_n.interval(ea / 1000 - half, ea / 1000 + half, ea_se / 1000, 'kJ mol⁻¹')})",
             f"  pre-exponential factor A = {_n.measured(fit.extra.get('A'), fit.extra.get('A_se'), 'in the unit of k')}",
             f"  residual SD of ln k {_n.quantity(fit.residual_sd, digits=2)}; 95 % interval = value ± t·SE, "
             f"t = {t_quantile(LEVEL, fit.dof):.4g} with {fit.dof} degree(s) of freedom"]
    if fit.extra.get("se_rule"):
        lines.append(f"  standard errors: {fit.extra['se_rule']}")
    if eyring is not None:
        lines.append("Eyring (ln(k/T) against 1/T, transmission coefficient 1)")
        lines.append(f"  ΔH‡ = {_n.measured(eyring.values['dH_J_per_mol'] / 1000, eyring.stderr['dH_J_per_mol'] / 1000, 'kJ mol⁻¹')}")
        lines.append(f"  ΔS‡ = {_n.measured(eyring.values['dS_J_per_mol_K'], eyring.stderr['dS_J_per_mol_K'], 'J mol⁻¹ K⁻¹')}")
    if detail:
        lines += ["detail", fit.report()] + ([eyring.report()] if eyring is not None else [])
    return "\n".join(lines)


def orders_text(result: Any, *, detail: bool = False) -> str:
    """Each reactant's order rounded by its standard error (joint power law, then one reactant at a time)."""
    joint = result.joint
    lines = [f"reaction orders from the initial rates of {joint.n} runs (rate = k·Π[X]^order)"]
    for name in joint.names:
        if name.startswith("order_"):
            lines.append(f"  order in {name[len('order_'):]}: {_n.measured(joint.values[name], joint.stderr[name])}")
    for name, fit in result.per_reactant.items():
        lines.append(f"  {name} alone (others held at one level, {fit.n} runs): order "
                     f"{_n.measured(fit.values['order'], fit.stderr['order'])}")
    for name, why in result.skipped.items():
        lines.append(f"  {name}: no fit of its own ({why})")
    if detail:
        lines += ["detail", result.report()]
    return "\n".join(lines)


def initial_rate_text(fit: Any, *, detail: bool = False) -> str:
    """The initial rate dA/dt with its unit and interval, and the window it came from."""
    rate, se = fit.values["rate"], fit.stderr["rate"]
    half = t_quantile(LEVEL, fit.dof) * se
    lo, hi = fit.extra.get("window_s", [math.nan, math.nan])
    lines = [f"initial rate dA/dt = {_n.measured(rate, se, 'absorbance s⁻¹')}  (95 % interval "
             f"{_n.interval(rate - half, rate + half, se, 'absorbance s⁻¹')})",
             f"  from {fit.extra.get('window_points', fit.n)} readings, {_n.quantity(lo, digits=3)} to "
             f"{_n.quantity(hi, 's', digits=3)}; starting absorbance "
             f"{_n.measured(fit.values['A0'], fit.stderr['A0'])}",
             f"  window: {fit.message}"]
    if detail:
        lines += ["detail", fit.report()]
    return "\n".join(lines)
