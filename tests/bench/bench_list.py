"""Benchmark: ``nightcell list runs`` against a plain sqlite3 script listing the same runs with their sample counts.

The database holds 1000 stopped runs of 1000 samples (full; 100 runs of 300 quick) of one device
(``sidebyside.build_runs_db``). The plain script is what a user would write: the start and stop marks in journal
order, paired, then one ``count(*)`` of each run's samples between its marks, printed as lines. Both are timed in
this process on the same file, interleaved over ≥ 5 rounds: nightcell's command through click's runner (the table
printed), the script as a function. Goal: ≤ 2× (median of the per-round ratios). Flat in samples per run: how much
slower each gets on the database of 1000 samples per run than on one of as many runs with 10 samples each; both
count with SQLite's ``count(*)``, which walks each run's range of the key (a cost per sample that no listing avoids
without a stored count), so the goal is that nightcell's growth be ≤ 1.5× the plain script's own (both growths
printed).

Reported beside them: both as fresh processes (the ``nightcell`` command against ``python script.py``), which adds
nightcell's start-up (its imports) to the command's own work.

    python tests/bench/bench_list.py [--quick]

"""

from __future__ import annotations

import io
import sqlite3
import sys
import tempfile
from contextlib import redirect_stdout
from pathlib import Path

from click.testing import CliRunner

sys.path.insert(0, str(Path(__file__).resolve().parent))
from sidebyside import build_runs_db, interleaved, interleaved_processes, median, ratio_row  # noqa: E402

from nightcell.cli import cli  # noqa: E402

GOAL = 2.0
FLAT_GOAL = 1.5

PLAIN_SCRIPT = '''
import sqlite3, sys

def main(db):
    conn = sqlite3.connect(db)
    marks = conn.execute("SELECT device, boot, seq, mark, label FROM marks WHERE mark IN ('run_start', 'run_stop') "
                         "ORDER BY device, boot, seq").fetchall()
    runs, open_run = [], {}
    for device, boot, seq, mark, label in marks:
        if mark == "run_start":
            open_run[device] = [device, boot, seq, label, None, None]
            runs.append(open_run[device])
        elif device in open_run:
            run = open_run.pop(device)
            run[4], run[5] = boot, seq
    for device, boot, seq, label, stop_boot, stop_seq in runs:
        if stop_boot is None:
            n = conn.execute("SELECT count(*) FROM samples WHERE device = ? AND channel = 0 AND (boot, seq) > (?, ?)",
                             (device, boot, seq)).fetchone()[0]
        else:
            n = conn.execute("SELECT count(*) FROM samples WHERE device = ? AND channel = 0 AND (boot, seq) > (?, ?) "
                             "AND (boot, seq) < (?, ?)", (device, boot, seq, stop_boot, stop_seq)).fetchone()[0]
        print(f"{device}:{boot}:{seq}  {label}  {n}  {'stopped' if stop_boot is not None else 'open'}")
    conn.close()

if __name__ == "__main__":
    main(sys.argv[1])
'''


def _plain(db: Path) -> None:
    namespace: dict = {"__name__": "plain"}
    exec(compile(PLAIN_SCRIPT, "plain_list.py", "exec"), namespace)  # noqa: S102 — our own benchmark script
    with redirect_stdout(io.StringIO()):
        namespace["main"](str(db))


def _ours(runner: CliRunner, db: Path) -> None:
    got = runner.invoke(cli, ["list", "runs", "--db", str(db)])
    assert got.exit_code == 0, got.output


def _counts(db: Path) -> list[int]:
    conn = sqlite3.connect(db)
    try:
        return [n for (n,) in conn.execute("SELECT count(*) FROM samples GROUP BY boot")]
    finally:
        conn.close()


def run(quick: bool) -> list[dict]:
    n_runs, n_points = (100, 300) if quick else (1000, 1000)
    runner = CliRunner()
    with tempfile.TemporaryDirectory() as tmp:
        big, small = Path(tmp) / "big.db", Path(tmp) / "small.db"
        build_runs_db(big, n_runs, n_points)
        build_runs_db(small, n_runs, 10)
        script = Path(tmp) / "plain_list.py"
        script.write_text(PLAIN_SCRIPT)
        got = runner.invoke(cli, ["list", "runs", "--db", str(big), "--json"])
        assert got.exit_code == 0, got.output
        import json

        listed = json.loads(got.output)
        assert len(listed) == n_runs and all(r["samples"] == n_points for r in listed), listed[:2]
        assert _counts(big) == [n_runs * n_points]
        t = interleaved({"ours": lambda: _ours(runner, big), "plain": lambda: _plain(big),
                         "ours_small": lambda: _ours(runner, small), "plain_small": lambda: _plain(small)})
        procs = interleaved_processes({
            "ours": [str(Path(sys.executable).parent / "nightcell"), "list", "runs", "--db", big],
            "plain": [sys.executable, script, big]})
    return [
        ratio_row("list_runs_over_plain_sqlite3_ratio", t["ours"], t["plain"], most=GOAL,
                  what=f"{n_runs} runs x {n_points} samples, in process"),
        ratio_row("list_runs_flat_ratio", [o / s for o, s in zip(t["ours"], t["ours_small"])],
                  [o / s for o, s in zip(t["plain"], t["plain_small"])], most=FLAT_GOAL,
                  what=f"growth from 10 to {n_points} samples per run over the plain script's own, {n_runs} runs"),
        ratio_row(f"list_runs_growth_ratio_alone ({n_points} vs 10 samples per run)", t["ours"], t["ours_small"],
                  what="SQLite's count(*) walks each run's key range: the per-sample cost both pay"),
        ratio_row(f"plain_sqlite3_growth_ratio ({n_points} vs 10 samples per run)", t["plain"], t["plain_small"],
                  what="the same for the plain script"),
        {"name": "list_runs_seconds (in process, median)", "value": round(median(t["ours"]), 3), "goal": None,
         "ok": None},
        {"name": "plain_sqlite3_list_seconds (in process, median)", "value": round(median(t["plain"]), 3),
         "goal": None, "ok": None},
        ratio_row("list_runs_over_plain_fresh_process_ratio (nightcell start-up included)",
                  [p["seconds"] for p in procs["ours"]], [p["seconds"] for p in procs["plain"]],
                  what="start-up is issue 11's; the command's own work is the in-process ratio"),
        {"name": "list_runs_fresh_process_seconds (median)",
         "value": round(median([p["seconds"] for p in procs["ours"]]), 3), "goal": None, "ok": None},
    ]


if __name__ == "__main__":  # the same as: python tests/bench/run.py --only NAME [--quick] [--json]
    from run import script

    sys.exit(script(__file__))
