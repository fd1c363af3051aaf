"""The ``nightcell`` command: thin click commands over the library.

Each command parses its options, calls one library function, prints the result (or JSON with ``--json``) and turns
the project's own errors into a one-line message and the error's exit code. Nothing here computes.

Exit codes: 0 success; 1 usage or unexpected failure; 2 bad input (file, option, value); 3 board not found, not
answering or refusing; 4 database cannot be opened or written; 5 the data cannot support the analysis.
"""

from __future__ import annotations

import functools
import json
import sys
from pathlib import Path
from typing import Any, Callable

import click

from . import __version__
from .errors import NightcellError

__all__ = ["main", "cli"]


class _Failure(click.ClickException):
    def __init__(self, message: str, exit_code: int):
        super().__init__(message)
        self.exit_code = exit_code


def friendly(fn: Callable[..., Any]) -> Callable[..., Any]:
    """Turn nightcell's own errors into a message and its documented exit code (no traceback)."""

    @functools.wraps(fn)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        try:
            return fn(*args, **kwargs)
        except NightcellError as exc:
            raise _Failure(str(exc), exc.exit_code) from exc
        except KeyboardInterrupt:
            raise _Failure("interrupted", 130) from None

    return wrapper


# -- shared options ------------------------------------------------------------------------------------------------

def db_option(fn: Callable[..., Any]) -> Callable[..., Any]:
    return click.option("--db", "db", type=click.Path(dir_okay=False, path_type=Path), default="nightcell.db",
                        show_default=True, help="The SQLite database file.")(fn)


def port_option(fn: Callable[..., Any]) -> Callable[..., Any]:
    return click.option("--port", "port", required=True,
                        help="The board's serial port or any pyserial URL (find boards with `nightcell boards`).")(fn)


def json_option(fn: Callable[..., Any]) -> Callable[..., Any]:
    return click.option("--json", "as_json", is_flag=True, help="Print plain JSON instead of text.")(fn)


def _emit(data: Any, as_json: bool, text: str) -> None:
    if as_json:
        click.echo(json.dumps(data, indent=1, sort_keys=True, default=str))
    else:
        click.echo(text)


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="nightcell")
def cli() -> None:
    """nightcell: log a colorimeter cell unattended, then sync, analyse and report.

    Start with `nightcell demo` (no hardware needed).
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
    """Run the whole job on a simulated board: calibrate, log unattended, sync, analyse, report.

    Example: nightcell demo --out demo-run
    """
    from .demo import run_demo

    outcome = run_demo(out, force=force, interpreter=interpreter, say=(lambda s: None) if as_json else click.echo)
    if as_json:
        _emit({"report": str(outcome.report), "db": str(outcome.db), "seconds": round(outcome.seconds, 2),
               **outcome.summary}, True, "")
    else:
        click.echo(f"done in {outcome.seconds:.1f} s")


@cli.command()
@json_option
@friendly
def boards(as_json: bool) -> None:
    """List serial ports whose USB id a nightcell board can have.

    Example: nightcell boards
    """
    from .link import candidate_ports

    found = candidate_ports()
    lines = [f"{p['port']}  {p['vid']:04X}:{p['pid']:04X}  {p['kind']}" for p in found] or \
        ["no candidate boards found: plug one in (see hardware_notes/linux.md for permissions)"]
    _emit(found, as_json, "\n".join(lines))


@cli.command()
@port_option
@json_option
@friendly
def hello(port: str, as_json: bool) -> None:
    """Ask a board who it is and how full its journal is.

    Example: nightcell hello --port /dev/ttyACM0
    """
    from .link import Board

    with Board.open(port) as board:
        info = board.hello()
    text = "\n".join(f"{k}: {v}" for k, v in sorted(info.items()))
    _emit(info, as_json, text)


@cli.command()
@port_option
@db_option
@click.option("--no-ack", is_flag=True, help="Do not let the board trim what was stored.")
@json_option
@friendly
def sync(port: str, db: Path, no_ack: bool, as_json: bool) -> None:
    """Pull a board's journal into the database (resumable; running it again adds nothing).

    Example: nightcell sync --port /dev/ttyACM0 --db class.db
    """
    from .link import Board
    from .store import Store
    from .sync import sync_board

    with Board.open(port) as board, Store.open(db) as store:
        summary = sync_board(board, store, acknowledge=not no_ack)
    new = sum(summary.new_rows.values())
    text = (f"{summary.device}: {summary.records} records, {summary.bytes} bytes, {new} new rows "
            f"in {summary.seconds:.1f} s; journal stored to {summary.end}")
    for w in summary.warnings:
        text += f"\nwarning: {w}"
    _emit(summary.to_dict(), as_json, text)


def _register_rooms() -> None:
    """Commands that live beside their room (analysis, boards and databases) register themselves here."""
    import importlib

    for name in ("analysis_cli", "board_cli"):
        try:
            module = importlib.import_module(f"{__package__}.{name}")
        except ModuleNotFoundError as exc:
            if exc.name != f"{__package__}.{name}":
                raise
            continue
        module.register(cli)


_register_rooms()


def main(argv: list[str] | None = None) -> None:
    """Console entry point."""
    cli.main(args=argv, prog_name="nightcell")


if __name__ == "__main__":  # pragma: no cover
    main(sys.argv[1:])
