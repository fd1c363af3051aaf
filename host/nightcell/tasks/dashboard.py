"""The class set at a glance: one worker thread per board keeps a tile's worth of state and the alerts a teacher
wants to see; "sync all" pauses each worker, syncs its board, and lets it go on.

Owns: the worker loop (``status`` at a modest rate, the board's journal read forward for marks and restarts), the
tile state and its alert rules (``alerts_for``, pure), and the order of a sync of every board (``ClassSet``).
Must never: hold a board's port while a sync of that board runs (the worker closes it first and waits), send a board
anything but ``hello``/``status``/``read`` unless a caller asks for one of the controls (``CONTROLS``) — the web room
checks the control token before it does — or know anything about HTTP: ``render/dashboard`` serves this state.

The absorbance, journal-fill and trend logic is the live view's (``tasks.live``); sync is ``store.sync.sync_ports``;
the page is ``render.dashboard`` (``serve_page`` puts the two together for the command).

Example::

    boards = ClassSet(["/dev/ttyACM0", "/dev/ttyACM1"], db="class.db")
    boards.start()
    print(boards.snapshot()["tiles"])
    boards.sync_all()
    boards.stop()
"""

from __future__ import annotations

import math
import threading
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable, Sequence

from ..errors import DeviceNotFound, InputError, NightcellError
from ..science import optics as _optics
from ..wire.frames import KIND_BOOT, KIND_EVENT, KIND_MARK, KIND_SAMPLES, MARK_NAMES, iter_records
from ..wire.link import READ_CHUNK, Board
from .live import Blank, blank_from_mark, journal_fill, reading_absorbance

__all__ = ["Limits", "BoardWorker", "ClassSet", "alerts_for", "board_ports", "parse_planned_end", "scatter_sd",
           "serve_page", "CONTROLS", "ALERT_CODES"]

EVENT_FLASH_FULL = 4  # schema/records.md, EVENT codes
MARK_SOURCE_BOARD = 2  # schema/records.md: a MARK the board journaled by itself (a run it resumed)

ALERT_CODES = {
    "not_answering": "stopped answering",
    "restarted": "restarted in the middle of a run",
    "no_blank": "no blank since it booted",
    "blank_blocked": "the blank looks blocked",
    "saturated": "readings saturated",
    "beyond_stray": "readings beyond the stray-light ceiling",
    "light_near_dark": "light close to dark",
    "journal_full": "journal full",
    "full_before_end": "journal full before the planned end",
}
"""Every alert a tile can raise, by code, with its short title (the page shows the title and the detail)."""

CONTROLS = ("start", "stop", "blank")
"""What a page may ask a board to do when the server was started with ``--control`` and the token is presented."""


@dataclass
class Limits:
    """The thresholds of the alert rules, in one place (each is a choice of ours, stated with its reason)."""

    silence_s: float = 3.0
    """No answer for this long (wall seconds) and the tile says "not answering": six polls at the default rate,
    so one slow reply on a busy laptop does not raise it."""
    full_scale: float = 4095.0
    """The ADC's top count per read (12 bits), as ``optics.absorbance`` takes it."""
    near_dark_fraction: float = 0.02
    """Light − dark below this fraction of full scale (82 counts per read of 4095) is "light close to dark": an LED
    that is off, failed or disconnected, or a light path that is blocked. A working cell sees hundreds to thousands."""
    stray_default: float = 0.0
    """Stray-light fraction used when the board holds no opaque mark (0: only the saturation flag can fire)."""


def parse_planned_end(text: str | None, now: float | None = None) -> float | None:
    """The planned end of the class's runs as Unix seconds, from ``HH:MM`` (today, or tomorrow if already past, local
    time) or a duration from now (``90min``, ``3h``, ``2d``, ``45s``). None for None; ``InputError`` otherwise."""
    if text is None:
        return None
    now = time.time() if now is None else now
    t = text.strip().lower()
    units = {"d": 86400.0, "h": 3600.0, "min": 60.0, "m": 60.0, "s": 1.0}
    for suffix in ("min", "d", "h", "m", "s"):
        if t.endswith(suffix):
            try:
                value = float(t[: -len(suffix)])
            except ValueError:
                break
            if not math.isfinite(value) or value <= 0:
                break
            return now + value * units[suffix]
    if ":" in t:
        hh, _, mm = t.partition(":")
        if hh.isdigit() and mm.isdigit() and int(hh) < 24 and int(mm) < 60 and len(mm) == 2:
            lt = time.localtime(now)
            end = time.mktime((lt.tm_year, lt.tm_mon, lt.tm_mday, int(hh), int(mm), 0, 0, 0, -1))
            return end if end > now else end + 86400.0
    raise InputError(f"--planned-end {text!r}: give a time today as HH:MM (e.g. 15:30) or a duration from now "
                     "(e.g. 90min, 3h, 2d)")


def _reading_flags(status: dict[str, Any], blank: Blank | None, stray: float, limits: Limits) -> list[int]:
    """``optics`` flags of each channel of the status's last reading against the blank (saturation, stray light);
    0 for a channel the blank cannot read."""
    last = status.get("last") if blank is not None else None
    if not last or blank is None:
        return []
    per_read = 1.0 / max(1, int(last.get("reads") or 1))
    out = [0] * len(last["light"])
    for c in range(min(len(out), len(blank.light))):
        if blank.light[c] > blank.dark[c]:
            res = _optics.absorbance([last["light"][c] * per_read], [last["dark"][c] * per_read], blank.light[c],
                                     blank.dark[c], full_scale=limits.full_scale, stray=stray)
            out[c] = int(res.flags[0])
    return out


def scatter_sd(values: Sequence[float | None], last: int = 12) -> float | None:
    """Reading-to-reading scatter of the newest ``last`` finite values, from their successive differences: the
    median absolute difference over 0.6745·√2 (a difference of two independent normal readings has SD σ√2, and the
    median of its size is 0.6745 of that SD). Differences, so a slow drift or a reaction barely counts; the median,
    so one change of cuvette does not. None with fewer than 5 values. The page rounds the absorbance it shows at
    this uncertainty."""
    finite = [v for v in values if v is not None and math.isfinite(v)][-last:]
    if len(finite) < 5:
        return None
    diffs = sorted(abs(b - a) for a, b in zip(finite, finite[1:]))
    n = len(diffs)
    median = diffs[n // 2] if n % 2 else (diffs[n // 2 - 1] + diffs[n // 2]) / 2
    return median / (0.6745 * math.sqrt(2.0))


def _net_light(light: Sequence[float], dark: Sequence[float], reads: int = 1) -> list[float]:
    return [(li - d) / max(1, reads) for li, d in zip(light, dark)]


def alerts_for(tile: dict[str, Any], limits: Limits | None = None, now: float | None = None) -> list[dict[str, str]]:
    """The alerts of one tile (its state as ``BoardWorker.snapshot`` gives it); pure, so every rule has a test.

    Each alert is ``{"code", "title", "detail"}`` with the code from ``ALERT_CODES``.
    """
    limits = limits or Limits()
    now = time.time() if now is None else now
    out: list[dict[str, str]] = []

    def add(code: str, detail: str) -> None:
        out.append({"code": code, "title": ALERT_CODES[code], "detail": detail})

    if tile.get("state") == "not answering":
        seen = tile.get("last_answer_unix")
        add("not_answering", "no answer since it was last seen" if seen is None else
            f"no answer for {now - seen:.0f} s: check its cable and power")
    restart = tile.get("restart")
    if restart:
        add("restarted", f"boot {restart['from_boot']} → {restart['to_boot']}"
            + (f" (reset cause {restart['reset_cause']})" if restart.get("reset_cause") is not None else "")
            + ("; the board resumed the run by itself" if restart.get("resumed") else
               "; the run did not resume"))
    blank = tile.get("blank")
    boot = tile.get("boot")
    if tile.get("device") and boot is not None:
        if blank is None:
            add("no_blank", "no blank on the board or in the database: take one before reading absorbance")
        elif blank["boot"] != boot:
            add("no_blank", f"the newest blank is from boot {blank['boot']}; this is boot {boot}: take a new one")
    if blank is not None:
        net = _net_light(blank["light"], blank["dark"])
        low = [c for c, v in enumerate(net) if v < limits.near_dark_fraction * limits.full_scale]
        if low:
            add("blank_blocked", f"channel {low[0]}: the blank's light is only {net[low[0]]:.0f} counts above dark "
                                 "(blocked path or LED off when it was taken): take it again")
    flags = tile.get("flags") or []
    if any(f & _optics.FLAG_SATURATED for f in flags):
        add("saturated", "the light is at the top of the ADC range: absorbance reads too low; lower the LED drive")
    if any(f & _optics.FLAG_BEYOND_STRAY for f in flags):
        add("beyond_stray", "stray light is at least half of what is detected: dilute the sample")
    last = tile.get("last")
    if last and tile.get("state") != "not answering":
        net = _net_light(last["light"], last["dark"], int(last.get("reads") or 1))
        low = [c for c, v in enumerate(net) if v < limits.near_dark_fraction * limits.full_scale]
        if low:
            add("light_near_dark", f"channel {low[0]}: light only {net[low[0]]:.0f} counts above dark: is the LED on "
                                   "and the path clear?")
    fill = tile.get("journal") or {}
    if fill.get("full"):
        add("journal_full", "new samples are not stored: sync all to make room")
    elif tile.get("planned_end_unix") and tile.get("state") == "logging":
        left = fill.get("wall_seconds_left")
        until_end = tile["planned_end_unix"] - now
        if left is not None and until_end > 0 and left < until_end:
            add("full_before_end", f"full in about {_minutes(left)}, the run ends in {_minutes(until_end)}: "
                                   "sync before then")
    return out


def _minutes(seconds: float) -> str:
    if seconds >= 5400:
        return f"{seconds / 3600:.1f} h"
    return f"{max(1, round(seconds / 60))} min"


class BoardWorker:
    """One board's worker: the only thing that talks to its port while the dashboard runs.

    ``every`` seconds it asks ``status``; when the journal's head moved it reads the new records (at most
    ``scan_chunks`` × 4 KiB a turn, so a long unsynced journal is read over several turns without delaying status).
    ``pause()`` closes the port and waits (for a sync); ``resume()`` lets it go on. ``on_change()`` is called from
    the worker's thread after every change of its state.
    """

    def __init__(self, url: str, *, db: str | Path | None = None, every: float = 0.5, answer_timeout: float = 1.0,
                 limits: Limits | None = None, planned_end: float | None = None, keep: int = 120,
                 trend: int = 60, scan_chunks: int = 4, on_change: Callable[[], None] = lambda: None):
        self.url = url
        self.db = None if db is None else Path(db)
        self.every = every
        self.answer_timeout = answer_timeout
        self.limits = limits or Limits()
        self.planned_end = planned_end
        self.keep = keep
        self.trend = trend
        self.scan_chunks = scan_chunks
        self.on_change = on_change
        self._lock = threading.Lock()
        self._halt = threading.Event()
        self._wake = threading.Event()
        self._pause_wanted = threading.Event()
        self._paused = threading.Event()
        self._actions: list[tuple[str, dict[str, Any], dict[str, Any], threading.Event]] = []
        self._thread = threading.Thread(target=self._run, daemon=True, name=f"nightcell-dashboard {url}")
        self._board: Board | None = None
        # what the tile shows
        self.info: dict[str, Any] | None = None
        self.statuses: list[dict[str, Any]] = []
        self.wall: list[float] = []  # wall time of each status, for board-time → wall-time
        self.history: list[float | None] = []  # absorbance of channel 0, one per distinct reading
        self._last_key: tuple[int, int] | None = None
        self.last_answer: float | None = None
        self.error: str | None = None
        self.paused_for = ""
        self.restart: dict[str, Any] | None = None
        # what the journal told us
        self._cursor: dict[int, int] = {}  # journal id → position read up to
        self.blank: Blank | None = None
        self.opaque: dict[str, Any] | None = None
        self.last_mark: dict[str, Any] | None = None
        self._boot_samples: dict[int, int] = {}  # samples journaled per boot (blocks seen)
        self._run_start: dict[str, Any] | None = None  # newest run_start of the current boot
        self._run_stopped: tuple[int, int] | None = None
        self._full_event = False
        self._journal_boots: set[int] = set()

    # -- life cycle ----------------------------------------------------------------------------------------------

    def start(self) -> "BoardWorker":
        self._thread.start()
        return self

    def stop(self, timeout: float = 5.0) -> None:
        self._halt.set()
        self._wake.set()
        self._thread.join(timeout)
        self._close()

    def pause(self, reason: str = "sync", timeout: float = 10.0) -> bool:
        """Close the port and keep it closed until ``resume()``; True once the port is closed."""
        self.paused_for = reason
        self._pause_wanted.set()
        self._wake.set()
        ok = self._paused.wait(timeout)
        self.on_change()
        return ok

    def resume(self) -> None:
        self._pause_wanted.clear()
        self._paused.clear()
        self.paused_for = ""
        self._wake.set()
        self.on_change()

    def control(self, action: str, timeout: float = 70.0, **args: Any) -> dict[str, Any]:
        """Run one of ``CONTROLS`` on the board from the worker's own thread; its reply, or ``{"error": ...}``."""
        if action not in CONTROLS:
            raise InputError(f"unknown control {action!r}: one of {', '.join(CONTROLS)}")
        done = threading.Event()
        result: dict[str, Any] = {}
        with self._lock:
            self._actions.append((action, args, result, done))
        self._wake.set()
        if not done.wait(timeout):
            return {"error": "the board's worker did not get to it in time"}
        return result

    # -- the loop ------------------------------------------------------------------------------------------------

    def _close(self) -> None:
        board, self._board = self._board, None
        if board is not None:
            board.close()

    def _run(self) -> None:
        while not self._halt.is_set():
            if self._pause_wanted.is_set():
                self._close()
                self._paused.set()
                self._wake.wait(0.5)
                self._wake.clear()
                continue
            t0 = time.monotonic()
            try:
                if self._board is None:
                    self._connect()
                self._poll()
                self._do_actions()
                self.error = None
            except NightcellError as exc:
                self.error = str(exc)
                self._close()
            except Exception as exc:  # noqa: BLE001 — a worker must outlive one odd reply; say what happened
                self.error = f"{type(exc).__name__}: {exc}"
                self._close()
            self.on_change()
            self._wake.wait(max(0.05, self.every - (time.monotonic() - t0)))
            self._wake.clear()
        self._close()

    def _connect(self) -> None:
        board = Board.open(self.url, timeout=self.answer_timeout)
        board.retries = 1
        self._board = board
        info = board.hello(timeout=self.answer_timeout)
        self.last_answer = time.time()
        old = self.info
        if old is not None and old.get("device") == info.get("device") and old.get("boot") != info.get("boot"):
            was_running = bool(self.statuses and self.statuses[-1].get("running")) or bool(old.get("running"))
            if was_running or info.get("running"):
                self.restart = {"from_boot": old.get("boot"), "to_boot": info.get("boot"), "reset_cause": None,
                                "resumed": bool(info.get("running"))}
            self.statuses.clear()
            self.wall.clear()
        if old is None or old.get("device") != info.get("device"):
            self._load_from_database(info)
        self.info = info

    def _load_from_database(self, info: dict[str, Any]) -> None:
        """The newest blank and opaque mark the database holds for this device, and where its journal is stored to
        (the live view's rule: the board's own unsynced journal wins, the database fills in)."""
        if self.db is None or not self.db.exists():
            return
        from ..store.database import Store

        try:
            with Store.open_read(self.db) as store:
                device = str(info["device"])
                state = store.journal_state(device, int(info["journal"]))
                if state is not None:
                    self._cursor[int(info["journal"])] = max(self._cursor.get(int(info["journal"]), 0), state[0])
                blanks = store.marks(device, "blank")
                if blanks and self.blank is None:
                    self.blank = blank_from_mark(blanks[-1], "database")
                opaques = store.marks(device, "opaque")
                if opaques and self.opaque is None:
                    self.opaque = {"light": opaques[-1]["light"], "dark": opaques[-1]["dark"],
                                   "reads": opaques[-1]["reads"]}
        except NightcellError:
            return  # an unreadable database only costs the fallback; sync all will say what is wrong with it

    def _poll(self) -> None:
        board = self._board
        assert board is not None and self.info is not None
        st = board.status()
        now = time.time()
        self.last_answer = now
        st = dict(st, boot=self.info.get("boot"))
        if self.statuses and int(st.get("free_bytes", 0)) > int(self.statuses[-1].get("free_bytes", 0)):
            self._full_event = False  # a sync's acknowledgement made room: no longer full
        with self._lock:
            self.statuses.append(st)
            self.wall.append(now)
            del self.statuses[:-self.keep]
            del self.wall[:-self.keep]
            last = st.get("last")
            if last:
                key = (int(st.get("boot") or 0), int(last["seq"]))
                if key != self._last_key:
                    self._last_key = key
                    a = reading_absorbance(st, self.blank)
                    self.history.append(a[0] if a else None)
                    del self.history[:-self.trend]
        self._scan(board, int(st.get("head", 0)), int(st.get("tail", 0)))

    def _scan(self, board: Board, head: int, tail: int) -> None:
        """Read the journal forward from where we were (never acknowledging), noting marks, boots and events."""
        assert self.info is not None
        journal = int(self.info["journal"])
        pos = max(self._cursor.get(journal, tail), tail)
        for _ in range(self.scan_chunks):
            if pos >= head:
                break
            _, data = board.read(pos, READ_CHUNK)
            if not data:
                break
            for rec in iter_records(data, pos, lazy_samples=True):
                self._note(rec)
            pos += len(data)
            self._cursor[journal] = pos

    def _note(self, rec: Any) -> None:
        current = self.info.get("boot") if self.info else None
        if rec.kind == KIND_BOOT:
            self._journal_boots.add(rec.boot)
            if rec.boot == current:
                self._run_start = None
                self._run_stopped = None
                self._full_event = False
                if self.restart is not None and self.restart.get("to_boot") == rec.boot:
                    self.restart["reset_cause"] = rec.fields.get("reset_cause")
        elif rec.kind == KIND_SAMPLES:
            self._boot_samples[rec.boot] = self._boot_samples.get(rec.boot, 0) + int(rec.fields["count"])
        elif rec.kind == KIND_EVENT and rec.fields.get("code") == EVENT_FLASH_FULL and rec.boot == current:
            self._full_event = True
        elif rec.kind == KIND_MARK:
            name = MARK_NAMES.get(rec.fields["mark"], "mark")
            self.last_mark = {"kind": name, "label": rec.fields.get("label", ""), "value": rec.fields.get("value", ""),
                              "boot": rec.boot, "seq": rec.seq, "source": rec.fields.get("source")}
            if name == "blank":
                self.blank = blank_from_mark(dict(rec.fields, boot=rec.boot, seq=rec.seq), "board")
                self.history = [None] * len(self.history)  # the trend was read against another blank
            elif name == "opaque":
                self.opaque = {"light": rec.fields["light"], "dark": rec.fields["dark"], "reads": rec.fields["reads"]}
            elif name == "run_start" and rec.boot == current:
                self._run_start = {"boot": rec.boot, "seq": rec.seq, "label": rec.fields.get("label", ""),
                                   "samples_before": self._boot_samples.get(rec.boot, 0)}
                self._run_stopped = None
                if rec.fields.get("source") == MARK_SOURCE_BOARD and self.restart is None:
                    # a run resumed by the board itself after a restart we did not watch
                    self.restart = {"from_boot": rec.boot - 1, "to_boot": rec.boot, "reset_cause": None,
                                    "resumed": True}
            elif name == "run_stop" and rec.boot == current:
                self._run_stopped = (rec.boot, rec.seq)

    def _do_actions(self) -> None:
        with self._lock:
            actions, self._actions = self._actions, []
        for action, args, result, done in actions:
            try:
                board = self._board
                if board is None:
                    raise DeviceNotFound(f"no board answering on {self.url}")
                if action == "start":
                    result.update(board.start(str(args.get("label", ""))))
                elif action == "stop":
                    result.update(board.stop())
                elif action == "blank":
                    result.update(board.mark("blank", str(args.get("label", ""))))
            except NightcellError as exc:
                result["error"] = str(exc)
            finally:
                done.set()

    # -- what the page shows ---------------------------------------------------------------------------------------

    def _stray(self) -> float:
        if self.opaque is None or self.blank is None or not self.blank.light:
            return self.limits.stray_default
        reads = max(1, int(self.opaque.get("reads") or 1))
        try:
            return _optics.stray_fraction_from_opaque(self.opaque["light"][0] / reads, self.opaque["dark"][0] / reads,
                                                      self.blank.light[0], self.blank.dark[0])
        except (NightcellError, IndexError):
            return self.limits.stray_default

    def _board_rate(self) -> float:
        """Board seconds per wall second over the statuses kept (1 for real boards; more for a fast simulation)."""
        if len(self.statuses) < 2:
            return 1.0
        db = (int(self.statuses[-1].get("uptime_ms", 0)) - int(self.statuses[0].get("uptime_ms", 0))) / 1000.0
        dw = self.wall[-1] - self.wall[0]
        return db / dw if db > 0 and dw > 0 else 1.0

    def snapshot(self, now: float | None = None) -> dict[str, Any]:
        """The tile: plain JSON types, full precision (the page rounds)."""
        now = time.time() if now is None else now
        with self._lock:
            info = dict(self.info or {})
            statuses = list(self.statuses)
            history = list(self.history)
        st = statuses[-1] if statuses else {}
        silent = self.last_answer is None or now - self.last_answer > self.limits.silence_s
        if self._paused.is_set() or self._pause_wanted.is_set():
            state = "paused"
        elif silent:
            state = "not answering"
        elif st.get("running"):
            state = "logging"
        elif self._run_stopped is not None or self._full_event:
            state = "stopped"
        else:
            state = "idle"
        absorbance = reading_absorbance(st, self.blank) if st else []
        fill = journal_fill(statuses) if statuses else None
        if fill is not None:
            fill["wall_seconds_left"] = (None if fill["seconds_left"] is None
                                         else fill["seconds_left"] / self._board_rate())
            fill["full"] = bool(fill["full"] or self._full_event)
        samples = int(st.get("samples", 0)) if st else None
        run_samples = None
        if samples is not None and (st.get("running") or self._run_stopped):
            if self._run_start is not None:
                run_samples = max(0, samples - int(self._run_start["samples_before"]))
            elif info.get("boot") not in self._journal_boots:
                run_samples = samples  # this boot's start is not in what we read: every sample of the boot
        tile = {
            "port": self.url, "device": info.get("device"), "label": info.get("label") or "",
            "board": info.get("board"), "firmware": info.get("firmware"), "boot": info.get("boot"),
            "state": state, "paused_for": self.paused_for if state == "paused" else "",
            "absorbance": absorbance, "trend": history, "absorbance_sd": scatter_sd(history),
            "flags": _reading_flags(st, self.blank, self._stray(), self.limits) if st else [],
            "last": st.get("last"), "interval_ms": st.get("interval_ms", info.get("interval_ms")),
            "samples_boot": samples, "samples_run": run_samples,
            "run_label": (self._run_start or {}).get("label"),
            "last_mark": self.last_mark, "journal": fill,
            "blank": None if self.blank is None else {"light": self.blank.light, "dark": self.blank.dark,
                                                       "boot": self.blank.boot, "seq": self.blank.seq,
                                                       "label": self.blank.label, "source": self.blank.source},
            "stray": self._stray(), "last_answer_unix": self.last_answer,
            "age_s": None if self.last_answer is None else max(0.0, now - self.last_answer),
            "error": self.error, "restart": self.restart, "planned_end_unix": self.planned_end,
        }
        tile["alerts"] = alerts_for(tile, self.limits, now)
        return tile


def board_ports(extra: Sequence[str] = (), *, discover_boards: bool = True, timeout: float = 1.0) -> list[str]:
    """The ports of every board that answers ``roll-call``'s discovery, then ``extra`` URLs, each once."""
    from ..wire.link import discover

    found = [e["port"] for e in discover(timeout=timeout) if "hello" in e] if discover_boards else []
    out: list[str] = []
    for p in [*found, *extra]:
        if p not in out:
            out.append(p)
    return out


class ClassSet:
    """Every board's worker, and a sync of them all that never shares a port with a worker."""

    def __init__(self, ports: Sequence[str], *, db: str | Path, every: float = 0.5, limits: Limits | None = None,
                 planned_end: float | None = None, acknowledge: bool = True, sync_timeout: float = 5.0,
                 on_change: Callable[[], None] = lambda: None):
        self.db = Path(db)
        self.acknowledge = acknowledge
        self.sync_timeout = sync_timeout
        self.on_change = on_change
        self.version = 0
        self._vlock = threading.Lock()
        self.workers = [BoardWorker(p, db=self.db, every=every, limits=limits, planned_end=planned_end,
                                    on_change=self._changed) for p in ports]
        self.sync_state: dict[str, dict[str, Any]] = {}
        self.sync_running = False
        self._sync_lock = threading.Lock()

    def _changed(self) -> None:
        with self._vlock:
            self.version += 1
        self.on_change()

    def start(self) -> "ClassSet":
        for w in self.workers:
            w.start()
        return self

    def stop(self) -> None:
        for w in self.workers:
            w.stop()

    def worker(self, port: str) -> BoardWorker:
        for w in self.workers:
            if w.url == port:
                return w
        raise InputError(f"no board on {port} in this dashboard")

    def snapshot(self) -> dict[str, Any]:
        now = time.time()
        tiles = [w.snapshot(now) for w in self.workers]
        alerts = [dict(a, port=t["port"], label=t["label"], device=t["device"]) for t in tiles for a in t["alerts"]]
        return {"version": self.version, "server_unix": now, "db": str(self.db), "tiles": tiles, "alerts": alerts,
                "planned_end_unix": self.workers[0].planned_end if self.workers else None,
                "sync": {"running": self.sync_running, "boards": dict(self.sync_state)}}

    def sync_all(self) -> list[dict[str, Any]]:
        """Sync every board into the database, one after another; each board's worker closes its port first and
        goes on when its sync is done. Per-board progress is in ``sync_state``. A sync already running: refused."""
        from ..store.sync import sync_ports

        if not self._sync_lock.acquire(blocking=False):
            raise InputError("a sync of every board is already running: wait for it to finish")
        try:
            self.sync_running = True
            self.sync_state = {w.url: {"phase": "waiting", "done": 0, "total": 0, "records": 0} for w in self.workers}
            self._changed()
            results = []
            for w in self.workers:
                state = self.sync_state[w.url]
                state["phase"] = "syncing"
                self._changed()
                if not w.pause("sync"):
                    state.update(phase="failed", error="its worker did not let go of the port")
                    w.resume()
                    continue

                def progress(port: str, done: int, total: int, records: int, _s: dict = state) -> None:
                    _s.update(done=done, total=total, records=records)
                    self._changed()

                try:
                    entry = sync_ports([w.url], self.db, acknowledge=self.acknowledge, timeout=self.sync_timeout,
                                       progress=progress)[0]
                except NightcellError as exc:
                    entry = {"port": w.url, "error": str(exc)}
                finally:
                    w.resume()
                if "summary" in entry:
                    s = entry["summary"]
                    state.update(phase="done", records=s.records, new_rows=s.new, device=s.device,
                                 warnings=list(s.warnings), seconds=round(s.seconds, 2))
                    results.append({"port": w.url, **s.to_dict()})
                else:
                    state.update(phase="failed", error=entry["error"])
                    results.append({"port": w.url, "error": entry["error"]})
                self._changed()
            return results
        finally:
            self.sync_running = False
            self._sync_lock.release()
            self._changed()


def serve_page(ports: Sequence[str], db: str | Path, *, every: float = 0.5, planned_end: float | None = None,
               acknowledge: bool = True, host: str = "127.0.0.1", http_port: int = 0,
               control_token: str | None = None, any_host: bool = False,
               ready: Callable[[str], None] = lambda url: None) -> None:
    """Watch every board in ``ports`` and serve the class page until Ctrl-C; the workers stop with it."""
    from ..render.dashboard.server import serve

    classset = ClassSet(ports, db=db, every=every, planned_end=planned_end, acknowledge=acknowledge).start()
    try:
        serve(classset, host=host, port=http_port, control_token=control_token, controls=CONTROLS, ready=ready,
              any_host=any_host)
    finally:
        classset.stop()
