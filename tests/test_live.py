"""The live view: its pure pieces (absorbance of the last reading, journal fill and time until full, the trend line,
the rendered text) and the polling loop, which Ctrl-C ends without ever telling the board to stop."""

from __future__ import annotations

import io
import math

import pytest

from nightcell.tasks.live import Blank, format_duration, journal_fill, reading_absorbance, render_text, sparkline, watch

BLANK = Blank(light=[3100.0], dark=[100.0], boot=1, seq=4, label="water", source="board")


def _status(seq: int, light_per_read: float, dark_per_read: float = 100.0, *, head: int = 1000, uptime_ms: int = 0,
            used: int = 1000, free: int = 99_000, running: bool = True, full: bool = False, reads: int = 16) -> dict:
    return {"uptime_ms": uptime_ms, "running": running, "samples": seq, "head": head, "tail": head - used,
            "used_bytes": used, "free_bytes": free, "interval_ms": 1000, "full": full, "boot": 1,
            "last": {"seq": seq, "reads": reads, "light": [round(light_per_read * reads)],
                     "dark": [round(dark_per_read * reads)]}}


def test_absorbance_of_the_last_reading_is_minus_log10_of_transmittance():
    # A = −log10((I − I_dark)/(I0 − I0_dark)): the definition of absorbance (common practice, no source needed)
    signal = 3000.0 * 10 ** -0.5  # a reading that transmits 10^-0.5 of the blank's light
    st = _status(7, 100.0 + signal, reads=1)
    (a,) = reading_absorbance(st, BLANK)
    assert a == pytest.approx(0.5, abs=2e-4)  # the counts are whole numbers: 0.5 count of rounding
    assert reading_absorbance(st, None) == [None]
    assert reading_absorbance({"last": None}, BLANK) == []
    dark_only = _status(8, 100.0, reads=1)  # no light above dark: no absorbance, not a number
    assert reading_absorbance(dark_only, BLANK) == [None]


def test_journal_fill_and_time_until_full_from_head_growth():
    statuses = [_status(i, 1000, head=10_000 + 100 * i, uptime_ms=10_000 * i, used=10_000 + 100 * i,
                        free=500_000 - 100 * i) for i in range(5)]
    fill = journal_fill(statuses)
    # from the first block that arrived (i = 1) to the last (i = 4): 300 bytes over 30 s = 10 bytes/s;
    # 499 600 bytes free → 49 960 s
    assert fill["bytes_per_s"] == pytest.approx(10.0)
    assert fill["seconds_left"] == pytest.approx(49_960.0)
    # blocks of 480 bytes every 48 s, polled every 10 s: the rate is 10 bytes/s whatever the polls' phase
    blocky = [_status(i, 1000, head=10_000 + 480 * ((10 * i + 7) // 48), uptime_ms=10_000 * i) for i in range(30)]
    assert journal_fill(blocky)["bytes_per_s"] == pytest.approx(10.0)
    assert journal_fill(blocky[:6])["seconds_left"] is None  # one block arrived: not yet
    assert fill["fraction"] == pytest.approx(10_400 / 510_000)
    # a board that restarted (uptime went back) or a new journal (head went back): only the statuses after it count
    restarted = statuses + [_status(9, 1000, head=10_500, uptime_ms=500, used=10_500, free=499_500)]
    assert journal_fill(restarted)["seconds_left"] is None
    idle = [dict(s, running=False) for s in statuses]
    assert journal_fill(idle)["seconds_left"] is None


def test_sparkline_scales_between_min_and_max():
    assert sparkline([0, 1, 2, 3, 4, 5, 6, 7]) == "▁▂▃▄▅▆▇█"
    assert sparkline([0.5, None, 0.5]) == "▅ ▅"
    assert sparkline([None, float("nan")]) == ""
    assert len(sparkline(list(range(100)), width=40)) == 40


def test_format_duration():
    assert format_duration(30) == "30 s"
    assert format_duration(40 * 60) == "40 min"
    assert format_duration(5 * 3600 + 12 * 60) == "5 h 12 min"
    assert format_duration(2 * 86400 + 3 * 3600) == "2 d 3 h"
    assert format_duration(None) == "unknown" and format_duration(math.inf) == "unknown"


def test_render_shows_counts_absorbance_trend_fill_and_time_left():
    statuses = [_status(i, 100.0 + 3000.0 * 10 ** (-0.8 + 0.05 * i), head=1000 + 50 * i, uptime_ms=1000 * i,
                        used=1000 + 50 * i) for i in range(6)]
    text = render_text(statuses, BLANK, {"device": "5e1f", "label": "[bold]bench[/bold] <b>3</b>"})
    assert "[bold]bench[/bold] <b>3</b>" in text  # a board's label is shown as typed, never read as markup
    assert "logging a run" in text and "blank 'water' (from the board)" in text and "1:4" not in text
    assert "0.5500" in text  # the last reading: A = 0.8 − 0.05·5
    assert "█" in text and "▁" in text  # the trend falls from the first reading to the last
    assert "full in about" in text and "50.0 bytes/s" in text
    assert "the board goes on logging" in text


def test_render_without_blank_or_readings_says_what_to_do():
    text = render_text([_status(1, 2000)], None, {"device": "5e1f"})
    assert "none yet: take one with `nightcell blank`" in text and "—" in text
    full = render_text([_status(1, 2000, full=True)], BLANK, {})
    assert "FULL" in full and "sync now" in full
    empty = render_text([{"running": False, "last": None, "used_bytes": 0, "free_bytes": 10}], BLANK, {})
    assert "no reading yet" in empty and "not filling" in empty


class _FakeBoard:
    """Answers ``status`` from a list and records every verb it is asked; Ctrl-C arrives on the last one."""

    def __init__(self, statuses):
        self.statuses = list(statuses)
        self.verbs: list[str] = []

    def status(self):
        self.verbs.append("status")
        if not self.statuses:
            raise KeyboardInterrupt
        return self.statuses.pop(0)

    def __getattr__(self, name):  # any other command is a failure of the view
        raise AssertionError(f"the live view must only ask for status, not {name}")


def test_watch_loop_ends_on_ctrl_c_and_only_asks_for_status():
    from rich.console import Console

    board = _FakeBoard([_status(i, 1500, uptime_ms=1000 * i) for i in range(3)])
    console = Console(file=io.StringIO(), width=100)
    history = watch(board, BLANK, info={"device": "x", "boot": 1}, every=0.0, console=console, sleep=lambda s: None)
    assert len(history) == 3
    assert board.verbs == ["status"] * 4


def test_watch_loop_stops_after_polls():
    from rich.console import Console

    board = _FakeBoard([_status(i, 1500) for i in range(10)])
    sleeps = []
    history = watch(board, BLANK, every=2.5, polls=3, console=Console(file=io.StringIO()),
                    sleep=sleeps.append)
    assert len(history) == 3 and sleeps == [2.5, 2.5]


def test_a_board_that_measures_its_bytes_per_sample_gives_the_time_until_full_from_one_status():
    # 99 000 B free at 3.3 B a sample every 1 s: 30 000 s, as the board says (schema/protocol.md, full_in_s)
    st = dict(_status(3, 1000), bytes_per_sample=3.3, full_in_s=30000)
    fill = journal_fill([st])
    assert fill["seconds_left"] == 30000 and fill["bytes_per_s"] == pytest.approx(3.3)
    assert journal_fill([dict(st, running=False)])["seconds_left"] is None  # not logging: not filling
