"""Formats both sides obey; shipped inside the host package as data."""
