"""Harnesses and campaigns shared by the tests and the benchmarks (never shipped, never imported by nightcell)."""
