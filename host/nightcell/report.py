"""Figures, a self-contained HTML report and CSV exports from analysis results.

Plot functions take ``ax=`` and return it; nothing calls ``plt.show()``. The HTML embeds its figures (PNG, base64)
so the one file can be mailed or opened anywhere; every label that came from a board or a user is escaped. This
module never talks to a board and never changes the store.
"""

from __future__ import annotations

import base64
import csv
import datetime
import html
import io
import re
from pathlib import Path
from typing import Any, Iterable, Sequence

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from . import __version__  # noqa: E402

__all__ = ["plot_calibration", "plot_run", "figure_png", "save_figure", "html_report", "write_csv",
           "safe_filename"]


def plot_calibration(cal: Any, ax: Any = None, resid_ax: Any = None, unit: str = "") -> Any:
    """Standards, the fitted line and its 95 % prediction band for one new reading; residuals on ``resid_ax``."""
    if ax is None:
        _, ax = plt.subplots()
    x = np.asarray(cal.x, dtype=float)
    y = np.asarray(cal.y, dtype=float)
    ax.plot(x, y, "o", color="#1f5f8b", label="standards")
    grid = np.linspace(min(0.0, x.min()), x.max() * 1.05, 200)
    fitted = cal.values.get("intercept", 0.0) + cal.values["slope"] * grid + cal.values.get("curvature", 0.0) * grid**2
    ax.plot(grid, fitted, "-", color="#333333", label="fit")
    band = _prediction_band(cal, grid)
    if band is not None:
        ax.fill_between(grid, fitted - band, fitted + band, color="#1f5f8b", alpha=0.15,
                        label="95 % prediction band")
    ax.set_xlabel(f"concentration {unit}".strip())
    ax.set_ylabel("absorbance")
    ax.legend(loc="upper left", fontsize="small")
    if resid_ax is not None:
        resid_ax.axhline(0, color="#999999", lw=0.8)
        resid_ax.plot(x, cal.residuals, "o", color="#1f5f8b")
        resid_ax.set_xlabel(f"concentration {unit}".strip())
        resid_ax.set_ylabel("residual (A)")
    return ax


def _prediction_band(cal: Any, grid: np.ndarray) -> np.ndarray | None:
    """Half-width of the 95 % band for one new reading at each concentration (line or quadratic)."""
    from scipy import stats

    names = list(cal.names)
    cov = np.asarray(cal.cov, dtype=float)
    cols = {"intercept": np.ones_like(grid), "slope": grid, "curvature": grid**2}
    try:
        design = np.column_stack([cols[n] for n in names])
    except KeyError:
        return None
    var = np.einsum("ij,jk,ik->i", design, cov, design) + cal.residual_sd**2
    return stats.t.ppf(0.975, max(cal.dof, 1)) * np.sqrt(var)


def plot_run(time_s: Sequence[float], absorbance: Sequence[float], fit: Any = None, ax: Any = None,
             resid_ax: Any = None, flags: Sequence[int] | None = None, title: str = "") -> Any:
    """Absorbance against time with the fitted curve; flagged points hollow; residuals on ``resid_ax``."""
    if ax is None:
        _, ax = plt.subplots()
    t = np.asarray(time_s, dtype=float)
    a = np.asarray(absorbance, dtype=float)
    bad = np.zeros(len(t), bool) if flags is None else np.asarray(flags) != 0
    ax.plot(t[~bad], a[~bad], ".", color="#7a3b8f", label="readings")
    if bad.any():
        ax.plot(t[bad], a[bad], "o", mfc="none", color="#cc5500", label="flagged")
    if fit is not None and len(getattr(fit, "x", [])):
        fx = np.asarray(fit.x, dtype=float)
        fy = np.asarray(fit.y, dtype=float) - np.asarray(fit.residuals, dtype=float)
        order = np.argsort(fx)
        ax.plot(fx[order], fy[order], "-", color="#222222", label=f"fit: {fit.model}")
        if resid_ax is not None:
            resid_ax.axhline(0, color="#999999", lw=0.8)
            resid_ax.plot(fx, fit.residuals, ".", color="#7a3b8f")
            resid_ax.set_xlabel("time (s)")
            resid_ax.set_ylabel("residual (A)")
    ax.set_xlabel("time (s)")
    ax.set_ylabel("absorbance")
    if title:
        ax.set_title(title)
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


def safe_filename(label: str, default: str = "run") -> str:
    """A file name from a label: letters, digits, dot, dash and underscore only, never a path."""
    name = re.sub(r"[^A-Za-z0-9._-]+", "_", label).strip("._")
    return (name or default)[:80]


def _table(headers: Sequence[str], rows: Iterable[Sequence[Any]]) -> str:
    out = ["<table><thead><tr>" + "".join(f"<th>{html.escape(str(h))}</th>" for h in headers) + "</tr></thead><tbody>"]
    for row in rows:
        out.append("<tr>" + "".join(f"<td>{html.escape(_fmt(v))}</td>" for v in row) + "</tr>")
    out.append("</tbody></table>")
    return "".join(out)


def _fmt(v: Any) -> str:
    if isinstance(v, float):
        if not np.isfinite(v):
            return "—"
        return f"{v:.6g}"
    return str(v)


def fit_table(fit: Any) -> str:
    """Parameter table of a FitResult as HTML."""
    rows = [(n, fit.values[n], fit.stderr.get(n, float("nan"))) for n in fit.names]
    summary = (f"<p class='small'>model {html.escape(fit.model)}; n = {fit.n}, dof = {fit.dof}, "
               f"residual SD = {_fmt(fit.residual_sd)}, AIC = {_fmt(fit.aic)}; "
               f"{html.escape(fit.message or ('converged' if fit.success else 'failed'))}</p>")
    return _table(["parameter", "value", "standard error"], rows) + summary


_CSS = """
body{font-family:system-ui,sans-serif;max-width:980px;margin:2em auto;padding:0 1em;color:#222}
h1{font-size:1.5em}h2{font-size:1.2em;border-bottom:1px solid #ccc;padding-bottom:.2em;margin-top:2em}
table{border-collapse:collapse;margin:.5em 0}td,th{border:1px solid #ccc;padding:.25em .6em;text-align:left}
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
        parts.append(_table(["item", "value"], sorted((k, v) for k, v in provenance.items())))
    parts.append("</body></html>")
    return "\n".join(parts)


def write_csv(path: str | Path, headers: Sequence[str], rows: Iterable[Sequence[Any]]) -> Path:
    """Write rows to CSV (written to a temporary name, then renamed: never half a file)."""
    p = Path(path)
    tmp = p.with_name(p.name + ".part")
    with open(tmp, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(headers)
        for row in rows:
            w.writerow(["" if (isinstance(v, float) and not np.isfinite(v)) else v for v in row])
    tmp.replace(p)
    return p
