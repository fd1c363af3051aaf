"""The room a run has, as the board reports it (schema/protocol.md, hello and status): free bytes, journal bytes per
sample measured in the run, seconds until full, and how long one measurement takes. In MicroPython on littlefs.

The check is against the journal itself: its growth over the run (head and open block) divided by the samples
taken, and the free space littlefs reports (``os.statvfs``) less the journal's reserve.
"""

from __future__ import annotations

import json

from support.fwharness import results, run_mp

ROOM = r"""
import json
from boards.simkit import SimKit
kit = SimKit(blocks=128, settings={"interval_ms": 1000, "warmup_ms": 0})
lg = kit.lg
early = kit.request(b"1 status")
kit.request(b"2 start")
h0 = lg.journal.head + lg.block.size
kit.run_ms(600000)
reply = kit.request(b"3 status")
print("early=" + early[7:-4].decode())
print("status=" + reply[7:-4].decode())
print("growth=%d" % (lg.journal.head + lg.block.size - h0))
print("samples=%d" % lg.samples)
print("free=%d" % lg.journal.free_bytes())
"""


def test_the_board_reports_bytes_per_sample_and_time_until_full_from_its_own_journal():
    res = results(run_mp(ROOM))
    early = json.loads(res["early"])
    assert early["bytes_per_sample"] is None and early["full_in_s"] is None  # nothing measured yet
    st = json.loads(res["status"])
    # the MARK run start written before the first sample is not the run's growth: allow its few dozen bytes
    measured = int(res["growth"]) / int(res["samples"])
    assert abs(st["bytes_per_sample"] - measured) <= 0.1
    assert 2.5 <= st["bytes_per_sample"] <= 4.0  # DEVELOPERS.md: ≤ 4 B per sample at 1 channel
    want = int(res["free"]) / st["bytes_per_sample"] * st["interval_ms"] / 1000
    assert abs(st["full_in_s"] - want) <= 0.01 * want
    assert st["measure_ms"] == 20 and st["channels"] == 1  # two pairs of 5 + 5 ms in the default 20 ms window
