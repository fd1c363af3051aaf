"""Clock rebuild: wall-clock time from anchors, against synthetic boots with known drift (made here, not measured).

The goal (issue 4): <= 1 s error over a 7-day boot with two anchors and 50 ppm drift. 50 ppm is within the
frequency tolerance usually quoted for the 12 MHz crystals on small boards (common practice, from memory: ±30 ppm
initial plus temperature drift).
"""

import random

import numpy as np
import pytest
from numpy.testing import assert_allclose

from nightcell.wire import frames as F
from nightcell.store.database import Store
from nightcell.science.timeline import UPTIME_WRAP_MS, fit_boot_clock, unwrap_uptimes
from nightcell.store.clocks import rebuild_clocks

WEEK_MS = 7 * 86400 * 1000


def _true_clock(t0, ppm):
    rate = 1 + ppm * 1e-6
    return lambda up_ms: t0 + rate * np.asarray(up_ms, dtype=float) / 1000.0


@pytest.mark.parametrize("ppm", [50.0, -50.0])
def test_two_anchors_over_seven_days_with_50_ppm_drift_within_one_second(ppm):
    true = _true_clock(1_790_000_000.0, ppm)
    rng = random.Random(4)
    # Each anchor's host time is late or early by up to 50 ms (USB latency, a busy host).
    anchors = [(up, round(float(true(up)) * 1000 + rng.uniform(-50, 50))) for up in (1000, WEEK_MS)]
    clock = fit_boot_clock(anchors)
    ups = np.linspace(0, WEEK_MS + 3600_000, 2001)  # and an hour past the last anchor
    err = np.abs(clock.to_unix(ups) - true(ups))
    assert err.max() < 1.0
    assert clock.quality == "fitted" and clock.anchors == 2
    assert_allclose(clock.rate, 1 + ppm * 1e-6, atol=2e-7)


def test_one_anchor_assumes_rate_one_and_says_so():
    clock = fit_boot_clock([(5000, 1_790_000_005_000)])
    assert clock.quality == "one-anchor"
    assert clock.rate == 1.0
    assert_allclose(clock.to_unix(65000), 1_790_000_065.0)


def test_anchors_within_a_second_cannot_show_drift():
    clock = fit_boot_clock([(5000, 1_790_000_005_000), (5400, 1_790_000_005_400)])
    assert clock.quality == "one-anchor" and clock.rate == 1.0


def test_no_anchor_no_clock():
    assert fit_boot_clock([]) is None


def test_uptime_unwrap_across_u32():
    vals = [2**32 - 2000, 2**32 - 1000, 500, 1500]
    assert unwrap_uptimes(vals) == [2**32 - 2000, 2**32 - 1000, 2**32 + 500, 2**32 + 1500]
    # Continuing from a stored value past one wrap.
    assert unwrap_uptimes([700, 2**31], last=2**32 + 500) == [2**32 + 700, 2**32 + 2**31]
    # A record a little earlier than the one before stays just before it, not 49.7 days later.
    assert unwrap_uptimes([2**32 - 10], last=2**32 + 500) == [2**32 - 10]


def _anchor(boot, seq, up, host_ms):
    return F.decode_record(F.encode_record(F.KIND_ANCHOR, boot, seq, up, {"host_unix_ms": host_ms}))[0]


def _samples(boot, seq, up, n, interval):
    s = [{"late_ms": 0, "flags": 0, "dark": [100], "light": [4000]} for _ in range(n)]
    raw = F.encode_record(F.KIND_SAMPLES, boot, seq, up, {"interval_ms": interval, "reads": 1, "channels": 1,
                                                          "options": 0, "samples": s})
    return F.decode_record(raw, lazy_samples=True)[0]


def test_sixty_day_boot_across_the_uptime_wrap_in_the_store(tmp_path):
    """A boot of 60 days: uptime_ms (u32) wraps at 49.7 days; samples after the wrap keep their wall clock."""
    true = _true_clock(1_790_000_000.0, 50.0)
    day = 86400 * 1000
    interval = 6 * 3600 * 1000
    a1 = _anchor(3, 0, 1000, round(float(true(1000)) * 1000))
    recs = []
    seq = 1
    for d in range(0, 60, 5):  # one block of 20 six-hourly samples every 5 days, stored in several syncs
        recs.append(_samples(3, seq, (d * day) % UPTIME_WRAP_MS, 20, interval))
        seq += 20
    a2 = _anchor(3, seq, (59 * day) % UPTIME_WRAP_MS, round(float(true(59 * day)) * 1000))
    with Store.open(tmp_path / "long.db") as store:
        for batch in ([a1] + recs[:6], recs[6:], [a2]):  # the wrap falls between two syncs
            with store.write():
                store.ingest("dev", batch)
                rebuild_clocks(store, "dev")
        rows = store.query("SELECT seq, uptime_s, wall_clock_unix_s, clock_quality FROM sample_readings "
                           "ORDER BY seq")
    ups = np.array([r["uptime_s"] * 1000 for r in rows])
    assert np.all(np.diff(ups) > 0) and ups.max() > UPTIME_WRAP_MS
    err = np.abs(np.array([r["wall_clock_unix_s"] for r in rows]) - true(ups))
    assert err.max() < 1.0
    assert {r["clock_quality"] for r in rows} == {"fitted"}


def test_one_anchor_boot_borrows_the_drift_of_a_fitted_boot(tmp_path):
    true1 = _true_clock(1_790_000_000.0, 40.0)
    true2 = _true_clock(1_790_700_000.0, 40.0)  # same crystal, a later boot
    recs = [
        _anchor(1, 0, 0, round(float(true1(0)) * 1000)),
        _anchor(1, 1, 3 * 86400_000, round(float(true1(3 * 86400_000)) * 1000)),
        _anchor(2, 0, 1000, round(float(true2(1000)) * 1000)),
        _samples(2, 1, 2 * 86400_000, 1, 1000),
        _samples(4, 0, 5000, 1, 1000),  # a boot with no anchor at all
    ]
    with Store.open(tmp_path / "b.db") as store, store.write():
        store.ingest("dev", recs)
        rebuild_clocks(store, "dev")
        clocks = {r["boot"]: r for r in store.query("SELECT * FROM boot_clocks")}
        rows = {r["boot"]: r for r in store.query("SELECT * FROM sample_readings")}
    assert clocks[1]["quality"] == "fitted" and clocks[2]["quality"] == "borrowed"
    assert clocks[2]["anchors"] == 1 and clocks[2]["anchor_seqs_json"] == "[0]"
    # Borrowed drift: 2 days after the only anchor, still within a second (rate 1 would be 6.9 s off).
    assert abs(rows[2]["wall_clock_unix_s"] - float(true2(2 * 86400_000))) < 1.0
    # No anchor: relative time only.
    assert 4 not in clocks and rows[4]["wall_clock_unix_s"] is None and rows[4]["uptime_s"] == 5.0


def test_anchors_seconds_apart_do_not_fit_a_drift():
    # Two anchors 5 s apart whose host times carry 25 ms of USB jitter would "show" a 5000 ppm drift; a board's
    # crystal drifts tens of ppm (common practice), so such a pair is averaged at rate 1, not fitted.
    anchors = [(10_000, 1_790_000_010_000), (15_000, 1_790_000_015_025)]
    clock = fit_boot_clock(anchors)
    assert clock.quality == "one-anchor" and clock.rate == 1.0
    assert abs(clock.to_unix(12_500) - 1_790_000_012.5125) < 0.02
