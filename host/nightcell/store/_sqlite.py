"""sqlite-utils, loaded without pandas.

sqlite-utils imports pandas when it is installed (about a second) only to map ``pandas.Timestamp`` columns to TEXT;
the store never writes pandas objects, so every command would pay that second for nothing. When neither is loaded
yet, pandas is hidden for the one import of sqlite-utils (``sys.modules[name] = None`` makes an import raise
ImportError) and shown again at once, so a user can still import pandas afterwards. When pandas is already loaded
(a notebook), sqlite-utils is imported as usual.
"""

from __future__ import annotations

import sys
from types import ModuleType

__all__ = ["sqlite_utils"]


def _load() -> ModuleType:
    if "sqlite_utils" not in sys.modules and "pandas" not in sys.modules:
        sys.modules["pandas"] = None  # type: ignore[assignment]
        try:
            import sqlite_utils as module
        finally:
            del sys.modules["pandas"]
        return module
    import sqlite_utils as module

    return module


sqlite_utils = _load()
