"""Figures, pages and files: what a person reads."""
