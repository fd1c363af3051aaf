"""Start-up: how long a person waits for ``nightcell --help`` and ``nightcell list runs``, against the floor every
click program pays (``python -c "import click"``), both in fresh processes.

Every command used to import scipy (and pandas through sqlite-utils) before parsing its options, so even ``--help``
took over a second. Goal: ``nightcell --help`` ≤ 4 × ``import click`` (the goal its issue set). Timings are taken
interleaved, round after round, in this one run (the machine is shared and noisy); each figure is the median of its
rounds, and the ratio is the ratio of the medians.

    python tests/bench/bench_startup.py            # 15 rounds
    python tests/bench/bench_startup.py --quick    # 5 rounds
"""

from __future__ import annotations

import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # tests/: the shared support package
from support.commands import nightcell_command  # noqa: E402

GOAL_RATIO = 4.0


def _empty_database(folder: Path) -> Path:
    """A fresh nightcell database made by nightcell itself (in a process of its own, so nothing is imported here)."""
    db = folder / "startup.db"
    make = ("try:\n from nightcell.store.database import Store\nexcept ImportError:\n from nightcell.store import Store\n"
            f"Store.open({str(db)!r}).close()")
    subprocess.run([sys.executable, "-c", make], check=True, capture_output=True, timeout=300)
    return db


def _seconds(cmd: list[str], cwd: Path, env: dict[str, str]) -> float:
    t0 = time.perf_counter()
    proc = subprocess.run(cmd, capture_output=True, cwd=cwd, env=env, timeout=300)
    seconds = time.perf_counter() - t0
    if proc.returncode != 0:
        raise RuntimeError(f"{' '.join(cmd)} exited {proc.returncode}: {proc.stderr.decode()[-300:]}")
    return seconds


def run(quick: bool) -> list[dict]:
    rounds = 5 if quick else 15
    with tempfile.TemporaryDirectory(prefix="nc_startup_") as tmp:
        folder = Path(tmp)
        db = _empty_database(folder)
        env = dict(os.environ, NO_COLOR="1")
        commands = {
            "click": [sys.executable, "-c", "import click"],
            "help": [*nightcell_command(), "--help"],
            "list": [*nightcell_command(), "list", "runs", "--db", str(db)],
        }
        for cmd in commands.values():  # one warm-up each: the first start also fills the OS file cache
            _seconds(cmd, folder, env)
        times: dict[str, list[float]] = {name: [] for name in commands}
        for i in range(rounds):
            order = list(commands) if i % 2 == 0 else list(reversed(commands))
            for name in order:
                times[name].append(_seconds(commands[name], folder, env))
    median = {name: statistics.median(values) for name, values in times.items()}
    ratio_help = median["help"] / median["click"]
    ratio_list = median["list"] / median["click"]
    return [
        {"name": f"start-up: nightcell --help ÷ python -c 'import click' (median of {rounds} interleaved rounds)",
         "value": round(ratio_help, 2), "goal": f"<= {GOAL_RATIO:g}x", "ok": ratio_help <= GOAL_RATIO},
        {"name": "start-up: nightcell list runs ÷ python -c 'import click' (an empty database)",
         "value": round(ratio_list, 2), "goal": "(reported)", "ok": True},
        {"name": "start-up: nightcell --help, ms (median)", "value": round(1000 * median["help"], 1),
         "goal": "(reported)", "ok": True},
        {"name": "start-up: nightcell list runs, ms (median)", "value": round(1000 * median["list"], 1),
         "goal": "(reported)", "ok": True},
        {"name": "start-up: python -c 'import click', ms (median)", "value": round(1000 * median["click"], 1),
         "goal": "(reported)", "ok": True},
    ]


if __name__ == "__main__":  # the same as: python tests/bench/run.py --only NAME [--quick] [--json]
    from run import script

    sys.exit(script(__file__))
