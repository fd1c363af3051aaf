"""Counts → transmittance and absorbance, with a flag on every reading that cannot be trusted.

Owns: the photometric equation ``A = −log10((I − I_dark)/(I0 − I0_dark))`` against a blank, bit flags for
non-positive signal, saturation, dark drift and readings beyond the stray-light ceiling, the noise of A propagated
from the scatter of the counts, and the stray-light relations ``A_obs = −log10((T + s)/(1 + s))``.

Must never: open a serial port or a database, print, or raise for one bad reading (it is flagged and its absorbance
is NaN). It raises only when the whole computation is impossible (arrays that do not pair up, a missing or dark
blank), with a message saying what to do. Counts are the mean ADC counts per read (floats).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import InputError, NonFiniteInput, ShapeMismatch
from .fitting import jsonable

__all__ = [
    "FLAG_NONPOSITIVE",
    "FLAG_SATURATED",
    "FLAG_DARK_DRIFT",
    "FLAG_BEYOND_STRAY",
    "FLAG_MISSING",
    "FLAG_BELOW_BLANK",
    "FLAG_NAMES",
    "NoiseEstimate",
    "OpticsResult",
    "absorbance",
    "absorbance_noise",
    "apparent_absorbance",
    "correct_stray",
    "flag_names",
    "stray_ceiling",
    "blank_problems",
    "stray_fraction_from_opaque",
]

FLAG_NONPOSITIVE = 1  #: light − dark ≤ 0: no absorbance can be computed (A is NaN).
FLAG_SATURATED = 2  #: the light reading (or the blank's) is at the top of the ADC range.
FLAG_DARK_DRIFT = 4  #: the dark reading moved from the blank's dark by more than ``dark_drift_limit`` counts.
FLAG_BEYOND_STRAY = 8  #: stray light is at least half of the detected light (true A ≥ −log10 s); A reads low.
FLAG_MISSING = 16  #: a count is NaN or infinite (a missing read); A is NaN.
FLAG_BELOW_BLANK = 32  #: more light than the blank beyond its noise (A below −max(5 SD, 0.005)): wrong blank?
NOISE_COUNTS = 3.0
"""Count noise (SD, counts per read) assumed when no scatter was measured: about 2–3 LSB for a 12-bit ADC with
~8.7 effective bits [memory, RP2040 datasheet errata and MicroPython port notes]."""

FLAG_NAMES = {
    FLAG_NONPOSITIVE: "nonpositive",
    FLAG_SATURATED: "saturated",
    FLAG_DARK_DRIFT: "dark_drift",
    FLAG_BEYOND_STRAY: "beyond_stray",
    FLAG_MISSING: "missing",
    FLAG_BELOW_BLANK: "below_blank",
}

_LN10 = math.log(10.0)


def flag_names(flags: int) -> list[str]:
    """Names of the bits set in one ``flags`` value, e.g. ``['saturated', 'dark_drift']``."""
    return [name for bit, name in FLAG_NAMES.items() if int(flags) & bit]


@dataclass
class OpticsResult:
    """Transmittance, absorbance and flags for a series of readings against one blank.

    Attributes
    ----------
    transmittance, absorbance : float arrays; NaN where the reading is flagged nonpositive or missing.
    flags : int array of bit flags (``FLAG_*``); 0 means the reading is clean.
    signal : light − dark for each reading (counts).
    reference : blank light − blank dark (counts).
    stray : stray-light fraction used for the ceiling flag.
    ceiling : the stray-light ceiling −log10(s/(1+s)) (inf when s = 0).
    message : notes that concern every reading (e.g. a saturated blank).
    """

    transmittance: np.ndarray
    absorbance: np.ndarray
    flags: np.ndarray
    signal: np.ndarray
    reference: float
    stray: float
    ceiling: float
    message: str = ""

    @property
    def ok(self) -> np.ndarray:
        """Boolean array, True where no flag is set."""
        return self.flags == 0

    @property
    def weights(self) -> np.ndarray:
        """Relative weights 1/var(A) for fits when the count noise is about constant: var(A) ∝ 1/signal², so the
        weight is T² (0 where A is NaN, to be left out with ``mask``)."""
        return np.where(np.isfinite(self.transmittance), np.nan_to_num(self.transmittance) ** 2, 0.0)

    @property
    def mask(self) -> np.ndarray:
        """Boolean array, True where a flag is set — pass it as ``mask=`` to the fitting functions."""
        return self.flags != 0

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON types only (NaN becomes ``None``)."""
        return jsonable(
            {
                "transmittance": self.transmittance,
                "absorbance": self.absorbance,
                "flags": self.flags,
                "reference": self.reference,
                "stray": self.stray,
                "ceiling": self.ceiling,
                "message": self.message,
            }
        )


def _blank_value(value: Any, what: str) -> float:
    try:
        arr = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise InputError(f"{what} must be a number of counts; re-take the blank") from None
    if arr.size != 1:
        raise ShapeMismatch(f"{what} must be one number (the blank's mean counts), got {arr.size} values")
    v = float(arr.reshape(-1)[0])
    if not math.isfinite(v):
        raise NonFiniteInput(f"{what} is {v}; the blank is missing — record a blank before computing absorbance")
    return v


def _check_stray(s: float) -> float:
    s = float(s)
    if not (0.0 <= s < 1.0) or not math.isfinite(s):
        raise InputError(f"stray-light fraction {s!r} must lie in [0, 1), e.g. 0.001 for 0.1 % stray light")
    return s


def stray_ceiling(s: float) -> float:
    """Highest absorbance an instrument with stray-light fraction ``s`` can read: ``−log10(s/(1+s))`` (inf for 0)."""
    s = _check_stray(s)
    return math.inf if s == 0.0 else -math.log10(s / (1.0 + s))


def apparent_absorbance(true_absorbance: Any, s: float) -> np.ndarray | float:
    """Absorbance read with stray-light fraction ``s``: ``A_obs = −log10((T + s)/(1 + s))`` with ``T = 10^−A``."""
    s = _check_stray(s)
    a = np.asarray(true_absorbance, dtype=float)
    out = -np.log10((10.0 ** (-a) + s) / (1.0 + s))
    return float(out) if out.ndim == 0 else out


def correct_stray(observed_absorbance: Any, s: float) -> np.ndarray | float:
    """Invert :func:`apparent_absorbance`: ``T = T_obs·(1 + s) − s``; NaN at or beyond the ceiling."""
    s = _check_stray(s)
    a = np.asarray(observed_absorbance, dtype=float)
    t = 10.0 ** (-a) * (1.0 + s) - s
    with np.errstate(invalid="ignore", divide="ignore"):
        out = np.where(t > 0, -np.log10(np.where(t > 0, t, 1.0)), np.nan)
    return float(out) if out.ndim == 0 else out


def stray_fraction_from_opaque(opaque_light: float, opaque_dark: float, blank_light: float, blank_dark: float) -> float:
    """Stray-light fraction from a reading through an opaque filter (true T = 0): ``s = T_obs/(1 − T_obs)``.

    Negative apparent transmittance (noise around zero) gives 0.
    """
    reference = _blank_value(blank_light, "blank_light") - _blank_value(blank_dark, "blank_dark")
    if reference <= 0:
        raise InputError("blank light is not above blank dark; check the LED and re-take the blank")
    t_obs = (_blank_value(opaque_light, "opaque_light") - _blank_value(opaque_dark, "opaque_dark")) / reference
    if t_obs >= 1.0:
        raise InputError("the opaque reading is as bright as the blank; is the opaque filter in the light path?")
    return max(0.0, t_obs / (1.0 - t_obs))


def absorbance(
    light: Any,
    dark: Any,
    blank_light: float,
    blank_dark: float,
    *,
    full_scale: float = 4095,
    saturation_fraction: float = 0.995,
    stray: float = 0.0,
    dark_drift_limit: float | None = None,
    noise_counts: float = NOISE_COUNTS,
) -> OpticsResult:
    """Absorbance of each reading against a blank: ``A = −log10((light − dark)/(blank_light − blank_dark))``.

    Parameters
    ----------
    light, dark : mean counts per read with the LED on and off, one value per reading (same shape).
    blank_light, blank_dark : the blank's mean counts (one number each).
    full_scale : the ADC's top count (4095 for 12 bits).
    saturation_fraction : a light reading at or above ``saturation_fraction·full_scale`` is flagged saturated.
    stray : stray-light fraction s; readings where stray is at least half of the detected light
        (A_obs ≥ ceiling − log10 2, i.e. true A ≥ −log10 s) are flagged. A is reported as read, not corrected
        (see :func:`correct_stray`).
    dark_drift_limit : flag readings whose dark differs from the blank's dark by more than this many counts.
    noise_counts : SD of one light or dark value in counts (``NOISE_COUNTS`` by default); readings more than
        max(5 SD of A at T = 1, 0.005) below zero absorbance are flagged ``below_blank``.

    Returns
    -------
    OpticsResult — flagged readings keep their value where one exists; NaN only where none can be computed.
    """
    light_a = np.atleast_1d(np.asarray(light, dtype=float))
    dark_a = np.atleast_1d(np.asarray(dark, dtype=float))
    if light_a.shape != dark_a.shape:
        raise ShapeMismatch(
            f"light has {light_a.size} readings but dark has {dark_a.size}; give one dark per light reading"
        )
    b_light = _blank_value(blank_light, "blank_light")
    b_dark = _blank_value(blank_dark, "blank_dark")
    reference = b_light - b_dark
    if reference <= 0:
        raise InputError(
            f"blank light ({b_light:g}) is not above blank dark ({b_dark:g}); check that the LED is on and the "
            "blank cuvette is in place, then re-take the blank"
        )
    s = _check_stray(stray)
    ceiling = stray_ceiling(s)
    flags = np.zeros(light_a.shape, dtype=np.int64)
    missing = ~(np.isfinite(light_a) & np.isfinite(dark_a))
    flags[missing] |= FLAG_MISSING
    signal = light_a - dark_a
    with np.errstate(invalid="ignore"):
        nonpositive = ~missing & ~(signal > 0)
    flags[nonpositive] |= FLAG_NONPOSITIVE
    limit = saturation_fraction * full_scale
    message = ""
    with np.errstate(invalid="ignore"):
        flags[light_a >= limit] |= FLAG_SATURATED
        if b_light >= limit:
            flags |= FLAG_SATURATED
            message = "the blank is saturated: lower the LED drive or gain and re-take the blank"
        if dark_drift_limit is not None:
            flags[np.abs(dark_a - b_dark) > dark_drift_limit] |= FLAG_DARK_DRIFT
    usable = signal > 0
    transmittance = np.where(usable, signal / reference, np.nan)
    a = np.full(light_a.shape, np.nan)
    a[usable] = -np.log10(transmittance[usable])
    if s > 0:
        with np.errstate(invalid="ignore"):
            flags[usable & (a >= ceiling - math.log10(2.0))] |= FLAG_BEYOND_STRAY
    # A at T = 1 scatters by (1/ln 10)·sqrt(var S/S² + var R/R²) with var = 2·noise² (light and dark each)
    below = max(5.0 * math.sqrt(4.0) * noise_counts / (math.log(10.0) * reference), 0.005)
    with np.errstate(invalid="ignore"):
        flags[usable & (a < -below)] |= FLAG_BELOW_BLANK
    return OpticsResult(
        transmittance=transmittance,
        absorbance=a,
        flags=flags,
        signal=signal,
        reference=reference,
        stray=s,
        ceiling=ceiling,
        message=message,
    )


@dataclass
class NoiseEstimate:
    """Absorbance of a reading and its standard deviation propagated from the scatter of the counts.

    ``sd`` includes the blank's own scatter; ``sd_reading`` only the reading's (the blank's share is common to
    every reading against that blank, so it shifts them together rather than scattering them).
    """

    absorbance: np.ndarray
    sd: np.ndarray
    sd_reading: np.ndarray


def _mean_and_var(samples: Any, what: str) -> tuple[np.ndarray, np.ndarray]:
    arr = np.asarray(samples, dtype=float)
    if arr.ndim == 1:
        arr = arr[None, :]
    if arr.ndim != 2 or arr.shape[-1] < 2:
        raise ShapeMismatch(f"{what} must hold at least 2 individual reads per reading (last axis)")
    if not np.all(np.isfinite(arr)):
        raise NonFiniteInput(f"{what} holds NaN or infinite counts; drop the missing reads first")
    return arr.mean(axis=-1), arr.var(axis=-1, ddof=1) / arr.shape[-1]


def absorbance_noise(
    light_samples: Any,
    dark_samples: Any,
    blank_light_samples: Any,
    blank_dark_samples: Any,
) -> NoiseEstimate:
    """Standard deviation of A from the scatter of the individual reads behind each mean.

    Each argument holds the individual reads (counts) along its last axis: 1-D for one reading, 2-D
    (readings × reads) for several; the blank arguments are 1-D. First-order propagation:
    ``sd(A) = (1/ln 10)·sqrt(var(S)/S² + var(R)/R²)`` where ``S = mean(light) − mean(dark)``,
    ``R`` the same for the blank, and each ``var`` the variance of a mean (``SD²/reads``).
    """
    light_m, light_v = _mean_and_var(light_samples, "light_samples")
    dark_m, dark_v = _mean_and_var(dark_samples, "dark_samples")
    if light_m.shape != dark_m.shape:
        raise ShapeMismatch("light_samples and dark_samples must hold the same number of readings")
    bl_m, bl_v = _mean_and_var(blank_light_samples, "blank_light_samples")
    bd_m, bd_v = _mean_and_var(blank_dark_samples, "blank_dark_samples")
    if bl_m.size != 1 or bd_m.size != 1:
        raise ShapeMismatch("the blank samples must be one 1-D list of reads each")
    reference = float(bl_m[0] - bd_m[0])
    if reference <= 0:
        raise InputError("blank light is not above blank dark; check the LED and re-take the blank")
    signal = light_m - dark_m
    var_signal = light_v + dark_v
    var_reference = float(bl_v[0] + bd_v[0])
    with np.errstate(invalid="ignore", divide="ignore"):
        a = np.where(signal > 0, -np.log10(np.where(signal > 0, signal, 1.0) / reference), np.nan)
        rel_reading = var_signal / signal**2
        sd_reading = np.where(signal > 0, np.sqrt(rel_reading) / _LN10, np.nan)
        sd = np.where(signal > 0, np.sqrt(rel_reading + var_reference / reference**2) / _LN10, np.nan)
    return NoiseEstimate(absorbance=a, sd=sd, sd_reading=sd_reading)


BLANK_NOISE_SDS = 5.0
"""A blank whose light − dark is within this many SDs of the dark noise (of a difference: √2·noise) is blocked."""
BLANK_FAR_BELOW = 0.1
"""A blank whose signal is below this fraction of the median of the board's earlier blanks (A > 1 against them)."""


def blank_problems(light: float, dark: float, earlier_signals: Any = (), *,
                   noise_counts: float = NOISE_COUNTS) -> list[str]:
    """Why a blank (mean counts per read) looks wrong, or ``[]``: light within ``BLANK_NOISE_SDS`` dark-noise SDs
    of its dark (the light path blocked), or a signal far below the board's earlier blanks (``earlier_signals``:
    their light − dark). Common practice: a blank is the brightest reading of a session."""
    problems = []
    sd = math.sqrt(2.0) * noise_counts
    signal = float(light) - float(dark)
    if signal <= BLANK_NOISE_SDS * sd:
        problems.append(f"light {light:.1f} vs dark {dark:.1f} counts per read: within {BLANK_NOISE_SDS:g} "
                        f"dark-noise SDs ({sd:.2g} counts) of its dark, as if the light path were blocked")
    earlier = np.asarray(list(earlier_signals), dtype=float)
    earlier = earlier[np.isfinite(earlier) & (earlier > 0)]
    if earlier.size and signal < BLANK_FAR_BELOW * float(np.median(earlier)):
        problems.append(f"signal {signal:.1f} counts per read, far below the {float(np.median(earlier)):.1f} of this "
                        f"board's {earlier.size} earlier blank(s) (less than {BLANK_FAR_BELOW:g} of them)")
    return problems
