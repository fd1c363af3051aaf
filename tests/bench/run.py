"""Every benchmark and campaign in one command: one line per figure, ``name: value (goal …)``.

    python tests/bench/run.py            # the full run (tens of minutes on a shared 2-core machine)
    python tests/bench/run.py --quick    # the CI-sized run (the default pytest run executes it)
    python tests/bench/run.py --json     # a machine-readable table instead of lines
    python tests/bench/run.py --only nist --only demo   # some modules only (name without ``bench_``)

Modules are found at run time: every ``tests/bench/bench_*.py`` with ``run(quick: bool) -> list[dict]`` returning
rows ``{name, value, goal, ok}``; a timing ratio adds ``rounds`` (≥ 5 interleaved rounds, its value their
median) and ``spread`` ([smallest, largest] per-round ratio), printed beside it. A module without ``run``, one
that raises, or a row of the wrong shape becomes a
row of its own with ``ok`` false, so nothing is lost silently. A module that only gathers others (it lists them in
``MODULES``) is skipped when all of those are found on their own, so no figure is measured twice. Modules run one
after another in this process; each compares what it compares side by side within its own run, so the ratios are
measured on the same machine at the same moment.

After the modules, every figure the project promises (``FIGURES``) must have printed at least one row; a figure no
module printed is listed as ``missing`` (not ok). With ``--only`` that check is left out. The exit status is 0 when
every row is ok, 1 otherwise, 2 on a bad option.
"""

from __future__ import annotations

import argparse
import importlib.util
import json
import math
import re
import sys
import time
import traceback
from pathlib import Path
from typing import Any

HERE = Path(__file__).resolve().parent
MIN_ROUNDS = 5  # a timing ratio is the median of at least this many interleaved rounds
TESTS = HERE.parent

# The figures of the project's promise, and how to recognise a row that measures each (a regular expression over
# row names, case-insensitive). A figure with no row is reported as missing.
FIGURES: dict[str, str] = {
    "firmware bytes per sample": r"bytes per sample",
    "firmware days per MB": r"days per mb",
    "firmware flash life": r"flash life",
    "firmware heap": r"heap",
    "power cuts": r"power cut",
    "link faults": r"fault",
    "host kills": r"host.?kill|kill",
    "concurrency": r"concurren|parallel|several boards|boards at once|simultaneous|sync.?all",
    "wire efficiency": r"wire.*(efficien|overhead)|efficien.*wire",
    "sync throughput": r"throughput|baud|bytes per s|kb/s|records per s",
    "ingest ratio": r"ingest",
    "analysis ratio": r"full_over_bare_ratio|analysis.*ratio",
    "NIST digits": r"nist",
    "interval coverage": r"coverage",
    "demo time": r"demo.*(time|seconds)",
    "list runs ratio": r"list_runs_over_plain",
    "list runs flat in samples": r"list_runs_flat",
    "long-run rate time and memory": r"rate_db_long_run_(time|memory)_ratio",
    "long-run report time, memory and files": r"report_run_long_(time|memory)_ratio|report_largest_file",
    "study report per run": r"study_report_seconds_per_run_beyond",
    "start-up": r"start-?up: nightcell --help",
    "CSV reader ratio": r"csv_reader_over_loadtxt",
    "page update latency": r"update latency (median|worst)",
}


def discover() -> list[Path]:
    """Every ``bench_*.py`` beside this file, in name order."""
    return sorted(HERE.glob("bench_*.py"))


def _short(path: Path) -> str:
    return path.stem[len("bench_"):]


def _load(path: Path) -> Any:
    for p in (str(HERE), str(TESTS)):
        if p not in sys.path:
            sys.path.insert(0, p)
    name = path.stem
    if name in sys.modules:  # imported already by a module that gathers others
        return sys.modules[name]
    spec = importlib.util.spec_from_file_location(name, path)
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    sys.modules[name] = module
    try:
        spec.loader.exec_module(module)
    except BaseException:
        del sys.modules[name]
        raise
    return module


def _gathers_only_found(module: Any, found: set[str]) -> bool:
    members = getattr(module, "MODULES", None)
    if not isinstance(members, (list, tuple)) or not members:
        return False
    names = {getattr(m, "__name__", "").rsplit(".", 1)[-1] for m in members}
    return names <= found


def _error_row(module: str, what: str, detail: str) -> dict[str, Any]:
    return {"name": f"{module}: {what}", "value": detail, "goal": "the module runs and returns rows", "ok": False,
            "module": module}


def _check_row(module: str, row: Any) -> dict[str, Any]:
    if not isinstance(row, dict) or not {"name", "value", "goal", "ok"} <= set(row):
        return _error_row(module, "malformed row", repr(row)[:200])
    ok, goal = row["ok"], row["goal"]
    if ok is None and goal is None:  # a figure reported for its own sake: nothing to meet
        ok, goal = True, "(reported)"
    if type(ok).__name__ not in ("bool", "bool_"):  # numpy's bool is a yes/no too
        return _error_row(module, "malformed row", f"{row['name']}: ok is {ok!r}, not true/false")
    out = {"name": str(row["name"]), "value": _plain(row["value"]), "goal": str(goal), "ok": bool(ok),
           "module": module}
    if "rounds" in row or "spread" in row:  # a timing ratio: the median of interleaved rounds, and their spread
        rounds, spread = row.get("rounds"), row.get("spread")
        if not (isinstance(rounds, int) and rounds >= MIN_ROUNDS and isinstance(spread, (list, tuple))
                and len(spread) == 2):
            return _error_row(module, "malformed row", f"{row['name']}: a ratio needs rounds >= {MIN_ROUNDS} and "
                              f"spread [low, high], got rounds {rounds!r}, spread {spread!r}")
        out["rounds"], out["spread"] = rounds, [_plain(v) for v in spread]
    return out


def _plain(value: Any) -> Any:
    """A JSON-able value: numpy scalars become Python numbers; NaN and infinities become text."""
    if hasattr(value, "item") and callable(value.item):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return str(value)
    if isinstance(value, (bool, int, float, str)) or value is None:
        return value
    try:
        return json.loads(json.dumps(value, allow_nan=False))  # a table of counts stays a table
    except (TypeError, ValueError):
        return str(value)


def run_module(path: Path, quick: bool) -> tuple[list[dict[str, Any]], float]:
    """The rows of one module (errors turned into rows) and its wall time in seconds."""
    name = _short(path)
    t0 = time.perf_counter()
    try:
        module = _load(path)
    except BaseException as exc:  # noqa: BLE001 — an import error is a result to report, not a crash
        if isinstance(exc, KeyboardInterrupt):
            raise
        return [_error_row(name, "cannot import", _exception_text(exc))], time.perf_counter() - t0
    fn = getattr(module, "run", None)
    if not callable(fn):
        return [_error_row(name, "no run(quick) function", "add run(quick: bool) -> list[dict]")], 0.0
    try:
        rows = fn(quick)
    except BaseException as exc:  # noqa: BLE001 — pytest.fail/skip in a harness are BaseExceptions
        if isinstance(exc, KeyboardInterrupt):
            raise
        return [_error_row(name, "raised", _exception_text(exc))], time.perf_counter() - t0
    seconds = time.perf_counter() - t0
    if not isinstance(rows, list) or not rows:
        return [_error_row(name, "returned no rows", repr(rows)[:200])], seconds
    return [_check_row(name, r) for r in rows], seconds


def _exception_text(exc: BaseException) -> str:
    last = traceback.extract_tb(exc.__traceback__)[-1:] if exc.__traceback__ else []
    where = f" at {Path(last[0].filename).name}:{last[0].lineno}" if last else ""
    text = str(exc).strip().splitlines()
    return f"{type(exc).__name__}{where}: {' '.join(text[:3])[:400]}"


def missing_figures(rows: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """A row for every promised figure that no row measures."""
    out = []
    for figure, pattern in FIGURES.items():
        rx = re.compile(pattern, re.IGNORECASE)
        if not any(rx.search(r["name"]) for r in rows if not r["name"].startswith("missing:")):
            out.append({"name": f"missing: {figure}", "value": "no benchmark prints it",
                        "goal": "a tests/bench/bench_*.py row", "ok": False, "module": "run"})
    return out


def select(paths: list[Path], only: list[str]) -> list[Path]:
    if not only:
        return paths
    names = {_short(p): p for p in paths}
    unknown = [o for o in only if o not in names]
    if unknown:
        raise ValueError(f"no benchmark module {', '.join(unknown)} (have: {', '.join(sorted(names))}); "
                         "give a name without 'bench_' and '.py'")
    return [names[o] for o in only]


def run_all(quick: bool, only: list[str] | None = None, echo: Any = None) -> list[dict[str, Any]]:
    """Run the selected modules; rows of every module, plus the missing figures when all modules ran."""
    paths = discover()
    chosen = select(paths, only or [])
    found = {p.stem for p in paths}
    rows: list[dict[str, Any]] = []
    for path in chosen:
        if not only:
            try:
                if _gathers_only_found(_load(path), found - {path.stem}):
                    continue
            except BaseException as exc:  # noqa: BLE001 — reported by run_module below
                if isinstance(exc, KeyboardInterrupt):
                    raise
        got, seconds = run_module(path, quick)
        for r in got:
            r["seconds"] = round(seconds, 2)
            if echo:
                echo(r)
        rows.extend(got)
    if not only:
        for r in missing_figures(rows):
            rows.append(r)
            if echo:
                echo(r)
    return rows


def line(row: dict[str, Any]) -> str:
    v = row["value"]
    value = f"{v:.4g}" if isinstance(v, float) else json.dumps(v) if isinstance(v, (dict, list)) else str(v)
    spread = ""
    if "spread" in row:
        lo, hi = row["spread"]
        spread = f" [median of {row['rounds']} rounds, spread {lo:.4g}-{hi:.4g}]"
    return f"{row['name']}: {value}{spread} (goal {row['goal']}){'' if row['ok'] else '  MISSED'}"


def script(module_file: str) -> int:
    """A bench module run as a script: the same as ``python tests/bench/run.py --only NAME`` plus its arguments."""
    return main(["--only", _short(Path(module_file)), *sys.argv[1:]])


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description="Run every nightcell benchmark and campaign; one line per figure.")
    parser.add_argument("--quick", action="store_true", help="CI-sized runs (a few minutes in all)")
    parser.add_argument("--json", action="store_true", help="print one JSON table (a list of rows) at the end")
    parser.add_argument("--only", action="append", default=[], metavar="NAME",
                        help="run only this module (bench_NAME.py); repeat for several")
    args = parser.parse_args(argv)
    t0 = time.perf_counter()
    echo = None if args.json else (lambda r: print(line(r), flush=True))
    try:
        rows = run_all(args.quick, args.only, echo)
    except ValueError as exc:
        parser.error(str(exc))
    bad = [r for r in rows if not r["ok"]]
    if args.json:
        json.dump(rows, sys.stdout, indent=1, allow_nan=False)
        print()
    else:
        print(f"{len(rows) - len(bad)} of {len(rows)} figures meet their goal "
              f"({'quick' if args.quick else 'full'} run, {time.perf_counter() - t0:.0f} s)")
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
