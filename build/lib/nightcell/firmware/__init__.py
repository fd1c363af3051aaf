"""nightcell firmware (MicroPython); shipped inside the host package as data."""
