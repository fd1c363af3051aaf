"""Figures, self-contained HTML reports (one per run, one per study) and CSV exports from analysis results.

Plot functions take ``ax=`` and return it; nothing calls ``plt.show()``. Without ``ax=`` they draw on a new pyplot
figure (so a notebook shows it with its own backend); the reports draw on ``matplotlib.figure.Figure`` objects made
here, which need no pyplot and no backend switch (importing this module never changes the user's backend). The HTML embeds its figures (PNG, base64)
so the one file can be mailed or opened anywhere and fetches nothing; each figure is also written beside it as PNG
and SVG. Every label that came from a board or a user is escaped (HTML) or made literal (matplotlib's ``$…$``
maths), so a label that is HTML or SQL stays inert text. Files are written to a temporary name and renamed: never
half a report. This module never talks to a board and never changes the store.

Example::

    files = run_report(analysis, "out/", calibration=cal, provenance=run_provenance(store, analysis, cal))
    files = study_report(study, "out/")
"""

from __future__ import annotations

import base64
import contextlib
import contextvars
import csv
import datetime
import html
import io
import math
import os
import re
import tempfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterable, Iterator, Mapping, Sequence


def _matplotlib_config_folder() -> None:
    """Give matplotlib a temporary config folder where the home folder cannot hold one (a read-only home, a locked
    school account), instead of letting it print a warning on every command."""
    if os.environ.get("MPLCONFIGDIR"):
        return
    home = Path(os.environ.get("XDG_CONFIG_HOME") or Path.home() / ".config") / "matplotlib"
    cache = Path(os.environ.get("XDG_CACHE_HOME") or Path.home() / ".cache") / "matplotlib"
    try:
        for folder in (home, cache):
            folder.mkdir(parents=True, exist_ok=True)
            with tempfile.TemporaryFile(dir=folder):
                pass
    except OSError:
        import atexit
        import shutil

        os.environ["MPLCONFIGDIR"] = folder = tempfile.mkdtemp(prefix="nightcell-matplotlib-")
        atexit.register(shutil.rmtree, folder, ignore_errors=True)


_matplotlib_config_folder()

import numpy as np  # noqa: E402

from .. import __version__  # noqa: E402
from . import fit_layout as _fit_layout  # noqa: E402
from . import numbers as _n  # noqa: E402
from ..science import laws as _laws  # noqa: E402

__all__ = ["plot_calibration", "plot_run", "thin_for_drawing", "DRAW_LIMIT", "plot_orders", "plot_arrhenius",
           "figure_png", "figure_svg", "save_figure", "html_report", "fit_table", "write_csv", "safe_filename", "device_stems",
           "ReportFiles", "run_report", "study_report", "plain_text", "plus_minus", "html_table", "write_atomic",
           "out_folder", "all_or_nothing", "run_style"]


# The eight colours of the colour-universal-design palette (Okabe & Ito, 2008 [memory for the values]), told apart
# by readers with the common colour-vision deficiencies; each run also gets its own marker and line style, so the
# runs stay apart in greyscale print.
RUN_COLOURS = ("#000000", "#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7")
RUN_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "*")
RUN_LINES = ("-", "--", "-.", ":")


def run_style(i: int) -> dict[str, str]:
    """Colour, marker and line style of the ``i``-th run in a figure of several runs: no two of the first 64 share
    colour and marker, and no two of the first 8 share a marker."""
    return {"color": RUN_COLOURS[i % 8], "marker": RUN_MARKERS[(i + i // 8) % 8], "linestyle": RUN_LINES[i % 4]}


def plain_text(label: Any) -> str:
    """A label as literal text for a matplotlib figure: ``$`` would otherwise start mathematics."""
    return str(label).replace("$", r"\$")


UNKNOWN_COLOUR = "#d55e00"  # vermillion of the colour-universal-design palette, apart from the standards' blue


def plot_calibration(cal: Any, ax: Any = None, resid_ax: Any = None, unit: str = "",
                     unknowns: Sequence[tuple[str, float, Any]] = ()) -> Any:
    """Standards, the fitted curve and its prediction band for one new reading at the calibration's own level
    (``cal.level``, 95 % unless fitted otherwise); residuals on ``resid_ax``.

    ``unknowns``: (name, absorbance, ``cal.predict`` result) of readings read through the curve (a run's first
    reading, a measured sample), drawn on the curve as diamonds with their concentration interval as a horizontal
    bar, named beside it (numbered 1, 2 … in their order when there are several).
    """
    if ax is None:
        ax = _new_axes()
    x = np.asarray(cal.x, dtype=float)
    y = np.asarray(cal.y, dtype=float)
    ax.plot(x, y, "o", color="#1f5f8b", label="standards")
    right = max([x.max()] + [float(p.ci_high) for _, _, p in unknowns if np.isfinite(p.ci_high)])
    grid = np.linspace(min(0.0, x.min()), right * 1.05, 200)
    fitted = cal.curve(grid)
    ax.plot(grid, fitted, "-", color="#333333", label="fit")
    low, high = cal.band(grid, cal.level, kind="prediction")
    ax.fill_between(grid, low, high, color="#1f5f8b", alpha=0.15, label=f"{100 * cal.level:g} % prediction band")
    for i, (name, absorbance, p) in enumerate(unknowns):
        value = float(p.value)
        bar = [[value - float(p.ci_low)], [float(p.ci_high) - value]]
        ax.errorbar([value], [absorbance], xerr=bar, fmt="D", color=UNKNOWN_COLOUR, ms=6, capsize=3,
                    label=f"unknown, {100 * p.level:g} % interval" if i == 0 else None)
        # one unknown is named; several (often at one point: runs started alike) are numbered down a column,
        # and the caller lists the numbers with their names
        ax.annotate(plain_text(name) if len(unknowns) == 1 else str(i + 1), (value, absorbance),
                    xytext=(6, -10 - 9 * i), textcoords="offset points", fontsize="x-small", color=UNKNOWN_COLOUR)
    ax.set_xlabel(f"concentration {unit}".strip())
    ax.set_ylabel("absorbance")
    ax.legend(loc="upper left", fontsize="small")
    if resid_ax is not None:
        resid_ax.axhline(0, color="#999999", lw=0.8)
        resid_ax.plot(x, cal.residuals, "o", color="#1f5f8b")
        resid_ax.set_xlabel(f"concentration {unit}".strip())
        resid_ax.set_ylabel("residual (A)")
    return ax


DRAW_LIMIT = 4000
"""Points of one series drawn as they are; a denser series is thinned for drawing only (``thin_for_drawing``)."""
DRAW_SLICES = 1000
"""Equal slices of time a thinned series is cut into; each keeps its lowest and highest point."""


def thin_for_drawing(x: np.ndarray, y: np.ndarray, limit: int = DRAW_LIMIT,
                     slices: int = DRAW_SLICES) -> np.ndarray | None:
    """Indices (in order) of the points of a series to draw: None (draw all) up to ``limit`` finite points; beyond,
    the lowest and highest point of each of ``slices`` equal slices of x (the outline and every outlier) and
    ``slices`` points evenly spaced through the series (where the cloud is dense). For drawing only: fits, tables
    and CSV keep every point."""
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    finite = np.flatnonzero(np.isfinite(x) & np.isfinite(y))
    if finite.size <= limit:
        return None
    xs, ys = x[finite], y[finite]
    lo, hi = float(xs.min()), float(xs.max())
    slot = np.zeros(xs.size, dtype=np.int64) if hi <= lo else np.minimum(
        ((xs - lo) * (slices / (hi - lo))).astype(np.int64), slices - 1)
    even = np.linspace(0, xs.size - 1, slices).round().astype(np.int64)
    if np.all(slot[1:] >= slot[:-1]):  # times in order (as runs are): each slice is one stretch of the series
        starts = np.flatnonzero(np.concatenate(([True], slot[1:] != slot[:-1])))
        counts = np.diff(np.append(starts, xs.size))
        pick = []
        for reduce in (np.minimum, np.maximum):
            extreme = np.repeat(reduce.reduceat(ys, starts), counts)
            hits = np.flatnonzero(ys == extreme)
            pick.append(hits[np.concatenate(([True], slot[hits][1:] != slot[hits][:-1]))])  # first in its slice
        return finite[np.unique(np.concatenate((*pick, even)))]
    order = np.lexsort((ys, slot))  # by slice, then by y: each slice's lowest first and highest last
    ends = np.flatnonzero(np.diff(slot[order]))
    first = np.concatenate(([0], ends + 1))
    last = np.concatenate((ends, [order.size - 1]))
    return finite[np.unique(np.concatenate((order[first], order[last], even)))]


def _drawn(ax: Any, x: np.ndarray, y: np.ndarray, what: str, *,
           at: float = 0.98) -> tuple[np.ndarray, np.ndarray, str]:
    """The points of a series to draw and the words for its legend; a thinned series says so inside ``ax``."""
    keep = thin_for_drawing(x, y)
    if keep is None:
        return x, y, what
    ax.text(0.99, at, f"{what}: drawing thinned, {keep.size:,} of {np.size(x):,} shown (each of "
            f"{DRAW_SLICES} time slices' lowest and highest, and evenly spaced ones); fits use all",
            transform=ax.transAxes, ha="right", va="top", fontsize="xx-small", color="#444444")
    return x[keep], y[keep], f"{what} (thinned for drawing)"


def plot_run(time_s: Sequence[float], absorbance: Sequence[float], fit: Any = None, ax: Any = None,
             resid_ax: Any = None, flags: Sequence[int] | None = None, title: str = "",
             notes: Sequence[dict[str, Any]] = ()) -> Any:
    """Absorbance against time with the fitted curve; flagged points hollow; residuals on ``resid_ax``; each note
    (``{"time_s", "text"}``) a dotted line with its text.

    A dense series (more than ``DRAW_LIMIT`` points) is thinned for drawing only (``thin_for_drawing``), and its
    legend says so; the fit and its residuals were computed from every point before.
    """
    if ax is None:
        ax = _new_axes()
    t = np.asarray(time_s, dtype=float)
    a = np.asarray(absorbance, dtype=float)
    bad = np.zeros(len(t), bool) if flags is None else np.asarray(flags) != 0
    dx, dy, label = _drawn(ax, t[~bad], a[~bad], "readings")
    ax.plot(dx, dy, ".", color="#7a3b8f", label=label)
    if bad.any():
        dx, dy, label = _drawn(ax, t[bad], a[bad], "flagged", at=0.93)
        ax.plot(dx, dy, "o", mfc="none", color="#cc5500", label=label)
    if fit is not None and len(getattr(fit, "x", [])):
        fx = np.asarray(fit.x, dtype=float)
        resid = np.asarray(fit.residuals, dtype=float)
        fy = np.asarray(fit.y, dtype=float) - resid
        if np.any(fx[1:] < fx[:-1]):
            order = np.argsort(fx)
            fx, fy, resid = fx[order], fy[order], resid[order]
        keep = thin_for_drawing(fx, fy)  # the curve through the same thinning (its shape, at a fraction)
        if keep is not None:
            ax.plot(fx[keep], fy[keep], "-", color="#222222", label=plain_text(f"fit: {_laws.title(fit.model)}"))
        else:
            ax.plot(fx, fy, "-", color="#222222", label=plain_text(f"fit: {_laws.title(fit.model)}"))
        if resid_ax is not None:
            resid_ax.axhline(0, color="#999999", lw=0.8)
            dx, dy, _ = _drawn(resid_ax, fx, resid, "residuals")
            resid_ax.plot(dx, dy, ".", color="#7a3b8f")
            resid_ax.set_xlabel("time (s)")
            resid_ax.set_ylabel("residual (A)")
    for i, nt in enumerate(notes):
        for a_ in (ax, resid_ax) if resid_ax is not None else (ax,):
            a_.axvline(float(nt["time_s"]), color="#555555", ls=":", lw=0.9,
                       label="note" if (i == 0 and a_ is ax) else None)
        ax.annotate(plain_text(str(nt["text"])[:40]), (float(nt["time_s"]), 1.0), xycoords=("data", "axes fraction"),
                    xytext=(2, -2), textcoords="offset points", va="top", fontsize="x-small", rotation=90)
    ax.set_xlabel("time (s)")
    ax.set_ylabel("absorbance")
    if title:
        ax.set_title(plain_text(title))
    ax.legend(loc="best", fontsize="small")
    return ax


def figure_png(fig: Any) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=110, bbox_inches="tight")
    return buf.getvalue()


def save_figure(fig: Any, path: str | Path) -> Path:
    p = Path(path)
    fig.savefig(p, dpi=110, bbox_inches="tight")
    return p


_WINDOWS_RESERVED = {"CON", "PRN", "AUX", "NUL", *(f"COM{i}" for i in range(10)), *(f"LPT{i}" for i in range(10))}


def safe_filename(label: str, default: str = "run", limit: int | None = 80) -> str:
    """A file name from a label: letters, digits, dot, dash and underscore only, never a path, and valid on
    Windows too (no trailing dot, no reserved device name such as ``CON`` or ``lpt1.txt``); at most ``limit``
    characters."""
    name = re.sub(r"[^A-Za-z0-9._-]+", "_", label).strip("._")
    name = (name or default)[:limit].rstrip(".")
    if name.split(".")[0].upper() in _WINDOWS_RESERVED:
        name = "_" + name
    return name


def device_stems(labels: Mapping[str, str | None]) -> dict[str, str]:
    """A file-name stem for each device of ``labels`` (device id → label): its label made safe (``bench_A``), or
    its id when it has none. Devices whose stems would be the same — two benches labelled alike, or alike but for
    case, as file names are on Windows and macOS — each carry their id as well (``bench_A-5eba000000000001``), so
    no two devices share a file."""
    stems = {d: safe_filename(label or "", default=d, limit=48) for d, label in labels.items()}
    seen: dict[str, int] = {}
    for stem in stems.values():
        seen[stem.lower()] = seen.get(stem.lower(), 0) + 1
    return {d: f"{stem}-{safe_filename(d)}" if seen[stem.lower()] > 1 and stem != safe_filename(d) else stem
            for d, stem in stems.items()}


def _table(headers: Sequence[str], rows: Iterable[Sequence[Any]], css_class: str = "") -> str:
    opening = f"<table class='{css_class}'>" if css_class else "<table>"  # css_class: our own constant names
    out = [opening + "<thead><tr>" + "".join(f"<th>{html.escape(str(h))}</th>" for h in headers) + "</tr></thead><tbody>"]
    for row in rows:
        out.append("<tr>" + "".join(f"<td>{html.escape(_fmt(v))}</td>" for v in row) + "</tr>")
    out.append("</tbody></table>")
    return "".join(out)


def html_table(headers: Sequence[str], rows: Iterable[Sequence[Any]]) -> str:
    """An HTML table; every header and cell is escaped (numbers to 6 significant digits)."""
    return _table(headers, rows)


def _fmt(v: Any) -> str:
    if isinstance(v, float):
        if not np.isfinite(v):
            return "—"
        return f"{v:.6g}"
    return str(v)


def fit_table(fit: Any) -> str:
    """Parameter table of a FitResult as HTML: each value rounded by its standard error, with its 95 % interval."""
    rows = [(n, _n.measured(fit.values[n], fit.stderr.get(n, float("nan"))),
             _n.interval(*fit.confint(n), fit.stderr.get(n, float("nan")))) for n in fit.names]
    t = fit.confint(fit.names[0])[1] - fit.values[fit.names[0]]
    t = t / fit.stderr[fit.names[0]] if fit.stderr.get(fit.names[0]) else float("nan")
    summary = (f"<p class='small'>{html.escape(_laws.title(fit.model))}; {fit.n} points, {fit.dof} degrees of "
               f"freedom, residual SD {html.escape(_n.quantity(fit.residual_sd, digits=2))}; 95 % interval = value "
               f"± t·SE, t = {_fmt(t)} (Student t, {fit.dof} degrees of freedom); "
               f"{html.escape(fit.message or ('converged' if fit.success else 'failed'))}</p>")
    return _table(["parameter", "value ± standard error", "95 % interval"], rows) + summary


_CSS = """
body{font-family:system-ui,sans-serif;max-width:980px;margin:2em auto;padding:0 1em;color:#222}
h1{font-size:1.5em}h2{font-size:1.2em;border-bottom:1px solid #ccc;padding-bottom:.2em;margin-top:2em}
table{border-collapse:collapse;margin:.5em 0}td,th{border:1px solid #ccc;padding:.25em .6em;text-align:left}
.provenance td+td{overflow-wrap:anywhere}
@media (max-width:900px){table{font-size:.85em}td,th{padding:.2em .35em}}
th{background:#f1f1f1}.small{font-size:.85em;color:#555}img{max-width:100%}
.warn{color:#8a4b00}
"""


def html_report(title: str, sections: Sequence[dict[str, Any]], provenance: dict[str, Any] | None = None) -> str:
    """A self-contained HTML page. Each section: {"title", "text"?, "html"?, "figures": [png bytes]}.

    ``text`` is escaped; ``html`` must already be safe (built by this module's helpers).
    """
    parts = ["<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>",
             f"<title>{html.escape(title)}</title><style>{_CSS}</style></head><body>",
             f"<h1>{html.escape(title)}</h1>",
             f"<p class='small'>nightcell {html.escape(__version__)} — made "
             f"{html.escape(datetime.datetime.now(datetime.timezone.utc).strftime('%Y-%m-%d %H:%M UTC'))}</p>"]
    for sec in sections:
        parts.append(f"<h2>{html.escape(sec['title'])}</h2>")
        if sec.get("text"):
            for para in str(sec["text"]).split("\n\n"):
                parts.append(f"<p>{html.escape(para)}</p>")
        if sec.get("html"):
            parts.append(sec["html"])
        for png in sec.get("figures", []):
            b64 = base64.b64encode(png).decode("ascii")
            parts.append(f"<p><img alt='{html.escape(sec['title'])}' src='data:image/png;base64,{b64}'></p>")
    if provenance:
        parts.append("<h2>Provenance</h2>")
        parts.append(_table(["item", "value"], sorted((k, v) for k, v in provenance.items()), "provenance"))
    parts.append("</body></html>")
    return "\n".join(parts)


def write_csv(path: str | Path, headers: Sequence[str], rows: Iterable[Sequence[Any]]) -> Path:
    """Write rows to CSV (through ``write_atomic``: a new temporary file, then renamed; never half a file)."""
    buf = io.StringIO(newline="")
    w = csv.writer(buf)
    w.writerow(headers)
    for row in rows:
        w.writerow(["" if (isinstance(v, float) and not np.isfinite(v)) else _inert_cell(v) for v in row])
    return write_atomic(Path(path), buf.getvalue().encode("utf-8"))


def _inert_cell(v: Any) -> Any:
    """Text a spreadsheet would run as a formula (a label typed as ``=HYPERLINK(…)``) is written with a leading
    apostrophe, so opening an export never runs what a board or a user wrote; numbers are written as they are."""
    if isinstance(v, str) and v[:1] in ("=", "+", "-", "@", "\t", "\r"):
        return "'" + v
    return v


# -- several runs ---------------------------------------------------------------------------------------------------

def _order_fit(fit: Any) -> Any:
    """The log–log fit from an OrderStudy (its first reactant) or a FitResult as it is."""
    per = getattr(fit, "per_reactant", None)
    if per is not None:
        if not per:
            raise ValueError("this order study has no per-reactant fit to plot")
        return next(iter(per.values()))
    return fit


def plot_orders(fit: Any, ax: Any = None, rate_se: Sequence[float] | None = None, reactant: str = "",
                quantity: str = "k (s⁻¹)") -> Any:
    """Log–log order plot: rate (or k) against a reactant's concentration, with the fitted power law.

    ``fit`` is a per-reactant fit of ``study.orders`` (parameters ``ln_rate_at_1`` and ``order``; ``x`` the
    concentrations, ``y`` ln rate) or the ``OrderStudy`` itself. ``rate_se`` draws ±1 SE bars.
    """
    if ax is None:
        ax = _new_axes()
    f = _order_fit(fit)
    c = np.asarray(f.x, dtype=float)
    r = np.exp(np.asarray(f.y, dtype=float))
    yerr = None if rate_se is None else np.abs(np.asarray(rate_se, dtype=float))
    ax.errorbar(c, r, yerr=yerr, fmt="s", color="#2d6a4f", ms=5, capsize=3, label="runs (±1 SE)")
    grid = np.geomspace(c.min() / 1.15, c.max() * 1.15, 50)
    n = f.values["order"]
    ax.plot(grid, np.exp(f.curve(grid)), "-", color="#333333", label=f"order {n:.3f} ± {f.stderr['order']:.2g}")
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel(plain_text(f"[{reactant}] (mol/L)" if reactant else "concentration (mol/L)"))
    ax.set_ylabel(plain_text(quantity))
    ax.legend(loc="best", fontsize="small")
    return ax


def plot_arrhenius(fit: Any, ax: Any = None, k_se: Sequence[float] | None = None, resid_ax: Any = None) -> Any:
    """ln k (Arrhenius) or ln(k/T) (Eyring) against 1000/T with the fitted line; residuals on ``resid_ax``."""
    from ..science.study import BOLTZMANN, PLANCK

    if ax is None:
        ax = _new_axes()
    T = np.asarray(fit.x, dtype=float)
    y = np.asarray(fit.y, dtype=float)
    eyring = fit.model == "eyring"
    if eyring:
        y = y + math.log(BOLTZMANN / PLANCK)
        label_y = "ln(k / T)   (k in s⁻¹, T in K)"
    else:
        label_y = "ln k   (k in s⁻¹)"
    x = 1000.0 / T
    yerr = None
    if k_se is not None:  # SE of ln k is se/k (delta method); the same for ln(k/T)
        k = np.exp(np.asarray(fit.y, dtype=float) + (math.log(BOLTZMANN / PLANCK) if eyring else 0.0)) * \
            (T if eyring else 1.0)
        yerr = np.abs(np.asarray(k_se, dtype=float)) / k
    ax.errorbar(x, y, yerr=yerr, fmt="o", color="#9c2f2f", ms=5, capsize=3, label="runs (±1 SE)")
    grid = np.linspace(T.min() - 3.0, T.max() + 3.0, 50)
    line = fit.curve(grid) + (math.log(BOLTZMANN / PLANCK) if eyring else 0.0)
    if eyring:
        dh = fit.values["dH_J_per_mol"]
        lab = f"ΔH‡ {dh / 1000:.1f} ± {fit.stderr['dH_J_per_mol'] / 1000:.1f} kJ/mol"
    else:
        ea = fit.values["Ea_J_per_mol"]
        lab = f"Ea {ea / 1000:.1f} ± {fit.stderr['Ea_J_per_mol'] / 1000:.1f} kJ/mol"
    ax.plot(1000.0 / grid, line, "-", color="#333333", label=lab)
    ax.set_xlabel("1000 / T (K⁻¹)")
    ax.set_ylabel(label_y)
    ax.legend(loc="best", fontsize="small")
    if resid_ax is not None:
        resid_ax.axhline(0, color="#999999", lw=0.8)
        resid_ax.plot(x, fit.residuals, "o", color="#9c2f2f")
        resid_ax.set_xlabel("1000 / T (K⁻¹)")
        resid_ax.set_ylabel("residual")
    return ax


# -- report files ---------------------------------------------------------------------------------------------------

@dataclass
class ReportFiles:
    """What a report wrote: the HTML page and its figures (PNG and SVG of each)."""

    html: Path
    figures: list[Path] = field(default_factory=list)

    @property
    def files(self) -> list[Path]:
        return [self.html, *self.figures]


def figure_svg(fig: Any) -> bytes:
    buf = io.BytesIO()
    # no date or creator in the file: the same figure gives the same bytes
    fig.savefig(buf, format="svg", bbox_inches="tight", metadata={"Date": None, "Creator": None})
    return buf.getvalue()


def _umask() -> int:
    """The process's file-creation mask (read without changing it where the platform allows)."""
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except (OSError, ValueError):
        pass
    mask = os.umask(0o022)  # elsewhere: read by setting it, and put it back at once
    os.umask(mask)
    return mask


_BATCH: contextvars.ContextVar[tuple[list[tuple[str, Path]], list[Path]] | None] = contextvars.ContextVar(
    "nightcell_output_batch", default=None)


@contextlib.contextmanager
def all_or_nothing() -> Iterator[None]:
    """Files written inside (``write_atomic``, ``out_folder``) appear together when the block succeeds; when it
    fails, none does: their temporary files are removed, and the folders it made are removed again if empty."""
    staged: list[tuple[str, Path]] = []
    made: list[Path] = []
    token = _BATCH.set((staged, made))
    done = False
    try:
        yield
        for tmp, final in staged:
            os.replace(tmp, final)
        done = True
    finally:
        _BATCH.reset(token)
        if not done:
            for tmp, _ in staged:
                with contextlib.suppress(OSError):
                    os.unlink(tmp)
            for folder in reversed(made):
                with contextlib.suppress(OSError):
                    folder.rmdir()


def write_atomic(path: Path, data: bytes) -> Path:
    """Write to a new temporary file beside ``path`` (created exclusively, under a random name, so nothing planted
    there is followed) and rename it into place: never half a file. Inside ``all_or_nothing`` the rename waits
    for the block to succeed. ``InputError`` (exit 2) with the path and the reason when it cannot be written."""
    from ..errors import InputError

    path = Path(path)
    try:
        fd, tmp = tempfile.mkstemp(prefix="." + path.name[:60] + ".", suffix=".part", dir=str(path.parent))
    except OSError as exc:
        raise InputError(f"cannot write {path}: {exc.strerror or exc}; choose a folder you can write to") from None
    batch = _BATCH.get()
    try:
        # mkstemp makes the file private (0600); a report is for handing out: the user's normal permissions
        os.chmod(tmp, 0o666 & ~_umask())
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
        os.chmod(tmp, 0o666 & ~_umask())
        if batch is None:
            os.replace(tmp, path)
        else:
            batch[0].append((tmp, path))
    except BaseException as exc:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        if isinstance(exc, OSError):
            raise InputError(f"cannot write {path}: {exc.strerror or exc}; free some space or choose another "
                             "folder (nothing was left behind)") from None
        raise
    return path


def _umask() -> int:
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def out_folder(out: str | Path) -> Path:
    from ..errors import InputError

    p = Path(out)
    if p.exists() and not p.is_dir():
        raise InputError(f"{p} is a file: give a folder for the report")
    missing = [q for q in [p, *p.parents] if not q.exists()]
    try:
        p.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"cannot make the report folder {p} ({exc}): choose a folder you can write to") from exc
    batch = _BATCH.get()
    if batch is not None:
        batch[1].extend(reversed(missing))
    return p


def _figure_files(fig: Any, stem: Path, done: list[Path]) -> bytes:
    """PNG and SVG of a figure beside the report; returns the PNG bytes to embed.

    The report's figures are laid out by matplotlib's constrained layout when made, so saving needs no extra
    "tight" drawing pass (a report draws many figures: this halves the time). The layout runs once, here, and is
    then fixed, so the PNG and the SVG are drawn from the same positions without laying the figure out again.
    """
    if fig.get_layout_engine() is not None:
        fig.draw_without_rendering()  # the one layout pass
        fig.set_layout_engine("none")
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=110)
    png = buf.getvalue()
    buf = io.BytesIO()
    fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": None})
    # the stem may hold dots (a label "NaOH 0.02 M"): the suffix is added, never swapped in
    done.append(write_atomic(stem.with_name(stem.name + ".png"), png))
    done.append(write_atomic(stem.with_name(stem.name + ".svg"), buf.getvalue()))
    return png


def _new_axes() -> Any:
    """Axes on a new pyplot figure, for a caller who gave no ``ax=`` (pyplot picks the caller's own backend)."""
    import matplotlib.pyplot as plt

    return plt.subplots()[1]


def _figure(figsize: tuple[float, float] | None = None, **kw: Any) -> tuple[Any, Any]:
    """A report figure: a bare ``Figure`` (no pyplot, no backend) laid out by constrained layout."""
    from matplotlib.figure import Figure  # on first use: commands that only write files do not load matplotlib

    fig = Figure(figsize=figsize, layout="constrained")
    return fig, fig.subplots(**kw)


def _two_panel() -> tuple[Any, Any, Any]:
    fig, (ax, rax) = _figure(nrows=2, ncols=1, figsize=(6.4, 6.0), sharex=True, gridspec_kw={"height_ratios": [3, 1]})
    return fig, ax, rax


def plus_minus(value: Any, se: Any, digits: int = 4, unit: str = "") -> str:
    """``value ± se`` rounded by the standard error: ``render.numbers.measured`` (the one way numbers are written)."""
    return _n.measured(value, se, unit, digits=digits)


def _conditions_text(conditions: dict[str, Any] | None) -> str:
    if not conditions:
        return "none recorded"
    parts = []
    for q, c in sorted(conditions.items()):
        v = c["value"] if isinstance(c, dict) else c
        src = c.get("source") if isinstance(c, dict) else None
        if q == "temperature_K":
            txt = f"temperature {v:.2f} K ({v - 273.15:.1f} °C)"
        elif q.startswith("conc_") and q.endswith("_M"):
            txt = f"[{q[5:-2]}] {v:.4g} mol/L"
        else:
            txt = f"{q} {v:g}"
        parts.append(txt + (f" — {src}" if src else ""))
    return "; ".join(parts)


def _shade_restarts(analysis: Any, axes: Sequence[Any]) -> None:
    """Grey bands where the board restarted inside the run (no readings: the time without power)."""
    keys = analysis.seqs
    boots = np.asarray(keys.boot if hasattr(keys, "boot") else [b for b, _ in keys])
    t = np.asarray(analysis.time_s, dtype=float)
    changes = np.flatnonzero(boots[1:] != boots[:-1]) + 1
    for i in changes:
        for j, ax in enumerate(axes):
            ax.axvspan(t[i - 1], t[i], color="#888888", alpha=0.2, lw=0,
                       label=f"restart (boot {boots[i]})" if j == 0 else None)
    if changes.size:
        axes[0].legend(loc="best", fontsize="small")


def run_report(analysis: Any, out: str | Path, *, calibration: Any = None, provenance: dict[str, Any] | None = None,
               conditions: dict[str, Any] | None = None, name: str | None = None, title: str | None = None,
               cache: dict | None = None, unit: str = "", notes: Sequence[dict[str, Any]] | None = None,
               device_stem: str | None = None) -> ReportFiles:
    """One run's self-contained HTML page (``<name>.html``), with its figures also as PNG and SVG beside it.

    ``analysis`` is ``analyse.analyse_run``'s result; ``provenance`` typically ``analyse.run_provenance``;
    ``conditions`` the run's entry of ``analyse.run_conditions``. Shows absorbance against time with the best fit
    and its residuals, every rate law compared, the parameter table with standard errors, the calibration (plot
    with residuals and prediction band) when given, warnings and provenance. Pass the same ``cache`` dict to the
    reports of several runs in one folder to draw a shared calibration once (``calibration-<device>.png/.svg``,
    ``<device>`` being ``device_stem``, one of ``device_stems``, else the device id).
    ``unit`` is the unit of the standards' values (for axis labels and concentrations); ``notes`` the notes journaled
    during the run (``analyse.run_notes``), shown in a table and on the plot. The fit is laid out as on the command
    line (``render.fit_layout``): the answer, how well the law fits, the parameters, the laws ranked; the criteria
    and the marks the run was read against in "Detail", the words of the trade's tools in "Glossary".
    """
    out = out_folder(out)
    run = analysis.run
    name = safe_filename(name or f"run-{run.key.replace(':', '-')}", limit=None)
    figs: list[Path] = []
    laid = _fit_layout.layout(analysis.fits)
    best = analysis.fits[laid["answer"]["law"]]
    prov = dict(provenance or {"device": run.device, "run": run.key, "run label": run.label})
    bench = str(prov.get("device label") or "") or run.device
    notes = list(notes or [])
    fig, ax, rax = _two_panel()
    try:
        plot_run(analysis.time_s, analysis.absorbance, best, ax=ax, resid_ax=rax, flags=analysis.flags,
                 title=run.label or run.key, notes=notes)
        _shade_restarts(analysis, (ax, rax))
        run_png = _figure_files(fig, out / f"{name}-absorbance", figs)
    finally:
        fig.clear()  # drop the figure's artists now: a report draws many
    flagged = int(np.count_nonzero(analysis.flags))
    restarts = len(analysis.boots) - 1
    sections: list[dict[str, Any]] = [{
        "title": f"Run {run.label or run.key}",
        "text": (f"Bench {bench}. Conditions: {_conditions_text(conditions)}.\n\n"
                 f"{len(analysis.time_s)} readings over {_n.quantity(float(analysis.time_s[-1]), 's', digits=3)} "
                 f"({flagged} flagged and left out of the fits)"
                 + (f"; the board restarted {restarts} time(s) during the run (grey bands)" if restarts > 0 else "")
                 + ". Absorbance is read against the blank taken before the run."
                 + (f" Flagged by kind: {', '.join(f'{n} {c}' for n, c in analysis.flag_counts().items())}."
                    if flagged else "")),
    }]
    sections += _fit_sections(laid, run_png)
    if notes:
        sections.append({"title": "Notes taken during the run",
                         "html": _table(["time into the run", "note"],
                                        [(_n.quantity(nt["time_s"], "s", digits=3), nt["text"]) for nt in notes])})
    if calibration is not None:
        key = (id(calibration), str(out))
        if cache is not None and key in cache:
            cal_png, paths = cache[key]
            figs += paths
        else:
            fig, ax, rax = _two_panel()
            made: list[Path] = []
            try:
                first = _first_concentration(calibration, analysis) if analysis.concentration is not None else None
                plot_calibration(calibration, ax=ax, resid_ax=rax, unit=plain_text(f"({unit})") if unit else "",
                                 unknowns=[] if first is None else [(f"first reading of {run.label or 'the run'}",
                                                                      _first_absorbance(analysis), first)])
                ax.set_title(plain_text(f"Calibration of {bench}"))
                stem = (f"calibration-{device_stem or safe_filename(run.device)}" if cache is not None
                        else f"{name}-calibration")
                cal_png = _figure_files(fig, out / stem, made)
            finally:
                fig.clear()  # drop the figure's artists now: a report draws many
            figs += made
            if cache is not None:
                cache[key] = (cal_png, made)
        cunit = unit or "in the unit of the standards' values"
        text = (f"{calibration.n} standards. Limit of detection "
                f"{_n.quantity(calibration.extra.get('lod'), unit, digits=2)}, limit of quantification "
                f"{_n.quantity(calibration.extra.get('loq'), unit, digits=2)} (σ from "
                f"{calibration.extra.get('sigma_source', 'the residuals')})"
                + ("" if unit else ", in the unit of the standards' values") + ".")
        if analysis.concentration is not None:
            first = _first_concentration(calibration, analysis)
            if first is not None:
                text += (f" Concentration at the first reading: {_n.measured(first.value, first.stderr, unit)} "
                         f"({first.level:.0%} interval {_n.interval(first.ci_low, first.ci_high, first.stderr, unit)}"
                         f"{'' if unit else ', ' + cunit}).")
        sections.append({"title": f"Calibration of {bench}", "html": fit_table(calibration), "text": text,
                         "figures": [cal_png]})
    if analysis.warnings:
        sections.append({"title": "Warnings", "text": "\n\n".join(analysis.warnings)})
    sections.append(_detail_section(laid, analysis))
    sections.append(GLOSSARY)
    page = html_report(title or f"nightcell run report — {run.label or run.key}", sections, prov)
    path = write_atomic(out / f"{name}.html", page.encode("utf-8"))
    return ReportFiles(path, figs)


def _first_absorbance(analysis: Any) -> float | None:
    """The absorbance of the run's first usable (unflagged) reading (None if none is)."""
    ok = np.flatnonzero(np.asarray(analysis.flags) == 0)
    return float(analysis.absorbance[ok[0]]) if ok.size else None


def _first_concentration(calibration: Any, analysis: Any) -> Any:
    """The calibrated concentration of the run's first usable reading, with its standard error (None if none)."""
    first = _first_absorbance(analysis)
    if first is None:
        return None
    try:
        return calibration.predict([first])
    except Exception:  # a reading the calibration cannot invert (e.g. outside a quadratic's range): say nothing
        return None


def _fit_sections(laid: dict[str, Any], run_png: bytes) -> list[dict[str, Any]]:
    """The fit result in the one order: the answer, how well the law fits, the parameters, the laws ranked."""
    a, q = laid["answer"], laid["how_well_it_fits"]
    key = "rate_constant" if "rate_constant" in a else "rate"
    r = a[key]
    what = "Rate constant k" if key == "rate_constant" else "Rate dA/dt"
    answer = (f"{what} = {_n.measured(r['value'], r['standard_error'], r['unit'])} (95 % interval "
              f"{_n.interval(*r['interval_95'], r['standard_error'], r['unit'])})")
    if "half_life" in a:
        h = a["half_life"]
        answer += f"; half-life = {_n.measured(h['value'], h['standard_error'], 's')}"
    fits = (f"Residual SD {_n.quantity(q['residual_sd'], 'absorbance', digits=2)} over {q['points']} readings. "
            f"{q['residuals_in_words']} {q['best_law_in_words']}")
    rows = [(p["meaning"], p["name"], _n.measured(p["value"], p["standard_error"], p["unit"]),
             _n.interval(*p["interval_95"], p["standard_error"], p["unit"])) for p in laid["parameters"]]
    ranked = "".join(
        f"<li>{html.escape(row['law_title'])}: "
        + (html.escape("not fitted (" + row["not_fitted"] + ")") if "not_fitted" in row
           else f"ΔAICc {html.escape(_fit_layout._delta(row['delta_aicc']))}") + "</li>"
        for row in laid["laws_ranked"])
    return [
        {"title": f"The answer: {a['law_title']}", "text": answer + "."},
        {"title": "How well the law fits", "text": fits, "figures": [run_png]},
        {"title": "Parameters", "html": _table(["parameter", "symbol", "value ± standard error", "95 % interval"],
                                                rows)},
        {"title": "Rate laws ranked",
         "html": f"<ol class='ranked'>{ranked}</ol><p class='small'>ΔAICc: how far behind the best law; below 2 the "
                 "data do not tell two laws apart, above 10 they rule the worse one out.</p>"},
    ]


def _detail_section(laid: dict[str, Any], analysis: Any) -> dict[str, Any]:
    rows = []
    for law, d in laid["detail"].items():
        if not isinstance(d, dict) or "aic" not in d:
            continue
        rt = d.get("extra", {}).get("runs_test") or {}
        rows.append((law, _n.quantity(d["aic"]), _n.quantity(d.get("extra", {}).get("aicc")), d["n"], d["dof"],
                     "n/a" if rt.get("p_value") is None else _n.quantity(rt["p_value"], digits=2)))
    b = analysis.blank
    text = (f"Blank: mark {b.boot}:{b.seq} ({b.rule}); {b.stray_text}. Time basis: {analysis.time_basis}. "
            f"Boots: {', '.join(map(str, analysis.boots))}. Run key: {analysis.run.key}.")
    return {"title": "Detail", "text": text,
            "html": _table(["rate law", "AIC", "AICc", "n", "dof", "runs-test p"], rows)}


GLOSSARY = {"title": "Glossary", "html": "<dl class='small'>" + "".join(
    f"<dt>{html.escape(term)}</dt><dd>{html.escape(meaning)}</dd>" for term, meaning in (
        ("AIC, AICc", "Akaike's information criterion: a fit's misfit with a penalty for each parameter; AICc adds "
                      "the correction for few readings. Only differences between laws fitted to the same readings "
                      "mean anything (ΔAICc)."),
        ("runs-test p", "how likely residual signs this clustered are if the law were right; a small p means the "
                        "law misses the curve's shape."),
        ("Birge ratio", "how much more the runs scatter than their own standard errors allow; standard errors are "
                        "enlarged by it when it is above 1."),
        ("journal", "the record of readings and marks the board keeps on its own flash while unattended."),
        ("durability window", "the longest time a reading waits in the board's memory before it is safe on flash; "
                              "a power cut loses at most this much."),
        ("boot", "one power-up of the board; a restart starts a new boot, and readings keep their boot's clock."),
        ("mark key", "boot:number of a journal record, e.g. 1:25, as in the detail and provenance."),
        ("torn bytes", "the unfinished end of a journal record cut by a power loss; it is left out and reported."),
    )) + "</dl>"}


def study_report(study: Any, out: str | Path, *, name: str = "study", title: str = "nightcell study report",
                 intro: str = "", provenance: dict[str, Any] | None = None,
                 run_pages: dict[str, str] | None = None, extra_sections: Sequence[dict[str, Any]] = (),
                 unit: str = "", device_labels: dict[str, str] | None = None) -> ReportFiles:
    """One study's self-contained HTML page (``<name>.html``) with figures also as PNG and SVG beside it.

    ``study`` is ``analyse.analyse_study``'s result. Shows every run with its conditions and k ± SE, all runs'
    absorbance curves, the log–log order plot per reactant (from k and from initial rates), the Arrhenius plot with
    residuals and the Eyring parameters, each device's calibration, the rules that chose runs, and provenance.
    ``run_pages`` maps run keys to the file names of their own pages (linked by relative path); ``device_labels``
    maps device ids to their labels ("bench A"), shown instead of the id (which stays in the provenance) and naming
    each calibration's figure files (``device_stems``)."""
    labels = device_labels or {}
    stems = device_stems(labels)

    def bench(device: str) -> str:
        return labels.get(device) or device

    out = out_folder(out)
    name = safe_filename(name, "study")
    figs: list[Path] = []
    sections: list[dict[str, Any]] = []
    if intro:
        sections.append({"title": "What this is", "text": intro})
    run_pages = run_pages or {}
    rows = []
    for it in study.runs:
        c = it.conditions
        concs = "; ".join(f"{q[5:-2]} {v:.4g} M" for q, v in sorted(c.items()) if q.startswith("conc_"))
        t = c.get("temperature_K")
        rows.append((it.run.label or it.run.key, bench(it.run.device), "—" if t is None else f"{t - 273.15:.1f}",
                     concs, plus_minus(it.k, it.k_se),
                     plus_minus(it.fit.extra.get("half_life_s"), it.fit.extra.get("half_life_se_s")),
                     plus_minus(it.fit.values.get("A_inf"), it.fit.stderr.get("A_inf"), 3),
                     len(it.analysis.boots) - 1, len(it.analysis.time_s)))
    sections.append({"title": "Runs",
                     "text": f"Rate constants from the law {_laws.title(study.model)} (A∞ found by the fit) fitted "
                             "to each run's absorbance against its own blank.",
                     "html": _table(["run", "bench", "T (°C)", "starting concentrations", "k (s⁻¹) ± SE",
                                     "half-life (s) ± SE", "A∞ ± SE", "restarts", "readings"], rows)
                     + _links(study.runs, run_pages, bench)})
    if study.runs:
        fig, ax = _figure(figsize=(8.6, 4.4))
        try:
            import matplotlib

            cmap = matplotlib.colormaps["viridis"]
            styled = len(study.runs) <= 20  # up to 20 runs each gets its own colour, marker and line (run_style)
            # one figure for every run: the points drawn are shared out (about 4 × DRAW_LIMIT in all, at least 30
            # a run), so a study of many runs stays a figure of a few MB
            share = max(30, 4 * DRAW_LIMIT // len(study.runs))
            thinned = False
            for i, it in enumerate(study.runs):
                a = it.analysis
                ok = a.flags == 0
                style = run_style(i) if styled else {"color": cmap(i / max(1, len(study.runs) - 1)),
                                                      "marker": ".", "linestyle": "-"}
                col = style["color"]
                x, y = a.time_s[ok], a.absorbance[ok]
                keep = thin_for_drawing(x, y, limit=share, slices=max(10, share // 3))
                if keep is not None:
                    x, y, thinned = x[keep], y[keep], True
                ax.plot(x, y, style["marker"], ms=2.5, mfc="none", mew=0.6, color=col, linestyle="none",
                        label=plain_text(it.run.label or it.run.key)[:60])
                fx = np.asarray(it.fit.x, dtype=float)
                fy = np.asarray(it.fit.y) - np.asarray(it.fit.residuals)
                order = np.argsort(fx)
                fx, fy = fx[order], fy[order]
                keep = thin_for_drawing(fx, fy, limit=share, slices=max(10, share // 3))
                if keep is not None:
                    fx, fy = fx[keep], fy[keep]
                ax.plot(fx, fy, style["linestyle"], lw=0.9, color=col)
            ax.set_xlabel("time (s)")
            ax.set_ylabel("absorbance")
            ax.set_title("All runs with their fits" + (" (drawing thinned; the fits use every reading)"
                                                       if thinned else ""))
            if styled:  # beside the axes, never over the data
                fig.legend(fontsize="x-small", loc="outside right upper", markerscale=2.0)
            else:  # a legend of hundreds of runs would hide the plot: the table above names every run in order
                ax.text(0.99, 0.98, f"{len(study.runs)} runs coloured in the table's order (dark first, yellow last)",
                        transform=ax.transAxes, ha="right", va="top", fontsize="x-small")
            png = _figure_files(fig, out / f"{name}-runs", figs)
        finally:
            fig.clear()  # drop the figure's artists now: a report draws many
        sections.append({"title": "Absorbance of every run", "figures": [png]})
    by_key = {it.run.key: it for it in study.runs}
    all_runs = {it.run.key: it.run for it in study.runs}

    def run_name(key: str) -> str:
        """A run as the class knows it: its label and bench; the key (in the provenance) where it has none."""
        run = all_runs.get(key)
        return f"{run.label} ({bench(run.device)})" if run is not None and run.label else key
    for reactant, st in study.orders.items():
        f = st.per_reactant[reactant]
        keys = study.used.get(f"order {reactant}", [])
        se = [by_key[k].k_se for k in keys] if all(k in by_key for k in keys) else None
        fig, ax = _figure(figsize=(6.0, 4.4))
        try:
            plot_orders(f, ax=ax, rate_se=se, reactant=reactant, quantity="k (s⁻¹)")
            ax.set_title(plain_text(f"Order in {reactant} from rate constants"))
            png = _figure_files(fig, out / f"{name}-order-{safe_filename(reactant)}", figs)
        finally:
            fig.clear()  # drop the figure's artists now: a report draws many
        html_parts = fit_table(f)
        text = (f"ln k against ln [{reactant}] over the runs {', '.join(run_name(k) for k in keys)}. "
                f"Order {plus_minus(f.values['order'], f.stderr['order'])}; "
                f"Birge ratio {f.extra.get('birge_ratio', float('nan')):.3g}.")
        ini = study.initial_orders.get(reactant)
        if ini is not None and reactant in ini.per_reactant:
            g = ini.per_reactant[reactant]
            text += (f"\n\nFrom initial rates (dA/dt over an early window, same runs): order "
                     f"{plus_minus(g.values['order'], g.stderr['order'])}. A cross-check only: it holds when every run "
                     "starts from the same absorbance, and the window's curvature pulls fast runs' rates low.")
            html_parts += fit_table(g)
        sections.append({"title": f"Order in {reactant}", "text": text, "html": html_parts, "figures": [png]})
    if study.arrhenius is not None:
        fa, fe = study.arrhenius, study.eyring
        keys = study.used.get("arrhenius", [])
        se = [by_key[k].k_se for k in keys] if all(k in by_key for k in keys) else None
        fig, ax, rax = _two_panel()
        try:
            plot_arrhenius(fa, ax=ax, k_se=se, resid_ax=rax)
            ax.set_title("Arrhenius plot")
            png = _figure_files(fig, out / f"{name}-arrhenius", figs)
        finally:
            fig.clear()  # drop the figure's artists now: a report draws many
        ex = fa.extra
        ci = ex.get("Ea_ci95_kJ_per_mol")
        text = (f"Runs {', '.join(run_name(k) for k in keys)}. "
                f"{_n.activation_energy(fa.values['Ea_J_per_mol'], fa.stderr['Ea_J_per_mol'])}"
                + (f" (95 % interval {_n.interval(ci[0], ci[1], fa.stderr['Ea_J_per_mol'] / 1000, 'kJ mol⁻¹')})"
                   if ci else "")
                + f"; A = {plus_minus(ex.get('A'), ex.get('A_se'), unit='s⁻¹')}. {ex.get('se_rule', '')}"
                f" (Birge ratio: see Glossary).")
        if fe is not None:
            text += (f"\n\nEyring (transmission coefficient 1): ΔH‡ = "
                     f"{plus_minus(fe.values['dH_J_per_mol'] / 1000, fe.stderr['dH_J_per_mol'] / 1000, unit='kJ mol⁻¹')}, "
                     "ΔS‡ = "
                     f"{plus_minus(fe.values['dS_J_per_mol_K'], fe.stderr['dS_J_per_mol_K'], unit='J mol⁻¹ K⁻¹')}.")
        sections.append({"title": "Temperature dependence", "text": text,
                         "html": fit_table(fa) + (fit_table(fe) if fe is not None else ""), "figures": [png]})
    cals: dict[str, Any] = {}
    for it in study.runs:
        if it.calibration is not None:
            cals.setdefault(it.run.device, it.calibration)
    for device, cal in cals.items():
        fig, ax, rax = _two_panel()
        unknowns = []
        for it in study.runs:
            same = it.calibration is not None and it.run.device == device and (
                it.calibration.inputs.get("standards") == cal.inputs.get("standards"))  # the same standards
            if same and it.analysis.concentration is not None:
                first = _first_concentration(cal, it.analysis)
                if first is not None:
                    unknowns.append((run_name(it.run.key), _first_absorbance(it.analysis), first))
        try:
            plot_calibration(cal, ax=ax, resid_ax=rax, unit=plain_text(f"({unit})") if unit else "",
                             unknowns=unknowns)
            ax.set_title(plain_text(f"Calibration of {bench(device)}"))
            png = _figure_files(fig, out / f"{name}-calibration-{stems.get(device) or safe_filename(device)}", figs)
        finally:
            fig.clear()  # drop the figure's artists now: a report draws many
        sections.append({"title": f"Calibration of {bench(device)}", "html": fit_table(cal),
                         "text": f"{cal.n} standards; limit of detection "
                                 f"{_n.quantity(cal.extra.get('lod'), unit, digits=2)}, limit of quantification "
                                 f"{_n.quantity(cal.extra.get('loq'), unit, digits=2)}"
                                 + ("" if unit else " in the unit of the standards' values")
                                 + (". Diamonds: the first reading of each run read through the curve — "
                                    + "; ".join(f"{i + 1} {name}" for i, (name, _, _) in enumerate(unknowns)) + "."
                                    if unknowns else "."),
                         "figures": [png]})
    sections.extend(extra_sections)
    notes = [f"{k}: {v}" for k, v in study.rules.items()] + [f"left out — {run_name(k)}: {v}"
                                                             for k, v in study.skipped.items()]
    sections.append({"title": "How runs were chosen", "text": "\n\n".join(notes)})
    sections.append(GLOSSARY)
    page = html_report(title, sections, provenance)
    path = write_atomic(out / f"{name}.html", page.encode("utf-8"))
    return ReportFiles(path, figs)


def _relative_page(path: str) -> bool:
    """A link target a report may hold: a relative path of plain file names ending in .html (no scheme, no ..)."""
    parts = str(path).split("/")
    return str(path).endswith(".html") and all(p == safe_filename(p) and p not in ("", ".", "..") for p in parts)


def _links(runs: Sequence[Any], pages: dict[str, str], bench: Any = None) -> str:
    items = [((it.run.label or it.run.key) + (f" ({bench(it.run.device)})" if bench else ""), pages[it.run.key])
             for it in runs
             if it.run.key in pages and _relative_page(pages[it.run.key])]
    if not items:
        return ""
    lis = "".join(f"<li><a href='{html.escape(p, quote=True)}'>{html.escape(lbl)}</a></li>" for lbl, p in items)
    return f"<p class='small'>Each run's own page:</p><ul class='small'>{lis}</ul>"
