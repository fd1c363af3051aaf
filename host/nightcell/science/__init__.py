"""Science room: optics, timeline, calibration, kinetics, studies and fitting (numpy/scipy only, no I/O)."""
