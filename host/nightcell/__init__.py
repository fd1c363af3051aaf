"""nightcell host package: sync, store, analysis and reports for the nightcell colorimeter logger.

The names below are the public API, for a notebook or a script without the command line. Each loads its room only
when first used, so ``import nightcell`` stays quick and loads neither scipy nor matplotlib::

    import nightcell as nc

    cal = nc.fit_calibration([0, 2, 4, 6, 8], [0.002, 0.151, 0.301, 0.452, 0.600])
    unknown = cal.predict(0.37)                    # concentration with its standard error and interval
    with nc.Store.open("class.db") as store:       # a database `nightcell sync` filled
        for run in store.runs():
            analysis = nc.analyse_run(store, run)  # blank, clock, flags, every rate law, best by AIC
            print(run.key, analysis.best, analysis.fits[analysis.best].values)

DEVELOPERS.md ("Using nightcell from Python") lists what each name does.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

__version__ = "0.1.0"

# name → the module that defines it (loaded on first use)
_API = {
    # the store and getting data into it
    "Store": "nightcell.store.database",
    "Run": "nightcell.store.database",
    "Board": "nightcell.wire.link",
    "sync_board": "nightcell.store.sync",
    "sync_ports": "nightcell.store.sync",
    "merge_database": "nightcell.store.merge",
    # analyse stored runs
    "analyse_run": "nightcell.tasks.analyse",
    "calibrate_from_store": "nightcell.tasks.analyse",
    "analyse_study": "nightcell.tasks.analyse",
    "set_run_condition": "nightcell.tasks.analyse",
    "run_conditions": "nightcell.tasks.analyse",
    "run_report": "nightcell.tasks.export",
    "study_report": "nightcell.tasks.export",
    # the science on plain arrays
    "absorbance": "nightcell.science.optics",
    "fit_calibration": "nightcell.science.calibration",
    "fit_model": "nightcell.science.kinetics",
    "fit_all": "nightcell.science.kinetics",
    "initial_rate": "nightcell.science.kinetics",
    "MODELS": "nightcell.science.laws",
    "orders": "nightcell.science.study",
    "arrhenius": "nightcell.science.study",
    "eyring": "nightcell.science.study",
    "FitResult": "nightcell.science.fitting",
}

__all__ = ["__version__", *_API]

if TYPE_CHECKING:  # for type checkers and editors; at run time each name is loaded by __getattr__
    from .science.calibration import fit_calibration
    from .science.fitting import FitResult
    from .science.kinetics import fit_all, fit_model, initial_rate
    from .science.laws import MODELS
    from .science.optics import absorbance
    from .science.study import arrhenius, eyring, orders
    from .store.database import Run, Store
    from .store.merge import merge_database
    from .store.sync import sync_board, sync_ports
    from .tasks.analyse import analyse_run, analyse_study, calibrate_from_store, run_conditions, set_run_condition
    from .tasks.export import run_report, study_report
    from .wire.link import Board


def __getattr__(name: str) -> Any:
    try:
        module = _API[name]
    except KeyError:
        raise AttributeError(f"module 'nightcell' has no attribute {name!r}") from None
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(__all__) | {k for k in globals() if k.startswith("__")})
