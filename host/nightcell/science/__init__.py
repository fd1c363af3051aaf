"""The science: optics, boot clocks, calibration, kinetics, several-run studies and the one fit-result shape.

numpy and scipy only: no files, no database, no ports, no figures.
"""
