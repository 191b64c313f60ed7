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
  the file and the text stays editable; SVG keeps text as text in the
  named font (DejaVu Sans, which matplotlib ships);
* one colour, marker and line style per interval method, the same in every
  figure (:data:`METHOD_STYLES`), so a method is recognised across figures;
* the grey accepted-coverage band is hatched while each method's Monte Carlo
  band is a plain light fill, so the two stay apart in greyscale print;
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
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import matplotlib
from matplotlib import rc_context
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from simcheck import __version__
from simcheck.report.text import cell_outcome
from simcheck.results import CheckResult, CurveResult

__all__ = ["coverage_figure", "margin_figure", "miss_figure", "sweep_figure", "save_figure", "figure_bytes",
           "series_style", "method_style", "METHOD_STYLES", "STYLE", "OKABE_ITO", "SCREEN_DPI", "screen_png"]

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
ACCEPT_GREY = "#E3E3E3"
ACCEPT_HATCH = "////"
ACCEPT_HATCH_COLOUR = "#9A9A9A"
#: resolution of the PNG embedded in report.html (the files beside it are at savefig.dpi)
SCREEN_DPI = 110


def _style(colour: str, marker: str, linestyle: Any) -> dict[str, Any]:
    return {"color": colour, "marker": marker, "linestyle": linestyle}


_B, _V, _G, _P, _O, _S = SERIES_COLOURS[0], SERIES_COLOURS[1], SERIES_COLOURS[2], SERIES_COLOURS[3], \
    SERIES_COLOURS[4], SERIES_COLOURS[5]

#: One fixed style per interval method, the same in every figure. Methods
#: that can appear together (same estimand) never share colour and marker.
METHOD_STYLES: dict[str, dict[str, Any]] = {
    # means
    "t": _style(_V, "s", "--"),
    "cox": _style(_B, "o", "-"),
    "johnson-t": _style(_G, "^", "-."),
    "bootstrap-bca": _style(_P, "D", ":"),
    "welch": _style(_O, "v", (0, (5, 1, 1, 1, 1, 1))),
    "z": _style(_S, "P", (0, (1, 1))),
    "bootstrap-percentile": _style(_O, "X", "-"),
    "bootstrap-t": _style(_S, "h", "--"),
    "cluster-t": _style(_G, "p", "-"),
    "bootstrap": _style(_P, "X", "-."),  # stratified designs only (beside t, z, wald)
    # proportions (one and two groups)
    "wald": _style(_V, "s", "--"),
    "wilson": _style(_B, "o", "-"),
    "agresti-coull": _style(_G, "^", "-."),
    "clopper-pearson": _style(_P, "D", ":"),
    "jeffreys": _style(_O, "v", (0, (5, 1, 1, 1, 1, 1))),
    "hypergeometric": _style(_S, "*", (0, (3, 1))),
    "newcombe": _style(_B, "o", "-"),
    "agresti-caffo": _style(_G, "^", "-."),
    # correlation (with bootstrap-percentile)
    "fisher-z": _style(_B, "o", "-"),
}


def method_style(label: str, i: int = 0) -> dict[str, Any]:
    """The fixed style of an interval method (``"t"`` or ``"t interval"``); other
    labels get the ``i``-th series style."""
    name = str(label).removesuffix(" interval").split(",")[0].strip()
    return dict(METHOD_STYLES[name]) if name in METHOD_STYLES else series_style(i)

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
    # SVG text stays text (searchable, editable); the font is named in each text element's style
    "svg.fonttype": "none",
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
        label = f"{label} (log scale)"  # a reader must not take the spacing for linear
    ax.set_xlabel(label)


def _vline(ax, x: float | None, *, style: str, colour: str, label: str | None):
    if x is None:
        return None
    return ax.axvline(x, color=colour, linestyle=style, linewidth=1.0, label=label, zorder=1.5)


def _band(ax, x, centre, half, colour) -> None:
    """Monte Carlo band: a light plain fill in the series colour. (No outline: on a narrow
    band the outline would fill the gaps of a dashed line and hide the method's line style.)"""
    if np.any(np.nan_to_num(half) > 0):
        ax.fill_between(x, centre - half, centre + half, facecolor=colour, alpha=BAND_ALPHA, linewidth=0, zorder=1)


def _accept_band(ax, low: float, high: float) -> None:
    """The accepted-coverage band, hatched so it never merges with a method's band in greyscale."""
    ax.axhspan(low, high, facecolor=ACCEPT_GREY, edgecolor=ACCEPT_HATCH_COLOUR, hatch=ACCEPT_HATCH,
               linewidth=0, zorder=0.5, label="_accepted band")


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
    undecided: Sequence[str] = (),
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
    undecided : list of str
        Methods whose search was undecided: their n found is labelled so.

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
        _coverage_refs(ax, confidence, tolerance)
        all_n = []
        lows, highs = [confidence - tolerance], [confidence]
        for i, (name, curve) in enumerate(curves.items()):
            st = method_style(name, i)
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
        _found_lines(ax, list(curves), found, undecided)
        n_all = np.concatenate(all_n) if all_n else np.array([1.0])
        _set_n_axis(ax, n_all, n_label)
        lo, hi = float(np.nanmin(lows)), float(np.nanmax(highs))
        pad = max(0.002, 0.06 * (hi - lo))
        ax.set_ylim(max(0.0, lo - pad), min(1.0, hi + pad) if hi + pad <= 1.0 else 1.0 + 0.001)
        ax.set_ylabel("Coverage (share of intervals\ncontaining the true value)" if bound == "two-sided" else
                      f"Coverage (share of {bound} limits\n{'at or above' if bound == 'upper' else 'at or below'} the true value)")
        _outside_legend(fig, ax)
    return fig


def _coverage_refs(ax, confidence: float, tolerance: float) -> None:
    """Nominal level, and with a tolerance the hatched accepted band and its dashed lower edge."""
    if tolerance > 0:
        _accept_band(ax, confidence - tolerance, confidence)
    ax.axhline(confidence, color=REFERENCE_COLOUR, linewidth=0.9, label=f"nominal {confidence:g}", zorder=1.6)
    if tolerance > 0:
        ax.axhline(confidence - tolerance, color=REFERENCE_COLOUR, linewidth=0.8, linestyle=(0, (4, 2)),
                   label=f"lowest accepted {confidence - tolerance:g}", zorder=1.6)


def _found_lines(ax, names: Sequence[str], found: Mapping[str, Any], undecided: Sequence[str]) -> None:
    """A dashed line at each method's n found, in its colour; 'undecided' said in the label."""
    for i, name in enumerate(names):
        nf = found.get(name)
        if nf is None:
            continue
        who = f" ({name})" if len(names) > 1 else ""
        st = method_style(name, i)
        status = ", undecided" if name in undecided else ""
        ln = _vline(ax, nf, style=(0, (6, 2)), colour=st["color"], label=f"n found = {nf:,}{status}{who}")
        if len(names) > 1:
            # the method's marker on top of its line tells the lines apart in greyscale
            ln.set_marker(st["marker"])
            ln.set_markevery([1])
            ln.set_clip_on(False)


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
    undecided: Sequence[str] = (),
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
    undecided : sequence of str
        Methods whose search confirmed no n: their half-widths are labelled as
        taken at an n that was not confirmed.
    """
    checks = _as_checks(checks)
    curve_map = _as_curves(curves) if curves is not None else {}
    if target_margin is None:
        target_margin = next((c.target_margin for c in checks.values() if c.target_margin is not None), None)
    labels = list(dict.fromkeys(list(checks) + list(curve_map)))
    found = _per_method(n_found, labels)
    # a one-sided limit's margin is the distance from the estimate to the limit
    hw = "half-width" if all(getattr(c, "bound", "two-sided") == "two-sided" for c in checks.values()) else "margin"
    if any(_ratio_scale(getattr(c, "estimand", None)) for c in checks.values()):
        hw = "margin factor"
    with rc_context(STYLE):
        fig = _new_figure(width, height)
        if curve_map:
            ax, ax2 = fig.subplots(1, 2)
        else:
            ax, ax2 = fig.add_subplot(), None
        x_ends: list[float] = []
        for name, chk in checks.items():
            i = labels.index(name)
            st = method_style(name, i)
            if chk.margin_values is None or np.size(chk.margin_values) == 0:
                continue
            x, y = _thin_ecdf(*_ecdf(chk.margin_values, chk.margin_weights))
            if x.size == 0:
                continue
            # far tails of exact laws (a 1e-17 chance of a huge interval) would squash the plot:
            # the axis ends past the 99.5th percentile of every method (and the target)
            x_ends.append(float(x[min(np.searchsorted(y, 0.995), x.size - 1)]))
            # Start the step at 0 and carry it past the target so the curve reads as a distribution function.
            right = max(float(x[-1]), target_margin or float(x[-1])) * 1.03
            x = np.concatenate([[x[0]], x, [right]])
            y = np.concatenate([[0.0], y, [1.0]])
            # a long ECDF is drawn as a line (a step path of thousands of tiny
            # treads renders dashes badly); short exact supports keep their steps
            draw = ax.step if x.size < 200 else ax.plot
            kw = {"where": "post"} if x.size < 200 else {}
            draw(x, y, color=st["color"], linestyle=st["linestyle"], **kw,
                    label=_margin_label(name, chk.n, name in undecided, len(checks) > 1))
            # One marker where the ECDF crosses the target, for greyscale reading.
            if target_margin is not None and chk.assurance is not None:
                ax.plot([target_margin], [chk.assurance], linestyle="none", marker=st["marker"],
                        color=st["color"], zorder=3)
        if target_margin is not None:
            ax.axvline(target_margin, color=REFERENCE_COLOUR, linestyle=(0, (4, 2)), linewidth=0.9,
                       label=f"target margin {target_margin:g}")
        if x_ends:
            lo, hi = ax.get_xlim()
            end = max(max(x_ends), target_margin or 0.0) * 1.08
            if end < hi:
                ax.set_xlim(lo, end)
        ax.set_xlabel(value_label)
        ax.set_ylabel(f"Share of samples with\n{hw} at most x")
        ax.set_ylim(-0.02, 1.02)
        ax.text(0.02, 0.98, "A", transform=ax.transAxes, va="top", ha="left", fontweight="bold")
        if ax2 is not None:
            _assurance_panel(ax2, curve_map, labels, found, assurance, n_label, single=len(checks) <= 1, hw=hw)
        _outside_legend(fig, ax)
    return fig


def _ratio_scale(estimand: str | None) -> bool:
    from simcheck.estimands import spec_for

    spec = spec_for(estimand) if estimand else None
    return spec is not None and spec.ratio_scale


def _margin_label(name: str, n: int, undecided: bool, several: bool) -> str:
    """Legend text of one half-width distribution; an undecided search's n is said to be unconfirmed."""
    at = f"n = {n:,}" + (" (no n confirmed; n with the best coverage)" if undecided else "")
    return f"{name}, {at}" if several else f"half-width at {at}"


def _assurance_panel(ax2, curve_map: Mapping[str, CurveResult], labels: Sequence[str], found: Mapping[str, Any],
                     assurance: float | None, n_label: str, single: bool, hw: str = "half-width") -> None:
    """Panel B of the margin figure: assurance against n, ± 2 MCSE, the required level and the n found."""
    if assurance is not None:
        ax2.axhline(assurance, color=REFERENCE_COLOUR, linewidth=0.9, label=f"required assurance {assurance:g}")
    all_n = []
    for name, curve in curve_map.items():
        i = labels.index(name)
        st = method_style(name, i)
        n = curve.n.astype(float)
        a = curve.column("assurance")
        se = np.nan_to_num(curve.column("assurance_mcse"))
        all_n.append(n)
        _band(ax2, n, a, 2 * se, st["color"])
        ax2.plot(n, a, color=st["color"], marker=st["marker"], linestyle=st["linestyle"],
                 markevery=_markevery(len(n), i, len(curve_map)),
                 label=name if single and len(curve_map) > 1 else None)
        nf = found.get(name)
        if nf is not None:
            ax2.axvline(nf, color=st["color"], linestyle=(0, (6, 2)), linewidth=1.0)
    _set_n_axis(ax2, np.concatenate(all_n) if all_n else np.array([1.0]), n_label)
    ax2.set_ylabel(f"Assurance (share with\n{hw} at most target)")
    ax2.set_ylim(-0.02, 1.02)
    ax2.text(0.02, 0.98, "B", transform=ax2.transAxes, va="top", ha="left", fontweight="bold")


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
        # each panel in its method's colour (one colour per method across figures); the side is
        # told by line style and marker fill, shown in the legend in neutral grey
        sides = (("miss_low", "wholly below the true value", "-", None),
                 ("miss_high", "wholly above the true value", "--", "white"))
        for j, (name, curve) in enumerate(curves.items()):
            ax = axes[j]
            colour = method_style(name, j)["color"]
            n = curve.n.astype(float)
            R = curve.column("replicates")
            exact = np.array([r.exact for r in curve.rows], dtype=bool)
            ax.axhline(half, color=REFERENCE_COLOUR, linestyle=":", linewidth=0.9,
                       label=f"(1 \u2212 confidence) / 2 = {half:g}")
            for col, label, ls, face in sides:
                p = curve.column(col)
                se = _share_mcse(p, R, exact)
                _band(ax, n, p, 2 * se, colour)
                ax.plot(n, p, color=colour, marker="o", markerfacecolor=face or colour, linestyle=ls,
                        markevery=_markevery(len(n), 0 if col == "miss_low" else 1, 2), label="_" + label)
                if j == 0:
                    ax.plot([], [], color="#555555", marker="o", markerfacecolor=face or "#555555", linestyle=ls,
                            label=label)
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
    from simcheck.report.text import key_label

    if isinstance(value, float):
        value = f"{value:g}"
    if col in ("method.interval", "method"):
        return f"{value} interval"
    return f"{key_label(col)} = {value}"


#: What a sweep cell's search outcome looks like in the figure.
#: "undecided" keeps the method's own marker, drawn open (the legend shows a circle).
OUTCOME_STYLE = {
    "undecided": {"marker": "o", "markersize": 5.0,
                  "label": "undecided (budget spent); bar: n range"},
    "undecided-none": {"marker": "$?$", "markersize": 6.0,
                       "label": "undecided, no n yet (budget spent)"},
    "not reached": {"marker": "$\u2191$", "markersize": 7.0,
                    "label": "not reached by the search ceiling"},
}


@dataclass(frozen=True)
class SweepLayout:
    """Which varied column goes where in a sweep figure."""

    x_col: str
    line_col: str | None
    panel_cols: tuple[str, ...]
    panels: tuple[tuple, ...]
    x_levels: tuple
    line_levels: tuple
    x_numeric: bool
    nrows: int
    ncols: int


def sweep_layout(frame, vary: Sequence[str] | None, max_panels: int = 12) -> SweepLayout:
    """x axis: the numeric varied column with most levels; lines: a categorical one
    (the interval method); panels: every combination of the rest."""
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
    panel_cols = tuple(c for c in rest if c != line_col)
    if panel_cols:
        by = panel_cols[0] if len(panel_cols) == 1 else list(panel_cols)
        keys = list(frame.groupby(by, sort=True, dropna=False).groups)
        panels = tuple((p if isinstance(p, tuple) else (p,)) for p in keys)[:max_panels]
    else:
        panels = ((),)
    ncols = min(len(panels), 3)
    x_levels = tuple(sorted(frame[x_col].dropna().unique().tolist(), key=lambda v: (str(type(v)), v)))
    line_levels = tuple(sorted(frame[line_col].dropna().unique().tolist(), key=str)) if line_col else (None,)
    return SweepLayout(x_col, line_col, panel_cols, panels, x_levels, line_levels, _is_numeric(frame[x_col]),
                       math.ceil(len(panels) / ncols), ncols)


def _panel_rows(frame, lay: SweepLayout, key: tuple):
    sub = frame
    for c, v in zip(lay.panel_cols, key):
        sub = sub[sub[c].isna()] if (isinstance(v, float) and math.isnan(v)) else sub[sub[c] == v]
    return sub


def _x_of(lay: SweepLayout, values) -> np.ndarray:
    if lay.x_numeric:
        return np.asarray(values, dtype=float)
    return np.array([lay.x_levels.index(v) for v in values], dtype=float)


def _dodge_step(frame, lay: SweepLayout) -> float:
    """x shift between neighbouring lines, so markers of different methods at the same x
    sit side by side instead of on top of each other (about one marker width)."""
    if lay.line_col is None or len(lay.line_levels) < 2:
        return 0.0
    if lay.x_numeric:
        xs = np.unique(frame[lay.x_col].dropna().to_numpy(dtype=float))
        span = float(xs.max() - xs.min()) if xs.size > 1 else 1.0
        gap = float(np.diff(xs).min()) if xs.size > 1 else 1.0
        return min(0.035 * (span or 1.0), 0.6 * gap / len(lay.line_levels))
    return min(0.12, 0.6 / len(lay.line_levels))


def _draw_coverage_refs(ax, sub, confidence, tolerance, conf_uniform: bool) -> None:
    """Nominal level (each panel's own when the sweep varies it) and the hatched accepted band."""
    conf_p = confidence
    if "confidence" in sub.columns:
        levels = sub["confidence"].dropna().unique()
        conf_p = float(levels[0]) if len(levels) == 1 else None
    if conf_p is None:
        return
    if tolerance:
        _accept_band(ax, conf_p - tolerance, conf_p)
    ax.axhline(conf_p, color=REFERENCE_COLOUR, linewidth=0.9,
               label=f"nominal {conf_p:g}" if conf_uniform else "nominal level (per panel)")


def _draw_formula_n(ax, sub, lay: SweepLayout, reference: str, dodge: float) -> None:
    """The closed-form n: one black dotted line per panel when it is the same for every line
    at each x, else a small black cross beside each of the lines' points."""
    vals = sub[[lay.x_col, reference] + ([lay.line_col] if lay.line_col else [])].dropna(subset=[reference])
    if vals.empty:
        return  # never drawn, so never in the legend
    per_x = vals.groupby(lay.x_col, sort=True)[reference]
    if (per_x.nunique() <= 1).all():
        ref = per_x.first()
        ax.plot(_x_of(lay, ref.index), ref.to_numpy(dtype=float), color=REFERENCE_COLOUR, linestyle=":",
                marker="x", markersize=3.5, linewidth=1.0, label="formula n", zorder=1.8)
        return
    for i, lev in enumerate(lay.line_levels):
        part = vals if lay.line_col is None else vals[vals[lay.line_col] == lev]
        if part.empty:
            continue
        xs = _x_of(lay, part[lay.x_col]) + dodge * (i - (len(lay.line_levels) - 1) / 2)
        ax.plot(xs, part[reference].to_numpy(dtype=float), linestyle="none", color=REFERENCE_COLOUR, marker="x",
                markersize=3.5, label="formula n (per cell)", zorder=1.8)


def _draw_sweep_series(ax, part, lay: SweepLayout, i: int, value: str, dodge: float, ceiling_y) -> set[str]:
    """One line level in one panel; returns the outcome kinds drawn (for the legend)."""
    lev = lay.line_levels[i]
    st = method_style(str(lev), i) if lay.line_col in ("method.interval", "method") else series_style(i)
    xs = _x_of(lay, part[lay.x_col]) + dodge * (i - (len(lay.line_levels) - 1) / 2)
    ys = part[value].to_numpy(dtype=float)
    label = _level_text(lay.line_col, lev) if lay.line_col is not None else None
    if value != "n":
        yerr = 2 * np.nan_to_num(part["coverage_mcse"].to_numpy(dtype=float)) if "coverage_mcse" in part else None
        ax.errorbar(xs, ys, yerr=yerr, color=st["color"], marker=st["marker"], linestyle=st["linestyle"],
                    capsize=2, elinewidth=0.8, label=label)
        return set()
    kinds = np.array([cell_outcome(r) for r in part.to_dict("records")])
    ax.plot(xs, ys, color=st["color"], linestyle=st["linestyle"], linewidth=1.1, label="_line", zorder=2)
    clear = kinds == "clear"
    ax.plot(xs[clear], ys[clear], linestyle="none", color=st["color"], marker=st["marker"], zorder=3,
            label=label if clear.any() else "_none")
    if not clear.any() and label:
        ax.plot([], [], color=st["color"], marker=st["marker"], linestyle=st["linestyle"], label=label)
    drawn = set()
    for kind in ("undecided", "undecided-none", "not reached"):
        mask = kinds == kind
        if not mask.any():
            continue
        drawn.add(kind)
        o = OUTCOME_STYLE[kind]
        y = ys[mask] if kind == "undecided" else np.full(int(mask.sum()), ceiling_y)
        marker = st["marker"] if kind == "undecided" else o["marker"]
        face = "white" if kind == "undecided" else st["color"]
        ax.plot(xs[mask], y, linestyle="none", marker=marker, markerfacecolor=face,
                markeredgecolor=st["color"], markersize=o["markersize"], zorder=3.5, clip_on=False)
        if kind == "undecided" and {"n_range_low", "n_range_high"} <= set(part.columns):
            lo = part["n_range_low"].to_numpy(dtype=float)[mask]
            hi = part["n_range_high"].to_numpy(dtype=float)[mask]
            ax.vlines(xs[mask], lo, hi, color=st["color"], linewidth=0.9, zorder=2.5)
    return drawn


def _sweep_axes_finish(fig, axes, frame, lay: SweepLayout, value: str, value_label: str) -> None:
    from simcheck.report.text import key_label

    k = len(lay.panels)
    for j, ax in enumerate(axes[:k]):
        if lay.panel_cols:
            ax.set_title(", ".join(_level_text(c, v) for c, v in zip(lay.panel_cols, lay.panels[j])), loc="left")
        if not lay.x_numeric:
            ax.set_xticks(range(len(lay.x_levels)), [str(v) for v in lay.x_levels])
        elif len(lay.x_levels) <= 8:
            ax.set_xticks([float(v) for v in lay.x_levels], [f"{v:g}" for v in lay.x_levels])
        if j % lay.ncols == 0:
            ax.set_ylabel(value_label)
        if j >= k - lay.ncols:
            ax.set_xlabel(key_label(lay.x_col))
    for ax in axes[k:]:
        ax.set_visible(False)
    if value == "n":
        vals = frame[value].to_numpy(dtype=float)
        vals = vals[np.isfinite(vals) & (vals > 0)]
        if vals.size > 1 and vals.max() / vals.min() > 25:
            axes[0].set_yscale("log")
            _plain_log(axes[0].yaxis)
            for ax in axes[:k]:
                if ax.get_ylabel():
                    ax.set_ylabel(f"{ax.get_ylabel()} (log scale)")


def sweep_figure(
    frame,
    *,
    value: str = "n",
    vary: Sequence[str] | None = None,
    confidence: float | None = None,
    tolerance: float | None = None,
    reference: str | None = "n_formula",
    value_label: str | None = None,
    n_label: str | None = None,
    width: float = FULL_WIDTH,
    max_panels: int = 12,
) -> Figure:
    """Small multiples of a result across the varied parameters of a sweep.

    The numeric varied parameter with most levels goes on the x axis (labelled
    in words, e.g. "CV of the data" for ``data.cv``), one further parameter
    (preferably the interval method) gives one line per level, in the
    method's fixed style and shifted a little sideways so markers do not
    hide each other, and every combination of the rest gets its own panel.

    For search sweeps (``value="n"``) each cell's outcome is drawn apart:
    a filled marker where the answer is clear; an open marker at the
    conservative n with a bar over the n range where the search was
    undecided (replicate budget spent); an open triangle above the data
    where the targets were not reached by the search ceiling. Legend
    entries appear only for what is drawn.

    Parameters
    ----------
    frame : pandas.DataFrame
        One row per cell: varied parameter columns (dotted keys such as
        ``data.cv``) and result columns (``n``, ``reached``, ``decision``,
        ``stop_reason``, ``n_range_low``/``high``, ``coverage``, ...).
    value : str
        ``n`` (search sweeps) or ``coverage`` (check sweeps; ± 2 MCSE bars).
    vary : list of str, optional
        Varied parameter columns; default: columns containing a dot.
    confidence, tolerance : float, optional
        Reference lines for coverage.
    reference : str, optional
        Column drawn in black (default the formula n, for ``value="n"``):
        one line per panel, or a cross per cell where it differs between lines.
    n_label : str, optional
        y label for ``value="n"`` (say what n counts, e.g. clusters).
    """
    _check_sweep_frame(frame, value)
    lay = sweep_layout(frame, vary, max_panels)
    # room for the panels plus a legend of about (lines + 4) entries in two columns
    legend_rows = math.ceil((len(lay.line_levels) + 4) / 2)
    height = 2.3 * lay.nrows + 0.55 + 0.17 * legend_rows
    dodge = _dodge_step(frame, lay)
    value_label = value_label or _sweep_value_label(value, n_label)
    top = frame[value].to_numpy(dtype=float)
    ceiling_y = float(np.nanmax(top)) * 1.4 if np.isfinite(top).any() else 1.0
    conf_uniform = "confidence" not in frame.columns or frame["confidence"].dropna().nunique() <= 1
    use_ref = value == "n" and reference is not None and reference in frame.columns
    drawn: set[str] = set()
    with rc_context(STYLE):
        fig = _new_figure(width, height)
        # panels of different confidence levels get their own coverage scale
        share_y = value == "n" or conf_uniform
        axes = np.atleast_1d(fig.subplots(lay.nrows, lay.ncols, sharey=share_y, sharex=True, squeeze=False)).ravel()
        for j, key in enumerate(lay.panels):
            ax, sub = axes[j], _panel_rows(frame, lay, key)
            if value == "coverage":
                _draw_coverage_refs(ax, sub, confidence, tolerance, conf_uniform)
            if use_ref:
                _draw_formula_n(ax, sub, lay, reference, dodge)
            for i, lev in enumerate(lay.line_levels):
                part = (sub if lay.line_col is None else sub[sub[lay.line_col] == lev]).sort_values(lay.x_col)
                if not part.empty:
                    drawn |= _draw_sweep_series(ax, part, lay, i, value, dodge, ceiling_y)
        _sweep_axes_finish(fig, axes, frame, lay, value, value_label)
        _sweep_legend(fig, axes[0], drawn)
    return fig


def _check_sweep_frame(frame, value: str) -> None:
    import pandas as pd

    if not isinstance(frame, pd.DataFrame):
        raise TypeError(f"frame must be a pandas DataFrame, got {type(frame).__name__}")
    if value not in frame.columns:
        raise ValueError(f"frame has no column {value!r}")


def _sweep_value_label(value: str, n_label: str | None) -> str:
    label = {"n": n_label or "Required sample size n", "coverage": "Coverage at the fixed n"}.get(value, value)
    # break a long label before its parenthesis so it fits the panel height
    return label.replace(" (", "\n(") if len(label) > 24 else label


def _sweep_legend(fig: Figure, ax, drawn: set[str]) -> None:
    from matplotlib.lines import Line2D

    for kind in ("undecided", "undecided-none", "not reached"):
        if kind in drawn:
            o = OUTCOME_STYLE[kind]
            face = "white" if kind == "undecided" else REFERENCE_COLOUR
            ax.add_line(Line2D([], [], linestyle="none", marker=o["marker"], markerfacecolor=face,
                               markeredgecolor=REFERENCE_COLOUR, markersize=o["markersize"], label=o["label"]))
    handles, labels = _legend_items(fig)
    if handles:
        fits = _legend_columns(fig, labels)
        fig.legend(handles, labels, loc="outside lower center", ncols=min(fits, 4, len(labels)), handlelength=2.6)


def _legend_items(fig: Figure) -> tuple[list, list]:
    """Legend entries of every axis, once each; labels starting with '_' are left out."""
    handles, labels = [], []
    for a in fig.axes:
        h, lab = a.get_legend_handles_labels()
        for hh, ll in zip(h, lab):
            if ll and not ll.startswith("_") and ll not in labels:
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


def screen_png(fig: Figure, dpi: float = SCREEN_DPI, colours: int = 96) -> bytes:
    """A small PNG for web pages: screen resolution and an adaptive palette of ``colours``.

    A figure of lines, bands and text uses few colours, so the palette keeps it
    visually the same at a third of the bytes; the quantisation is
    deterministic, so equal figures give equal bytes.
    """
    import io

    from PIL import Image

    img = Image.open(io.BytesIO(figure_bytes(fig, "png", dpi=dpi))).convert("RGB")
    out = io.BytesIO()
    img.quantize(colors=colours, method=Image.Quantize.MEDIANCUT, dither=Image.Dither.NONE).save(
        out, format="PNG", optimize=True)
    return out.getvalue()


def figure_bytes(fig: Figure, fmt: str = "png", dpi: float | None = None) -> bytes:
    """The figure as bytes in one format (for embedding in HTML; ``dpi`` default ``savefig.dpi``)."""
    import io

    buf = io.BytesIO()
    with rc_context(STYLE):
        fig.savefig(buf, format=fmt, metadata=_metadata(fmt), **({} if dpi is None else {"dpi": dpi}))
    return buf.getvalue()
