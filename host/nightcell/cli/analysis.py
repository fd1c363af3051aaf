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
  equal concentration]; a percent-transmittance column (``%T``) may stand in for ``absorbance`` (read_table
  converts it).
- rate: ``time_s,absorbance`` (times strictly increasing) [``weight`` — relative weights, as the run export
  writes them (T², what ``rate --db`` uses; 0 for flagged readings); without it the fit is unweighted] [``flags``
  — rows with flags other than 0 are left out, as ``rate --db`` leaves them out].
- An ``absorbance`` column whose values all lie within 0–100 with some above 4 looks like %T: refused (exit 2)
  unless ``--accept-suspect``.
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
from ..science import laws as _laws
from ..science.laws import ALL_MODELS, MODELS
from .options import (FINITE, Finite, accept_suspect_option, db_from_environment, friendly, inert, json_option,
                      open_writing, source_db_option)

if TYPE_CHECKING:
    import numpy as np

__all__ = ["arrhenius_command", "calibrate_command", "orders_command", "rate_command", "read_columns", "register"]


def read_columns(
    path: Path, required: Sequence[str], optional: Sequence[str] = (), *, prefix: str | None = None, min_rows: int = 1,
    text: Sequence[str] = (), say: Callable[[str], None] | None = None, check_range: bool = False,
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
    if check_range:
        _plausible(table)
    return table.columns


def _read_checked(path: Path, *args: Any, **kwargs: Any) -> dict[str, np.ndarray]:
    """``read_columns`` as the commands read: values beyond any plausible size refused by row."""
    return read_columns(path, *args, check_range=True, **kwargs)


# Beyond these no reading of a colorimeter or rate constant lies, and the fits' arithmetic would overflow.
_LIMITS = {"absorbance": 1000.0, "k": 1e50, "k_se": 1e50, "initial_rate": 1e50, "rate_se": 1e50, "weight": 1e50,
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


def _absorbance_columns(path: Path, first: str, optional: Sequence[str], *, min_rows: int,
                        accept_suspect: bool) -> tuple[dict[str, np.ndarray], str]:
    """``first`` and ``absorbance`` of a CSV (a %T column converted by read_table), and how A was obtained.

    Values in an ``absorbance`` column that look like percent transmittance (all within 0–100, some above 4) are
    refused unless ``accept_suspect``: an LED photometer rarely reads A above 3 (common practice)."""
    import numpy as np

    notes: list[str] = []
    cols = read_columns(path, [first, "absorbance"], optional, min_rows=min_rows, say=notes.append,
                        check_range=True)
    for line in notes:
        click.echo(inert(line), err=True)
    if any("percent transmittance" in line for line in notes):
        return cols, "converted from percent transmittance: A = 2 − log10(%T)"
    a = cols["absorbance"]
    if a.size and np.all((a >= 0) & (a <= 100)) and a.max() > 4 and not accept_suspect:
        raise InputError(f"{path}: column absorbance holds values up to {a.max():g}, which look like percent "
                         "transmittance (0–100), not absorbance (rarely above 3): if they are %T, name the column "
                         "%T and nightcell converts them (A = 2 − log10 %T); if they are right, pass --accept-suspect")
    return cols, "column absorbance"


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


_db_option = source_db_option  # the shared --db and NIGHTCELL_DB, without a default (it switches CSV → database)


def _channel_option(fn: Callable[..., Any]) -> Callable[..., Any]:
    return click.option("--channel", type=click.IntRange(min=0), default=0, show_default=True,
                        help="Light channel (with --db).")(fn)


_csv_argument = click.argument("csv_file", required=False, type=click.Path(path_type=Path))


def _mode(csv_file: Path | None, db: Path | None, *, csv_with_db: bool, what: str) -> Path | None:
    """Exactly the inputs a command needs: a CSV file, or --db (with a run plan CSV where ``csv_with_db``).

    Returns the database to use, or None for the CSV file alone: a CSV file typed on the command line wins over a
    database that only came from ``NIGHTCELL_DB`` (for orders and arrhenius, unless the CSV names runs).
    """
    if db is None and csv_file is None:
        raise InputError(f"give a CSV file ({what}) or --db DATABASE")
    if db is not None and csv_file is not None and db_from_environment():
        if not csv_with_db or "run" not in _header(csv_file):
            return None
    if db is not None and csv_file is not None and not csv_with_db:
        raise InputError("give a CSV file or --db, not both")
    return db


def _header(path: Path) -> list[str]:
    import csv

    try:
        with open(path, newline="", encoding="utf-8-sig") as fh:
            return [h.strip() for h in next(csv.reader(fh), [])]
    except (OSError, UnicodeDecodeError, csv.Error):
        return []


def _open(db: Path) -> Any:
    # every analysis with --db saves its result: a writing command
    return open_writing(db)


def _finish(data: dict[str, Any], text: str, as_json: bool, out: Path | None, *, sort_keys: bool = True) -> None:
    from ..render.report import write_atomic

    # a fit result keeps its reading order (answer, fit, parameters, ranking, detail); other results sort their keys
    payload = json.dumps(data, indent=1, sort_keys=sort_keys, allow_nan=False)
    if out is not None:
        try:
            write_atomic(out, (payload + "\n").encode("utf-8"))  # never half a file
        except OSError as exc:
            raise InputError(f"cannot write {out}: {exc}") from None
    click.echo(payload if as_json else inert(text))


def _finish_saved(store: Any, db: Path, kind: str, label: str, inputs: dict[str, Any], data: dict[str, Any],
                  text: str, as_json: bool, out: Path | None, *, sort_keys: bool = True) -> None:
    """Save a result and write ``--out`` as one step: the file is written inside the transaction that saves the
    result, so a file that cannot be written leaves the database as it was (and a refused commit, no file)."""
    from ..render.report import write_atomic

    with store.write():
        saved = store.save_result(kind, label, inputs, data)
        data = dict(data, result_id=saved)
        text += f"\nsaved in {db} as result {saved}"
        payload = json.dumps(data, indent=1, sort_keys=sort_keys, allow_nan=False)
        try:
            if out is not None:
                write_atomic(out, (payload + "\n").encode("utf-8"))
        except OSError as exc:
            raise InputError(f"cannot write {out}: {exc}") from None
    click.echo(payload if as_json else inert(text))


class LawChoice(click.Choice):
    """The rate laws by name; the names of version 0.1 still parse (hidden from --help) with a deprecation message."""

    def __init__(self, extra: Sequence[str] = (), laws: Sequence[str] = ALL_MODELS, exclude: Sequence[str] = ()):
        super().__init__(tuple(extra) + tuple(m for m in laws if m not in exclude))

    def convert(self, value: Any, param: Any, ctx: Any) -> Any:
        if isinstance(value, str) and value in _laws.OLD_NAMES and _laws.OLD_NAMES[value] in self.choices:
            click.echo(f"warning: {_laws.deprecation(value)}", err=True)
            value = _laws.OLD_NAMES[value]
        return super().convert(value, param, ctx)


def _detail_option(fn: Callable[..., Any]) -> Callable[..., Any]:
    return click.option("--detail", is_flag=True,
                        help="Also print the fit criteria (AIC, AICc), test statistics such as the runs test of "
                             "the residual signs, and the marks the readings were taken against.")(fn)


@click.command("calibrate")
@_csv_argument
@_table_options
@_db_option
@click.option("--device", default=None,
              help="With --db: the device (its label or id) whose standards to fit (default: the only one).")
@_channel_option
@click.option("--set", "set_name", default=None, metavar="NAME",
              help="With --db: the calibration set to fit (its set=NAME label, or the blank key it follows); "
                   "default: the latest set.")
@click.option("--unit", default=None, help="Concentration unit of the standards, e.g. µM (with --db: when the "
              "standards were journaled without one).")
@click.option("--quadratic", is_flag=True, help="Fit a quadratic instead of a straight line.")
@click.option("--through-origin", is_flag=True, help="Fit without an intercept.")
@click.option("--reading", "readings", type=FINITE, multiple=True,
              help="Absorbance of an unknown; repeat for replicate readings. Prints its concentration.")
@click.option("--path-cm", type=Finite(0.001, 100.0, unit="cm"), default=None,
              help="Path length (cm) for the molar absorptivity (with --db: default the board's path_cm setting).")
@click.option("--blank-sd", type=Finite(0.0), default=None,
              help="SD of repeated blank absorbances; LOD/LOQ then use it as σ.")
@click.option("--level", type=Finite(0.0, 1.0, open_ends=True), default=0.95,
              show_default=True, help="Confidence level of intervals, between 0 and 1 (e.g. 0.95).")
@accept_suspect_option
@_detail_option
@json_option
@_out_option
@friendly
def calibrate_command(csv_file: Path | None, db: Path | None, device: str | None, channel: int,
                      set_name: str | None, unit: str | None, quadratic: bool,
                      through_origin: bool, readings: tuple[float, ...], path_cm: float | None,
                      blank_sd: float | None, level: float, accept_suspect: bool, detail: bool, as_json: bool,
                      out: Path | None) -> None:
    """Fit a calibration curve to standards, from a CSV file or from a device's standards in the database.

    CSV columns: concentration,absorbance[,weight][,replicate] (a %T column instead of absorbance is converted).
    With --db the standards are one calibration set of the device's standard marks (the standards after one
    blank with no run between, or those labelled set=NAME; the latest unless --set names one), each against its
    nearest preceding blank, and the calibration is saved in the database.

    Example: nightcell calibrate standards.csv --unit µM --reading 0.412 --reading 0.409 --path-cm 1

    Example: nightcell calibrate --db class.db --device 5e1f000000000001 --set week2
    """
    db = _mode(csv_file, db, csv_with_db=False, what="concentration,absorbance")
    if set_name is not None and db is None:
        raise InputError("--set chooses among a device's standards in the database: use it with --db")
    options = dict(through_origin=through_origin, model="quadratic" if quadratic else "line", level=level,
                   blank_sd=blank_sd, accept_suspect=accept_suspect)
    with contextlib.ExitStack() as opened:
        _calibrate(csv_file, db, device, channel, options, readings, path_cm, as_json, out, opened,
                   set_name=set_name, unit=unit, detail=detail)


def _calibrate(csv_file: Path | None, db: Path | None, device: str | None, channel: int, options: dict[str, Any],
               readings: tuple[float, ...], path_cm: float | None, as_json: bool, out: Path | None,
               opened: contextlib.ExitStack, *, set_name: str | None = None, unit: str | None = None,
               detail: bool = False) -> None:
    from ..render import fit_layout as _layout
    from ..render import numbers as _n
    from ..science.calibration import molar_factor

    store = None
    path_note = "given with --path-cm"
    if db is not None:
        from ..tasks.analyse import calibrate_from_store
        from ..tasks.names import resolve_device

        store = opened.enter_context(_open(db))
        device, bench = resolve_device(store, device)
        cal = calibrate_from_store(store, device, channel, set_name=set_name, unit=unit, **options)
        if path_cm is None:
            path_cm, path_note = _stored_path_cm(store, device)
    else:
        assert csv_file is not None
        cols, how = _absorbance_columns(csv_file, "concentration", ["weight"], min_rows=3,
                                        accept_suspect=options["accept_suspect"])
        from ..science.calibration import fit_calibration

        cal = fit_calibration(cols["concentration"], cols["absorbance"], weights=cols.get("weight"),
                              inputs={"file": csv_file.name, "absorbance": how}, unit=unit or "", **options)
    data: dict[str, Any] = {"calibration": cal.to_dict()}
    text = _layout.calibration_text(cal, unit=cal.unit, detail=detail)
    u = f" {cal.unit}" if cal.unit else ""
    if db is not None:
        used = cal.inputs.get("standards_used", [])
        text += (f"\ncalibration set: {cal.inputs['set']} ({len(used)} standards; "
                 + (f"other sets: {'; '.join(cal.inputs['other_sets'])}" if cal.inputs.get("other_sets")
                    else "no other sets") + ")")
        text += "\nstandards used: " + ", ".join(
            f"{d['label']!r} = {d['value']}{(' ' + d['unit']) if d['unit'] else u}" if d["label"]
            else f"{d['value']}{(' ' + d['unit']) if d['unit'] else u}" for d in used)
        if detail:
            text += "\nstandards' marks: " + ", ".join(d["mark"] for d in used)
        for note in cal.inputs.get("left_out", []) + cal.inputs.get("warnings", []):
            text += f"\nnote: {note}"
    if cal.extra.get("suspect"):
        text += f"\nSUSPECT: {cal.extra['suspect']}"
    if readings:
        pred = cal.predict(list(readings))
        data["prediction"] = pred.to_dict()
        text += "\n" + _layout.prediction_text(pred, unit=cal.unit)
        if detail:
            text += f"\n  interval from t = {_t(pred.level, pred.dof):.3g} with {pred.dof} degrees of freedom"
    if path_cm is not None:
        factor = molar_factor(cal.unit) if cal.unit else 1.0
        if factor is None:
            text += (f"\nmolar absorptivity not given: the unit {cal.unit} does not convert to mol/L (give the "
                     "standards in M, mM, µM or nM)")
        elif not cal.unit and db is not None:
            text += ("\nmolar absorptivity not given: the standards carry no unit (give --unit, e.g. µM, to have "
                     "it)")
        else:
            eps = cal.molar_absorptivity(path_cm)
            data["molar_absorptivity"] = dict(eps.to_dict(), path_cm=path_cm, path_source=path_note)
            text += f"\nmolar absorptivity: {_n.measured(eps.value, eps.stderr, eps.unit)}, path {path_cm:g} cm " \
                    f"({path_note})"
    if store is not None:
        assert db is not None and device is not None
        _finish_saved(store, db, "calibration", f"{bench} {cal.inputs['set']}", cal.inputs, data, text, as_json,
                      out)
        return
    _finish(data, text, as_json, out)


def _t(level: float, dof: int) -> float:
    from ..science.fitting import t_quantile

    return t_quantile(level, dof)


def _stored_path_cm(store: Any, device: str) -> tuple[float | None, str]:
    """The path length in the device's latest settings record, and where it came from."""
    row = store.settings_before(device, 2 ** 32, 0)  # the latest of all
    if row is None:
        return None, "no settings record"
    try:
        value = json.loads(row["json"]).get("path_cm")
    except (ValueError, AttributeError):
        return None, "settings record unreadable"
    if not isinstance(value, (int, float)) or not value > 0:
        return None, "no path_cm setting"
    return float(value), f"the board's path_cm setting, record {row['boot']}:{row['seq']}"


def _run_layout(analysis: Any) -> dict[str, Any]:
    """A stored run's fits in the one layout, with where the readings came from (``detail`` holds the raw keys)."""
    import numpy as np

    from ..render import fit_layout as _layout

    run = analysis.run
    data = {"run": {"label": run.label, "key": run.key, "device": run.device},
            "readings": {"used": int(len(analysis.time_s) - np.count_nonzero(analysis.flags)),
                         "left_out_flagged": int(np.count_nonzero(analysis.flags)),
                         "flags": analysis.flag_counts(), "channel": analysis.channel},
            **_layout.layout(analysis.fits)}
    data["warnings"] = list(analysis.warnings)
    data["detail"] = dict(data["detail"], readings_from={
        "blank": analysis.blank.to_dict(), "time_basis": analysis.time_basis, "boots": list(analysis.boots),
        "end_rule": analysis.end_rule, "resumed_at": [f"{b}:{q}" for b, q in analysis.resumed_at],
        "calibration": analysis.calibration_id})
    return data


def _run_text(analysis: Any, data: dict[str, Any], detail: bool) -> str:
    from ..render import fit_layout as _layout

    run = analysis.run
    flagged = data["readings"]["left_out_flagged"]
    counts = data["readings"]["flags"]
    lines = [f"run {run.label or run.key!r}: {len(analysis.time_s)} readings"
             + (f", {flagged} flagged and left out" if flagged else ", none left out")
             + (f" ({', '.join(f'{n}: {c}' for n, c in counts.items())})" if counts else "")]
    lines += [f"warning: {w}" for w in analysis.warnings]
    lines.append(_layout.text(data, detail=detail))
    if detail:
        lines.append(f"  run key {run.key}; blank mark {analysis.blank.boot}:{analysis.blank.seq} "
                     f"({analysis.blank.rule}); time: {analysis.time_basis}")
    return "\n".join(lines)


def _starts(texts: Sequence[str]) -> dict[str, float]:
    out = {}
    for text in texts:
        name, sep, value = text.partition("=")
        try:
            out[name.strip()] = float(value)
        except ValueError:
            sep = ""
        if not sep or not name.strip():
            raise InputError(f"--start {text!r}: write NAME=VALUE, e.g. --start k=0.001 (names: A0, A_rise, k)")
    return out


@click.command("rate")
@_csv_argument
@_table_options
@_db_option
@click.option("--run", "run_text", metavar="RUN",
              help="With --db: the run (its number in `list runs`, or its label); default: the only run.")
@_channel_option
@click.option("--model", type=LawChoice(extra=("all", "initial_rate")), default="all",
              show_default=True, help="Rate law to fit; 'all' fits and ranks every candidate by AICc "
                                      "(first_order_rise_to_final only when named).")
@click.option("--window", type=(FINITE, FINITE), default=None, metavar="START END",
              help="Time window (s) for initial_rate; default: chosen automatically.")
@click.option("--t-start", type=FINITE, default=None, help="Leave out readings before this time (s), e.g. mixing.")
@click.option("--t-end", type=FINITE, default=None, help="Leave out readings after this time (s).")
@click.option("--a-end", type=FINITE, default=0.0, show_default=True,
              help="Absorbance when the followed species is used up (zero/first/second-order laws).")
@click.option("--a0", type=FINITE, default=None,
              help="first_order_rise_to_final: hold A0 (the absorbance at t = 0) at this value; default: fitted.")
@click.option("--start", "starts", multiple=True, metavar="NAME=VALUE",
              help="first_order_rise_to_final: a starting value (A0, A_rise, k); a grid start is always tried too.")
@click.option("--blank", "blank", metavar="KEY|LABEL", default=None,
              help="With --db: read the run against this blank (key boot:seq or label) instead of the nearest "
                   "one before it.")
@accept_suspect_option
@_detail_option
@json_option
@_out_option
@friendly
def rate_command(csv_file: Path | None, db: Path | None, run_text: str | None, channel: int, model: str,
                 window: tuple[float, float] | None, t_start: float | None, t_end: float | None, a_end: float,
                 a0: float | None, starts: tuple[str, ...], blank: str | None, accept_suspect: bool,
                 detail: bool, as_json: bool, out: Path | None) -> None:
    """Fit rate laws to one run, from a CSV file or from a run in the database.

    CSV columns: time_s,absorbance[,weight][,flags] (times strictly increasing; a %T column instead of absorbance
    is converted; a weight column — as `nightcell export` writes it — weights the fit as --db does, else it is
    unweighted). With --db the run's absorbance is read against its blank (the nearest before it, else the
    first after it with a warning, or --blank), flagged readings are left out, readings are weighted by T², and
    the result is saved in the database.

    Example: nightcell rate run.csv --t-start 30 --json

    Example: nightcell rate --db class.db --run "dye fading" --t-start 20 --t-end 600

    Example: nightcell rate product.csv --model first_order_rise_to_final --a0 0 --start A_rise=1 --start k=0.01
    """
    from ..render import fit_layout as _layout

    db = _mode(csv_file, db, csv_with_db=False, what="time_s,absorbance")
    start = _starts(starts)
    if (a0 is not None or start) and model != "first_order_rise_to_final":
        raise InputError("--a0 and --start apply to --model first_order_rise_to_final")
    if t_start is not None and t_end is not None and not t_end > t_start:
        raise InputError(f"--t-end {t_end:g} must be after --t-start {t_start:g}")
    if db is not None:
        from ..tasks.analyse import analyse_run, initial_rate_of
        from ..tasks.export import resolve_run

        if a_end != 0.0:
            raise InputError("--a-end applies to CSV files; with --db fit first_order_to_final, which fits the end")
        with _open(db) as store:
            run = resolve_run(store, run_text)
            if model == "initial_rate":
                if t_start is not None or t_end is not None:
                    raise InputError("--t-start/--t-end choose the readings of a fit; for initial_rate give "
                                     "--window START END")
                fit = initial_rate_of(store, run, channel, window, blank=blank, accept_suspect=accept_suspect)
                data = fit.to_dict()
                text = f"run {run.label or run.key!r}\n" + _layout.initial_rate_text(fit, detail=detail)
                inputs = fit.inputs
            else:
                if window is not None:
                    raise InputError("--window applies to --model initial_rate")
                if a0 is not None or start:
                    raise InputError("--a0 and --start with --db: export the run (`nightcell export`) and fit its "
                                     "absorbance CSV, where they apply (with --db first_order_rise_to_final fits A0 and "
                                     "starts from its grid)")
                analysis = analyse_run(store, run, channel=channel, models=None if model == "all" else (model,),
                                       blank=blank, t_start=t_start, t_end=t_end, accept_suspect=accept_suspect)
                data = _run_layout(analysis)
                text = _run_text(analysis, data, detail)
                inputs = analysis.fits[data["answer"]["law"]].inputs
            _finish_saved(store, db, "rate", run.label or run.key, inputs, data, text, as_json, out,
                          sort_keys=model == "initial_rate")
        return
    import numpy as np

    from ..science import kinetics as _kinetics

    assert csv_file is not None
    if blank is not None:
        raise InputError("--blank names a stored blank: use it with --db")
    cols, how = _absorbance_columns(csv_file, "time_s", ["weight", "flags"], min_rows=4,
                                    accept_suspect=accept_suspect)
    mask = (cols["flags"] != 0) if "flags" in cols else np.zeros(cols["time_s"].size, dtype=bool)
    weights = cols.get("weight")
    if weights is not None:
        mask |= weights == 0  # the export's weight for a flagged reading
    if t_end is not None:
        mask |= cols["time_s"] > t_end
    if weights is not None:
        weights = np.where(mask, 1.0, weights)
    inputs = {"file": csv_file.name, "absorbance": how,
              "weights": "the CSV's weight column" if weights is not None else "none (unweighted: no weight column)",
              "left_out": "rows with flags other than 0 (or weight 0)" if "flags" in cols or weights is not None
              else "none", "window_s": [t_start, t_end]}
    rise = {"a0": a0, "start": start} if model == "first_order_rise_to_final" else {}
    source = f"\nweights: {inputs['weights']}; absorbance: {how}"
    if model == "initial_rate":
        result = _kinetics.initial_rate(cols["time_s"], cols["absorbance"], window, t_start=t_start, inputs=inputs,
                                        mask=mask)
        _finish(result.to_dict(), _layout.initial_rate_text(result, detail=detail) + source, as_json, out)
        return
    if model == "all":
        both = _kinetics.fit_all(cols["time_s"], cols["absorbance"], t_start=t_start, a_end=a_end,
                                 inputs=inputs, mask=mask, weights=weights)
        fits, failures = both.results, both.failures
    else:
        fits = {model: _kinetics.fit_model(cols["time_s"], cols["absorbance"], model, t_start=t_start, a_end=a_end,
                                           inputs=inputs, mask=mask, weights=weights, **rise)}
        failures = {}
    data = _layout.layout(fits, failures)
    _finish(data, _layout.text(data, detail=detail) + source, as_json, out, sort_keys=False)


def _plan_from_conditions(store: Any, kind: str) -> dict[str, Any]:
    """The runs and their recorded conditions (``nightcell condition``), as the CSV plan would give them."""
    import numpy as np

    from ..tasks.analyse import run_conditions

    if not store.runs():
        raise InputError(f"{store.path} holds no runs yet: start one with `nightcell start`, then `nightcell sync`")
    conds = run_conditions(store)
    if kind == "orders":
        have = {k: c for k, c in conds.items() if any(q.startswith("conc_") for q in c)}
        what, how = "starting concentration", "--conc REACTANT=MOLAR"
        plan = "a CSV naming the runs (columns run,conc_<name>)"
    else:
        have = {k: c for k, c in conds.items() if "temperature_K" in c}
        what, how = "temperature", "--temperature-c DEGREES"
        plan = "a CSV naming the runs (column run, and temperature_K unless the runs have a probe)"
    if not have:
        raise InputError(f"no run in {store.path} has a recorded {what}: record each run's with `nightcell condition "
                         f"--db {store.path} --run RUN {how}`, or give {plan}")
    keys = sorted(have)
    if len(keys) < 3:
        raise InputError(f"only {len(keys)} run(s) in {store.path} have a recorded {what}; this needs at least 3: "
                         f"record more with `nightcell condition --db {store.path} --run RUN {how}`")
    cols: dict[str, Any] = {"run": np.array(keys, dtype=object)}
    if kind == "orders":
        names = sorted({q for c in have.values() for q in c if q.startswith("conc_")})
        incomplete = [k for k in keys if not all(n in have[k] for n in names)]
        if incomplete:
            lacking = ", ".join(n for n in names if n not in have[incomplete[0]])
            raise InputError(f"run {incomplete[0]} has no recorded {lacking}: record it with `nightcell condition`, "
                             f"or give {plan}")
        for n in names:
            cols["conc_" + n[len("conc_"):-len("_M")]] = np.array([have[k][n]["value"] for k in keys])
    else:
        cols["temperature_K"] = np.array([have[k]["temperature_K"]["value"] for k in keys])
    return cols


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
@_detail_option
@json_option
@_out_option
@friendly
def orders_command(csv_file: Path | None, db: Path | None, channel: int, nonlinear: bool, detail: bool,
                   as_json: bool, out: Path | None) -> None:
    """Reaction orders from the initial rates of several runs.

    CSV: one row per run with initial_rate[,rate_se] and one conc_<name> column per reactant. With --db the CSV
    names the runs instead (column run: key or label) and each initial rate comes from that run's readings.

    Example: nightcell orders initial_rates.csv --nonlinear

    Example: nightcell orders --db class.db runs_and_concentrations.csv

    Without a CSV, --db takes the runs whose starting concentrations were recorded with `nightcell condition`.
    """
    import numpy as np

    from ..science import study as _study
    from ..tasks.analyse import initial_rate_of

    from ..render import fit_layout as _layout

    db = _mode(csv_file, db, csv_with_db=True, what="initial_rate,conc_<name>...")
    with contextlib.ExitStack() as opened:
        store = None if db is None else opened.enter_context(_open(db))
        if csv_file is None:
            cols, source = _plan_from_conditions(store, "orders"), "recorded conditions"
        elif store is not None:
            cols, source = _read_checked(csv_file, ["run"], prefix="conc_", min_rows=3, text=("run",)), csv_file.name
        else:
            cols = _read_checked(csv_file, ["initial_rate"], ["rate_se"], prefix="conc_", min_rows=3)
            source = csv_file.name
        inputs: dict[str, Any] = {"file": source}
        conc = {name[len("conc_"):]: v for name, v in cols.items() if name.startswith("conc_")}
        if not conc:
            raise InputError(f"{csv_file} has no concentration columns; add one column per reactant named "
                             "conc_<name>")
        if store is not None:
            runs = _runs_from_plan(store, cols["run"])
            fits = [initial_rate_of(store, run, channel, None) for run in runs]
            cols["initial_rate"] = np.array([f.values["rate"] for f in fits])
            cols["rate_se"] = np.array([f.stderr["rate"] for f in fits])
            inputs = {"file": source, "runs": [r.key for r in runs], "channel": channel,
                      "rate_rule": "initial_rate, window chosen automatically, flagged readings left out"}
        result = _study.orders(cols["initial_rate"], conc, cols.get("rate_se"), nonlinear=nonlinear, inputs=inputs)
        data, text = result.to_dict(), _layout.orders_text(result, detail=detail)
        if store is not None:
            assert db is not None
            _finish_saved(store, db, "orders", Path(source).stem, inputs, data, text, as_json, out)
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
@click.option("--model", type=LawChoice(laws=MODELS, exclude=("zero_order",)),
              default="first_order_to_final", show_default=True,
              help="With --db: the rate law whose k is taken from every run (the same for all runs).")
@click.option("--eyring", is_flag=True, help="Also fit the Eyring equation (activation enthalpy and entropy).")
@_detail_option
@json_option
@_out_option
@friendly
def arrhenius_command(csv_file: Path | None, db: Path | None, channel: int, model: str, eyring: bool,
                      detail: bool, as_json: bool, out: Path | None) -> None:
    """Activation energy from rate constants at several temperatures.

    CSV columns: temperature_K,k[,k_se]. With --db the CSV names the runs instead (run[,temperature_K]); k comes
    from each run's fit and the temperature from the column, else from the run's solution probe.

    Example: nightcell arrhenius rate_constants.csv --eyring --out activation.json

    Example: nightcell arrhenius --db class.db runs_and_temperatures.csv

    Without a CSV, --db takes the runs whose temperatures were recorded with `nightcell condition`.
    """
    import numpy as np

    from ..science import study as _study
    from ..tasks.analyse import k_and_temperature

    from ..render import fit_layout as _layout

    db = _mode(csv_file, db, csv_with_db=True, what="temperature_K,k")
    with contextlib.ExitStack() as opened:
        store = None if db is None else opened.enter_context(_open(db))
        if csv_file is None:
            cols, source = _plan_from_conditions(store, "arrhenius"), "recorded conditions"
        elif store is not None:
            cols = _read_checked(csv_file, ["run"], ["temperature_K"], min_rows=3, text=("run",))
            source = csv_file.name
        else:
            cols, source = _read_checked(csv_file, ["temperature_K", "k"], ["k_se"], min_rows=3), csv_file.name
        inputs: dict[str, Any] = {"file": source}
        if store is not None:
            runs = _runs_from_plan(store, cols["run"])
            got = [k_and_temperature(store, run, channel, model) for run in runs]
            if "temperature_K" not in cols:
                missing = [r.key for r, g in zip(runs, got) if g[2] is None]
                if missing:
                    raise InputError(f"run {missing[0]} has no solution temperature (no probe): add a "
                                     f"temperature_K column to {source}")
                cols["temperature_K"] = np.array([g[2] for g in got])
            cols["k"] = np.array([g[0] for g in got])
            cols["k_se"] = np.array([g[1] for g in got])
            inputs = {"file": source, "runs": [r.key for r in runs], "channel": channel, "model": model,
                      "temperature": "from the CSV" if "temperature_K" in cols and not all(g[2] for g in got)
                      else "CSV column, else the run's mean probe temperature"}
        _kelvin(csv_file, cols["temperature_K"])
        fit = _study.arrhenius(cols["temperature_K"], cols["k"], cols.get("k_se"), inputs=inputs)
        data: dict[str, Any] = {"arrhenius": fit.to_dict()}
        ey = None
        if eyring:
            ey = _study.eyring(cols["temperature_K"], cols["k"], cols.get("k_se"), inputs=inputs)
            data["eyring"] = ey.to_dict()
        text = _layout.arrhenius_text(fit, ey, detail=detail)
        if store is not None:
            assert db is not None
            _finish_saved(store, db, "arrhenius", Path(source).stem, inputs, data, text, as_json, out)
            return
    _finish(data, text, as_json, out)


COMMANDS = (calibrate_command, rate_command, orders_command, arrhenius_command)


def register(cli_group: click.Group) -> None:
    """Add ``calibrate``, ``rate``, ``orders`` and ``arrhenius`` to ``cli_group``."""
    for command in COMMANDS:
        cli_group.add_command(command)


