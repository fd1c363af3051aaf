"""Packaging: what `pip install .` ships is exactly the source tree's own files.

Build outputs (``build/``, ``*.egg-info``) are ignored and must never be tracked: a tracked ``build/lib`` is reused by
setuptools on every build, so a stale file there (once ``nightcell_fw/x.py``) ships in the wheel and ``deploy`` copies
it to a board. The wheel is built from a copy of the checkout's own files (tracked, or new and not ignored), the way
a fresh clone would build it.
"""

from __future__ import annotations

import shutil
import subprocess
import sys
import tomllib
import zipfile
from pathlib import Path

import pytest

import nightcell

ROOT = Path(__file__).resolve().parent.parent
HOST = ROOT / "host" / "nightcell"
# Where each folder of the installed package comes from in the tree (pyproject's package-dir).
SHIPPED_FROM = {"nightcell/firmware/": "firmware/", "nightcell/schema/": "schema/", "nightcell/": "host/nightcell/"}


def _git(*args: str) -> list[str]:
    if shutil.which("git") is None or not (ROOT / ".git").exists():
        pytest.skip("not a git checkout (the tree's file list comes from git)")
    out = subprocess.run(["git", *args], cwd=ROOT, capture_output=True, text=True, check=True).stdout
    return [line for line in out.split("\0" if "-z" in args else "\n") if line]


def _tree_files() -> set[str]:
    """The checkout's own files: tracked, plus new ones that are not ignored (and not deleted)."""
    return {f for f in _git("ls-files", "-co", "--exclude-standard", "-z") if (ROOT / f).is_file()}


def _source_of(installed: str) -> str:
    for prefix, origin in SHIPPED_FROM.items():
        if installed.startswith(prefix):
            return origin + installed[len(prefix):]
    raise AssertionError(f"{installed} is outside the nightcell package")


def test_no_tracked_file_is_ignored():
    # Tracked build outputs would be shipped by the next build and dirtied by every editable install.
    assert _git("ls-files", "-ci", "--exclude-standard") == []


def test_pyproject_lists_every_room_of_the_host_package():
    config = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))["tool"]["setuptools"]
    rooms = {"nightcell"} | {"nightcell." + ".".join(p.parent.relative_to(HOST).parts)
                             for p in HOST.rglob("__init__.py") if p.parent != HOST}
    listed = set(config["packages"])
    assert rooms <= listed, f"missing from pyproject's packages: {sorted(rooms - listed)}"
    for package, patterns in config.get("package-data", {}).items():
        folder = ROOT / config["package-dir"].get(package, "host/" + package.replace(".", "/"))
        for pattern in patterns:
            assert list(folder.glob(pattern)), f"package data {package}: {pattern} matches nothing in {folder}"


def test_the_installed_package_holds_only_files_from_the_tree():
    # Editable installs point into the tree; a plain `pip install .` (as CI runs) copies what setuptools built.
    tree = _tree_files()
    installed_root = Path(nightcell.__file__).resolve().parent
    stray = []
    for path in installed_root.rglob("*"):
        if path.is_dir() or "__pycache__" in path.parts or path.suffix == ".pyc":
            continue
        rel = "nightcell/" + path.relative_to(installed_root).as_posix()
        if _source_of(rel) not in tree:
            stray.append(rel)
    assert not stray, f"installed files that are not in the tree: {stray}"


@pytest.mark.slow
def test_a_wheel_built_from_the_tree_ships_only_the_tree_and_every_module(tmp_path):
    tree = _tree_files()
    copy = tmp_path / "checkout"
    for rel in tree:
        (copy / rel).parent.mkdir(parents=True, exist_ok=True)
        shutil.copy2(ROOT / rel, copy / rel)
    out = tmp_path / "wheel"
    built = subprocess.run([sys.executable, "-m", "pip", "wheel", "--no-deps", "-q", "-w", str(out), str(copy)],
                           capture_output=True, text=True, timeout=600)
    assert built.returncode == 0, built.stderr[-2000:]
    (wheel,) = out.glob("nightcell-*.whl")
    with zipfile.ZipFile(wheel) as zf:
        shipped = {n for n in zf.namelist() if not n.split("/")[0].endswith(".dist-info")}
    stray = sorted(n for n in shipped if _source_of(n) not in tree)
    assert not stray, f"the wheel ships files that are not in the tree: {stray}"
    modules = {"nightcell/" + Path(f).relative_to("host/nightcell").as_posix()
               for f in tree if f.startswith("host/nightcell/") and f.endswith(".py")}
    firmware = {"nightcell/" + f for f in tree if f.startswith("firmware/") and f.endswith(".py")}
    missing = sorted((modules | firmware) - shipped)
    assert not missing, f"the wheel lacks modules of the tree: {missing}"
