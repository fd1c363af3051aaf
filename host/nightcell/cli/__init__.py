"""The ``nightcell`` command: thin click commands over the library.

Each command parses its options, calls the library, prints the result (or JSON with ``--json``) and turns the
project's own errors into a one-line message and the error's exit code. Nothing here computes. Shared options
(``--db``, ``--port``, ``--json``) are defined once in ``options.py`` and mean the same in every command, including
the families in their own modules (``analysis.py``, ``board.py``), which this group registers at the end.

Exit codes: 0 success; 1 usage or unexpected failure; 2 bad input (file, option, value); 3 board not found, not
answering or refusing; 4 database cannot be opened or written; 5 the data cannot support the analysis;
130 interrupted.
"""

from __future__ import annotations

import contextlib
import datetime
import functools
import json
import math
import sys
import time
from pathlib import Path
from typing import Any, Callable, Iterator, Sequence

import click

from .. import __version__
from ..errors import DeviceError, InputError
from ..wire import settings as _settings
from .options import (EXIT_CODES, FINITE, Finite, accept_suspect_option, db_option, friendly, inert, json_option,
                      link_settings, open_reading, open_writing, port_option)
from .options import emit as _emit

__all__ = ["main", "cli", "friendly", "db_option", "port_option", "json_option", "accept_suspect_option", "EXIT_CODES", "open_reading",
           "open_writing"]



@contextlib.contextmanager
def _connected(port: str) -> Iterator[tuple[Any, dict[str, Any]]]:
    """The board on ``port`` and its ``hello``: a clear error at once when nothing there speaks nightcell."""
    from ..wire.link import Board

    with Board.open(port, **link_settings()) as board:
        yield board, board.hello()


def _utc(unix_s: float | None, seconds: bool = True) -> str:
    """A stored moment as a person reads it: local time with its zone named (stored in UTC)."""
    from ..render.numbers import local_time

    return local_time(unix_s, seconds=seconds)


def _device_label(db: Path, device: str) -> str:
    with open_reading(db) as store:
        return _labels(store).get(device, device)


def _labels(store: Any) -> dict[str, str]:
    """Device id → its label ("bench A"), or the id where it has none."""
    return {d["device"]: d["label"] or d["device"] for d in store.devices()}


@click.group(context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100})
@click.version_option(__version__, prog_name="nightcell")
def cli() -> None:
    """nightcell: log a colorimeter cell unattended, then sync, analyse and report.

    Start with `nightcell demo` (no hardware needed). A session: `roll-call` to find the board, `setup`, `clock`,
    `dark`, `blank`, `standard` for each standard, `start`, `watch`, unplug and let it log, plug in, `stop`, `sync`,
    then `list runs`, `calibrate`, `rate`, `report` and `export` on the database.

    \b
    Exit codes:
      0  success
      1  usage error or unexpected failure
      2  bad input: a file, option or value that cannot be used as given
      3  board: not found, not answering, or refusing a request
      4  database: cannot be opened, migrated or written
      5  analysis: the data cannot support the analysis asked for
      130 interrupted (Ctrl-C)
    """


@cli.command()
@click.option("--out", type=click.Path(file_okay=False, path_type=Path), default="nightcell-demo",
              show_default=True, help="Folder for the database, report and figures.")
@click.option("--force", is_flag=True, help="Write into a folder that is not empty.")
@click.option("--interpreter", type=click.Choice(["auto", "micropython", "cpython"]), default="auto",
              show_default=True, help="Run the firmware in MicroPython's unix port or in CPython.")
@json_option
@friendly
def demo(out: Path, force: bool, interpreter: str, as_json: bool) -> None:
    """Run the whole job on two simulated boards: calibrate, log unattended through a power cut, sync, analyse
    orders and activation energy, report.

    Example: nightcell demo --out demo-run
    """
    from ..tasks.demo import run_demo

    outcome = run_demo(out, force=force, interpreter=interpreter, say=(lambda s: None) if as_json else click.echo)
    if as_json:
        _emit({"report": str(outcome.report), "db": str(outcome.db), "seconds": round(outcome.seconds, 2),
               **outcome.summary}, True, "")
    else:
        click.echo(f"done in {outcome.seconds:.1f} s")


# -- a simulated board to try every command on -----------------------------------------------------------------------

def _sim_folder(path: Path) -> Path:
    if path.exists() and not path.is_dir():
        raise InputError(f"{path} is a file: give --dir a folder for the simulated board's flash and cuvette")
    return path


@cli.command("sim-board")
@click.option("--dir", "folder", type=click.Path(file_okay=False, path_type=Path), default="nightcell-sim",
              show_default=True, help="Folder for the board's flash image and cuvette file (kept between runs).")
@click.option("--speed", type=Finite(1.0, 1000.0), default=1.0, show_default=True,
              help="How many times faster than real time the board's clock runs.")
@click.option("--seconds", type=Finite(0.1, unit="s"), default=None,
              help="Stop by itself after this many real seconds (default: run until Ctrl-C).")
@click.option("--interpreter", type=click.Choice(["auto", "micropython", "cpython"]), default="auto",
              show_default=True, help="Run the firmware in MicroPython's unix port or in CPython.")
@click.option("--link", type=click.Choice(["auto", "pty", "socket"]), default="auto", show_default=True,
              help="How the host reaches it: a pseudo-terminal (Linux, macOS) or a local TCP port as a "
                   "socket:// URL (any system; 'auto' takes the pty where there is one).")
@click.option("--tcp-port", type=click.IntRange(0, 65535), default=None,
              help="The TCP port for --link socket (default: the one it had last time in --dir, else any free one).")
@friendly
def sim_board(folder: Path, speed: float, seconds: float | None, interpreter: str, link: str,
              tcp_port: int | None) -> None:
    """Run the real firmware on a simulated board and print its port, to try every board command without hardware.

    Leave it running; in another terminal give its port to the other commands and change its cuvette with
    `nightcell sim-cuvette`. Ctrl-C switches it off (its flash is kept in --dir, so it starts again where it was).
    `nightcell boards` lists it while it runs.

    Example: nightcell sim-board --dir my-sim
    """
    import time

    from ..sim.board import SimulatedBoard, announce, folder_device_id, remember_port, remembered_port, withdraw

    device = folder_device_id(_sim_folder(folder), create=True)  # its own id, kept in the folder
    last = remembered_port(folder)
    wanted = tcp_port if tcp_port is not None else int(last.get("tcp_port") or 0)
    try:
        sim = SimulatedBoard(folder, device=device, speed=speed, interpreter=interpreter,
                             link=link, tcp_port=wanted)
        sim.start()
    except OSError as exc:
        if tcp_port is not None or not wanted:
            raise InputError(f"cannot serve the simulated board on TCP port {wanted} ({exc.strerror or exc}): "
                             "give another --tcp-port, or 0 for any free one") from None
        sim = SimulatedBoard(folder, device=device, speed=speed, interpreter=interpreter, link=link)
        sim.start()  # last time's port is taken now: any free one, and say so below
    remember_port(sim)
    announce(sim)
    try:
        click.echo(f"port: {sim.url}")
        if last.get("url") and last["url"] != sim.url:
            click.echo(f"the port changed since the last run in {folder} (it was {last['url']}): set NIGHTCELL_PORT "
                       "again, or find it with `nightcell boards`")
        click.echo(f"simulated board {device} running the firmware in {sim.interpreter}, clock x{speed:g}; "
                   f"its cuvette holds {sim.cell_path.name} in {sim.workdir}")
        click.echo(f"try: NIGHTCELL_PORT={sim.url} nightcell hello   — Ctrl-C switches the board off")
        sys.stdout.flush()
        end = None if seconds is None else time.monotonic() + seconds
        while end is None or time.monotonic() < end:
            time.sleep(0.2)
            if not sim.alive():
                tail = sim.stderr_text().strip().splitlines()[-1:] or ["(it wrote nothing)"]
                raise DeviceError(f"the simulated board stopped by itself: {tail[0]} — see {sim.log_path}")
    except KeyboardInterrupt:
        pass
    finally:
        withdraw(sim)
        sim.stop()
    click.echo("simulated board switched off (its flash is kept)")


@cli.command("sim-cuvette")
@click.option("--dir", "folder", type=click.Path(file_okay=False, path_type=Path), default="nightcell-sim",
              show_default=True, help="The folder a running `nightcell sim-board` was given.")
@click.option("--absorbance", type=FINITE, help="A solution of this absorbance (0 for the blank's solvent).")
@click.option("--fading", metavar="A0:A_END:K",
              help="A reaction: absorbance A0 fading (or growing) to A_END with rate constant K per second.")
@click.option("--blocked", is_flag=True, help="Block the light path (for `nightcell opaque`).")
@json_option
@friendly
def sim_cuvette(folder: Path, absorbance: float | None, fading: str | None, blocked: bool, as_json: bool) -> None:
    """Put something in the simulated board's cuvette: a solution, a reaction, or nothing at all (blocked).

    Example: nightcell sim-cuvette --absorbance 0.35
    """
    import math

    from ..sim.board import SimulatedBoard, folder_device_id

    if sum([absorbance is not None, fading is not None, blocked]) != 1:
        raise InputError("give exactly one of --absorbance, --fading A0:A_END:K or --blocked")
    device = folder_device_id(_sim_folder(folder), create=False)
    if device is None or not (folder / f"{device}.cell.json").exists():
        raise InputError(f"no simulated board in {folder}: start one with `nightcell sim-board --dir {folder}`")
    if absorbance is not None:
        if not math.isfinite(absorbance) or not -0.1 <= absorbance <= 5.0:
            raise InputError(f"--absorbance {absorbance:g} is not a plausible absorbance: give 0 to 5")
        content: dict[str, Any] = {"absorbance": absorbance}
    elif fading is not None:
        try:
            a0, a_end, k = (float(v) for v in fading.split(":"))
        except ValueError:
            raise InputError(f"--fading {fading!r}: write A0:A_END:K, e.g. 0.8:0.05:0.01") from None
        if not all(math.isfinite(v) for v in (a0, a_end, k)) or k <= 0 or not (0 <= a0 <= 5 and 0 <= a_end <= 5):
            raise InputError(f"--fading {fading!r}: absorbances 0 to 5 and a positive rate constant, please")
        content = {"reaction": {"a0": a0, "a_inf": a_end, "k_per_s": k}}
    else:
        content = {"opaque": True}
    SimulatedBoard(folder, device=device).set_cell(content)
    _emit(content, as_json, f"the simulated cuvette now holds {json.dumps(content)}")


# -- boards ----------------------------------------------------------------------------------------------------------

@cli.command()
@json_option
@friendly
def boards(as_json: bool) -> None:
    """List serial ports whose USB id a nightcell board can have (`nightcell roll-call` also asks who is there).

    Example: nightcell boards
    """
    from ..sim.board import running_boards
    from ..wire.link import candidate_ports

    found = candidate_ports() + running_boards()
    lines = [f"{p['port']}  {p['vid']:04X}:{p['pid']:04X}  {p['kind']}" if p["vid"] else f"{p['port']}  {p['kind']}"
             for p in found] or \
        ["no candidate boards found: plug one in (see hardware_notes/linux.md or windows_macos.md)"]
    _emit(found, as_json, "\n".join(lines))


@cli.command()
@port_option
@click.option("--detail", is_flag=True, help="Also print everything the board answered, as it answered it.")
@json_option
@friendly
def hello(port: str, detail: bool, as_json: bool) -> None:
    """Ask a board who it is and how full its storage is.

    Example: nightcell hello --port /dev/ttyACM0
    """
    from ..tasks.room import human_duration

    with _connected(port) as (_, info):
        pass
    used = max(0, int(info.get("head", 0)) - int(info.get("tail", 0)))
    free = int(info.get("free_bytes", 0))
    who = f"{info['label']} (device {info['device']})" if info.get("label") else f"device {info['device']}"
    lines = [f"{who}: board {info.get('board', '?')}, firmware {info.get('firmware', '?')}",
             ("logging a run" if info.get("running") else "not logging a run")
             + f"; a sample every {int(info.get('interval_ms', 0)) / 1000:g} s when it does",
             f"storage: {used / 1024:.0f} KiB used, {free / 1024:.0f} KiB free",
             f"switched on {int(info.get('uptime_ms', 0)) / 1000:.1f} s ago"]
    if info.get("full_in_s") is not None:
        lines.append(f"storage full in: {human_duration(float(info['full_in_s']))} at this interval (board's estimate)")
    if detail:
        lines += ["detail:"] + [f"  {k}: {v}" for k, v in sorted(info.items())]
    _emit(info, as_json, "\n".join(lines))


# Host-side checks of the settings `setup` changes, from the one settings table (schema/settings.json).
SETTING_RANGES_MS = {k: _settings.whole_range(k) for k in ("interval_ms", "warmup_ms", "durability_ms")}
SETTING_RANGES: dict[str, tuple[float, float]] = {"reads": _settings.whole_range("reads"),
                                                  "path_cm": _settings.number_range("path_cm")}
LABEL_MAX_BYTES = _settings.label_max_bytes()
MAX_CHANNELS = _settings.max_channels()


def _seconds_to_ms(key: str, seconds: float | None) -> int | None:
    if seconds is None:
        return None
    lo, hi = SETTING_RANGES_MS[key]
    ms = int(round(seconds * 1000))
    if not lo <= ms <= hi:
        raise InputError(f"{key[:-3].replace('_', '-')} must be from {lo / 1000:g} to {hi / 1000:g} s, not "
                         f"{seconds:g} s")
    return ms


def _channel(text: str) -> dict[str, Any]:
    parts = text.split(":")
    if len(parts) != 3 or not parts[0]:
        raise InputError(f"--channel {text!r} must be NAME:LED:ADC, e.g. red:15:26 (name, LED pin, ADC pin or "
                         "sensor channel)")
    name, led, adc = parts
    if len(name.encode("utf-8")) > 16:
        raise InputError(f"channel name {name!r} is longer than 16 bytes: shorten it")
    try:
        led_pin, adc_pin = int(led), int(adc)
    except ValueError:
        raise InputError(f"--channel {text!r}: LED and ADC must be pin numbers, e.g. red:15:26") from None
    if not (0 <= led_pin < 256 and 0 <= adc_pin < 256):
        raise InputError(f"--channel {text!r}: pin numbers run from 0 to 255")
    return {"name": name, "led": led_pin, "adc": adc_pin}


def _check_text(what: str, text: str, verb: str, max_bytes: int | None = None) -> str:
    """A label or note the board will accept: not too long once percent-encoded on one request line."""
    from ..wire.frames import encode_request, quote_text

    if max_bytes is not None and len(text.encode("utf-8")) > max_bytes:
        raise InputError(f"{what} {text!r} is {len(text.encode('utf-8'))} bytes; the board keeps at most "
                         f"{max_bytes}: shorten it")
    try:
        too_long = len(encode_request(65535, verb, "-0.000000000000000000000000001", quote_text(text))) > 250
    except ValueError:  # the codec refuses lines longer than the protocol allows
        too_long = True
    if too_long:
        raise InputError(f"{what} is too long for one request to the board: keep it under about 60 characters")
    return text


@cli.command()
@port_option
@click.option("--interval", type=FINITE, metavar="SECONDS", help="Time between samples of a run (0.2 s to 1 day).")
@click.option("--warmup", type=FINITE, metavar="SECONDS", help="LED on before a run's first sample (0 to 600 s).")
@click.option("--durability", type=FINITE, metavar="SECONDS",
              help="Durability window: samples older than this are on flash (0 to 3600 s; shorter wears flash more).")
@click.option("--label", "device_label", help=f"The board's own label, e.g. 'bench 3' (at most {LABEL_MAX_BYTES} "
                                             "bytes).")
@click.option("--channel", "channels", multiple=True, metavar="NAME:LED:ADC",
              help="A light channel: name, LED pin, ADC pin (or sensor channel); repeat for up to 4. Replaces all "
                   "channels; takes effect after the board restarts.")
@click.option("--reads", type=int, help="ADC reads summed per dark and per light value (1 to 256).")
@click.option("--path-cm", type=FINITE, help="Optical path length of the cuvette in cm (0.01 to 10).")
@json_option
@friendly
def setup(port: str, interval: float | None, warmup: float | None, durability: float | None,
          device_label: str | None, channels: tuple[str, ...], reads: int | None, path_cm: float | None,
          as_json: bool) -> None:
    """Set a board up: sampling interval, LED warm-up, durability window, label, channels, reads, path length.

    Every value is checked here before anything is sent, so a bad value changes nothing on the board.

    Example: nightcell setup --port /dev/ttyACM0 --interval 30 --warmup 5 --durability 60 --label "bench 3"
    """
    from ..tasks.names import board_name, label_hint

    changes: dict[str, Any] = {}
    if device_label is not None:
        changes["label"] = _check_text("label", device_label, "set", LABEL_MAX_BYTES)
    for key, seconds in (("interval_ms", interval), ("warmup_ms", warmup), ("durability_ms", durability)):
        ms = _seconds_to_ms(key, seconds)
        if ms is not None:
            changes[key] = ms
    if reads is not None:
        lo, hi = SETTING_RANGES["reads"]
        if not lo <= reads <= hi:
            raise InputError(f"--reads must be from {lo} to {hi}, not {reads}")
        changes["reads"] = reads
    if path_cm is not None:
        lo, hi = SETTING_RANGES["path_cm"]
        if not lo <= path_cm <= hi:
            raise InputError(f"--path-cm must be from {lo:g} to {hi:g} cm, not {path_cm:g}")
        changes["path_cm"] = path_cm
    if channels:
        if len(channels) > MAX_CHANNELS:
            raise InputError(f"{len(channels)} channels given; a board has at most {MAX_CHANNELS}")
        parsed = [_channel(c) for c in channels]
        if len({c["name"] for c in parsed}) != len(parsed):
            raise InputError("two channels have the same name: give each its own")
        changes["channels"] = parsed
    if not changes:
        raise InputError("nothing to set: give at least one of --interval, --warmup, --durability, --label, "
                         "--channel, --reads, --path-cm (see `nightcell setup --help`)")
    applied: dict[str, Any] = {}
    after_reset: list[str] = []
    reply: dict[str, Any] = {}
    with _connected(port) as (board, info):
        measure = info.get("measure_ms")
        if "interval_ms" in changes and measure is not None and "reads" not in changes:
            need = int(measure) + _settings.interval_margin_ms()
            if changes["interval_ms"] < need:
                raise InputError(f"--interval {changes['interval_ms'] / 1000:g} s is shorter than one measurement "
                                 f"on {_who(info)} ({int(measure)} ms with its reads, settle and window) plus "
                                 f"{_settings.interval_margin_ms()} ms: choose at least {need / 1000:g} s, or fewer "
                                 "--reads")
        for key, value in changes.items():
            reply = board.set(key, value)
            applied[key] = value
            if reply.get("after_reset"):
                after_reset.append(key)
    now = dict(info, label=applied.get("label", info.get("label")))
    lines = [f"{board_name(now)}: "
             + ", ".join(f"{k} = {json.dumps(v, ensure_ascii=False)}" for k, v in applied.items())]
    lines.append("saved on the board (and recorded with its readings, so every run says how it was taken)")
    if after_reset:
        lines.append(f"{', '.join(after_reset)} take effect when the board restarts (unplug and plug it in)")
    if label_hint(now):
        lines.append(label_hint(now))
    _emit({"device": info["device"], "applied": applied, "after_reset": after_reset,
           "settings": reply.get("settings"), "settings_crc": reply.get("settings_crc")}, as_json, "\n".join(lines))


@cli.command()
@port_option
@json_option
@friendly
def clock(port: str, as_json: bool) -> None:
    """Set the board's clock from this computer's time, so its readings can be placed in local time.

    `sync` takes one too; take one before a run that starts while the board is away from its host.

    Example: nightcell clock --port /dev/ttyACM0
    """
    with _connected(port) as (board, info):
        now_ms = int(round(time.time() * 1000))
        reply = board.anchor(now_ms)
    text = (f"{_who(info)}: clock set from this computer's time, {_utc(now_ms / 1000)} "
            f"(the board had been on for {reply['uptime_ms'] / 1000:.1f} s)")
    _emit(dict(reply, device=info["device"], host_unix_ms=now_ms), as_json, text)


def _who(info: dict[str, Any]) -> str:
    """A board as its class knows it: its label ("bench 3"), or its id when it has none."""
    return str(info.get("label") or info["device"])


def _mark_text(device: str, kind: str, reply: dict[str, Any], label: str) -> str:
    reads = max(1, int(reply.get("reads") or 1))
    pairs = list(zip(reply.get("light", []), reply.get("dark", [])))
    counts = "; ".join((f"channel {c}: " if len(pairs) > 1 else "") + f"light {li / reads:.1f}, dark {d / reads:.1f}"
                       for c, (li, d) in enumerate(pairs))
    shown = f" {label!r}" if label else ""
    return f"{device}: {kind}{shown} recorded on the board — {counts} counts per read"


def _blank_check(who: str, label: str, reply: dict[str, Any], accept_suspect: bool) -> list[str]:
    """Problems of a blank just journaled (``optics.blank_problems``), as text; raises ``SuspectData`` unless
    ``accept_suspect``. The mark stays on the board as taken: raw data is kept, and analyses flag or refuse it."""
    from ..errors import SuspectData
    from ..science.optics import blank_problems

    reads = max(1, int(reply.get("reads") or 1))
    problems = []
    for c, (li, d) in enumerate(zip(reply.get("light", []), reply.get("dark", []))):
        problems += [f"channel {c}: {p}" for p in blank_problems(li / reads, d / reads)]
    if problems and not accept_suspect:
        shown = f" {label!r}" if label else ""
        raise SuspectData(f"{who}: the blank{shown} just taken looks wrong — {problems[0]}. It is "
                          "journaled as taken (raw data is kept) but analyses will refuse it: clear the light path "
                          "and take the blank again, or pass --accept-suspect to use it anyway")
    return problems


def _measure_command(kind: str, doc: str) -> click.Command:
    @port_option
    @click.option("--label", default="", help="A note kept with this mark, e.g. the cuvette's content.")
    @json_option
    @friendly
    def command(port: str, label: str, as_json: bool, accept_suspect: bool = False) -> None:
        _check_text("label", label, kind)
        with _connected(port) as (board, info):
            reply = board.mark(kind, label)
        problems = _blank_check(_who(info), label, reply, accept_suspect) if kind == "blank" else []
        text = _mark_text(_who(info), kind, reply, label)
        if problems:
            text += "\nsuspect blank kept as confirmed (--accept-suspect): " + "; ".join(problems)
        _emit(dict(reply, device=info["device"], mark=kind, label=label, suspect=problems), as_json, text)

    if kind == "blank":
        command = accept_suspect_option(command)

    command.__doc__ = doc
    return cli.command(kind)(command)


_measure_command("dark", """Measure with the LED off and record it on the board as the dark (cover the cell first).

    Example: nightcell dark --port /dev/ttyACM0 --label "lid on"
    """)
_measure_command("blank", """Measure the blank (solvent only) and record it on the board; absorbance is read against it.

    Example: nightcell blank --port /dev/ttyACM0 --label "buffer pH 7"
    """)
_measure_command("opaque", """Measure with the light path blocked and record it on the board (gives the stray light).

    Example: nightcell opaque --port /dev/ttyACM0 --label "black card"
    """)


@cli.command()
@port_option
@click.argument("value")
@click.option("--label", default="", help="A note kept with this standard, e.g. its name.")
@click.option("--unit", default="", help="The concentration unit, e.g. µM or mg/L (kept in the mark's label as "
              "unit=…, printed with every result).")
@click.option("--set", "set_name", default="", metavar="NAME",
              help="Put this standard in the calibration set NAME (kept in the label as set=…); default: the "
                   "standards after the latest blank form a set.")
@json_option
@friendly
def standard(port: str, value: str, label: str, unit: str, set_name: str, as_json: bool) -> None:
    """Measure a standard of known concentration VALUE (as typed) and record it on the board.

    Example: nightcell standard --port /dev/ttyACM0 2.0 --unit µM --label "dye"
    """
    try:
        number = float(value)
        ok = len(value) <= 32 and all(c in "0123456789.+-eE" for c in value)
    except ValueError:
        number, ok = 0.0, False
    if ok and not (math.isfinite(number) and abs(number) < 1e50):
        raise InputError(f"the standard's VALUE {value!r} is not a usable concentration: give a finite number of "
                         "0 or more, e.g. 0.250")
    if not ok:
        raise InputError(f"the standard's VALUE must be a decimal number as typed, e.g. 0.250, not {value!r} "
                         "(give the unit with --unit)")
    if number < 0:
        raise InputError(f"the standard's VALUE {value} is a negative concentration: a standard holds zero or more "
                         "of the analyte — type its concentration (nothing was measured or journaled)")
    for what, text in (("--unit", unit), ("--set", set_name)):
        if any(ch.isspace() for ch in text):
            raise InputError(f"{what} {text!r} must be one word without spaces, e.g. µM")
    label = " ".join(p for p in (label.strip(), f"unit={unit}" if unit else "", f"set={set_name}" if set_name
                                 else "") if p)
    _check_text("label", label, "standard")
    with _connected(port) as (board, info):
        reply = board.mark("standard", label, value=value)
    _emit(dict(reply, device=info["device"], mark="standard", value=value, label=label), as_json,
          _mark_text(_who(info), f"standard {value}", reply, label))


@cli.command()
@port_option
@click.option("--label", default="", help="The run's label, e.g. what is in the cuvette.")
@click.option("--for", "planned", default=None, metavar="DURATION",
              help="How long the run is meant to last, e.g. 7d, 36h, 90m: refused unless the journal has room.")
@click.option("--even-if-short", is_flag=True,
              help="Start even though the journal fills before --for is over (logging stops when it is full).")
@json_option
@friendly
def start(port: str, label: str, planned: str | None, even_if_short: bool, as_json: bool) -> None:
    """Start a run: after the warm-up wait the board samples at its interval until `stop`, unattended.

    With --for, the board's free journal space and its measured bytes per sample are checked first, and a run that
    would not fit is refused with the longest run that fits and the interval that would fit.

    Example: nightcell start --port /dev/ttyACM0 --label "dye fading 25 °C" --for 7d
    """
    from ..tasks.room import human_duration, parse_duration, plan_run

    _check_text("label", label, "start")
    seconds = parse_duration(planned) if planned is not None else None
    with _connected(port) as (board, info):
        if info.get("running"):
            raise InputError(f"{_who(info)} is already logging a run: stop it first with `nightcell stop`, "
                             "or leave it running")
        room = plan_run(info, seconds) if seconds is not None else None
        if room is not None and not room.fits and not even_if_short:
            raise InputError(room.message())
        reply = board.start(label)
    run_key = f"{info['device']}:{reply['boot']}:{reply['seq']}"
    text = (f"{_who(info)}: run{' ' + repr(label) if label else ''} started, a sample every "
            f"{int(info.get('interval_ms', 0)) / 1000:g} s; you may unplug the computer now")
    if room is not None:
        text += (f"\nthe board's storage holds about {human_duration(room.seconds_that_fit)} at this interval"
                 + ("" if room.fits else f": it fills before the planned {human_duration(room.seconds_wanted)}"))
    out = dict(reply, device=info["device"], run=run_key, label=label)
    if room is not None:
        out["room"] = room.to_dict()
    _emit(out, as_json, text)


@cli.command()
@port_option
@json_option
@friendly
def stop(port: str, as_json: bool) -> None:
    """Stop the run being logged (the samples stay on the board until synced).

    Example: nightcell stop --port /dev/ttyACM0
    """
    with _connected(port) as (board, info):
        if not info.get("running"):
            raise InputError(f"{_who(info)} is not logging a run: nothing to stop")
        reply = board.stop()
    text = f"{_who(info)}: run stopped; copy it to the database with `nightcell sync`"
    _emit(dict(reply, device=info["device"]), as_json, text)


@cli.command()
@port_option
@click.argument("text")
@json_option
@friendly
def note(port: str, text: str, as_json: bool) -> None:
    """Record a note on the board at this moment (what the board's button does), e.g. when a reagent was added.

    Example: nightcell note --port /dev/ttyACM0 "added 1 mL NaOH"
    """
    if not text.strip():
        raise InputError("the note is empty: write what happened, e.g. \"added 1 mL NaOH\"")
    _check_text("note", text, "note")
    with _connected(port) as (board, info):
        reply = board.note(text)
    _emit(dict(reply, device=info["device"], text=text), as_json,
          f"{_who(info)}: note recorded on the board, with the time it was taken")


@cli.command()
@port_option
@db_option
@click.option("--every", type=Finite(0.1, unit="s"), default=1.0, show_default=True, metavar="SECONDS",
              help="How often to ask the board.")
@click.option("--polls", type=click.IntRange(min=1), default=None,
              help="Stop after this many polls (default: until Ctrl-C).")
@friendly
def watch(port: str, db: Path, every: float, polls: int | None) -> None:
    """Live view: counts, absorbance against the latest blank, a trend, storage used and time until full.

    Only asks the board for its status: Ctrl-C ends the view and the board goes on logging. The blank is the
    newest one on the board, else the newest in --db (if that file exists).

    Example: nightcell watch --port /dev/ttyACM0 --every 2
    """
    from rich.console import Console

    from ..tasks.live import latest_blank
    from ..tasks.live import watch as live_watch

    with _connected(port) as (board, info):
        store = open_reading(db) if db.exists() else None
        try:
            blank = latest_blank(board, info, store)
        finally:
            if store is not None:
                store.close()
        history = live_watch(board, blank, info=info, every=every, polls=polls, console=Console())
    click.echo("")
    click.echo(f"stopped watching after {len(history)} polls; the board goes on logging"
               if info.get("running") or (history and history[-1].get("running")) else
               f"stopped watching after {len(history)} polls")


@cli.command()
@port_option
@db_option
@click.option("--no-ack", is_flag=True, help="Do not let the board trim what was stored.")
@json_option
@friendly
def sync(port: str, db: Path, no_ack: bool, as_json: bool) -> None:
    """Copy a board's readings into the database (resumable; running it again adds nothing).

    Example: nightcell sync --port /dev/ttyACM0 --db class.db
    """
    from .board import sync_progress
    from ..wire.link import Board
    from ..store.database import Store
    from ..store.sync import sync_board

    with Board.open(port, **link_settings()) as board, open_writing(db, create=True) as store, sync_progress(not as_json) as update:
        summary = sync_board(board, store, acknowledge=not no_ack,
                             progress=lambda done, total, records: update(port, done, total, records))
    new = sum(summary.new_rows.values())
    text = (f"{_device_label(db, summary.device)}: {new} new readings and marks stored in {db} "
            f"({summary.records} records, {summary.bytes} bytes, {summary.seconds:.1f} s)")
    for w in summary.warnings:
        text += f"\nwarning: {w}"
    _emit(summary.to_dict(), as_json, text)


# -- the database ------------------------------------------------------------------------------------------------------

def _table(title: str, columns: Sequence[str], rows: Sequence[Sequence[Any]]) -> None:
    """Print a table with rich; every cell is plain text (labels from users are never read as markup).

    A table that fits the console's width with one line per row is drawn by ``_box_lines`` in rich's own layout:
    rich lays out and wraps every cell (about 1.5 ms a row, seconds for a thousand runs), which only a table too
    wide for the console needs.
    """
    from rich.console import Console
    from rich.table import Table
    from rich.text import Text

    # labels come from boards and users: control characters are written out, never sent to the terminal
    rows = [[None if v is None else inert(str(v)) for v in row] for row in rows]
    console = Console(highlight=False)
    lines = _box_lines(title, columns, rows, console.width, console.is_terminal)
    if lines is not None:
        console.file.write("\n".join(lines) + "\n")
        console.file.flush()
        return
    table = Table(title=title, title_justify="left")
    for i, c in enumerate(columns):
        # the first column names the row (a number or id that --run, --device take): never folded
        table.add_column(c, overflow="fold", no_wrap=i == 0)
    for row in rows:
        table.add_row(*[Text("" if v is None else str(v)) for v in row])
    console.print(table)


def _box_lines(title: str, columns: Sequence[str], rows: Sequence[Sequence[Any]], width: int,
               styled: bool) -> list[str] | None:
    """The lines rich draws for a table of printable one-line cells that fits ``width`` (heavy head, title on the
    left, italic title and bold headers on a terminal), or None when rich must lay it out itself."""
    from rich.cells import cell_len

    head = [str(c) for c in columns]
    body = [["" if v is None else str(v) for v in row] for row in rows]
    widths = [cell_len(h) for h in head]
    for row in body:
        for i, c in enumerate(row):
            if not c.isprintable():
                return None
            n = cell_len(c)
            if n > widths[i]:
                widths[i] = n
    total = sum(widths) + 3 * len(widths) + 1
    if total > width or not all(h.isprintable() for h in head + [title]) or cell_len(title) > total:
        return None
    bold, italic, plain = ("\x1b[1m", "\x1b[3m", "\x1b[0m") if styled else ("", "", "")

    def cells(values: list[str], bar: str, on: str = "", off: str = "") -> str:
        return bar + bar.join(f" {on}{v}{off}{' ' * (w - cell_len(v))} " for v, w in zip(values, widths)) + bar

    def rule(left: str, fill: str, mid: str, right: str) -> str:
        return left + mid.join(fill * (w + 2) for w in widths) + right

    lines = [f"{italic}{title}{' ' * (total - cell_len(title))}{plain}" if styled
             else title + " " * (total - cell_len(title)),
             rule("┏", "━", "┳", "┓"), cells(head, "┃", bold, plain), rule("┡", "━", "╇", "┩")]
    lines += [cells(row, "│") for row in body]
    lines.append(rule("└", "─", "┴", "┘"))
    return lines


@cli.group("list")
def list_group() -> None:
    """List what a database holds: devices, runs, blanks, calibrations, results, conditions.

    Example: nightcell list runs --db class.db
    """


def _list_command(name: str) -> Callable[[Callable[..., Any]], click.Command]:
    def decorate(fn: Callable[..., Any]) -> click.Command:
        @db_option
        @json_option
        @friendly
        @functools.wraps(fn)
        def command(db: Path, as_json: bool) -> None:
            with open_reading(db) as store:
                title, columns, rows, data, empty = fn(store)
            if as_json:
                _emit(data, True, "")
            elif not rows:
                click.echo(empty)
            else:
                _table(title, columns, rows)

        return list_group.command(name)(command)

    return decorate


@_list_command("devices")
def list_devices(store: Any) -> tuple:
    """Devices synced into the database, with their runs and samples.

    Example: nightcell list devices --db class.db
    """
    data = []
    for d in store.devices():
        n_runs = len(store.runs(d["device"]))
        n_samples = store.sample_count(d["device"], channel=0)
        data.append(dict(d, runs=n_runs, samples=n_samples))
    rows = [(d["label"] or "", d["device"], d["runs"], d["samples"], _utc(d["last_seen_unix"], seconds=False))
            for d in data]
    return ("devices", ("label", "device id", "runs", "readings", "last synced"), rows, data,
            "no devices yet: sync a board with `nightcell sync --port PORT --db DB`")


@_list_command("runs")
def list_runs(store: Any) -> tuple:
    """Runs in the database: number and label (either is what --run takes, as is the key in --json), bench, start
    time, readings, open or stopped.

    Example: nightcell list runs --db class.db
    """
    starts = store.mark_times("run_start")
    labels = _labels(store)
    data = []
    runs = store.runs()
    for number, (run, samples) in enumerate(zip(runs, store.run_sample_counts(runs)), start=1):
        d = run.to_dict()
        d["number"] = number
        d["bench"] = labels.get(run.device, run.device)
        d["samples"] = samples
        d["started_utc"] = starts.get((run.device, run.start_boot, run.start_seq), "")
        d["state"] = "stopped" if run.stop_seq is not None else "open (still logging, or not synced to its stop)"
        data.append(d)
    rows = [(f"#{d['number']}", d["label"], d["bench"], _utc(d["started_utc"] or None, seconds=False), d["samples"],
             "stopped" if d["stop_seq"] is not None else "open") for d in data]
    return ("runs (--run takes the number, e.g. --run 1, or the label)",
            ("#", "run", "bench", "started", "readings", "state"), rows, data,
            "no runs yet: start one with `nightcell start`, then `nightcell sync`")


@_list_command("blanks")
def list_blanks(store: Any) -> tuple:
    """Blank marks in the database, with their counts per read (what absorbance is measured against).

    Example: nightcell list blanks --db class.db
    """
    times = store.mark_times("blank")
    labels = _labels(store)
    data = []
    for m in store.marks(mark="blank"):
        reads = max(1, m["reads"])
        data.append({"device": m["device"], "bench": labels.get(m["device"], m["device"]),
                     "blank": f"{m['boot']}:{m['seq']}", "label": m["label"],
                     "taken_utc": times.get((m["device"], m["boot"], m["seq"]), ""),
                     "light_per_read": [v / reads for v in m["light"]],
                     "dark_per_read": [v / reads for v in m["dark"]]})
    rows = [(d["bench"], d["label"], _utc(d["taken_utc"] or None, seconds=False),
             " ".join(f"{v:.1f}" for v in d["light_per_read"]), " ".join(f"{v:.1f}" for v in d["dark_per_read"]))
            for d in data]
    return ("blanks (counts per read)", ("bench", "label", "taken", "light", "dark"), rows, data,
            "no blanks yet: take one with `nightcell blank`, then `nightcell sync`")


@_list_command("calibrations")
def list_calibrations(store: Any) -> tuple:
    """Calibrations saved in the database (by `nightcell calibrate --db`), with slope and its standard error.

    Example: nightcell list calibrations --db class.db
    """
    from ..render.numbers import measured

    data = store.results("calibration")
    labels = _labels(store)
    rows = []
    for r in data:
        res = r["result"]
        slope, se = res.get("values", {}).get("slope"), res.get("stderr", {}).get("slope")
        device = r["inputs"].get("device", "")
        rows.append((r["id"], r["label"], labels.get(device, device), res.get("model", ""), res.get("n", ""),
                     measured(slope, se), _utc(r["created_unix"], seconds=False)))
    return ("calibrations", ("id", "label", "bench", "curve", "standards", "slope ± SE", "saved"), rows, data,
            "no calibrations saved yet: fit one with `nightcell calibrate --db DB --device DEVICE`")


@_list_command("results")
def list_results(store: Any) -> tuple:
    """Every result saved in the database: calibrations, rate fits, studies, each with the inputs it names.

    Example: nightcell list results --db class.db
    """
    data = store.results()
    labels = _labels(store)
    runs = {run.key: run.label or run.key for run in store.runs()}
    rows = []
    for r in data:
        ins = r["inputs"]
        source = (runs.get(ins.get("run"), ins.get("run")) if ins.get("run") else
                  labels.get(ins.get("device", ""), ins.get("device", "")) if ins.get("device") else
                  ins.get("file", ""))
        rows.append((r["id"], r["kind"], r["label"], source, _utc(r["created_unix"], seconds=False)))
    return ("results", ("id", "kind", "label", "from", "saved"), rows, data,
            "no results saved yet: run `nightcell calibrate --db DB` or `nightcell rate --db DB`")


@_list_command("conditions")
def list_conditions(store: Any) -> tuple:
    """Recorded run conditions (temperature, starting concentrations), each with where it came from.

    Example: nightcell list conditions --db class.db
    """
    from ..tasks.analyse import run_conditions

    conds = run_conditions(store)
    runs = {run.key: run.label or run.key for run in store.runs()}
    rows = [(runs.get(key, key), q, f"{v['value']:g}", v["source"]) for key, qs in conds.items()
            for q, v in sorted(qs.items())]
    return ("run conditions", ("run", "quantity", "value", "source"), rows, conds,
            "no conditions recorded yet: record them with `nightcell condition`")


def _concentration(text: str) -> tuple[str, float]:
    name, sep, value = text.partition("=")
    if not sep or not name.strip() or not value.strip():
        raise InputError(f"--conc {text!r}: write REACTANT=MOLAR, e.g. --conc hydroxide=0.02")
    try:
        molar = float(value)
    except ValueError:
        raise InputError(f"--conc {text!r}: {value!r} is not a number of mol/L") from None
    if not (math.isfinite(molar) and 0.0 <= molar < 1e3):
        raise InputError(f"--conc {text!r}: give a finite concentration from 0 to 1000 mol/L")
    return f"conc_{name.strip().lower()}_M", molar


@cli.command()
@db_option
@click.option("--run", "run_text", metavar="RUN",
              help="The run (its number in `list runs`, or its label); default: the only run.")
@click.option("--temperature-c", "temperature_c", type=Finite(-273.15, 1000.0, unit="°C"),
              help="The run's temperature in °C.")
@click.option("--temperature-k", "temperature_k", type=Finite(0.0, 1300.0, unit="K", open_ends=False),
              help="The run's temperature in kelvin.")
@click.option("--conc", "concentrations", multiple=True, metavar="REACTANT=MOLAR",
              help="A starting concentration in mol/L, e.g. hydroxide=0.02 (repeat for each reactant).")
@click.option("--source", default="typed in by the user", show_default=True,
              help="Where the values come from, e.g. 'bench sheet' (kept beside each value).")
@accept_suspect_option
@json_option
@friendly
def condition(db: Path, run_text: str | None, temperature_c: float | None, temperature_k: float | None,
              concentrations: tuple[str, ...], source: str, accept_suspect: bool, as_json: bool) -> None:
    """Record a run's conditions (temperature, starting concentrations) for studies of order and activation energy.

    Example: nightcell condition --db class.db --run "fading 1" --temperature-c 25 --conc hydroxide=0.02
    """
    from ..tasks.analyse import run_conditions, set_run_condition
    from ..tasks.export import resolve_run

    if temperature_c is not None and temperature_k is not None:
        raise InputError("give the temperature once: --temperature-c or --temperature-k")
    values: list[tuple[str, float]] = [_concentration(c) for c in concentrations]
    if temperature_c is not None:
        values.insert(0, ("temperature_K", temperature_c + 273.15))
    elif temperature_k is not None:
        values.insert(0, ("temperature_K", temperature_k))
    if not values:
        raise InputError("nothing to record: give --temperature-c/--temperature-k and/or --conc REACTANT=MOLAR")
    with open_writing(db) as store:
        run = resolve_run(store, run_text)
        for quantity, value in values:  # every value checked before any is written
            set_run_condition(store, run, quantity, value, source, accept_suspect=accept_suspect, check_only=True)
        for quantity, value in values:
            set_run_condition(store, run, quantity, value, source, accept_suspect=accept_suspect)
        recorded = run_conditions(store, run).get(run.key, {})
    text = "\n".join(f"{run.key} {q} = {v['value']:g} ({v['source']})" for q, v in sorted(recorded.items()))
    _emit({"run": run.key, "conditions": recorded}, as_json, text)


@cli.command()
@db_option
@click.option("--run", "run_text", metavar="RUN",
              help="The run (its number in `list runs`, or its label); default: the only run.")
@click.option("--all", "all_runs", is_flag=True, help="One report per run in the database.")
@click.option("--study", "study", is_flag=True,
              help="A study page over every run with recorded conditions (orders, Arrhenius, Eyring), linking "
                   "one page per run.")
@click.option("--out", type=click.Path(file_okay=False, path_type=Path), required=True,
              help="Folder for the HTML pages and figures.")
@click.option("--channel", type=click.IntRange(min=0), default=0, show_default=True, help="Light channel.")
@click.option("--level", type=Finite(0.0, 1.0, open_ends=True), default=0.95, show_default=True,
              help="Confidence level of the calibration's intervals and prediction band.")
@click.option("--blank", "blank", metavar="KEY|LABEL", default=None,
              help="With --run: read the run against this blank (its key boot:seq or its label) instead of the "
                   "nearest one before it.")
@accept_suspect_option
@json_option
@friendly
def report(db: Path, run_text: str | None, all_runs: bool, study: bool, out: Path, channel: int, level: float,
           blank: str | None, accept_suspect: bool, as_json: bool) -> None:
    """Write self-contained HTML reports (figures embedded; each figure also as PNG and SVG): one per run, or a
    study over several runs with their recorded conditions (see `nightcell condition`).

    Example: nightcell report --db class.db --all --out reports

    Example: nightcell report --db class.db --study --out reports
    """
    from ..errors import AnalysisError
    from ..tasks.export import Written, resolve_run, run_report, study_report
    from ..render.report import all_or_nothing

    if sum([all_runs, bool(run_text), study]) > 1:
        raise InputError("give one of --run, --all or --study")
    if blank is not None and (all_runs or study):
        raise InputError("--blank names the blank of one run: give it with --run")
    done = Written()
    if study:
        with open_reading(db) as store, all_or_nothing():
            done = study_report(store, out, channel, level=level)
        lines = [f"wrote {f}" for f in done.files] + [f"skipped {s}" for s in done.skipped]
        _emit(done.to_dict(), as_json, "\n".join(lines))
        return
    with open_reading(db) as store, all_or_nothing():
        runs = store.runs() if all_runs else [resolve_run(store, run_text)]
        if not runs:
            raise InputError(f"{db} holds no runs yet: start one with `nightcell start`, then `nightcell sync`")
        for run in runs:
            try:
                one = run_report(store, run, out, channel, level=level, blank=blank, accept_suspect=accept_suspect)
            except AnalysisError as exc:
                if not all_runs:
                    raise
                done.skipped.append(f"run {run.key} ({run.label!r}): {exc}")
                continue
            done.files += one.files
            done.skipped += one.skipped
    lines = [f"wrote {f}" for f in done.files] + [f"skipped {s}" for s in done.skipped]
    _emit(done.to_dict(), as_json, "\n".join(lines))


@cli.command()
@db_option
@click.option("--run", "run_text", metavar="RUN",
              help="Only this run (its number in `list runs`, or its label); default: every run.")
@click.option("--out", type=click.Path(file_okay=False, path_type=Path), required=True,
              help="Folder for the CSV files.")
@click.option("--channel", type=click.IntRange(min=0), default=0, show_default=True, help="Light channel.")
@json_option
@friendly
def export(db: Path, run_text: str | None, out: Path, channel: int, as_json: bool) -> None:
    """Write CSV files: every mark, and per run its raw samples and its absorbance against the blank.

    Example: nightcell export --db class.db --out csv
    """
    from ..tasks.export import export_csv, resolve_run
    from ..render.report import all_or_nothing

    with open_reading(db) as store, all_or_nothing():
        runs = None if run_text is None else [resolve_run(store, run_text)]
        done = export_csv(store, out, runs, channel)
    lines = [f"wrote {f}" for f in done.files] + [f"skipped {s}" for s in done.skipped]
    _emit(done.to_dict(), as_json, "\n".join(lines))


# -- the command families that live in their own modules -------------------------------------------------------

from . import analysis as _analysis  # noqa: E402  (the group above must exist before they register)
from . import board as _board  # noqa: E402
from . import dashboard as _dashboard  # noqa: E402

_analysis.register(cli)
_board.register(cli)
_dashboard.register(cli)


def main(argv: list[str] | None = None) -> None:
    """Console entry point."""
    cli.main(args=argv, prog_name="nightcell")


if __name__ == "__main__":  # pragma: no cover
    main(sys.argv[1:])
