"""The rate laws' names: one identifier each (for ``--model``, JSON keys and stored results) and its title in words.

Owns: the identifiers, their titles and parameter meanings, the unit of each law's rate constant, and the old names
that still parse for one version (with a deprecation message). Must never: fit, print or read files.

The identifiers say what the law is in the trade's words: the order, and where the absorbance goes — to zero (or to a
known end absorbance given as ``a_end``, the absorbance left when the followed species is used up), or towards a
final absorbance the fit finds. Kept apart from ``kinetics.py`` (which needs scipy) so that a command can offer the
names without loading scipy.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

__all__ = ["ALL_MODELS", "LAWS", "MODELS", "OLD_NAMES", "Law", "describe", "resolve", "title"]


@dataclass(frozen=True)
class Law:
    """A rate law as a person reads it: its title, what each parameter means, and its rate constant's unit."""

    title: str
    equation: str
    parameters: dict[str, str]
    rate_parameter: str  # the parameter a chemist reports as the law's rate ("k", or "rate" for zero order)
    rate_unit: str


_A0 = "starting absorbance"
LAWS: dict[str, Law] = {
    "zero_order": Law("zero order", "A = A0 + rate·t",
                      {"A0": _A0, "rate": "rate of change dA/dt"}, "rate", "absorbance s⁻¹"),
    "first_order_to_zero": Law("first order to zero",
                               "A = A_end + (A0 − A_end)·e^(−k·t)",
                               {"A0": _A0, "k": "rate constant"}, "k", "s⁻¹"),
    "second_order": Law("second order to zero",
                        "A = A_end + D0/(1 + k·|D0|·t), D0 = A0 − A_end",
                        {"A0": _A0, "k": "rate constant"}, "k", "(absorbance·s)⁻¹"),
    "first_order_to_final": Law("first order, towards a final absorbance",
                                "A = A∞ + (A0 − A∞)·e^(−k·t)",
                                {"A0": _A0, "A_inf": "final absorbance A∞", "k": "rate constant"}, "k", "s⁻¹"),
    "first_order_rise_to_final": Law("first order, rising to a final absorbance",
                                     "A = A0 + A_rise·(1 − e^(−k·t))",
                                     {"A0": "absorbance at t = 0", "A_rise": "rise to the final absorbance",
                                      "k": "rate constant"}, "k", "s⁻¹"),
}

MODELS: tuple[str, ...] = ("zero_order", "first_order_to_zero", "second_order", "first_order_to_final")
"""The candidates ranked by default: integrated zero-, first- and second-order laws, and the first-order approach
towards a final absorbance (offset free)."""
ALL_MODELS: tuple[str, ...] = MODELS + ("first_order_rise_to_final",)
"""Every law ``kinetics.fit_model`` knows: ``MODELS`` and the rise to a final value, A = A0 + A_rise·(1 − e^(−kt)),
fitted only when named (with A0 free it is ``first_order_to_final`` written another way)."""

#: Names of version 0.1, and the rise law's working name while it was developed, accepted (with a deprecation message)
#: until the next version, mapped to the identifiers above. ``tests/test_laws.py`` checks every old name still resolves.
OLD_NAMES: dict[str, str] = {
    "first_order_plateau": "first_order_to_final",
    "first_order": "first_order_to_zero",
    "first_order_rise": "first_order_rise_to_final",
}


def deprecation(old: str) -> str:
    """The message given when an old name is used."""
    return (f"the rate-law name {old!r} is deprecated and will stop working in the next version; "
            f"use {OLD_NAMES[old]!r}")


def resolve(name: str, *, warn: bool = True) -> str:
    """The current identifier for ``name`` (unchanged if already current); an old name warns ``DeprecationWarning``."""
    if name in OLD_NAMES:
        if warn:
            warnings.warn(deprecation(name), DeprecationWarning, stacklevel=3)
        return OLD_NAMES[name]
    return name


def title(name: str) -> str:
    """The law's title in words ("first order, towards a final absorbance"); the name itself if it is not a law."""
    law = LAWS.get(OLD_NAMES.get(name, name))
    return law.title if law else name.replace("_", " ")


def describe(name: str) -> Law | None:
    """The ``Law`` for an identifier (or an old name), None for anything else (e.g. ``initial_rate``)."""
    return LAWS.get(OLD_NAMES.get(name, name))
