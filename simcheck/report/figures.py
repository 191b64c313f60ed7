"""Figures for a methods section: coverage, achieved margin, misses, sweeps.

Every function returns a :class:`matplotlib.figure.Figure` built without
pyplot (no global figure manager, no global rcParams change), so callers can
restyle it (``fig.axes[0].set_title(...)``) and save it themselves, or pass
it to :func:`save_figure`, which writes PNG, SVG and PDF with byte-identical
output for identical input.

Style choices, and why:

* colours from the Okabe–Ito palette, which stays distinguishable under the
  common colour-vision deficiencies, and every series also gets its own
  marker and line style so the figure reads in greyscale print;
* Monte Carlo bands are the estimate ± 2 MCSE (about a 95 % band under the
  normal approximation to the binomial share), drawn as light shading;
* TrueType (Type 42) fonts in PDF so journals' production checks accept
  the file and the text stays editable;
* no titles inside the figure (captions belong to the document), no grids
  beyond faint major lines, no decoration.

References
----------
.. [1] Okabe, M. and Ito, K. (2002). Color Universal Design (CUD): how to make
   figures and presentations that are friendly to colorblind people.
   https://jfly.uni-koeln.de/color/
.. [2] Morris, T. P., White, I. R. and Crowther, M. J. (2019). Using
   simulation studies to evaluate statistical methods. Statistics in
   Medicine 38(11), 2074-2102 (Monte Carlo standard errors, Table 6).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import matplotlib
from matplotlib import rc_context
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from simcheck import __version__
from simcheck.results import CheckResult, CurveResult

__all__ = ["coverage_figure", "margin_figure", "miss_figure", "sweep_figure", "save_figure", "figure_bytes",
           "series_style", "STYLE", "OKABE_ITO"]

# Okabe & Ito (2002) palette, in the order series are given out; black and
# yellow are kept out of the series list (black is for reference lines,
# yellow is too light on white paper).
OKABE_ITO = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky_blue": "#56B4E9",
    "bluish_green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "reddish_purple": "#CC79A7",
}
SERIES_COLOURS = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9")
SERIES_MARKERS = ("o", "s", "^", "D", "v", "P")
SERIES_LINESTYLES = ("-", "--", "-.", ":", (0, (5, 1, 1, 1, 1, 1)), (0, (1, 1)))
REFERENCE_COLOUR = "#000000"
BAND_ALPHA = 0.18
ACCEPT_GREY = "#D9D9D9"

#: Matplotlib settings applied (inside ``rc_context`` only) while figures are
#: built and saved.
STYLE: dict[str, Any] = {
    "font.family": "sans-serif",
    "font.sans-serif": ["DejaVu Sans"],
    "font.size": 8.5,
    "axes.labelsize": 8.5,
    "axes.titlesize": 8.5,
    "xtick.labelsize": 7.5,
    "ytick.labelsize": 7.5,
    "legend.fontsize": 7.5,
    "legend.frameon": False,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.linewidth": 0.7,
    "axes.grid": True,
    "grid.color": "#E5E5E5",
    "grid.linewidth": 0.5,
    "axes.axisbelow": True,
    "lines.linewidth": 1.4,
    "lines.markersize": 4.0,
    "xtick.major.width": 0.7,
    "ytick.major.width": 0.7,
    "figure.dpi": 100,
    "savefig.dpi": 300,
    "savefig.bbox": "standard",
    "pdf.fonttype": 42,
    "ps.fonttype": 42,
    "svg.fonttype": "path",
    "svg.hashsalt": "simcheck-figures",
    "path.simplify": True,
    "image.interpolation": "nearest",
    "axes.formatter.use_mathtext": False,
    "axes.unicode_minus": True,
}

# Width of a full-width journal figure (about 174 mm) in inches.
FULL_WIDTH = 6.85

FORMATS = ("png", "svg", "pdf")


def series_style(i: int) -> dict[str, Any]:
    """Colour, marker and line style of the ``i``-th series (cycled)."""
    return {
        "color": SERIES_COLOURS[i % len(SERIES_COLOURS)],
        "marker": SERIES_MARKERS[i % len(SERIES_MARKERS)],
        "linestyle": SERIES_LINESTYLES[i % len(SERIES_LINESTYLES)],
    }


def _new_figure(width: float, height: float) -> Figure:
    fig = Figure(figsize=(width, height), layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _as_curves(curves: Mapping[str, CurveResult] | CurveResult) -> dict[str, CurveResult]:
    if isinstance(curves, CurveResult):
        label = curves.rows[0].method if curves.rows else "method"
        return {label: curves}
    if isinstance(curves, Mapping):
        out = {str(k): v for k, v in curves.items()}
        for k, v in out.items():
            if not isinstance(v, CurveResult):
                raise TypeError(f"curves[{k!r}] must be a CurveResult, got {type(v).__name__}")
        return out
    raise TypeError(f"curves must be a CurveResult or a dict of them, got {type(curves).__name__}")


def _as_checks(checks: Mapping[str, CheckResult] | CheckResult) -> dict[str, CheckResult]:
    if isinstance(checks, CheckResult):
        return {checks.method: checks}
    if isinstance(checks, Mapping):
        return {str(k): v for k, v in checks.items()}
    raise TypeError(f"checks must be a CheckResult or a dict of them, got {type(checks).__name__}")


def _per_method(value: Mapping[str, Any] | Any, labels: Sequence[str]) -> dict[str, Any]:
    """Spread a scalar to every method, or keep a per-method mapping."""
    if isinstance(value, Mapping):
        return {k: value.get(k) for k in labels}
    return {k: value for k in labels}


def _markevery(count: int, index: int, n_series: int) -> Any:
    """At most about 10 markers per line, staggered between series so they do not overlap."""
    if count <= 12:
        return None
    step = max(1, count // 10)
    return (min(step - 1, (index * step) // max(1, n_series)), step)


def _share_mcse(p: np.ndarray, replicates: np.ndarray, exact: np.ndarray) -> np.ndarray:
    """MCSE of a simulated share, sqrt(p(1-p)/R); zero on exact paths."""
    with np.errstate(invalid="ignore", divide="ignore"):
        se = np.sqrt(np.clip(p * (1 - p), 0, None) / replicates)
    return np.where(exact, 0.0, se)


def _use_log_x(n_values: np.ndarray) -> bool:
    n_values = n_values[n_values > 0]
    return n_values.size > 1 and n_values.max() / n_values.min() > 8


def _plain_log(axis) -> None:
    """Log scale with ticks at 1, 2, 5 x 10^k written as plain numbers (readers want 200, not 2e2)."""
    from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

    axis.set_major_locator(LogLocator(base=10, subs=(1.0, 2.0, 5.0)))
    axis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:,.0f}" if v >= 1 else f"{v:g}"))
    axis.set_minor_formatter(NullFormatter())


def _set_n_axis(ax, n_values: np.ndarray, label: str) -> None:
    if _use_log_x(n_values):
        ax.set_xscale("log")
        _plain_log(ax.xaxis)
    ax.set_xlabel(label)


def _vline(ax, x: float | None, *, style: str, colour: str, label: str | None):
    if x is None:
        return None
    return ax.axvline(x, color=colour, linestyle=style, linewidth=1.0, label=label, zorder=1.5)


def _band(ax, x, centre, half, colour) -> None:
    if np.any(np.nan_to_num(half) > 0):
        ax.fill_between(x, centre - half, centre + half, color=colour, alpha=BAND_ALPHA, linewidth=0, zorder=1)


def _outside_legend(fig: Figure, ax, ncols: int | None = None) -> None:
    handles, labels = [], []
    for a in fig.axes:
        h, lab = a.get_legend_handles_labels()
        for hh, ll in zip(h, lab):
            if ll and not ll.startswith("_") and ll not in labels:
                handles.append(hh)
                labels.append(ll)
    if handles:
        fits = _legend_columns(fig, labels)
        fig.legend(handles, labels, loc="outside lower center", ncols=min(ncols or 4, len(labels), fits),
                   handlelength=2.6)


def _legend_columns(fig: Figure, labels: Sequence[str]) -> int:
    """Legend columns that fit the figure width (long labels, many methods)."""
    size = float(matplotlib.rcParams["legend.fontsize"]) if not isinstance(
        matplotlib.rcParams["legend.fontsize"], str) else 7.5
    # a column: the handle (about 2.6 em + padding) plus the longest label
    # (about 0.55 em per character), in points
    col = size * (2.6 + 1.5 + 0.55 * max(len(t) for t in labels))
    return max(1, int(fig.get_figwidth() * 72 // col))


def coverage_figure(
    curves: Mapping[str, CurveResult] | CurveResult,
    *,
    confidence: float,
    tolerance: float = 0.0,
    n_formula: int | None = None,
    n_found: Mapping[str, int | None] | int | None = None,
    n_label: str = "Sample size n",
    width: float = FULL_WIDTH,
    height: float = 3.3,
    bound: str = "two-sided",
) -> Figure:
    """Coverage against n with its Monte Carlo band (``bound``: one-sided limits say so on the axis).

    Parameters
    ----------
    curves : CurveResult or dict of method name to CurveResult
        One line per method.
    confidence : float
        Nominal confidence level, drawn as a solid reference line.
    tolerance : float
        Accepted shortfall: the band from ``confidence - tolerance`` to
        ``confidence`` is shaded grey and its lower edge drawn dashed.
    n_formula : int, optional
        Closed-form n, marked by a dotted vertical line.
    n_found : int or dict of method name to int, optional
        Smallest n meeting the targets, a dashed vertical line in the
        method's colour.
    n_label : str
        x-axis label (say what n counts: observations, clusters, group a).

    Returns
    -------
    matplotlib.figure.Figure
        The shaded band around each line is the estimate ± 2 MCSE
        (about a 95 % Monte Carlo band); exact curves have none.
    """
    curves = _as_curves(curves)
    found = _per_method(n_found, list(curves))
    with rc_context(STYLE):
        fig = _new_figure(width, height)
        ax = fig.add_subplot()
        ax.axhspan(confidence - tolerance, confidence, color=ACCEPT_GREY, alpha=0.6, linewidth=0, zorder=0.5)
        ax.axhline(confidence, color=REFERENCE_COLOUR, linewidth=0.9, label=f"nominal {confidence:g}", zorder=1.6)
        if tolerance > 0:
            ax.axhline(
                confidence - tolerance,
                color=REFERENCE_COLOUR,
                linewidth=0.8,
                linestyle=(0, (4, 2)),
                label=f"lowest accepted {confidence - tolerance:g}",
                zorder=1.6,
            )
        all_n = []
        lows, highs = [confidence - tolerance], [confidence]
        for i, (name, curve) in enumerate(curves.items()):
            st = series_style(i)
            n = curve.n.astype(float)
            cov = curve.column("coverage")
            se = np.nan_to_num(curve.column("coverage_mcse"))
            all_n.append(n)
            _band(ax, n, cov, 2 * se, st["color"])
            ax.plot(n, cov, color=st["color"], marker=st["marker"], linestyle=st["linestyle"],
                    markevery=_markevery(len(n), i, len(curves)), label=name, zorder=2)
            lows.append(np.nanmin(cov - 2 * se))
            highs.append(np.nanmax(cov + 2 * se))
        _vline(ax, n_formula, style=":", colour=REFERENCE_COLOUR,
               label=None if n_formula is None else f"formula n = {n_formula:,}")
        for i, name in enumerate(curves):
            nf = found.get(name)
            if nf is not None:
                who = f" ({name})" if len(curves) > 1 else ""
                st = series_style(i)
                ln = _vline(ax, nf, style=(0, (6, 2)), colour=st["color"], label=f"n found = {nf:,}{who}")
                if len(curves) > 1:
                    # the method's marker on top of its line tells the lines apart in greyscale
                    ln.set_marker(st["marker"])
                    ln.set_markevery([1])
                    ln.set_clip_on(False)
        n_all = np.concatenate(all_n) if all_n else np.array([1.0])
        _set_n_axis(ax, n_all, n_label)
        lo, hi = float(np.nanmin(lows)), float(np.nanmax(highs))
        pad = max(0.002, 0.06 * (hi - lo))
        ax.set_ylim(max(0.0, lo - pad), min(1.0, hi + pad) if hi + pad <= 1.0 else 1.0 + 0.001)
        ax.set_ylabel("Coverage (share of intervals\ncontaining the true value)" if bound == "two-sided" else
                      f"Coverage (share of {bound} limits\n{'at or above' if bound == 'upper' else 'at or below'} the true value)")
        _outside_legend(fig, ax)
    return fig


def _ecdf(values: np.ndarray, weights: np.ndarray | None) -> tuple[np.ndarray, np.ndarray]:
    values = np.asarray(values, dtype=float)
    keep = np.isfinite(values)
    if weights is None:
        v = np.sort(values[keep])
        return v, np.arange(1, v.size + 1) / max(1, v.size)
    w = np.asarray(weights, dtype=float)[keep]
    v = values[keep]
    order = np.argsort(v, kind="stable")
    v, w = v[order], w[order]
    # Merge tied support points so the step is drawn once.
    uniq, start = np.unique(v, return_index=True)
    wsum = np.add.reduceat(w, start) if v.size else w
    cum = np.cumsum(wsum)
    return uniq, cum / cum[-1] if cum.size else cum


def _thin_ecdf(x: np.ndarray, y: np.ndarray, keep: int = 1200) -> tuple[np.ndarray, np.ndarray]:
    """Keep about ``keep`` steps of a long ECDF: the drawn curve is the same at print
    resolution, and the vector files stay small and quick to write."""
    if x.size <= keep:
        return x, y
    idx = np.unique(np.linspace(0, x.size - 1, keep).round().astype(np.int64))
    return x[idx], y[idx]


def margin_figure(
    checks: Mapping[str, CheckResult] | CheckResult,
    *,
    target_margin: float | None = None,
    curves: Mapping[str, CurveResult] | CurveResult | None = None,
    assurance: float | None = None,
    n_found: Mapping[str, int | None] | int | None = None,
    value_label: str = "Achieved half-width (data units)",
    n_label: str = "Sample size n",
    width: float = FULL_WIDTH,
    height: float = 3.0,
) -> Figure:
    """Distribution of the achieved half-width at the chosen n, and assurance against n.

    Left panel: the empirical distribution function of the half-width
    (``margin_values``, weighted by ``margin_weights`` on exact paths) with
    the target margin; its height at the target is the assurance. Right
    panel (when ``curves`` are given): assurance against n, ± 2 MCSE band,
    the required assurance and the n found.

    Parameters
    ----------
    checks : CheckResult or dict of method name to CheckResult
        Results at the chosen n; each needs ``margin_values``.
    target_margin : float, optional
        Defaults to the checks' ``target_margin``.
    curves : CurveResult or dict, optional
        For the assurance-against-n panel.
    assurance : float, optional
        Required assurance, a horizontal reference line.
    n_found : int or dict, optional
        Marked on the assurance panel.
    """
    checks = _as_checks(checks)
    curve_map = _as_curves(curves) if curves is not None else {}
    if target_margin is None:
        target_margin = next((c.target_margin for c in checks.values() if c.target_margin is not None), None)
    labels = list(dict.fromkeys(list(checks) + list(curve_map)))
    found = _per_method(n_found, labels)
    # a one-sided limit's margin is the distance from the estimate to the limit
    hw = "half-width" if all(getattr(c, "bound", "two-sided") == "two-sided" for c in checks.values()) else "margin"
    with rc_context(STYLE):
        fig = _new_figure(width, height)
        if curve_map:
            ax, ax2 = fig.subplots(1, 2)
        else:
            ax, ax2 = fig.add_subplot(), None
        for name, chk in checks.items():
            i = labels.index(name)
            st = series_style(i)
            if chk.margin_values is None or np.size(chk.margin_values) == 0:
                continue
            x, y = _thin_ecdf(*_ecdf(chk.margin_values, chk.margin_weights))
            # Start the step at 0 and carry it past the target so the curve reads as a distribution function.
            right = max(float(x[-1]), target_margin or float(x[-1])) * 1.03
            x = np.concatenate([[x[0]], x, [right]])
            y = np.concatenate([[0.0], y, [1.0]])
            # a long ECDF is drawn as a line (a step path of thousands of tiny
            # treads renders dashes badly); short exact supports keep their steps
            draw = ax.step if x.size < 200 else ax.plot
            kw = {"where": "post"} if x.size < 200 else {}
            draw(x, y, color=st["color"], linestyle=st["linestyle"], **kw,
                    label=f"{name}, n = {chk.n:,}" if len(checks) > 1 else f"half-width at n = {chk.n:,}")
            # One marker where the ECDF crosses the target, for greyscale reading.
            if target_margin is not None and chk.assurance is not None:
                ax.plot([target_margin], [chk.assurance], linestyle="none", marker=st["marker"],
                        color=st["color"], zorder=3)
        if target_margin is not None:
            ax.axvline(target_margin, color=REFERENCE_COLOUR, linestyle=(0, (4, 2)), linewidth=0.9,
                       label=f"target margin {target_margin:g}")
        ax.set_xlabel(value_label)
        ax.set_ylabel(f"Share of samples with\n{hw} at most x")
        ax.set_ylim(-0.02, 1.02)
        ax.text(0.02, 0.98, "A", transform=ax.transAxes, va="top", ha="left", fontweight="bold")
        if ax2 is not None:
            if assurance is not None:
                ax2.axhline(assurance, color=REFERENCE_COLOUR, linewidth=0.9, label=f"required assurance {assurance:g}")
            all_n = []
            for name, curve in curve_map.items():
                i = labels.index(name)
                st = series_style(i)
                n = curve.n.astype(float)
                a = curve.column("assurance")
                se = np.nan_to_num(curve.column("assurance_mcse"))
                all_n.append(n)
                _band(ax2, n, a, 2 * se, st["color"])
                ax2.plot(n, a, color=st["color"], marker=st["marker"], linestyle=st["linestyle"],
                         markevery=_markevery(len(n), i, len(curve_map)),
                         label=name if len(checks) <= 1 and len(curve_map) > 1 else None)
                nf = found.get(name)
                if nf is not None:
                    ax2.axvline(nf, color=st["color"], linestyle=(0, (6, 2)), linewidth=1.0)
            _set_n_axis(ax2, np.concatenate(all_n) if all_n else np.array([1.0]), n_label)
            ax2.set_ylabel(f"Assurance (share with\n{hw} at most target)")
            ax2.set_ylim(-0.02, 1.02)
            ax2.text(0.02, 0.98, "B", transform=ax2.transAxes, va="top", ha="left", fontweight="bold")
        _outside_legend(fig, ax)
    return fig


def miss_figure(
    curves: Mapping[str, CurveResult] | CurveResult,
    *,
    confidence: float,
    n_found: Mapping[str, int | None] | int | None = None,
    n_formula: int | None = None,
    n_label: str = "Sample size n",
    width: float = FULL_WIDTH,
    height: float | None = None,
) -> Figure:
    """Shares of intervals wholly below and wholly above the true value, against n.

    One panel per method, sharing the y axis. With an equal-tailed interval
    each share should be near ``(1 - confidence) / 2`` (the dotted line); an
    imbalance shows the interval sits on the wrong side for skewed data.
    Bands are ± 2 MCSE, sqrt(p(1 - p) / R).
    """
    curves = _as_curves(curves)
    found = _per_method(n_found, list(curves))
    k = len(curves)
    ncols = min(k, 3)
    nrows = math.ceil(k / ncols)
    if height is None:
        height = 2.9 if nrows == 1 else 2.3 * nrows + 0.5
    half = (1 - confidence) / 2
    with rc_context(STYLE):
        fig = _new_figure(width, height)
        axes = np.atleast_1d(fig.subplots(nrows, ncols, sharey=True, squeeze=False)).ravel()
        ymax = half
        sides = (("miss_low", "wholly below the true value", SERIES_COLOURS[0], "o", "-"),
                 ("miss_high", "wholly above the true value", SERIES_COLOURS[1], "s", "--"))
        for j, (name, curve) in enumerate(curves.items()):
            ax = axes[j]
            n = curve.n.astype(float)
            R = curve.column("replicates")
            exact = np.array([r.exact for r in curve.rows], dtype=bool)
            ax.axhline(half, color=REFERENCE_COLOUR, linestyle=":", linewidth=0.9,
                       label=f"(1 \u2212 confidence) / 2 = {half:g}")
            for col, label, colour, marker, ls in sides:
                p = curve.column(col)
                se = _share_mcse(p, R, exact)
                _band(ax, n, p, 2 * se, colour)
                ax.plot(n, p, color=colour, marker=marker, linestyle=ls,
                        markevery=_markevery(len(n), 0 if col == "miss_low" else 1, 2), label=label)
                ymax = max(ymax, float(np.nanmax(p + 2 * se)))
            _vline(ax, n_formula, style=":", colour="#777777",
                   label=None if n_formula is None else f"formula n = {n_formula:,}")
            nf = found.get(name)
            _vline(ax, nf, style=(0, (6, 2)), colour=REFERENCE_COLOUR,
                   label=None if nf is None else "n found")
            _set_n_axis(ax, n, n_label)
            if k > 1:
                ax.set_title(name, loc="left")
            if j % ncols == 0:
                ax.set_ylabel("Share of intervals")
        for ax in axes[k:]:
            ax.set_visible(False)
        axes[0].set_ylim(0, ymax * 1.12)
        _outside_legend(fig, axes[0], ncols=3)
    return fig


def _is_numeric(series) -> bool:
    import pandas as pd

    return pd.api.types.is_numeric_dtype(series) and not pd.api.types.is_bool_dtype(series)


def _level_text(col: str, value: Any) -> str:
    if isinstance(value, float):
        value = f"{value:g}"
    if col in ("method.interval", "method"):
        return f"{value} interval"
    return f"{col} = {value}"


def sweep_figure(
    frame,
    *,
    value: str = "n",
    vary: Sequence[str] | None = None,
    confidence: float | None = None,
    tolerance: float | None = None,
    reference: str | None = "n_formula",
    value_label: str | None = None,
    width: float = FULL_WIDTH,
    max_panels: int = 12,
) -> Figure:
    """Small multiples of a result across the varied parameters of a sweep.

    The first numeric varied parameter (the one with most levels) goes on
    the x axis, one further parameter (preferably a categorical one such as
    the interval method) gives one line per level, and every combination of
    the remaining parameters gets its own panel.

    Parameters
    ----------
    frame : pandas.DataFrame
        One row per cell: columns for the varied parameters (dotted keys such
        as ``data.cv``) and result columns (``n``, ``coverage``, ...).
    value : str
        Result column on the y axis: ``n`` (required n, search sweeps) or
        ``coverage`` (check sweeps; ± 2 MCSE error bars from
        ``coverage_mcse`` when present).
    vary : list of str, optional
        Varied parameter columns; default: columns containing a dot.
    confidence, tolerance : float, optional
        Reference lines for coverage.
    reference : str, optional
        Column drawn as a black dotted line per panel (default the formula
        n, when the value is ``n``).
    """
    import pandas as pd

    if not isinstance(frame, pd.DataFrame):
        raise TypeError(f"frame must be a pandas DataFrame, got {type(frame).__name__}")
    if value not in frame.columns:
        raise ValueError(f"frame has no column {value!r}")
    if vary is None:
        vary = [c for c in frame.columns if "." in c]
    vary = [c for c in vary if c in frame.columns and frame[c].nunique(dropna=False) > 1] or list(vary[:1])
    if not vary:
        raise ValueError("sweep_figure needs at least one varied parameter column")
    numeric = [c for c in vary if _is_numeric(frame[c])]
    x_col = max(numeric, key=lambda c: frame[c].nunique()) if numeric else vary[0]
    rest = [c for c in vary if c != x_col]
    cats = [c for c in rest if not _is_numeric(frame[c])]
    line_col = (cats[0] if cats else rest[0]) if rest else None
    panel_cols = [c for c in rest if c != line_col]
    if panel_cols:
        by = panel_cols[0] if len(panel_cols) == 1 else panel_cols
        panels = list(frame.groupby(by, sort=True, dropna=False).groups)
        panels = [p if isinstance(p, tuple) else (p,) for p in panels][:max_panels]
    else:
        panels = [()]
    k = len(panels)
    ncols = min(k, 3)
    nrows = math.ceil(k / ncols)
    height = 2.9 if nrows == 1 else 2.2 * nrows + 0.5
    x_numeric = _is_numeric(frame[x_col])
    # Error bars of neighbouring lines would overlap at the same x: shift each line a little.
    dodge = 0.0
    if value == "coverage" and line_col is not None and frame[line_col].nunique() > 1:
        span = (float(frame[x_col].max()) - float(frame[x_col].min())) if x_numeric else float(frame[x_col].nunique())
        dodge = 0.012 * (span or 1.0)
    x_levels = sorted(frame[x_col].dropna().unique().tolist(), key=lambda v: (str(type(v)), v))
    line_levels = sorted(frame[line_col].dropna().unique().tolist(), key=str) if line_col else [None]
    use_ref = value == "n" and reference is not None and reference in frame.columns
    if value_label is None:
        value_label = {"n": "Required sample size n", "coverage": "Coverage at the fixed n"}.get(value, value)
    not_reached_y = None
    any_missing = False
    if value == "n" and "reached" in frame.columns and (frame["reached"] == False).any():  # noqa: E712
        top = frame[value].to_numpy(dtype=float)
        top = top[np.isfinite(top)]
        not_reached_y = float(top.max()) * 1.4 if top.size else 1.0
    conf_uniform = "confidence" not in frame.columns or frame["confidence"].dropna().nunique() <= 1
    with rc_context(STYLE):
        fig = _new_figure(width, height)
        axes = np.atleast_1d(fig.subplots(nrows, ncols, sharey=True, sharex=True, squeeze=False)).ravel()
        for j, key in enumerate(panels):
            ax = axes[j]
            sub = frame
            for c, v in zip(panel_cols, key):
                sub = sub[sub[c].isna()] if (isinstance(v, float) and math.isnan(v)) else sub[sub[c] == v]
            # a sweep may vary the confidence level itself: each panel's own level
            conf_p = confidence
            if "confidence" in sub.columns:
                levels = sub["confidence"].dropna().unique()
                conf_p = float(levels[0]) if len(levels) == 1 else None
            if value == "coverage" and conf_p is not None:
                if tolerance:
                    ax.axhspan(conf_p - tolerance, conf_p, color=ACCEPT_GREY, alpha=0.6, linewidth=0, zorder=0.5)
                label = f"nominal {conf_p:g}" if conf_uniform else "nominal level (per panel)"
                ax.axhline(conf_p, color=REFERENCE_COLOUR, linewidth=0.9, label=label)
            if use_ref:
                ref = sub.groupby(x_col, sort=True)[reference].first()
                xs = ref.index.to_numpy() if x_numeric else [x_levels.index(v) for v in ref.index]
                ax.plot(xs, ref.to_numpy(dtype=float), color=REFERENCE_COLOUR, linestyle=":", marker="x",
                        linewidth=1.0, label="formula n")
            for i, lev in enumerate(line_levels):
                st = series_style(i)
                part = sub if line_col is None else sub[sub[line_col] == lev]
                part = part.sort_values(x_col)
                if part.empty:
                    continue
                xs = part[x_col].to_numpy(dtype=float) if x_numeric else np.array([x_levels.index(v) for v in part[x_col]], dtype=float)
                if dodge:
                    xs = xs + dodge * (i - (len(line_levels) - 1) / 2)
                ys = part[value].to_numpy(dtype=float)
                label = _level_text(line_col, lev) if line_col is not None else value_label
                if value == "coverage" and "coverage_mcse" in part.columns:
                    ax.errorbar(xs, ys, yerr=2 * np.nan_to_num(part["coverage_mcse"].to_numpy(dtype=float)),
                                color=st["color"], marker=st["marker"], linestyle=st["linestyle"],
                                capsize=2, elinewidth=0.8, label=label)
                else:
                    ax.plot(xs, ys, color=st["color"], marker=st["marker"], linestyle=st["linestyle"], label=label)
                    if not_reached_y is not None and "reached" in part.columns:
                        miss = (part["reached"] == False).to_numpy()  # noqa: E712 (a column of bools or None)
                        if miss.any():
                            # a search that stopped at its ceiling: a hollow triangle above the data
                            ax.plot(xs[miss], np.full(int(miss.sum()), not_reached_y), linestyle="none", marker="^",
                                    markerfacecolor="white", markeredgecolor=st["color"], markersize=5.5, zorder=3)
                            any_missing = True
            if panel_cols:
                ax.set_title(", ".join(_level_text(c, v) for c, v in zip(panel_cols, key)), loc="left")
            if not x_numeric:
                ax.set_xticks(range(len(x_levels)), [str(v) for v in x_levels])
            if j % ncols == 0:
                ax.set_ylabel(value_label)
            if j >= k - ncols:
                ax.set_xlabel(x_col)
        for ax in axes[k:]:
            ax.set_visible(False)
        if value == "n":
            vals = frame[value].to_numpy(dtype=float)
            vals = vals[np.isfinite(vals) & (vals > 0)]
            if vals.size > 1 and vals.max() / vals.min() > 25:
                axes[0].set_yscale("log")
                _plain_log(axes[0].yaxis)
        if any_missing:
            from matplotlib.lines import Line2D

            axes[0].add_line(Line2D([], [], linestyle="none", marker="^", markerfacecolor="white",
                                    markeredgecolor=REFERENCE_COLOUR, markersize=5.5,
                                    label="targets not reached by the search ceiling"))
        if line_col is not None:
            fig.legend(*_legend_items(fig), loc="outside lower center", ncols=min(5, len(line_levels) + 2),
                       handlelength=2.6)
        else:
            _outside_legend(fig, axes[0])
    return fig


def _legend_items(fig: Figure) -> tuple[list, list]:
    handles, labels = [], []
    for a in fig.axes:
        h, lab = a.get_legend_handles_labels()
        for hh, ll in zip(h, lab):
            if ll and ll not in labels:
                handles.append(hh)
                labels.append(ll)
    return handles, labels


def _metadata(fmt: str) -> dict[str, Any]:
    """Format-specific metadata with no dates, so equal input gives equal bytes."""
    creator = f"simcheck {__version__}"
    if fmt == "png":
        return {"Software": creator}
    if fmt == "svg":
        return {"Date": None, "Creator": creator}
    if fmt == "pdf":
        return {"CreationDate": None, "ModDate": None, "Creator": creator}
    return {}


def save_figure(fig: Figure, stem: str | Path, formats: Sequence[str] = FORMATS) -> dict[str, Path]:
    """Write ``fig`` as ``stem.png``, ``stem.svg`` and ``stem.pdf``.

    The files carry no dates, SVG ids come from a fixed salt and PDF fonts
    are embedded as TrueType, so the same figure gives the same bytes.

    Returns
    -------
    dict
        Format to path written.
    """
    stem = Path(stem)
    stem.parent.mkdir(parents=True, exist_ok=True)
    out: dict[str, Path] = {}
    with rc_context(STYLE):
        for fmt in formats:
            if fmt not in FORMATS:
                raise ValueError(f"unknown figure format {fmt!r}; choose from {', '.join(FORMATS)}")
            path = stem.with_suffix(f".{fmt}")
            fig.savefig(path, format=fmt, metadata=_metadata(fmt))
            out[fmt] = path
    return out


def figure_bytes(fig: Figure, fmt: str = "png") -> bytes:
    """The figure as bytes in one format (for embedding in HTML)."""
    import io

    buf = io.BytesIO()
    with rc_context(STYLE):
        fig.savefig(buf, format=fmt, metadata=_metadata(fmt))
    return buf.getvalue()
