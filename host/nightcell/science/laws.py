"""The rate laws nightcell fits to one run, by name: the one list that the kinetics, the commands and the reports use.

Kept apart from ``kinetics.py`` (which needs scipy) so that a command can offer the names without loading scipy.
"""

from __future__ import annotations

__all__ = ["ALL_MODELS", "MODELS"]

MODELS: tuple[str, ...] = ("zero_order", "first_order", "second_order", "first_order_plateau")
"""Integrated zero-, first- and second-order laws, and the first-order approach to a plateau (offset free)."""
ALL_MODELS: tuple[str, ...] = MODELS + ("first_order_rise",)
"""Every law ``kinetics.fit_model`` knows: ``MODELS`` (the candidates ranked by default) and the rise to a final
value, A = A0 + A_rise·(1 − e^(−kt)), fitted only when named (with A0 free it is the plateau law written another
way)."""
