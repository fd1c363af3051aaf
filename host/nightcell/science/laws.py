"""The rate laws nightcell fits to one run, by name: the one list that the kinetics, the commands and the reports use.

Kept apart from ``kinetics.py`` (which needs scipy) so that a command can offer the names without loading scipy.
"""

from __future__ import annotations

__all__ = ["MODELS"]

MODELS: tuple[str, ...] = ("zero_order", "first_order", "second_order", "first_order_plateau")
"""Integrated zero-, first- and second-order laws, and the first-order approach to a plateau (offset free)."""
