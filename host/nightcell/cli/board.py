"""Commands for boards and databases: ask every board to identify, sync many boards, merge databases, deploy firmware.

Thin click commands over ``link``, ``sync``, ``merge`` and ``deploy``; ``cli/__init__.py`` calls ``register(cli)``. Each
command parses options, calls one library function, prints the result (or ``--json``); nightcell's own errors become
a message and their exit code through ``friendly``.
"""

from __future__ import annotations

import contextlib
import json
import sys
from pathlib import Path
from typing import Any, Iterator

import click

from .options import Finite, db_option, emit, friendly, json_option, open_writing, port_option
from ..errors import DeviceNotFound, InputError

__all__ = ["register", "sync_progress"]


_emit = emit  # JSON, or text made inert for the terminal


@contextlib.contextmanager
def sync_progress(enabled: bool = True) -> Iterator[Any]:
    """A rich progress display for syncs: one bar per port with records, bytes and rate.

    Yields ``update(port, done_bytes, total_bytes, records)`` (a no-op when disabled or not on a terminal).
    """
    if not enabled or not sys.stderr.isatty():
        yield lambda *a: None
        return
    from rich.console import Console
    from rich.progress import (BarColumn, DownloadColumn, Progress, TextColumn, TimeRemainingColumn,
                               TransferSpeedColumn)

    columns = (TextColumn("{task.description}"), BarColumn(), TextColumn("{task.fields[records]} records"),
               DownloadColumn(), TransferSpeedColumn(), TimeRemainingColumn())
    with Progress(*columns, console=Console(stderr=True), transient=False) as bar:
        tasks: dict[str, Any] = {}

        def update(port: str, done: int, total: int, records: int) -> None:
            if port not in tasks:
                tasks[port] = bar.add_task(port, total=max(total, 1), records=0)
            bar.update(tasks[port], completed=done, total=max(total, done, 1), records=records)

        yield update


@click.command("roll-call")
@click.option("--timeout", type=Finite(0.05, 3600.0, unit="s"), default=1.0, show_default=True, help="Seconds to wait for each board.")
@json_option
@friendly
def roll_call(timeout: float, as_json: bool) -> None:
    """Ask every port with a board's USB id who is there (label, device id, storage used).

    Example: nightcell roll-call
    """
    from ..wire.link import discover

    from ..sim.board import running_boards
    from ..wire.link import candidate_ports

    found = discover(timeout=timeout, ports=candidate_ports() + running_boards())
    lines = []
    for e in found:
        if "hello" in e:
            h = e["hello"]
            lines.append(f"{e['port']}  {h.get('device')}  {h.get('label') or '-'}  firmware {h.get('firmware')}  "
                         f"{h.get('head', 0) - h.get('tail', 0)} bytes to sync  "
                         f"{'logging' if h.get('running') else 'idle'}")
        else:
            lines.append(f"{e['port']}  no nightcell board: {e['error']}")
    _emit(found, as_json, "\n".join(lines) or "no candidate boards found: plug one in (see hardware_notes/linux.md "
                                               "or windows_macos.md)")


@click.command("sync-all")
@click.option("--port", "ports", multiple=True,
              help="A board's port or pyserial URL; repeat for several. Default: every board that answers.")
@db_option
@click.option("--parallel", is_flag=True, help="Sync all ports at once instead of one after another.")
@click.option("--no-ack", is_flag=True, help="Do not let the boards trim what was stored.")
@click.option("--timeout", type=Finite(0.05, 3600.0, unit="s"), default=5.0, show_default=True, help="Seconds to wait for each reply.")
@json_option
@friendly
def sync_all(ports: tuple[str, ...], db: Path, parallel: bool, no_ack: bool, timeout: float, as_json: bool) -> None:
    """Sync many boards into one database (a class set): each board's rows are kept apart by its device id.

    Example: nightcell sync-all --db class.db --parallel
    """
    from ..wire.link import discover
    from ..store.sync import sync_ports

    chosen = list(ports)
    if not chosen:
        chosen = [e["port"] for e in discover(timeout=min(timeout, 1.0)) if "hello" in e]
        if not chosen:
            raise DeviceNotFound("no board answered on any port with a board's USB id: plug the boards in, or name "
                                 "them with --port")
    with sync_progress(not as_json) as update:
        results = sync_ports(chosen, db, parallel=parallel, acknowledge=not no_ack, timeout=timeout,
                             progress=update)
    out = []
    lines = []
    for e in results:
        if "summary" in e:
            s = e["summary"]
            out.append({"port": e["port"], **s.to_dict()})
            lines.append(f"{e['port']}: {s.device} {s.records} records, {s.bytes} bytes, {s.new} new rows "
                         f"in {s.seconds:.1f} s" + "".join(f"\n  warning: {w}" for w in s.warnings))
        else:
            out.append({"port": e["port"], "error": e["error"]})
            lines.append(f"{e['port']}: FAILED — {e['error']}")
    _emit(out, as_json, "\n".join(lines))
    failed = [e for e in results if "error" in e]
    if failed:
        raise click.exceptions.Exit(3)


@click.command("merge")
@click.argument("other", type=click.Path(dir_okay=False, path_type=Path))
@db_option
@click.option("--strict", is_flag=True, help="Merge nothing at all when any row or label disagrees.")
@json_option
@friendly
def merge(other: Path, db: Path, strict: bool, as_json: bool) -> None:
    """Merge another host's database into this one (running it again adds nothing).

    Rows that disagree with rows already here are listed and left out; nothing here is overwritten.

    Example: nightcell merge laptop-2.db --db department.db
    """
    from ..store.merge import merge_database
    from ..store.database import Store

    if not other.exists():
        raise InputError(f"no database at {other}: give the path of the other host's nightcell database")
    if db.exists() and other.resolve() == db.resolve():
        raise InputError(f"{other} is the database being merged into: give another host's database")
    # the other database is checked whole before this one is created or migrated: a refused merge writes nothing
    with Store.open_read(other) as source:
        source.check_whole()
    created = not db.exists()
    try:
        with open_writing(db, create=True) as store:
            report = merge_database(store, other, strict=strict)
    except BaseException:
        if created:  # a merge refused into a new file leaves no file
            for extra in ("", "-wal", "-shm", "-journal"):
                Path(str(db) + extra).unlink(missing_ok=True)
        raise
    _emit(report.to_dict(), as_json, report.text())
    if not report.applied:
        raise InputError(f"nothing merged: {len(report.conflicts)} rows disagree (listed above); merge without "
                         "--strict to take the rest and keep the list")


@click.command("deploy")
@port_option
@click.option("--no-compile", is_flag=True, help="Copy .py sources instead of compiling them with mpy-cross.")
@click.option("--wait", type=Finite(0.0, 3600.0, unit="s"), default=20.0, show_default=True,
              help="Seconds to wait for the board to answer after its restart.")
@json_option
@friendly
def deploy_cmd(port: str, no_compile: bool, wait: float, as_json: bool) -> None:
    """Copy this nightcell's firmware onto a board, restart it, and check it answers with the new version.

    The readings and settings on the board are kept; a board that was logging is logging again afterwards.

    Example: nightcell deploy --port /dev/ttyACM0
    """
    from ..errors import NightcellError
    from ..wire.link import Board

    try:
        with Board.open(port, timeout=2.0) as board:
            board.retries = 1
            info = board.hello()
    except NightcellError:
        info = {}  # no nightcell firmware answering yet (a fresh board in its REPL): deploy finds out itself
    if info.get("board") == "sim":
        raise InputError(f"{port} is a simulated board (`nightcell sim-board`): it runs this nightcell's own "
                         "firmware files at every start, so there is nothing to copy — restart sim-board to run a "
                         "new version; deploy copies firmware onto a real board over USB")
    from ..tasks.deploy import deploy

    report = deploy(port, compile=not no_compile, wait=wait)
    _emit(report.to_dict(), as_json, report.text())


def register(cli: click.Group) -> None:
    """Add this room's commands to the ``nightcell`` group."""
    for command in (roll_call, sync_all, merge, deploy_cmd):
        cli.add_command(command)
