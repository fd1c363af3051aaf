"""Shared pieces of every ``nightcell`` command: exit codes, the error wrapper and the options that mean the same
everywhere (``--db``, ``--port``, ``--json``). Every command module imports these from here, never from the group.
"""

from __future__ import annotations

import functools
import json
import re
from pathlib import Path
from typing import Any, Callable

import click

from ..errors import NightcellError

__all__ = ["EXIT_CODES", "Finite", "FINITE", "friendly", "db_option", "db_from_environment", "port_option",
           "json_option", "accept_suspect_option", "emit", "inert", "link_settings", "open_reading", "open_writing",
           "source_db_option"]

EXIT_CODES = {
    0: "success",
    1: "usage error or unexpected failure",
    2: "bad input: a file, option or value that cannot be used as given",
    3: "board: not found, not answering, or refusing a request",
    4: "database: cannot be opened, migrated or written",
    5: "analysis: the data cannot support the analysis asked for",
    130: "interrupted (Ctrl-C)",
}


# Characters a terminal acts on instead of showing: C0 and C1 controls (ESC starts colour, cursor and title
# sequences; BEL; CR overwrites a line) and the invisible marks that reorder or hide text (bidi controls).
_TERMINAL_ACTS_ON = re.compile("[\x00-\x08\x0b-\x1f\x7f-\x9f\u061c\u200e\u200f\u2028-\u202e\u2066-\u2069]")


def inert(text: str) -> str:
    """Text as the terminal must show it: every control character written out as an escape (``\\x1b``), so a
    label from a board or a user can never move the cursor, clear the screen, retitle the window or reorder text.
    Newlines and tabs stay."""
    return _TERMINAL_ACTS_ON.sub(lambda m: f"\\x{ord(m.group()):02x}" if ord(m.group()) < 0x100 else
                                 f"\\u{ord(m.group()):04x}", text)


class _Failure(click.ClickException):
    def __init__(self, message: str, exit_code: int):
        super().__init__(inert(message))
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
            why = exc.args[-1] if exc.args else type(exc).__name__
            raise _Failure(f"the numbers are out of range for this analysis ({why}): check the values given "
                           "(absorbances are about 0 to 4, rate constants well below 1e50)", 5) from exc
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


class Finite(click.ParamType):
    """A number that is finite (never NaN or infinity) and, where given, within ``lo``..``hi``: every number typed
    at the command line is checked before it reaches a board or the store."""

    name = "number"

    def __init__(self, lo: float | None = None, hi: float | None = None, *, unit: str = "", open_ends: bool = False):
        self.lo, self.hi, self.unit, self.open_ends = lo, hi, unit, open_ends

    def convert(self, value: Any, param: Any, ctx: Any) -> float:
        import math

        if isinstance(value, float) and math.isfinite(value):
            v = value
        else:
            try:
                v = float(value)
            except (TypeError, ValueError):
                self.fail(f"{value!r} is not a number", param, ctx)
            if not math.isfinite(v):
                self.fail(f"{value!r} is not a finite number", param, ctx)
        unit = f" {self.unit}" if self.unit else ""
        below = self.lo is not None and (v <= self.lo if self.open_ends else v < self.lo)
        above = self.hi is not None and (v >= self.hi if self.open_ends else v > self.hi)
        if below or above:
            lo = "" if self.lo is None else f"{self.lo:g}"
            hi = "" if self.hi is None else f"{self.hi:g}"
            span = (f"between {lo} and {hi}{unit}, not either end" if self.open_ends and lo and hi else
                    f"from {lo} to {hi}{unit}") if lo and hi else (f"at least {lo}{unit}" if lo else f"at most {hi}{unit}")
            self.fail(f"{v:g}{unit} is out of range: give a number {span}", param, ctx)
        return v


FINITE = Finite()


# -- shared options ------------------------------------------------------------------------------------------------

def db_option(fn: Callable[..., Any]) -> Callable[..., Any]:
    return click.option("--db", "db", type=click.Path(dir_okay=False, path_type=Path), default="nightcell.db",
                        show_default=True, envvar="NIGHTCELL_DB", show_envvar=True,
                        help="The SQLite database file.")(fn)


def source_db_option(fn: Callable[..., Any]) -> Callable[..., Any]:
    """``--db`` for the commands that read either a CSV file or the database (calibrate, rate, orders, arrhenius).

    The same option and the same ``NIGHTCELL_DB`` as every other command, without a default: giving it (or the
    variable) is what switches the command to the database. A CSV file given on the command line still wins over the
    variable (``db_from_environment`` tells the command which it was).
    """
    return click.option("--db", "db", type=click.Path(dir_okay=False, path_type=Path), default=None,
                        envvar="NIGHTCELL_DB", show_envvar=True,
                        help="The SQLite database file: analyse stored readings instead of a CSV file, and save "
                             "the result there.")(fn)


def db_from_environment() -> bool:
    """True when the running command's ``--db`` came from ``NIGHTCELL_DB`` rather than the command line."""
    ctx = click.get_current_context(silent=True)
    return ctx is not None and ctx.get_parameter_source("db") == click.core.ParameterSource.ENVIRONMENT


def port_option(fn: Callable[..., Any]) -> Callable[..., Any]:
    """``--port``, with ``--timeout`` and ``--baud`` for slow links (kept in the click context; ``link_settings``
    reads them back, so every board command waits as long as it was told)."""
    fn = click.option("--baud", type=click.IntRange(300, 4_000_000), default=115200, show_default=True,
                      expose_value=False, callback=_link_setting,
                      help="Baud rate of a USB-serial bridge (a board's own USB ignores it).")(fn)
    fn = click.option("--timeout", type=Finite(0.05, 3600.0, unit="s"), default=5.0, show_default=True,
                      expose_value=False, callback=_link_setting,
                      help="Seconds to wait for each reply of the board (longer for a slow link).")(fn)
    return click.option("--port", "port", required=True, envvar="NIGHTCELL_PORT", show_envvar=True,
                        help="The board's serial port or any pyserial URL (find boards with `nightcell boards`).")(fn)


def _link_setting(ctx: click.Context, param: click.Parameter, value: Any) -> Any:
    ctx.meta.setdefault("nightcell.link", {})[param.name] = value
    return value


def link_settings() -> dict[str, Any]:
    """``timeout`` and ``baudrate`` for ``Board.open`` as the running command was given them."""
    ctx = click.get_current_context(silent=True)
    got = ctx.meta.get("nightcell.link", {}) if ctx is not None else {}
    return {"timeout": float(got.get("timeout", 5.0)), "baudrate": int(got.get("baud", 115200))}


def accept_suspect_option(fn: Callable[..., Any]) -> Callable[..., Any]:
    """``--accept-suspect``: the one option that confirms data a guard refuses (the flag stays on the result)."""
    return click.option("--accept-suspect", "accept_suspect", is_flag=True,
                        help="Use data nightcell's checks flag as suspect (a blocked blank, standards that do not "
                             "rise, an odd temperature); the flag is kept with the result.")(fn)


def json_option(fn: Callable[..., Any]) -> Callable[..., Any]:
    return click.option("--json", "as_json", is_flag=True, help="Print plain JSON instead of text.")(fn)


def emit(data: Any, as_json: bool, text: str) -> None:
    """Print plain JSON (control characters escaped by the encoder), or the text made ``inert``."""
    if as_json:
        click.echo(json.dumps(data, indent=1, sort_keys=True, default=str))
    else:
        click.echo(inert(text))
