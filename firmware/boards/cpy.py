"""Lets the firmware run in CPython (the demo where no MicroPython interpreter is installed): a stand-in
``micropython`` module whose ``const`` returns its argument. Time comes from the sim board's own clock.

Usage (first thing in ``sim_main.py`` under CPython)::

    import boards.cpy
"""

import sys

if "micropython" not in sys.modules:
    import types

    _m = types.ModuleType("micropython")
    _m.const = lambda x: x
    sys.modules["micropython"] = _m
