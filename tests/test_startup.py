"""Commands load only what they use: ``nightcell --help`` and ``nightcell list runs`` start without scipy,
matplotlib or pandas (each costs a large share of a second; how long start-up takes is measured side by side in
tests/bench/bench_startup.py, not here). Each command runs in a fresh Python, which then lists the modules it loaded.
"""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

HEAVY = {"scipy", "matplotlib", "pandas"}
_PROBE = """
import json, sys
from nightcell.cli import main
try:
    main(sys.argv[1:])
except SystemExit as exc:
    code = exc.code
else:
    code = 0
print(json.dumps({"code": code, "modules": sorted(sys.modules)}), file=sys.stderr)
"""


def _loaded(*args: str) -> set[str]:
    proc = subprocess.run([sys.executable, "-c", _PROBE, *args], capture_output=True, text=True, timeout=120)
    report = json.loads(proc.stderr.strip().splitlines()[-1])
    assert report["code"] in (0, None), proc.stdout + proc.stderr
    return {name.split(".")[0] for name in report["modules"]}


@pytest.fixture
def empty_db(tmp_path):
    from nightcell.store.database import Store

    path = tmp_path / "empty.db"
    Store.open(path).close()
    return path


def test_help_loads_no_scipy_matplotlib_or_pandas():
    loaded = _loaded("--help")
    assert "click" in loaded and "nightcell" in loaded  # the probe really ran the command
    assert not loaded & HEAVY, sorted(loaded & HEAVY)


def test_list_runs_loads_no_scipy_matplotlib_or_pandas(empty_db):
    loaded = _loaded("list", "runs", "--db", str(empty_db))
    assert "sqlite3" in loaded  # it opened the database
    assert not loaded & HEAVY, sorted(loaded & HEAVY)


def test_pandas_still_imports_after_the_store_is_loaded():
    # The store hides pandas from sqlite-utils for that one import only (store/_sqlite.py).
    code = ("import importlib.util, sys\nimport nightcell.store.database\n"
            "assert 'pandas' not in sys.modules\n"
            "if importlib.util.find_spec('pandas') is not None:\n    import pandas\n    print(pandas.__name__)\n"
            "else:\n    print('pandas')")
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0 and proc.stdout.strip() == "pandas", proc.stderr
