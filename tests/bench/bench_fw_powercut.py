"""Power-cut campaign benchmark: the CI campaign of tests/test_fw_powercut.py with ≥ 2000 cuts, at the default
settings (10-s samples, 10-s durability window), in MicroPython on littlefs over a cuttable RAM block device.
Every cut is checked inside the script (a failed check stops it with the reason); the figures are totals and the
worst data loss per cut, against the goal max(1 sample, 10 s of data).

    python tests/bench/bench_fw_powercut.py [--quick]
"""

from __future__ import annotations

import sys
import tempfile
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from test_fw_powercut import run_campaign  # noqa: E402

from nightcell.wire import frames as F  # noqa: E402


def run(quick: bool) -> list[dict]:
    cuts = 200 if quick else 2000
    with tempfile.TemporaryDirectory() as tmp:
        dump = str(Path(tmp) / "journal.bin")
        res = run_campaign(cuts, 7, dump, interval_ms=10_000, window_ms=10_000)
        data = Path(dump).read_bytes()
        recs = list(F.iter_records(data, 0))  # the host's reference codec reads the final journal whole
    interval = int(res["interval_ms"])
    window = int(res["window_ms"])
    worst = int(res["worst_lost_ms"])
    allowed = max(interval, window)
    return [
        {"name": "fw power cuts survived (all checks passed)", "value": int(res["cuts"]), "goal": f">= {cuts}",
         "ok": int(res["cuts"]) >= cuts},
        {"name": "fw cuts that tore the write in flight", "value": int(res["torn"]), "goal": "(reported)", "ok": True},
        {"name": "fw cuts during boot and recovery", "value": int(res["boot_cuts"]), "goal": "(reported)", "ok": True},
        {"name": "fw boots", "value": int(res["boots"]), "goal": "(reported)", "ok": True},
        {"name": "fw samples taken", "value": int(res["samples_taken"]), "goal": "(reported)", "ok": True},
        {"name": "fw segments written", "value": int(res["segments"]), "goal": "(reported)", "ok": True},
        {"name": "fw unreadable journals", "value": 0, "goal": "0", "ok": True},
        {"name": "fw worst data lost per cut, ms of samples", "value": worst,
         "goal": f"< max(1 sample, window) = {allowed} ms (+ the sample in flight)", "ok": worst <= allowed},
        {"name": "fw worst samples lost in one cut", "value": int(res["worst_lost_samples"]),
         "goal": f"<= max(1, window / interval) = {max(1, window // interval)} (+ the sample in flight)",
         "ok": int(res["worst_lost_samples"]) <= max(1, window // interval) + 1},
        {"name": "fw final journal records decoded by the host codec", "value": len(recs), "goal": "> 0",
         "ok": len(recs) > 0},
    ]


if __name__ == "__main__":  # the same as: python tests/bench/run.py --only NAME [--quick] [--json]
    from run import script

    sys.exit(script(__file__))
