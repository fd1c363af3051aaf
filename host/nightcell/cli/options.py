"""Shared pieces of every ``nightcell`` command: exit codes, the error wrapper and the options that mean the same
everywhere (``--db``, ``--port``, ``--json``). Every command module imports these from here, never from the group.
"""

from __future__ import annotations

import functools
import json
from pathlib import Path
from typing import Any, Callable

import click

from ..errors import NightcellError

__all__ = ["EXIT_CODES", "friendly", "db_option", "port_option", "json_option", "emit"]

EXIT_CODES = {
    0: "success",
    1: "usage error or unexpected failure",
    2: "bad input: a file, option or value that cannot be used as given",
    3: "board: not found, not answering, or refusing a request",
    4: "database: cannot be opened, migrated or written",
    5: "analysis: the data cannot support the analysis asked for",
    130: "interrupted (Ctrl-C)",
}


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
                        show_default=True, envvar="NIGHTCELL_DB", show_envvar=True,
                        help="The SQLite database file.")(fn)


def port_option(fn: Callable[..., Any]) -> Callable[..., Any]:
    return click.option("--port", "port", required=True, envvar="NIGHTCELL_PORT", show_envvar=True,
                        help="The board's serial port or any pyserial URL (find boards with `nightcell boards`).")(fn)


def json_option(fn: Callable[..., Any]) -> Callable[..., Any]:
    return click.option("--json", "as_json", is_flag=True, help="Print plain JSON instead of text.")(fn)


def emit(data: Any, as_json: bool, text: str) -> None:
    if as_json:
        click.echo(json.dumps(data, indent=1, sort_keys=True, default=str))
    else:
        click.echo(text)
