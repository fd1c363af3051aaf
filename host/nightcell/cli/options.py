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

__all__ = ["EXIT_CODES", "friendly", "db_option", "port_option", "json_option", "accept_suspect_option", "emit", "open_reading", "open_writing"]

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
    """Turn nightcell's own errors into a message and its documented exit code (no traceback).

    Also: a database SQLite finds damaged is exit 4 with what can still be read; numbers that overflow are exit 5;
    numpy's and scipy's warnings never reach the terminal (a result that needs one says so in its own words).
    """

    @functools.wraps(fn)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        import sqlite3
        import warnings

        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", RuntimeWarning)
                warnings.simplefilter("ignore", UserWarning)
                return fn(*args, **kwargs)
        except NightcellError as exc:
            raise _Failure(str(exc), exc.exit_code) from exc
        except sqlite3.DatabaseError as exc:
            from ..store.database import damaged

            db = kwargs.get("db")
            if "malformed" in str(exc) and db is not None:
                raise _Failure(str(damaged(db, exc)), 4) from exc
            raise _Failure(f"database error on {db or 'the database'} ({exc}): nothing was written; check the file "
                           "with `sqlite3 DB 'PRAGMA integrity_check'`", 4) from exc
        except (FloatingPointError, OverflowError) as exc:
            raise _Failure(f"the numbers are out of range for this analysis ({exc}): check the values given "
                           "(absorbances are about 0 to 4, rate constants well below 1e100)", 5) from exc
        except KeyboardInterrupt:
            raise _Failure("interrupted", 130) from None

    return wrapper


def open_reading(db: Path) -> Any:
    """The store for a command that only reads: opened read-only, never created, migrated or changed."""
    from ..store.database import Store

    return Store.open_read(db)


def open_writing(db: Path, *, create: bool = False) -> Any:
    """The store for a command that writes (a result, a condition, a sync): created only where ``create``."""
    from ..store.database import Store

    return Store.open_write(db, create=create)


# -- shared options ------------------------------------------------------------------------------------------------

def db_option(fn: Callable[..., Any]) -> Callable[..., Any]:
    return click.option("--db", "db", type=click.Path(dir_okay=False, path_type=Path), default="nightcell.db",
                        show_default=True, envvar="NIGHTCELL_DB", show_envvar=True,
                        help="The SQLite database file.")(fn)


def port_option(fn: Callable[..., Any]) -> Callable[..., Any]:
    return click.option("--port", "port", required=True, envvar="NIGHTCELL_PORT", show_envvar=True,
                        help="The board's serial port or any pyserial URL (find boards with `nightcell boards`).")(fn)


def accept_suspect_option(fn: Callable[..., Any]) -> Callable[..., Any]:
    """``--accept-suspect``: the one option that confirms data a guard refuses (the flag stays on the result)."""
    return click.option("--accept-suspect", "accept_suspect", is_flag=True,
                        help="Use data nightcell's checks flag as suspect (a blocked blank, standards that do not "
                             "rise, an odd temperature); the flag is kept with the result.")(fn)


def json_option(fn: Callable[..., Any]) -> Callable[..., Any]:
    return click.option("--json", "as_json", is_flag=True, help="Print plain JSON instead of text.")(fn)


def emit(data: Any, as_json: bool, text: str) -> None:
    if as_json:
        click.echo(json.dumps(data, indent=1, sort_keys=True, default=str))
    else:
        click.echo(text)
