"""The public API (``nightcell.__all__``): every name resolves, ``import nightcell`` stays light, and the example in
DEVELOPERS.md ("Using nightcell from Python") runs as printed.
"""

from __future__ import annotations

import json
import re
import subprocess
import sys
from pathlib import Path

import nightcell
from test_bad_input import make_db

ROOT = Path(__file__).resolve().parent.parent


def test_every_public_name_resolves_and_is_listed():
    assert nightcell.__all__[0] == "__version__" and len(set(nightcell.__all__)) == len(nightcell.__all__)
    for name in nightcell.__all__:
        assert getattr(nightcell, name) is not None, name
    assert set(nightcell.__all__) <= set(dir(nightcell))
    assert nightcell.Store.__module__ == "nightcell.store.database"
    try:
        nightcell.no_such_name
    except AttributeError as exc:
        assert "no_such_name" in str(exc)
    else:
        raise AssertionError("an unknown name must raise AttributeError")


def test_import_nightcell_loads_no_scipy_or_matplotlib():
    code = "import json, sys, nightcell; print(json.dumps(sorted(sys.modules)))"
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120, check=True)
    loaded = {m.split(".")[0] for m in json.loads(proc.stdout)}
    assert "nightcell" in loaded and not loaded & {"scipy", "matplotlib", "pandas", "numpy"}


def test_the_developers_example_runs(tmp_path):
    text = (ROOT / "DEVELOPERS.md").read_text(encoding="utf-8")
    example = re.search(r"<!-- api-example -->\n```python\n(.*?)```\n<!-- /api-example -->", text, re.S).group(1)
    make_db(tmp_path / "class.db")  # one run of a fading (k = 0.02 s⁻¹, the bad-input table's own journal)
    proc = subprocess.run([sys.executable, "-c", example], capture_output=True, text=True, timeout=300, cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    lines = proc.stdout.splitlines()
    # the calibration's unknown: 0.37 on a slope of about 0.075 per µM
    assert lines[0].startswith("unknown: 4.9") and "µM" in lines[0]
    assert any(line.startswith("model: first_order_to_final") for line in lines)
    assert re.match(r"5eba000000000007:1:9 first_order_to_final k = 0\.02 ± \S+ s⁻¹", lines[-1]), lines[-1]
