"""What the speed benchmarks share: interleaved rounds, ratio rows with their spread, a fresh process's peak memory,
and a stored database of long runs built quickly.

Not a benchmark itself (the runner only runs ``bench_*.py``). Every timing ratio is the median of ≥ ``ROUNDS``
rounds; in each round both sides run once, one right after the other, and the order alternates from round to round,
so a burst of load on this shared machine falls on both. A ratio row carries ``rounds`` and ``spread`` (the smallest
and largest per-round ratio), which the runner prints beside the median.

Memory is the peak resident set of a fresh process: a small wrapper process starts the command, waits for it and
reads ``resource.getrusage(RUSAGE_CHILDREN).ru_maxrss`` (its only child is the command, so that is the command's
peak), and its wall time measured around the command alone (the wrapper's own start-up is not counted).
"""

from __future__ import annotations

import json
import statistics
import subprocess
import sys
import time
from pathlib import Path
from typing import Any, Callable, Sequence

import numpy as np

ROUNDS = 5

_WRAPPER = (
    "import json, resource, subprocess, sys, time\n"
    "t = time.perf_counter()\n"
    "p = subprocess.run(sys.argv[1:], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)\n"
    "s = time.perf_counter() - t\n"
    "print(json.dumps({'rc': p.returncode, 'seconds': s, 'stderr': p.stderr.decode('utf-8', 'replace')[-2000:],\n"
    "                  'peak_kib': resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss}))\n"
)


def interleaved(paths: dict[str, Callable[[], Any]], rounds: int = ROUNDS) -> dict[str, list[float]]:
    """Seconds of each path in each round; the order within a round alternates (forwards, then backwards)."""
    names = list(paths)
    times: dict[str, list[float]] = {n: [] for n in names}
    for i in range(rounds):
        for n in (names if i % 2 == 0 else names[::-1]):
            t = time.perf_counter()
            paths[n]()
            times[n].append(time.perf_counter() - t)
    return times


def fresh_process(cmd: Sequence[str], cwd: str | Path | None = None) -> dict[str, Any]:
    """Run ``cmd`` in a fresh process; ``{"seconds", "peak_mib", "rc"}`` (raises if it fails)."""
    out = subprocess.run([sys.executable, "-c", _WRAPPER, *map(str, cmd)], capture_output=True, text=True,
                         cwd=cwd, check=True)
    got = json.loads(out.stdout)
    if got["rc"] != 0:
        raise RuntimeError(f"{' '.join(map(str, cmd))} exited {got['rc']}: {got['stderr']}")
    return {"seconds": got["seconds"], "peak_mib": got["peak_kib"] / 1024.0, "rc": got["rc"]}


def interleaved_processes(cmds: dict[str, Sequence[str]], rounds: int = ROUNDS,
                          cwd: str | Path | None = None) -> dict[str, list[dict[str, Any]]]:
    """``fresh_process`` of each command in each round, the order alternating as in ``interleaved``."""
    names = list(cmds)
    got: dict[str, list[dict[str, Any]]] = {n: [] for n in names}
    for i in range(rounds):
        for n in (names if i % 2 == 0 else names[::-1]):
            got[n].append(fresh_process(cmds[n], cwd=cwd))
    return got


def ratio_row(name: str, ours: Sequence[float], theirs: Sequence[float], *, most: float | None = None,
              least: float | None = None, what: str = "") -> dict[str, Any]:
    """A row of the median per-round ratio ours/theirs, its spread and round count; the goal ``<= most`` or
    ``>= least`` (neither: reported only)."""
    ratios = [a / b for a, b in zip(ours, theirs)]
    med = statistics.median(ratios)
    if most is not None:
        goal, ok = f"<= {most}", med <= most
    elif least is not None:
        goal, ok = f">= {least}", med >= least
    else:
        goal, ok = None, None
    if what:
        goal = f"{goal} ({what})" if goal else f"report ({what})"
        ok = True if ok is None else ok
    return {"name": name, "value": round(med, 3), "goal": goal, "ok": ok, "rounds": len(ratios),
            "spread": [round(min(ratios), 3), round(max(ratios), 3)]}


def median(values: Sequence[float]) -> float:
    return float(statistics.median(values))


# -- a stored database of long runs ------------------------------------------------------------------------------

DEVICE = "bench-cell"
READS, DARK, LED, INTERVAL_MS, COUNT_SD = 16, 100.0, 3400.0, 2000, 3.0
UNIX_ZERO_MS = 1_796_000_000_000
# a long run logs on long after its reaction ends: rates drawn as for a run of 2000 s (k·span of thousands over
# 10⁶ samples), the case where a search limited to k·span < 300 gave up
LONG_RUN_RATE_SPAN_S = 2000.0


def plateau(t: np.ndarray, a0: float, a_inf: float, k: float) -> np.ndarray:
    return a_inf + (a0 - a_inf) * np.exp(-k * t)


def build_runs_db(path: Path, n_runs: int, n_points: int, seed: int = 1234,
                  span_s: float | None = None) -> list[tuple[float, float, float]]:
    """A nightcell database (one device, one boot, a blank, two clock anchors) of ``n_runs`` stopped runs of
    ``n_points`` samples each, every 2 s, inserted as the raw rows a sync stores (``Store.insert_rows``), clocks
    rebuilt. Each run is an exponential approach to a plateau seen through counts with Gaussian noise (invented
    numbers, fixed seed); its k is drawn so the run lasts a few half-lives to a few tens (``span_s``: the run's
    length in seconds the rate is drawn for, default its own). Returns each run's true (A0, A_inf, k)."""
    from nightcell.store.database import Store
    from nightcell.store.clocks import rebuild_clocks

    rng = np.random.default_rng(seed)
    t = np.arange(n_points) * (INTERVAL_MS / 1000.0)
    span = float(span_s or max(t[-1], 1.0))
    truths = []
    seq = 0
    up = 0
    rows: dict[str, list[tuple]] = {"boots": [], "marks": [], "mark_counts": [], "anchors": []}
    rows["boots"].append((DEVICE, 1, seq, up, 0, 1, "0.1.0", "sim", 1, 0))
    seq += 1
    up += 1000
    rows["anchors"].append((DEVICE, 1, seq, up, UNIX_ZERO_MS + up))
    seq += 1
    up += 1000

    def mark(kind: str, label: str, light: float | None) -> None:
        nonlocal seq, up
        rows["marks"].append((DEVICE, 1, seq, up, kind, 0, READS if light is not None else 0, label, ""))
        if light is not None:
            rows["mark_counts"].append((DEVICE, 1, seq, 0, int(DARK * READS), int(round(light * READS))))
        seq += 1
        up += 1000

    mark("blank", "water", DARK + LED)
    with Store.open(path) as store:
        with store.write():
            store.touch_device(DEVICE, board="sim", firmware="0.1.0", label="bench")
            store.insert_rows(rows)
        for i in range(n_runs):
            rows = {"marks": [], "mark_counts": []}
            k = rng.uniform(3.0, 30.0) / span
            a0, a_inf = rng.uniform(0.6, 1.0), rng.uniform(0.05, 0.2)
            truths.append((a0, a_inf, k))
            mark("run_start", f"run {i}", None)
            light = DARK + LED * 10.0 ** (-plateau(t, a0, a_inf, k)) + rng.normal(0.0, COUNT_SD, n_points)
            sums = np.round(light * READS).astype(np.int64)
            seqs = np.arange(seq, seq + n_points)
            ups = up + np.arange(n_points) * INTERVAL_MS
            samples = list(zip([DEVICE] * n_points, [1] * n_points, seqs.tolist(), [0] * n_points, ups.tolist(),
                               [0] * n_points, [0] * n_points, [READS] * n_points,
                               [int(DARK * READS)] * n_points, sums.tolist(), [None] * n_points))
            seq += n_points
            up += n_points * INTERVAL_MS
            mark("run_stop", "", None)
            rows["samples"] = samples
            with store.write():
                store.insert_rows(rows)
            del samples, rows
        with store.write():
            store.insert_rows({"anchors": [(DEVICE, 1, seq, up, UNIX_ZERO_MS + up)]})
            rebuild_clocks(store, DEVICE)
    return truths


# -- what a user would write instead: sqlite3 + numpy + one curve_fit ---------------------------------------------

PLAIN_RATE = '''
import sqlite3, sys
import numpy as np
from scipy.optimize import curve_fit


def plateau(t, a0, a_inf, k):
    return a_inf + (a0 - a_inf) * np.exp(-k * t)


def read_run(conn, device, boot, seq):
    """Times (s), absorbance and T of the run starting at mark (boot, seq), against the blank before it."""
    stop = conn.execute("SELECT boot, seq FROM marks WHERE device = ? AND mark = 'run_stop' AND (boot, seq) > (?, ?) "
                        "ORDER BY boot, seq LIMIT 1", (device, boot, seq)).fetchone()
    reads, dark0, light0 = conn.execute(
        "SELECT m.reads, c.dark, c.light FROM marks m JOIN mark_counts c ON c.device = m.device AND c.boot = m.boot "
        "AND c.seq = m.seq AND c.channel = 0 WHERE m.device = ? AND m.mark = 'blank' AND (m.boot, m.seq) < (?, ?) "
        "ORDER BY m.boot DESC, m.seq DESC LIMIT 1", (device, boot, seq)).fetchone()
    rows = conn.execute("SELECT uptime_ms, reads, dark, light, flags FROM samples WHERE device = ? AND channel = 0 "
                        "AND boot = ? AND seq > ? AND seq < ? ORDER BY seq", (device, boot, seq, stop[1])).fetchall()
    x = np.array(rows, dtype=float)
    t = (x[:, 0] - x[0, 0]) / 1000.0
    trans = (x[:, 3] - x[:, 2]) / x[:, 1] / ((light0 - dark0) / reads)
    ok = (x[:, 4] == 0) & (trans > 0)
    return t[ok], -np.log10(trans[ok]), trans[ok]


def fit(t, a, trans, p0):
    popt, pcov = curve_fit(plateau, t, a, p0=p0, sigma=1.0 / trans)  # weights T squared
    return popt, np.sqrt(np.diag(pcov))


if __name__ == "__main__":
    db, device, boot, seq = sys.argv[1], sys.argv[2], int(sys.argv[3]), int(sys.argv[4])
    p0 = [float(v) for v in sys.argv[5:8]]
    conn = sqlite3.connect(db)
    t, a, trans = read_run(conn, device, boot, seq)
    popt, se = fit(t, a, trans, p0)
    print(f"k = {popt[2]:.6g} +/- {se[2]:.2g} per s from {t.size} readings")
'''


def plain_rate_namespace() -> dict[str, Any]:
    """The plain script's functions (``read_run``, ``fit``), for timing it in this process."""
    namespace: dict[str, Any] = {"__name__": "plain_rate"}
    exec(compile(PLAIN_RATE, "plain_rate.py", "exec"), namespace)  # noqa: S102 — our own benchmark script
    return namespace


PLAIN_PNG = '''
import sqlite3, sys
import matplotlib
matplotlib.use("Agg")
import matplotlib.pyplot as plt
from plain_rate import read_run  # the plain read above, from the same folder

if __name__ == "__main__":
    db, device, boot, seq, out = sys.argv[1], sys.argv[2], int(sys.argv[3]), int(sys.argv[4]), sys.argv[5]
    t, a, _ = read_run(sqlite3.connect(db), device, boot, seq)
    fig, ax = plt.subplots(figsize=(6.4, 4.8))
    ax.plot(t, a, ".", color="#7a3b8f")
    ax.set_xlabel("time (s)")
    ax.set_ylabel("absorbance")
    fig.savefig(out, dpi=110)
'''
