"""The one way nightcell writes a number for a person: rounded by its uncertainty, with its unit.

Owns: ``measured`` (value ± standard error, unit), ``interval`` (two ends rounded like their standard error),
``quantity`` (a value with no uncertainty), ``activation_energy`` (the one way Ea is printed), and ``superscript``.
Used by the command line, the reports and the demo; ``--json`` keeps full precision and never passes through here.
Must never: compute a result, read files, or print.

Convention (GUM, JCGM 100:2008 §7.2.6, from memory: "it usually suffices to quote the uncertainty to at most two
significant digits", the estimate rounded to be consistent with it; the same as the ``uncertainties`` library's
``.2u`` format, which the tests compare against): the standard error keeps two significant digits and the value is
rounded to the same decimal place. Values from 10⁻³ up to 10⁶ are written plainly; others share one power of ten,
``(1.234 ± 0.051)×10⁻⁷ M``. Without a usable standard error the value keeps four significant digits.

Example::

    measured(0.0198690, 5.54722e-05, "s⁻¹")   # '0.019869 ± 0.000055 s⁻¹'
    measured(100.02147, 0.00035, "g")          # '100.02147 ± 0.00035 g'   (GUM §7.2.2's example)
"""

from __future__ import annotations

import math
from typing import Any

__all__ = ["activation_energy", "interval", "local_time", "measured", "quantity", "superscript"]

_SUPER = str.maketrans("0123456789-+", "⁰¹²³⁴⁵⁶⁷⁸⁹⁻⁺")
_MISSING = "—"


def superscript(n: int) -> str:
    """An integer in superscript digits (``-7`` → ``⁻⁷``)."""
    return str(int(n)).translate(_SUPER)


def _number(value: Any) -> float | None:
    try:
        v = float(value)
    except (TypeError, ValueError):
        return None
    return v if math.isfinite(v) else None


def _with_unit(text: str, unit: str) -> str:
    return f"{text} {unit}" if unit else text


def _plain(v: float) -> bool:
    return v == 0 or 1e-3 <= abs(v) < 1e6


def _last_place(se: float) -> int:
    """The decimal place (power of ten) of the SE's second significant digit, after rounding to two digits."""
    last = math.floor(math.log10(se)) - 1
    if round(se / 10.0**last) >= 100:  # 0.0996 rounds to 0.10: one place coarser
        last += 1
    return last


def measured(value: Any, se: Any, unit: str = "", *, digits: int = 4) -> str:
    """``value ± se unit`` rounded by the standard error (module docstring); "—" for a missing value."""
    v, e = _number(value), _number(se)
    if v is None:
        return _MISSING
    if e is None or e <= 0:
        return quantity(v, unit, digits=digits)
    last = _last_place(e)
    if _plain(v):
        return _with_unit(f"{_at(v, last)} ± {_at(e, last)}", unit)
    power = math.floor(math.log10(abs(v)))
    d = max(0, power - last)
    scale = 10.0**power
    inner = f"({v / scale:.{d}f} ± {e / scale:.{d}f})×10{superscript(power)}"
    return _with_unit(inner, unit)


def interval(low: Any, high: Any, se: Any, unit: str = "", *, digits: int = 4) -> str:
    """``low to high unit``, both ends at the decimal place ``measured`` gives the value with this SE."""
    lo, hi, e = _number(low), _number(high), _number(se)
    if lo is None or hi is None:
        return _MISSING
    if e is None or e <= 0:
        return _with_unit(f"{_sig(lo, digits)} to {_sig(hi, digits)}", unit)
    last = _last_place(e)
    big = max(abs(lo), abs(hi))
    if 1e-3 <= big < 1e6 or big == 0:
        return _with_unit(f"{_at(lo, last)} to {_at(hi, last)}", unit)
    power = math.floor(math.log10(big))
    d = max(0, power - last)
    scale = 10.0**power
    return _with_unit(f"({lo / scale:.{d}f} to {hi / scale:.{d}f})×10{superscript(power)}", unit)


def _at(v: float, last: int) -> str:
    """``v`` rounded to the decimal place 10**last (tens, hundreds... when ``last`` > 0)."""
    if last >= 0:
        return f"{round(v, -last):.0f}"
    return f"{v:.{-last}f}"


def _sig(v: float, digits: int) -> str:
    if _plain(v):
        text = f"{v:.{digits}g}"
        if "e" not in text:
            return text
    power = math.floor(math.log10(abs(v)))
    return f"{v / 10.0**power:.{digits - 1}f}×10{superscript(power)}"


def quantity(value: Any, unit: str = "", *, digits: int = 4) -> str:
    """A value with no uncertainty to ``digits`` significant digits, with its unit; "—" when missing."""
    v = _number(value)
    if v is None:
        return _MISSING
    return _with_unit(_sig(v, digits), unit)


def activation_energy(ea_j_per_mol: Any, se_j_per_mol: Any) -> str:
    """Ea the one way nightcell prints it: kJ mol⁻¹, rounded by its standard error (``Ea = 52.3 ± 1.2 kJ mol⁻¹``)."""
    v, e = _number(ea_j_per_mol), _number(se_j_per_mol)
    return "Ea = " + measured(None if v is None else v / 1000.0, None if e is None else e / 1000.0, "kJ mol⁻¹")


def local_time(moment: Any, *, seconds: bool = True) -> str:
    """A moment (unix seconds, or a ``YYYY-MM-DD HH:MM:SS`` string in UTC as the store's views give it) in the
    computer's own time zone, with the zone named: ``2026-12-01 23:20:59 CET``. Times are stored in UTC; only what a
    person reads is local. "" for a missing moment."""
    import datetime as _dt

    if moment is None or moment == "":
        return ""
    if isinstance(moment, str):
        try:
            when = _dt.datetime.strptime(moment, "%Y-%m-%d %H:%M:%S").replace(tzinfo=_dt.timezone.utc)
        except ValueError:
            return moment
    else:
        v = _number(moment)
        if v is None:
            return ""
        when = _dt.datetime.fromtimestamp(v, _dt.timezone.utc)
    here = when.astimezone()  # the local zone, as the operating system (or TZ) says
    zone = here.tzname() or ""
    if not zone or zone[0] in "+-":  # a zone without an abbreviation: name it by its offset from UTC
        offset = here.utcoffset() or _dt.timedelta(0)
        minutes = int(offset.total_seconds() // 60)
        zone = f"UTC{'+' if minutes >= 0 else '-'}{abs(minutes) // 60:02d}:{abs(minutes) % 60:02d}"
    return here.strftime("%Y-%m-%d %H:%M:%S" if seconds else "%Y-%m-%d %H:%M") + f" {zone}"
