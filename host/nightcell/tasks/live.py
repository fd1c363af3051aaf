"""The live view while a board is connected: current counts, absorbance against the latest blank, a small trend,
and how full the journal is and when it will be full.

Owns: finding the latest blank (the board's journal first, then the database), the pure rendering of a list of
``status`` replies into a rich renderable (``render``), and the polling loop (``watch``). The loop only ever sends
``status`` (and ``flush``/``read`` while looking for the blank): it never stops a run, never acknowledges, never
changes the board. Ctrl-C ends the view and leaves the board logging.

Example::

    with Board.open(port) as board:
        info = board.hello()
        blank = latest_blank(board, info)
        watch(board, blank, info=info)
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass
from typing import Any, Callable, Sequence

from rich.console import Console, Group
from rich.table import Table
from rich.text import Text

from ..science import optics as _optics
from ..wire.frames import KIND_MARK, MARK_NAMES, iter_records
from ..wire.link import READ_CHUNK, Board

__all__ = ["Blank", "blank_from_mark", "latest_blank", "reading_absorbance", "journal_fill", "sparkline",
           "format_duration", "render", "watch", "SCAN_LIMIT_BYTES"]

SCAN_LIMIT_BYTES = 256 * 1024
"""Journal bytes not yet in the database that ``latest_blank`` reads from the board, at most."""

_BARS = "▁▂▃▄▅▆▇█"


@dataclass
class Blank:
    """A blank as mean counts per read, per channel, and where it was found."""

    light: list[float]
    dark: list[float]
    boot: int
    seq: int
    label: str
    source: str  # "board" (its journal, not yet synced) or "database"

    def describe(self) -> str:
        label = f" {self.label!r}" if self.label else ""
        return f"blank{label} (from the {self.source})"


def blank_from_mark(mark: dict[str, Any], source: str) -> Blank:
    """A ``Blank`` from a blank mark (a store row or a decoded MARK record's fields): sums divided by reads."""
    reads = max(1, int(mark["reads"]))
    return Blank([v / reads for v in mark["light"]], [v / reads for v in mark["dark"]], int(mark["boot"]),
                 int(mark["seq"]), str(mark.get("label", "")), source)


def latest_blank(board: Board, info: dict[str, Any], store: Any = None) -> Blank | None:
    """The newest blank of the board in ``info`` (a ``hello`` reply): from the part of its journal the database
    does not hold yet (read only, never acknowledged; at most ``SCAN_LIMIT_BYTES``), else the database's latest.
    None when neither has one."""
    device = str(info["device"])
    start = int(info["tail"])
    stored = None
    if store is not None:
        stored = store.journal_state(device, int(info["journal"]))
        if stored is not None:
            start = max(start, stored[0])
    head = int(board.flush().get("head", info["head"]))
    found = None
    if head - start <= SCAN_LIMIT_BYTES:
        pos = start
        while pos < head:
            _, data = board.read(pos, READ_CHUNK)
            if not data:
                break
            for rec in iter_records(data, pos):
                if rec.kind == KIND_MARK and MARK_NAMES.get(rec.fields["mark"]) == "blank":
                    found = blank_from_mark(dict(rec.fields, boot=rec.boot, seq=rec.seq), "board")
            pos += len(data)
    if found is None and store is not None:
        blanks = store.marks(device, "blank")
        if blanks:
            found = blank_from_mark(blanks[-1], "database")
    return found


def reading_absorbance(status: dict[str, Any], blank: Blank | None) -> list[float | None]:
    """Absorbance of each channel of the status's last reading against ``blank`` (None where none can be had)."""
    last = status.get("last")
    if not last:
        return []
    reads = max(1, int(last.get("reads") or 1))
    out: list[float | None] = []
    for c, (light, dark) in enumerate(zip(last["light"], last["dark"])):
        if blank is None or c >= len(blank.light) or blank.light[c] - blank.dark[c] <= 0:
            out.append(None)
            continue
        res = _optics.absorbance([light / reads], [dark / reads], blank.light[c], blank.dark[c])
        a = float(res.absorbance[0])
        out.append(a if math.isfinite(a) else None)
    return out


def journal_fill(statuses: Sequence[dict[str, Any]]) -> dict[str, Any]:
    """How full the journal is and, from how fast its head grew over these statuses, board seconds until full.

    ``seconds_left`` is None while the growth cannot be seen yet (fewer than two blocks arrived while watched, or not
    logging); a board that reports ``full_in_s`` (its own measured bytes per sample) is taken at its word.
    """
    st = statuses[-1]
    used = int(st.get("used_bytes", 0))
    free = int(st.get("free_bytes", 0))
    capacity = used + free
    out: dict[str, Any] = {"used_bytes": used, "free_bytes": free, "fraction": used / capacity if capacity else 0.0,
                           "bytes_per_s": None, "seconds_left": None, "full": bool(st.get("full"))}
    # the head only grows within one journal; a smaller head means a new journal: look only after it
    since = [st]
    for prev in reversed(statuses[:-1]):
        if int(prev.get("head", 0)) > int(since[0].get("head", 0)) or \
                int(prev.get("uptime_ms", 0)) > int(since[0].get("uptime_ms", 0)):
            break
        since.insert(0, prev)
    # the board adds to its journal a whole block of samples at a time: measure from one block's arrival to a later
    # one's, never from an arbitrary first poll (which would count a block that began before the watch)
    arrivals = [b for a, b in zip(since, since[1:]) if int(b.get("head", 0)) > int(a.get("head", 0))]
    if len(arrivals) >= 2 and st.get("running"):
        first, last = arrivals[0], arrivals[-1]
        grown = int(last.get("head", 0)) - int(first.get("head", 0))
        span_s = (int(last.get("uptime_ms", 0)) - int(first.get("uptime_ms", 0))) / 1000.0
        if grown > 0 and span_s > 0:
            out["bytes_per_s"] = grown / span_s
            out["seconds_left"] = free / out["bytes_per_s"]
    # a board that measures its own bytes per sample (hello/status ``full_in_s``) knows better than two polls
    if st.get("running") and st.get("full_in_s") is not None and st.get("bytes_per_sample"):
        out["seconds_left"] = float(st["full_in_s"])
        out["bytes_per_s"] = float(st["bytes_per_sample"]) * 1000.0 / max(1, int(st.get("interval_ms") or 1))
    return out


def sparkline(values: Sequence[float | None], width: int = 40) -> str:
    """The last ``width`` values as block characters scaled between their min and max (blank where missing)."""
    vals = list(values)[-width:]
    finite = [v for v in vals if v is not None and math.isfinite(v)]
    if not finite:
        return ""
    lo, hi = min(finite), max(finite)
    span = hi - lo
    out = []
    for v in vals:
        if v is None or not math.isfinite(v):
            out.append(" ")
        elif span <= 0:
            out.append(_BARS[len(_BARS) // 2])
        else:
            out.append(_BARS[min(len(_BARS) - 1, int((v - lo) / span * len(_BARS)))])
    return "".join(out)


def format_duration(seconds: float | None) -> str:
    """Seconds as '2 d 3 h', '5 h 12 min', '40 min' or '30 s'."""
    if seconds is None or not math.isfinite(seconds):
        return "unknown"
    s = int(round(seconds))
    if s >= 86400:
        return f"{s // 86400} d {s % 86400 // 3600} h"
    if s >= 3600:
        return f"{s // 3600} h {s % 3600 // 60} min"
    if s >= 60:
        return f"{s // 60} min"
    return f"{s} s"


def _readings(statuses: Sequence[dict[str, Any]]) -> list[dict[str, Any]]:
    """One status per distinct reading (a poll faster than the interval sees the same reading twice)."""
    seen: dict[tuple[int, int], dict[str, Any]] = {}
    for st in statuses:
        last = st.get("last")
        if last:
            seen[(int(st.get("boot", 0)), int(last["seq"]))] = st
    return list(seen.values())


def render(statuses: Sequence[dict[str, Any]], blank: Blank | None, info: dict[str, Any] | None = None,
           *, channel_names: Sequence[str] = (), trend_width: int = 40) -> Group:
    """The live view of these ``status`` replies (oldest first) as a rich renderable; pure, so tests can read it.

    Every text that came from the board (label, channel names) is put in as plain ``Text``, never as markup.
    """
    info = info or {}
    st = statuses[-1] if statuses else {}
    head = Table.grid(padding=(0, 2))
    head.add_column(style="bold")
    head.add_column()
    who = Text(str(info.get("label") or info.get("device", "board")))  # the id is in `hello --detail`
    head.add_row("board", who)
    state = "logging a run" if st.get("running") else "idle (not logging)"
    head.add_row("state", f"{state}; interval {int(st.get('interval_ms', info.get('interval_ms', 0))) / 1000:g} s; "
                          f"{int(st.get('samples', 0))} samples since it was switched on")
    head.add_row("blank", Text(blank.describe() if blank else
                               "none yet: take one with `nightcell blank`; absorbance needs it"))

    chans = Table(show_edge=False, box=None, padding=(0, 2))
    for col in ("channel", "light/read", "dark/read", "absorbance", "trend (absorbance)"):
        chans.add_column(col)
    last = st.get("last")
    readings = _readings(statuses)
    if last:
        reads = max(1, int(last.get("reads") or 1))
        now_a = reading_absorbance(st, blank)
        for c, (light, dark) in enumerate(zip(last["light"], last["dark"])):
            series = []
            for r in readings:
                a = reading_absorbance(r, blank)
                series.append(a[c] if c < len(a) else None)
            name = channel_names[c] if c < len(channel_names) else str(c)
            a_now = now_a[c] if c < len(now_a) else None
            chans.add_row(Text(name), f"{light / reads:.1f}", f"{dark / reads:.1f}",
                          "—" if a_now is None else f"{a_now:.4f}", sparkline(series, trend_width))
    else:
        chans.add_row("—", "no reading yet", "", "", "")

    fill = journal_fill(statuses) if statuses else None
    journal = Table.grid(padding=(0, 2))
    journal.add_column(style="bold")
    journal.add_column()
    if fill is not None:
        width = 30
        filled = int(round(fill["fraction"] * width))
        bar = "█" * filled + "░" * (width - filled)
        journal.add_row("storage", f"{bar} {fill['fraction']:.1%} used "
                                   f"({fill['used_bytes'] / 1024:.0f} KiB of "
                                   f"{(fill['used_bytes'] + fill['free_bytes']) / 1024:.0f} KiB)")
        if fill["full"]:
            left = Text("FULL — new samples are not stored: sync now to make room", style="bold red")
        elif fill["seconds_left"] is not None:
            left = Text(f"full in about {format_duration(fill['seconds_left'])} of board time at "
                        f"{fill['bytes_per_s']:.1f} bytes/s (sync before then)")
        elif st.get("running"):
            left = Text("full in: estimating (the board stores a block of samples at a time; this needs two "
                        "blocks to arrive while watched)")
        else:
            left = Text("not filling: no run is logging")
        journal.add_row("", left)
    footer = Text("Ctrl-C stops watching; the board goes on logging.", style="dim")
    return Group(head, Text(""), chans, Text(""), journal, footer)


def render_text(statuses: Sequence[dict[str, Any]], blank: Blank | None, info: dict[str, Any] | None = None,
                width: int = 100) -> str:
    """``render`` as plain text (for tests and logs)."""
    console = Console(width=width, record=True, file=_Null(), color_system=None)
    console.print(render(statuses, blank, info))
    return console.export_text()


class _Null:
    def write(self, s: str) -> int:
        return len(s)

    def flush(self) -> None:
        pass


def watch(board: Board, blank: Blank | None, *, info: dict[str, Any] | None = None, every: float = 1.0,
          polls: int | None = None, console: Console | None = None, keep: int = 240,
          sleep: Callable[[float], None] = time.sleep, channel_names: Sequence[str] = ()) -> list[dict[str, Any]]:
    """Poll ``status`` every ``every`` seconds and redraw the view until Ctrl-C (or ``polls`` polls).

    Returns the statuses seen (at most ``keep``). Ctrl-C is swallowed here: the caller just finishes, and the board
    — never sent anything but ``status`` — goes on logging.
    """
    from rich.live import Live

    history: list[dict[str, Any]] = []
    boot = (info or {}).get("boot", 0)
    n = 0
    with Live(render([], blank, info), console=console, auto_refresh=False, transient=False) as live:
        try:
            while polls is None or n < polls:
                st = dict(board.status(), boot=boot)
                history.append(st)
                del history[:-keep]
                live.update(render(history, blank, info, channel_names=channel_names), refresh=True)
                n += 1
                if polls is not None and n >= polls:
                    break
                sleep(every)
        except KeyboardInterrupt:
            pass
    return history

