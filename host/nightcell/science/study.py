"""Several runs together: reaction orders from initial rates, and activation parameters from rate constants.

Owns: orders by the method of initial rates (log rate against log concentration, per reactant, on the runs where
the other reactants are held at one level), the joint power law ``rate = k·Π[c_i]^n_i`` over all runs (log-linear
least squares, optionally refined by nonlinear least squares on the rates themselves), Arrhenius
(``ln k = ln A − Ea/(R·T)``) and Eyring (``ln(k/T) = ln(k_B/h) + ΔS‡/R − ΔH‡/(R·T)``, transmission coefficient 1).

Must never: open a serial port or a database, print, or read files. It takes arrays; results are ``FitResult``
objects whose parameters carry their units in their names.

Weights: when the standard errors of the rates or rate constants are given, each log value gets weight
``1/(se/value)²`` (the delta method for a logarithm); the scale is still estimated from the residuals
(NIST/statsmodels convention) unless ``absolute_sigma=True``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np

from ..errors import DegenerateData, InputError, ShapeMismatch, TooFewPoints
from .fitting import FitResult, as_vector, check_pairs, jsonable, linear_lstsq, nonlinear_lstsq

__all__ = ["GAS_CONSTANT", "BOLTZMANN", "PLANCK", "SE_RULE", "OrderStudy", "arrhenius", "eyring", "orders"]

SE_RULE = ("SE scaled by the residual scatter (the Birge ratio sqrt(χ²/dof), up or down: NIST/statsmodels "
           "convention); 95 % interval from Student t with n − 2 dof")
"""The one rule for the SE of Ea (and every fit over runs): the arrhenius command and the study report both."""

# CODATA 2018 exact values (SI redefinition).
GAS_CONSTANT = 8.314462618  # J mol⁻¹ K⁻¹
BOLTZMANN = 1.380649e-23  # J K⁻¹
PLANCK = 6.62607015e-34  # J s


def _log_weights(values: np.ndarray, se: Any, what: str) -> np.ndarray | None:
    if se is None:
        return None
    s = as_vector(se, f"{what}_se")
    if s.shape != values.shape:
        raise ShapeMismatch(f"{what}_se has {s.size} values but there are {values.size} {what} values; give one each")
    if not np.all(np.isfinite(s)) or np.any(s <= 0):
        raise InputError(f"every {what}_se must be a positive number; leave the column out to fit unweighted")
    return (values / s) ** 2


def _absolute(result: FitResult) -> None:
    """Rescale a weighted fit's covariance to the given SEs (σ known): cov/s²."""
    s2 = result.residual_sd**2
    if not s2 > 0:
        return
    c = result.cov_matrix / s2
    result.cov = c.tolist()
    result.stderr = {n: float(math.sqrt(c[i, i])) for i, n in enumerate(result.names)}
    result.extra["absolute_sigma"] = True


def _temperature_fit(
    T_K: Any, k: Any, k_se: Any, *, model: str, names: tuple[str, str], absolute_sigma: bool,
    inputs: Mapping[str, Any] | None,
) -> tuple[FitResult, np.ndarray, np.ndarray]:
    T, kv, _, _ = check_pairs(T_K, k, "temperature_K", "k")
    if np.any(T <= 0):
        raise InputError("temperatures must be in kelvin and positive (add 273.15 to °C)")
    if np.any(kv <= 0):
        raise InputError("rate constants must be positive; use the magnitude of a fitted k")
    if np.unique(T).size < 2:
        raise DegenerateData(f"{model} needs runs at two or more different temperatures")
    if T.size < 3:
        raise TooFewPoints(f"{model}: {T.size} runs; need at least 3 temperatures to give standard errors")
    w = _log_weights(kv, k_se, "k")
    if model == "arrhenius":
        y = np.log(kv)
    else:
        y = np.log(kv / T) - math.log(BOLTZMANN / PLANCK)
    rec = dict(inputs or {})
    rec.update(model=model, weighted=w is not None, absolute_sigma=absolute_sigma)
    fit = linear_lstsq(_temperature_design(T, model), y, names, model=model, weights=w, x=T, inputs=rec,
                       curve=lambda temps, beta: _temperature_design(temps, model) @ beta)
    if absolute_sigma and w is not None:
        _absolute(fit)
    return fit, T, kv


def _temperature_design(T: np.ndarray, model: str) -> np.ndarray:
    """Columns of the straight line in 1/T: ln k (Arrhenius) or ln(k/T) − ln(k_B/h) (Eyring) at temperatures T."""
    x = -1.0 / (GAS_CONSTANT * T)
    if model == "arrhenius":
        return np.column_stack([x, np.ones_like(x)])
    return np.column_stack([x, np.full_like(x, 1.0 / GAS_CONSTANT)])


def arrhenius(
    T_K: Any,
    k: Any,
    k_se: Any = None,
    *,
    absolute_sigma: bool = False,
    inputs: Mapping[str, Any] | None = None,
) -> FitResult:
    """Arrhenius fit ``ln k = ln A − Ea/(R·T)``.

    Parameters ``Ea_J_per_mol`` and ``ln_A`` (A in the unit of k); ``extra`` adds ``A`` and its SE
    (``A·SE(ln A)``, delta method), ``Ea_kJ_per_mol`` and the Ea–lnA correlation. ``k_se`` gives weights.
    """
    fit, _, _ = _temperature_fit(
        T_K, k, k_se, model="arrhenius", names=("Ea_J_per_mol", "ln_A"), absolute_sigma=absolute_sigma,
        inputs=inputs,
    )
    a = math.exp(fit.param("ln_A"))
    lo, hi = fit.confint("Ea_J_per_mol")
    fit.extra.update(
        se_rule=(SE_RULE + f" (Birge ratio {fit.residual_sd:.3g})") if not absolute_sigma or k_se is None
        else "SE from the given k_se alone (absolute_sigma; the scatter of the runs not used)",
        Ea_ci95_kJ_per_mol=[lo / 1000.0, hi / 1000.0],
    )
    fit.extra.update(
        A=a, A_se=a * fit.se("ln_A"), Ea_kJ_per_mol=fit.param("Ea_J_per_mol") / 1000.0,
        Ea_se_kJ_per_mol=fit.se("Ea_J_per_mol") / 1000.0, correlation_Ea_lnA=float(fit.correlation()[0, 1]),
    )
    return fit


def eyring(
    T_K: Any,
    k: Any,
    k_se: Any = None,
    *,
    absolute_sigma: bool = False,
    inputs: Mapping[str, Any] | None = None,
) -> FitResult:
    """Eyring fit ``ln(k/T) = ln(k_B/h) + ΔS‡/R − ΔH‡/(R·T)`` (transmission coefficient 1).

    Parameters ``dH_J_per_mol`` and ``dS_J_per_mol_K``. For a first-order k in s⁻¹ ΔS‡ has its usual meaning; for
    higher orders it refers to the standard state of the concentration unit used for k.
    """
    return _temperature_fit(
        T_K, k, k_se, model="eyring", names=("dH_J_per_mol", "dS_J_per_mol_K"), absolute_sigma=absolute_sigma,
        inputs=inputs,
    )[0]


@dataclass
class OrderStudy:
    """Orders of reaction from initial rates.

    Attributes
    ----------
    joint : the power law over all runs; parameters ``ln_k`` and ``order_<name>`` per reactant (``extra["k"]`` and
        ``extra["k_se"]`` give k itself). With ``nonlinear=True`` it is the nonlinear refinement (parameters
        ``k`` and ``order_<name>``) and ``log_linear`` keeps the log-linear fit.
    per_reactant : log rate against log concentration for each reactant, on the runs where every other reactant
        is at one level (parameters ``ln_rate_at_1`` and ``order``); missing when no such runs exist.
    skipped : reactants without a per-reactant fit, with the reason.
    """

    joint: FitResult
    per_reactant: dict[str, FitResult]
    skipped: dict[str, str] = field(default_factory=dict)
    log_linear: FitResult | None = None

    def report(self) -> str:
        """Joint fit, then one line per reactant."""
        lines = ["orders from initial rates", self.joint.report()]
        for name, fit in self.per_reactant.items():
            lines.append(
                f"  {name}: order {fit.param('order'):.4g} ± {fit.se('order'):.2g} from {fit.n} runs "
                f"(others held at one level)"
            )
        for name, why in self.skipped.items():
            lines.append(f"  {name}: no per-reactant fit ({why})")
        return "\n".join(lines)

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON types only."""
        return jsonable(
            {
                "joint": self.joint.to_dict(),
                "log_linear": self.log_linear.to_dict() if self.log_linear is not None else None,
                "per_reactant": {k: v.to_dict() for k, v in self.per_reactant.items()},
                "skipped": self.skipped,
            }
        )


def orders(
    rates: Any,
    concentrations: Mapping[str, Any],
    rate_se: Any = None,
    *,
    nonlinear: bool = False,
    inputs: Mapping[str, Any] | None = None,
) -> OrderStudy:
    """Orders of reaction from the initial rates of several runs.

    Parameters
    ----------
    rates : initial rate of each run (any unit; all of one sign — the magnitude is used and the sign recorded).
    concentrations : reactant name → starting concentration in each run (positive).
    rate_se : standard errors of the rates (optional weights).
    nonlinear : also fit ``rate = k·Π c^n`` on the rates themselves, started from the log-linear fit.
    """
    r = as_vector(rates, "initial_rate")
    if not concentrations:
        raise InputError("give at least one reactant's concentrations (columns named conc_<name>)")
    names = list(concentrations)
    conc = {}
    for name in names:
        c, _, _, _ = check_pairs(concentrations[name], r, f"concentration of {name}", "initial_rate")
        if np.any(c <= 0):
            raise InputError(f"concentrations of {name} must be positive to take logarithms; drop runs without it")
        conc[name] = c
    if not np.all(np.isfinite(r)) or np.any(r == 0):
        raise InputError("every initial rate must be a finite non-zero number")
    sign = np.sign(r)
    if np.unique(sign).size > 1:
        raise InputError("initial rates have mixed signs; give all rates for the same species (fading or growing)")
    mag = np.abs(r)
    w = _log_weights(mag, None if rate_se is None else np.abs(as_vector(rate_se, "rate_se")), "rate")
    k = len(names) + 1
    if r.size <= k:
        raise TooFewPoints(f"{r.size} runs for {k} parameters (ln k and one order per reactant); add runs")
    lnc = np.column_stack([np.log(conc[n]) for n in names])
    X = np.column_stack([np.ones(r.size), lnc])
    pnames = ("ln_k",) + tuple(f"order_{n}" for n in names)
    rec = dict(inputs or {})
    rec.update(reactants=names, rate_sign=int(sign[0]), weighted=w is not None)
    joint = linear_lstsq(X, np.log(mag), pnames, model="power_law_log_linear", weights=w, x=mag, inputs=rec)
    kk = math.exp(joint.param("ln_k"))
    joint.extra.update(k=kk, k_se=kk * joint.se("ln_k"))

    per: dict[str, FitResult] = {}
    skipped: dict[str, str] = {}
    for j, name in enumerate(names):
        others = [i for i in range(len(names)) if i != j]
        if others:
            keys = [tuple(row) for row in lnc[:, others]]
            groups: dict[tuple, list[int]] = {}
            for i, key in enumerate(keys):
                groups.setdefault(key, []).append(i)
            candidates = [g for g in groups.values() if np.unique(lnc[g, j]).size >= 2 and len(g) >= 3]
            if not candidates:
                skipped[name] = "no set of ≥ 3 runs varies it while the others stay at one level"
                continue
            idx = np.array(max(candidates, key=len))
        else:
            idx = np.arange(r.size)
        if np.unique(lnc[idx, j]).size < 2 or idx.size < 3:
            skipped[name] = "fewer than 3 runs or only one level"
            continue
        Xi = np.column_stack([np.ones(idx.size), lnc[idx, j]])
        per[name] = linear_lstsq(
            Xi, np.log(mag[idx]), ("ln_rate_at_1", "order"), model=f"order_{name}",
            weights=None if w is None else w[idx], x=conc[name][idx],
            inputs={"reactant": name, "runs": idx.tolist()},
            curve=lambda c, beta: beta[0] + beta[1] * np.log(c),
        )

    study = OrderStudy(joint=joint, per_reactant=per, skipped=skipped)
    if nonlinear:
        def f(_x: np.ndarray, *p: float) -> np.ndarray:
            return p[0] * np.exp(lnc @ np.asarray(p[1:]))

        def jac(_x: np.ndarray, *p: float) -> np.ndarray:
            base = np.exp(lnc @ np.asarray(p[1:]))
            return np.column_stack([base, (p[0] * base)[:, None] * lnc])

        p0 = [kk] + [joint.param(f"order_{n}") for n in names]
        wr = None if rate_se is None else 1.0 / np.abs(as_vector(rate_se, "rate_se")) ** 2
        nl = nonlinear_lstsq(
            f, mag, mag, p0, ("k",) + pnames[1:], model="power_law_nonlinear", jac=jac, weights=wr, inputs=rec
        )
        study.log_linear, study.joint = joint, nl
    return study

