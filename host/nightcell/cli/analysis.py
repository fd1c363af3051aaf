"""Analysis commands: ``calibrate``, ``rate``, ``orders``, ``arrhenius`` — on CSV files or on the database.

Owns: reading the documented CSV layouts, the commands' options, and printing a text report or plain JSON. Each
command parses, calls the library, prints; ``register(group)`` adds them to the main ``nightcell`` group (owned by
``cli/__init__.py``; ``options.friendly`` turns errors into one line and the documented exit code: 2 for a file or
value that cannot be used, 5 when the data cannot support the fit).

With ``--db`` the numbers come from the database (``analyse.py``: the blank rule, the clock, flags) and the result
is saved there with ``Store.save_result``, naming its inputs. Must never: compute anything itself, open a serial
port, or leave a half-written file.

CSV layouts (header row required, comma-separated, extra columns ignored):

- calibrate: ``concentration,absorbance`` [``weight``] [``replicate`` — a label; replicates are recognised by
  equal concentration].
- rate: ``time_s,absorbance`` (times strictly increasing).
- orders: one row per run: ``initial_rate`` [``rate_se``] and one ``conc_<name>`` column per reactant; with ``--db``,
  ``run`` (key or label) instead of ``initial_rate``: each run's initial rate comes from its readings.
- arrhenius: ``temperature_K,k`` [``k_se``]; with ``--db``, ``run`` [``temperature_K``] instead: k comes from the
  run's fit, the temperature from the column or else the mean of the run's solution probe.
"""

from __future__ import annotations

import contextlib
import json
from pathlib import Path
from typing import TYPE_CHECKING, Any, Callable, Sequence

import click

from ..errors import InputError
from ..science.laws import MODELS
from .options import FINITE, Finite, friendly, inert, json_option, open_writing

if TYPE_CHECKING:
    import numpy as np

__all__ = ["arrhenius_command", "calibrate_command", "orders_command", "rate_command", "read_columns", "register"]


def read_columns(
    path: Path, required: Sequence[str], optional: Sequence[str] = (), *, prefix: str | None = None, min_rows: int = 1,
    text: Sequence[str] = (), say: Callable[[str], None] | None = None,
) -> dict[str, np.ndarray]:
    """Numeric columns of a CSV or spreadsheet by header name (``tasks.tables.read_table`` with the dialect options
    of the command being run); what was detected or converted is said through ``say`` (to stderr by default)."""
    from ..tasks.tables import read_table

    ctx = click.get_current_context(silent=True)
    params = ctx.meta.get("nightcell.table", {}) if ctx is not None else {}
    table = read_table(path, required, optional, prefix=prefix, min_rows=min_rows, text=text,
                       delimiter=params.get("delimiter"), decimal=params.get("decimal"), sheet=params.get("sheet"))
    if table.notes:
        (say or (lambda line: click.echo(inert(line), err=True)))(f"read {Path(path).name}: {'; '.join(table.notes)}")
    _plausible(table)
    return table.columns


# Beyond these no reading of a colorimeter or rate constant lies, and the fits' arithmetic would overflow.
_LIMITS = {"absorbance": 50.0, "k": 1e50, "k_se": 1e50, "initial_rate": 1e50, "rate_se": 1e50, "weight": 1e50,
           "concentration": 1e50, "time_s": 1e12, "temperature_K": 1e5}


def _plausible(table: Any) -> None:
    import numpy as np

    for name, values in table.columns.items():
        limit = _LIMITS.get(name, 1e50 if name.startswith("conc_") else None)
        if limit is None or values.dtype == object or values.size == 0:
            continue
        big = np.flatnonzero(np.abs(values) > limit)
        if big.size:
            i = int(big[0])
            raise InputError(f"{table.path} line {table.line(i)}, column {name}: {values[i]:g} is beyond any plausible value "
                             f"(at most {limit:g} in size): fix or delete that row")


def _table_options(fn: Callable[..., Any]) -> Callable[..., Any]:
    """--delimiter, --decimal and --sheet: what a file's dialect is when detection is not wanted (read through the
    click context by ``read_columns``, so the commands' signatures stay as they are)."""
    fn = click.option("--sheet", default=None, expose_value=False, is_eager=False, callback=_keep,
                      help="The sheet of an .xlsx/.xls/.ods workbook to read (default: the first).")(fn)
    fn = click.option("--decimal", type=click.Choice([".", ","]), default=None, expose_value=False, callback=_keep,
                      help="Decimal mark of the CSV file (default: detected).")(fn)
    fn = click.option("--delimiter", type=click.Choice([",", ";", "tab", "|"]), default=None, expose_value=False,
                      callback=_keep, help="Column delimiter of the CSV file (default: detected).")(fn)
    return fn


def _keep(ctx: click.Context, param: click.Parameter, value: Any) -> Any:
    if value == "tab":
        value = "\t"
    ctx.meta.setdefault("nightcell.table", {})[param.name] = value
    return value


def _out_folder_exists(ctx: click.Context, param: click.Parameter, out: Path | None) -> Path | None:
    # checked before anything runs: with --db the result is saved in the database before the file is written
    if out is not None and not out.resolve().parent.is_dir():
        raise click.BadParameter(f"the folder {out.parent} does not exist: create it first, or give another path")
    return out


def _out_option(fn: Callable[..., Any]) -> Callable[..., Any]:
    return click.option(
        "--out", type=click.Path(dir_okay=False, path_type=Path), default=None, callback=_out_folder_exists,
        help="Also write the result as JSON to this file (written only if the analysis succeeds).",
    )(fn)


def _db_option(fn: Callable[..., Any]) -> Callable[..., Any]:
    # the shared --db, without a default here: giving it is what switches a command from CSV to the database
    return click.option("--db", "db", type=click.Path(dir_okay=False, path_type=Path), default=None,
                        help="The SQLite database file: analyse stored readings instead of a CSV file, and save "
                             "the result there.")(fn)


def _channel_option(fn: Callable[..., Any]) -> Callable[..., Any]:
    return click.option("--channel", type=click.IntRange(min=0), default=0, show_default=True,
                        help="Light channel (with --db).")(fn)


_csv_argument = click.argument("csv_file", required=False, type=click.Path(path_type=Path))


def _mode(csv_file: Path | None, db: Path | None, *, csv_with_db: bool, what: str) -> None:
    """Exactly the inputs a command needs: a CSV file, or --db (with a run plan CSV where ``csv_with_db``)."""
    if db is None and csv_file is None:
        raise InputError(f"give a CSV file ({what}) or --db DATABASE")
    if db is not None and csv_file is not None and not csv_with_db:
        raise InputError("give a CSV file or --db, not both")


def _open(db: Path) -> Any:
    # every analysis with --db saves its result: a writing command
    return open_writing(db)


def _finish(data: dict[str, Any], text: str, as_json: bool, out: Path | None) -> None:
    from ..render.report import write_atomic

    payload = json.dumps(data, indent=1, sort_keys=True, allow_nan=False)
    if out is not None:
        try:
            write_atomic(out, (payload + "\n").encode("utf-8"))  # never half a file
        except OSError as exc:
            raise InputError(f"cannot write {out}: {exc}") from None
    click.echo(payload if as_json else inert(text))


def _finish_saved(store: Any, db: Path, kind: str, label: str, inputs: dict[str, Any], data: dict[str, Any],
                  text: str, as_json: bool, out: Path | None) -> None:
    """Save a result and write ``--out`` as one step: the file is written inside the transaction that saves the
    result, so a file that cannot be written leaves the database as it was (and a refused commit, no file)."""
    from ..render.report import write_atomic

    with store.write():
        saved = store.save_result(kind, label, inputs, data)
        data = dict(data, result_id=saved)
        text += f"\nsaved in {db} as result {saved}"
        payload = json.dumps(data, indent=1, sort_keys=True, allow_nan=False)
        try:
            if out is not None:
                write_atomic(out, (payload + "\n").encode("utf-8"))
        except OSError as exc:
            raise InputError(f"cannot write {out}: {exc}") from None
    click.echo(payload if as_json else inert(text))


def _only_device(store: Any, device: str | None) -> str:
    devices = [d["device"] for d in store.devices()]
    if device is not None:
        if device not in devices:
            raise InputError(f"no device {device!r} in {store.path} (devices: {', '.join(devices) or 'none'})")
        return device
    if len(devices) == 1:
        return devices[0]
    if not devices:
        raise InputError(f"{store.path} holds no devices yet: sync a board first")
    raise InputError(f"{store.path} holds {len(devices)} devices: name one with --device "
                     f"({', '.join(devices)})")


@click.command("calibrate")
@_csv_argument
@_table_options
@_db_option
@click.option("--device", default=None, help="With --db: the device whose standards to fit (default: the only one).")
@_channel_option
@click.option("--quadratic", is_flag=True, help="Fit a quadratic instead of a straight line.")
@click.option("--through-origin", is_flag=True, help="Fit without an intercept.")
@click.option("--reading", "readings", type=FINITE, multiple=True,
              help="Absorbance of an unknown; repeat for replicate readings. Prints its concentration.")
@click.option("--path-cm", type=Finite(0.001, 100.0, unit="cm"), default=None, help="Path length (cm) to report the molar absorptivity.")
@click.option("--blank-sd", type=Finite(0.0), default=None,
              help="SD of repeated blank absorbances; LOD/LOQ then use it as σ.")
@click.option("--level", type=Finite(0.0, 1.0, open_ends=True), default=0.95,
              show_default=True, help="Confidence level of intervals, between 0 and 1 (e.g. 0.95).")
@json_option
@_out_option
@friendly
def calibrate_command(csv_file: Path | None, db: Path | None, device: str | None, channel: int, quadratic: bool,
                      through_origin: bool, readings: tuple[float, ...], path_cm: float | None,
                      blank_sd: float | None, level: float, as_json: bool, out: Path | None) -> None:
    """Fit a calibration curve to standards, from a CSV file or from a device's standards in the database.

    CSV columns: concentration,absorbance[,weight][,replicate]. With --db the standards are the device's standard
    marks, each against its nearest preceding blank, and the calibration is saved in the database.

    Example: nightcell calibrate standards.csv --reading 0.412 --reading 0.409 --path-cm 1

    Example: nightcell calibrate --db class.db --device 5e1f000000000001
    """
    _mode(csv_file, db, csv_with_db=False, what="concentration,absorbance")
    options = dict(through_origin=through_origin, model="quadratic" if quadratic else "line", level=level,
                   blank_sd=blank_sd)
    with contextlib.ExitStack() as opened:
        _calibrate(csv_file, db, device, channel, options, readings, path_cm, as_json, out, opened)


def _calibrate(csv_file: Path | None, db: Path | None, device: str | None, channel: int, options: dict[str, Any],
               readings: tuple[float, ...], path_cm: float | None, as_json: bool, out: Path | None,
               opened: contextlib.ExitStack) -> None:
    store = None
    if db is not None:
        from ..tasks.analyse import calibrate_from_store

        store = opened.enter_context(_open(db))
        device = _only_device(store, device)
        cal = calibrate_from_store(store, device, channel, **options)
    else:
        assert csv_file is not None
        cols = read_columns(csv_file, ["concentration", "absorbance"], ["weight"], min_rows=3)
        from ..science.calibration import fit_calibration

        cal = fit_calibration(cols["concentration"], cols["absorbance"], weights=cols.get("weight"),
                                inputs={"file": csv_file.name}, **options)
    data: dict[str, Any] = {"calibration": cal.to_dict()}
    text = cal.report()
    for line in cal.inputs.get("skipped", []):
        text += f"\nwarning: {line}"
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
    if store is not None:
        assert db is not None and device is not None
        _finish_saved(store, db, "calibration", f"{device} standards", cal.inputs, data, text, as_json, out)
        return
    _finish(data, text, as_json, out)


def _run_text(analysis: Any) -> str:
    import numpy as np

    run = analysis.run
    lines = [f"run {run.key} {run.label!r}: {len(analysis.time_s)} readings, "
             f"{int(np.count_nonzero(analysis.flags))} flagged and left out",
             f"blank {analysis.blank.boot}:{analysis.blank.seq} ({analysis.blank.rule}); time: {analysis.time_basis}",
             f"best rate law by AIC: {analysis.best}"]
    for name, fit in sorted(analysis.fits.items(), key=lambda kv: kv[1].aic):
        lines.append(f"  {name:<20} AIC = {fit.aic:10.2f}")
    lines += analysis.warnings
    lines.append(analysis.fits[analysis.best].report())
    return "\n".join(lines)


@click.command("rate")
@_csv_argument
@_table_options
@_db_option
@click.option("--run", "run_text", metavar="KEY", help="With --db: the run (key or label); default: the only run.")
@_channel_option
@click.option("--model", type=click.Choice(("all", "initial_rate") + MODELS), default="all",
              show_default=True, help="Rate law to fit; 'all' fits and ranks every candidate.")
@click.option("--window", type=(FINITE, FINITE), default=None, metavar="START END",
              help="Time window (s) for initial_rate; default: chosen automatically.")
@click.option("--t-start", type=FINITE, default=None, help="Leave out readings before this time (s), e.g. mixing.")
@click.option("--a-end", type=FINITE, default=0.0, show_default=True,
              help="Absorbance when the followed species is used up (zero/first/second-order laws).")
@json_option
@_out_option
@friendly
def rate_command(csv_file: Path | None, db: Path | None, run_text: str | None, channel: int, model: str,
                 window: tuple[float, float] | None, t_start: float | None, a_end: float, as_json: bool,
                 out: Path | None) -> None:
    """Fit rate laws to one run, from a CSV file or from a run in the database.

    CSV columns: time_s,absorbance (times strictly increasing). With --db the run's absorbance is read against its
    blank, flagged readings are left out, and the result is saved in the database.

    Example: nightcell rate run.csv --t-start 30 --json

    Example: nightcell rate --db class.db --run "dye fading"
    """
    _mode(csv_file, db, csv_with_db=False, what="time_s,absorbance")
    if db is not None:
        from ..tasks.analyse import analyse_run, initial_rate_of
        from ..tasks.export import resolve_run

        if t_start is not None or a_end != 0.0:
            raise InputError("--t-start and --a-end apply to CSV files; with --db the whole run is fitted "
                             "(export it with `nightcell export` to trim it)")
        with _open(db) as store:
            run = resolve_run(store, run_text)
            if model == "initial_rate":
                fit = initial_rate_of(store, run, channel, window)
                data, text = fit.to_dict(), f"run {run.key} {run.label!r}\n" + fit.report()
                inputs = fit.inputs
            else:
                if window is not None:
                    raise InputError("--window applies to --model initial_rate")
                analysis = analyse_run(store, run, channel=channel,
                                       models=None if model == "all" else (model,))
                data, text = analysis.to_dict(), _run_text(analysis)
                inputs = analysis.fits[analysis.best].inputs
            _finish_saved(store, db, "rate", run.label or run.key, inputs, data, text, as_json, out)
        return
    from ..science import kinetics as _kinetics

    assert csv_file is not None
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


def _runs_from_plan(store: Any, keys: Sequence[str]) -> list[Any]:
    from ..tasks.export import resolve_run

    runs = [resolve_run(store, str(k)) for k in keys]
    seen = [r.key for r in runs]
    twice = sorted({k for k in seen if seen.count(k) > 1})
    if twice:
        raise InputError(f"run {twice[0]} is listed twice in the CSV: list each run once")
    return runs


@click.command("orders")
@_csv_argument
@_table_options
@_db_option
@_channel_option
@click.option("--nonlinear", is_flag=True, help="Refine the power law by nonlinear least squares on the rates.")
@json_option
@_out_option
@friendly
def orders_command(csv_file: Path | None, db: Path | None, channel: int, nonlinear: bool, as_json: bool,
                   out: Path | None) -> None:
    """Reaction orders from the initial rates of several runs.

    CSV: one row per run with initial_rate[,rate_se] and one conc_<name> column per reactant. With --db the CSV
    names the runs instead (column run: key or label) and each initial rate comes from that run's readings.

    Example: nightcell orders initial_rates.csv --nonlinear

    Example: nightcell orders --db class.db runs_and_concentrations.csv
    """
    import numpy as np

    from ..science import study as _study
    from ..tasks.analyse import initial_rate_of

    _mode(csv_file, db, csv_with_db=True, what="initial_rate,conc_<name>...")
    assert csv_file is not None
    inputs: dict[str, Any] = {"file": csv_file.name}
    if db is not None:
        cols = read_columns(csv_file, ["run"], prefix="conc_", min_rows=3, text=("run",))
    else:
        cols = read_columns(csv_file, ["initial_rate"], ["rate_se"], prefix="conc_", min_rows=3)
    conc = {name[len("conc_"):]: v for name, v in cols.items() if name.startswith("conc_")}
    if not conc:
        raise InputError(f"{csv_file} has no concentration columns; add one column per reactant named conc_<name>")
    with contextlib.ExitStack() as opened:
        store = None if db is None else opened.enter_context(_open(db))
        if store is not None:
            runs = _runs_from_plan(store, cols["run"])
            fits = [initial_rate_of(store, run, channel, None) for run in runs]
            cols["initial_rate"] = np.array([f.values["rate"] for f in fits])
            cols["rate_se"] = np.array([f.stderr["rate"] for f in fits])
            inputs = {"file": csv_file.name, "runs": [r.key for r in runs], "channel": channel,
                      "rate_rule": "initial_rate, window chosen automatically, flagged readings left out"}
        result = _study.orders(cols["initial_rate"], conc, cols.get("rate_se"), nonlinear=nonlinear, inputs=inputs)
        data, text = result.to_dict(), result.report()
        if store is not None:
            assert db is not None
            _finish_saved(store, db, "orders", csv_file.stem, inputs, data, text, as_json, out)
            return
    _finish(data, text, as_json, out)


def _kelvin(path: Path, temperature_k: np.ndarray) -> None:
    """Refuse temperatures that are plainly °C written as kelvin (no solution is studied below 200 K)."""
    import numpy as np

    t = np.asarray(temperature_k, dtype=float)
    if t.size and float(np.max(t)) < 200.0:
        raise InputError(f"{path}: temperatures {float(np.min(t)):g} to {float(np.max(t)):g} K look like °C — add "
                         "273.15 to each (or name the column 'temperature (°C)', which is converted)")


@click.command("arrhenius")
@_csv_argument
@_table_options
@_db_option
@_channel_option
@click.option("--model", type=click.Choice([m for m in MODELS if m != "zero_order"]),
              default="first_order_plateau", show_default=True,
              help="With --db: the rate law whose k is taken from every run (the same for all runs).")
@click.option("--eyring", is_flag=True, help="Also fit the Eyring equation (activation enthalpy and entropy).")
@json_option
@_out_option
@friendly
def arrhenius_command(csv_file: Path | None, db: Path | None, channel: int, model: str, eyring: bool,
                      as_json: bool, out: Path | None) -> None:
    """Activation energy from rate constants at several temperatures.

    CSV columns: temperature_K,k[,k_se]. With --db the CSV names the runs instead (run[,temperature_K]); k comes
    from each run's fit and the temperature from the column, else from the run's solution probe.

    Example: nightcell arrhenius rate_constants.csv --eyring --out activation.json

    Example: nightcell arrhenius --db class.db runs_and_temperatures.csv
    """
    import numpy as np

    from ..science import study as _study
    from ..tasks.analyse import k_and_temperature

    _mode(csv_file, db, csv_with_db=True, what="temperature_K,k")
    assert csv_file is not None
    inputs: dict[str, Any] = {"file": csv_file.name}
    if db is not None:
        cols = read_columns(csv_file, ["run"], ["temperature_K"], min_rows=3, text=("run",))
    else:
        cols = read_columns(csv_file, ["temperature_K", "k"], ["k_se"], min_rows=3)
    with contextlib.ExitStack() as opened:
        store = None if db is None else opened.enter_context(_open(db))
        if store is not None:
            runs = _runs_from_plan(store, cols["run"])
            got = [k_and_temperature(store, run, channel, model) for run in runs]
            if "temperature_K" not in cols:
                missing = [r.key for r, g in zip(runs, got) if g[2] is None]
                if missing:
                    raise InputError(f"run {missing[0]} has no solution temperature (no probe): add a "
                                     f"temperature_K column to {csv_file}")
                cols["temperature_K"] = np.array([g[2] for g in got])
            cols["k"] = np.array([g[0] for g in got])
            cols["k_se"] = np.array([g[1] for g in got])
            inputs = {"file": csv_file.name, "runs": [r.key for r in runs], "channel": channel, "model": model,
                      "temperature": "from the CSV" if "temperature_K" in cols and not all(g[2] for g in got)
                      else "CSV column, else the run's mean probe temperature"}
        _kelvin(csv_file, cols["temperature_K"])
        fit = _study.arrhenius(cols["temperature_K"], cols["k"], cols.get("k_se"), inputs=inputs)
        data: dict[str, Any] = {"arrhenius": fit.to_dict()}
        text = fit.report()
        if eyring:
            ey = _study.eyring(cols["temperature_K"], cols["k"], cols.get("k_se"), inputs=inputs)
            data["eyring"] = ey.to_dict()
            text += "\n" + ey.report()
        if store is not None:
            assert db is not None
            _finish_saved(store, db, "arrhenius", csv_file.stem, inputs, data, text, as_json, out)
            return
    _finish(data, text, as_json, out)


COMMANDS = (calibrate_command, rate_command, orders_command, arrhenius_command)


def register(cli_group: click.Group) -> None:
    """Add ``calibrate``, ``rate``, ``orders`` and ``arrhenius`` to ``cli_group``."""
    for command in COMMANDS:
        cli_group.add_command(command)


