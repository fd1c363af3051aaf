"""Analysis commands on CSV files: ``calibrate``, ``rate``, ``orders``, ``arrhenius``.

Owns: reading the four documented CSV layouts, the commands' options, and printing a text report or plain JSON.
Each command parses, calls one library function, prints; ``register(group)`` adds them to the main ``nightcell``
group (owned by ``cli.py``).

Must never: compute anything itself, open a serial port or a database, or leave a half-written file. Bad input
ends in one line saying what to do (``click.ClickException``, exit status 1) and nothing is written.

CSV layouts (header row required, comma-separated, extra columns ignored):

- calibrate: ``concentration,absorbance`` [``weight``] [``replicate`` — a label; replicates are recognised by
  equal concentration].
- rate: ``time_s,absorbance`` (times strictly increasing).
- orders: one row per run: ``initial_rate`` [``rate_se``] and one ``conc_<name>`` column per reactant.
- arrhenius: ``temperature_K,k`` [``k_se``].
"""

from __future__ import annotations

import csv
import functools
import json
import math
import os
import tempfile
from pathlib import Path
from typing import Any, Callable, Sequence

import click
import numpy as np

from . import calibration as _calibration
from . import kinetics as _kinetics
from . import study as _study
from .errors import NightcellError

__all__ = ["arrhenius_command", "calibrate_command", "orders_command", "rate_command", "read_columns", "register"]


class _BadFile(click.ClickException):
    """A CSV that cannot be used; exit status 1, one line."""


def read_columns(
    path: Path, required: Sequence[str], optional: Sequence[str] = (), *, prefix: str | None = None, min_rows: int = 1
) -> dict[str, np.ndarray]:
    """Numeric columns of a CSV by header name; ``prefix`` also collects every column starting with it.

    Raises ``click.ClickException`` naming the file, row and column, and what to do.
    """
    try:
        with open(path, newline="", encoding="utf-8-sig") as fh:
            reader = csv.reader(fh)
            try:
                header = [h.strip() for h in next(reader)]
            except StopIteration:
                raise _BadFile(f"{path} is empty; it needs a header row ({','.join(required)}) and data rows")
            rows = [row for row in reader if any(cell.strip() for cell in row)]
    except (OSError, UnicodeDecodeError, csv.Error) as exc:
        raise _BadFile(f"cannot read {path}: {exc}") from None
    wanted = list(required) + [c for c in optional if c in header]
    if prefix:
        wanted += [h for h in header if h.startswith(prefix) and h not in wanted]
    missing = [c for c in required if c not in header]
    if missing:
        raise _BadFile(
            f"{path} has no column {', '.join(repr(m) for m in missing)} (found: {', '.join(header) or 'none'}); "
            f"the header row must name {','.join(required)}"
        )
    if len(rows) < min_rows:
        raise _BadFile(f"{path} has {len(rows)} data rows; this analysis needs at least {min_rows}")
    out: dict[str, np.ndarray] = {}
    for col in wanted:
        j = header.index(col)
        values = []
        for i, row in enumerate(rows, start=2):
            cell = row[j].strip() if j < len(row) else ""
            try:
                v = float(cell)
            except ValueError:
                raise _BadFile(
                    f"{path} line {i}, column {col}: {cell!r} is not a number; fix or delete that row"
                ) from None
            if not math.isfinite(v):
                raise _BadFile(f"{path} line {i}, column {col}: {cell!r} is not a finite number; fix or delete that row")
            values.append(v)
        out[col] = np.array(values)
    return out


def _guarded(fn: Callable[..., Any]) -> Callable[..., Any]:
    """Turn nightcell's own errors into one line and exit status 1."""

    @functools.wraps(fn)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        try:
            return fn(*args, **kwargs)
        except NightcellError as exc:
            raise click.ClickException(str(exc)) from None

    return wrapper


def _json_option(fn: Callable[..., Any]) -> Callable[..., Any]:
    return click.option("--json", "as_json", is_flag=True, help="Print plain JSON instead of text.")(fn)


def _out_option(fn: Callable[..., Any]) -> Callable[..., Any]:
    return click.option(
        "--out", type=click.Path(dir_okay=False, path_type=Path), default=None,
        help="Also write the result as JSON to this file (written only if the analysis succeeds).",
    )(fn)


_csv_argument = click.argument("csv_file", type=click.Path(exists=True, dir_okay=False, path_type=Path))


def _finish(data: dict[str, Any], text: str, as_json: bool, out: Path | None) -> None:
    payload = json.dumps(data, indent=1, sort_keys=True, allow_nan=False)
    if out is not None:
        # write beside the target and rename, so a failure never leaves a half-written file
        fd, tmp = tempfile.mkstemp(prefix=".nightcell-", suffix=".json", dir=out.parent if str(out.parent) else ".")
        try:
            with os.fdopen(fd, "w", encoding="utf-8") as fh:
                fh.write(payload + "\n")
            os.replace(tmp, out)
        except OSError as exc:
            Path(tmp).unlink(missing_ok=True)
            raise click.ClickException(f"cannot write {out}: {exc}") from None
    click.echo(payload if as_json else text)


@click.command("calibrate")
@_csv_argument
@click.option("--quadratic", is_flag=True, help="Fit a quadratic instead of a straight line.")
@click.option("--through-origin", is_flag=True, help="Fit without an intercept.")
@click.option("--reading", "readings", type=float, multiple=True,
              help="Absorbance of an unknown; repeat for replicate readings. Prints its concentration.")
@click.option("--path-cm", type=float, default=None, help="Path length (cm) to report the molar absorptivity.")
@click.option("--blank-sd", type=float, default=None,
              help="SD of repeated blank absorbances; LOD/LOQ then use it as σ.")
@click.option("--level", type=float, default=0.95, show_default=True, help="Confidence level of intervals.")
@_json_option
@_out_option
@_guarded
def calibrate_command(csv_file: Path, quadratic: bool, through_origin: bool, readings: tuple[float, ...],
                      path_cm: float | None, blank_sd: float | None, level: float, as_json: bool,
                      out: Path | None) -> None:
    """Fit a calibration curve to standards.

    CSV columns: concentration,absorbance[,weight][,replicate].

    Example: nightcell calibrate standards.csv --reading 0.412 --reading 0.409 --path-cm 1
    """
    cols = read_columns(csv_file, ["concentration", "absorbance"], ["weight"], min_rows=3)
    cal = _calibration.fit_calibration(
        cols["concentration"], cols["absorbance"], weights=cols.get("weight"), through_origin=through_origin,
        model="quadratic" if quadratic else "line", level=level, blank_sd=blank_sd,
        inputs={"file": csv_file.name},
    )
    data: dict[str, Any] = {"calibration": cal.to_dict()}
    text = cal.report()
    if readings:
        pred = cal.predict(list(readings))
        data["prediction"] = pred.to_dict()
        text += (f"\nunknown (mean of {pred.m} reading(s) = {pred.reading:.6g}): {pred.value:.6g} ± {pred.stderr:.3g}"
                 f", {pred.level:.0%} interval {pred.ci_low:.6g} to {pred.ci_high:.6g}"
                 + ("  (outside the standards' range)" if pred.extrapolated else ""))
    if path_cm is not None:
        eps = cal.molar_absorptivity(path_cm)
        data["molar_absorptivity"] = eps.to_dict()
        text += f"\nmolar absorptivity: {eps.value:.6g} ± {eps.stderr:.3g} {eps.unit}"
    _finish(data, text, as_json, out)


@click.command("rate")
@_csv_argument
@click.option("--model", type=click.Choice(("all", "initial_rate") + _kinetics.MODELS), default="all",
              show_default=True, help="Rate law to fit; 'all' fits and ranks every candidate.")
@click.option("--window", type=(float, float), default=None, metavar="START END",
              help="Time window (s) for initial_rate; default: chosen automatically.")
@click.option("--t-start", type=float, default=None, help="Leave out readings before this time (s), e.g. mixing.")
@click.option("--a-end", type=float, default=0.0, show_default=True,
              help="Absorbance when the followed species is used up (zero/first/second-order laws).")
@_json_option
@_out_option
@_guarded
def rate_command(csv_file: Path, model: str, window: tuple[float, float] | None, t_start: float | None,
                 a_end: float, as_json: bool, out: Path | None) -> None:
    """Fit rate laws to one run.

    CSV columns: time_s,absorbance (times strictly increasing).

    Example: nightcell rate run.csv --t-start 30 --json
    """
    cols = read_columns(csv_file, ["time_s", "absorbance"], min_rows=4)
    inputs = {"file": csv_file.name}
    if model == "all":
        result: Any = _kinetics.fit_all(cols["time_s"], cols["absorbance"], t_start=t_start, a_end=a_end,
                                        inputs=inputs)
    elif model == "initial_rate":
        result = _kinetics.initial_rate(cols["time_s"], cols["absorbance"], window, t_start=t_start, inputs=inputs)
    else:
        result = _kinetics.fit_model(cols["time_s"], cols["absorbance"], model, t_start=t_start, a_end=a_end,
                                     inputs=inputs)
    _finish(result.to_dict(), result.report(), as_json, out)


@click.command("orders")
@_csv_argument
@click.option("--nonlinear", is_flag=True, help="Refine the power law by nonlinear least squares on the rates.")
@_json_option
@_out_option
@_guarded
def orders_command(csv_file: Path, nonlinear: bool, as_json: bool, out: Path | None) -> None:
    """Reaction orders from the initial rates of several runs.

    CSV: one row per run with initial_rate[,rate_se] and one conc_<name> column per reactant.

    Example: nightcell orders initial_rates.csv --nonlinear
    """
    cols = read_columns(csv_file, ["initial_rate"], ["rate_se"], prefix="conc_", min_rows=3)
    conc = {name[len("conc_"):]: v for name, v in cols.items() if name.startswith("conc_")}
    if not conc:
        raise click.ClickException(
            f"{csv_file} has no concentration columns; add one column per reactant named conc_<name>"
        )
    result = _study.orders(cols["initial_rate"], conc, cols.get("rate_se"), nonlinear=nonlinear,
                           inputs={"file": csv_file.name})
    _finish(result.to_dict(), result.report(), as_json, out)


@click.command("arrhenius")
@_csv_argument
@click.option("--eyring", is_flag=True, help="Also fit the Eyring equation (activation enthalpy and entropy).")
@_json_option
@_out_option
@_guarded
def arrhenius_command(csv_file: Path, eyring: bool, as_json: bool, out: Path | None) -> None:
    """Activation energy from rate constants at several temperatures.

    CSV columns: temperature_K,k[,k_se].

    Example: nightcell arrhenius rate_constants.csv --eyring --out activation.json
    """
    cols = read_columns(csv_file, ["temperature_K", "k"], ["k_se"], min_rows=3)
    inputs = {"file": csv_file.name}
    fit = _study.arrhenius(cols["temperature_K"], cols["k"], cols.get("k_se"), inputs=inputs)
    data: dict[str, Any] = {"arrhenius": fit.to_dict()}
    text = fit.report()
    if eyring:
        ey = _study.eyring(cols["temperature_K"], cols["k"], cols.get("k_se"), inputs=inputs)
        data["eyring"] = ey.to_dict()
        text += "\n" + ey.report()
    _finish(data, text, as_json, out)


COMMANDS = (calibrate_command, rate_command, orders_command, arrhenius_command)


def register(cli_group: click.Group) -> None:
    """Add ``calibrate``, ``rate``, ``orders`` and ``arrhenius`` to ``cli_group``."""
    for command in COMMANDS:
        cli_group.add_command(command)
