"""Notebook display helpers: short text, compact HTML tables, small inline PNGs.

Used by the ``__repr__`` and ``_repr_html_`` methods of the result classes.
Plain data in, text out; matplotlib is imported only when a figure is drawn,
without pyplot (no global figure state). Every figure says its axis scale in
the axis label ("log scale") when an axis is not linear.
"""

from __future__ import annotations

import base64
import html
import io
import math
from typing import Any, Iterable, Sequence

import numpy as np

#: a curve with more n values than this is thinned to it in a notebook figure
FIGURE_POINTS = 400


def num(x: Any, digits: int = 4) -> str:
    """A number for a short repr: None/NaN as "-", floats with ``digits`` significant digits."""
    if x is None:
        return "-"
    if isinstance(x, (bool, np.bool_)):
        return str(bool(x))
    if isinstance(x, (int, np.integer)):
        return str(int(x))
    if isinstance(x, (float, np.floating)):
        return "-" if not math.isfinite(float(x)) else f"{float(x):.{digits}g}"
    return str(x)


def estimate(p: Any, se: Any, exact: bool = False) -> str:
    """``0.9412 (MCSE 0.0024)``, or ``0.9412 (exact)``."""
    if p is None:
        return "-"
    if exact:
        return f"{num(p)} (exact)"
    return f"{num(p)} (MCSE {num(se, 2)})"


def html_table(title: str, rows: Iterable[tuple[str, Any]]) -> str:
    """A two-column table of labels and values with a caption."""
    body = "".join(f"<tr><th style='text-align:left'>{html.escape(str(k))}</th>"
                   f"<td style='text-align:left'>{html.escape(v if isinstance(v, str) else num(v))}</td></tr>"
                   for k, v in rows)
    return f"<table><caption style='text-align:left'><b>{html.escape(title)}</b></caption>{body}</table>"


def frame_html(frame, max_rows: int = 12) -> str:
    """A DataFrame as HTML, first and last rows only when it is long."""
    if len(frame) > max_rows:
        half = max_rows // 2
        import pandas as pd

        shown = pd.concat([frame.head(half), frame.tail(half)])
        note = f"<p>{len(frame):,} rows; first and last {half} shown (all rows: <code>to_frame()</code>)</p>"
        return shown.to_html(index=False, na_rep="-", max_cols=14) + note
    return frame.to_html(index=False, na_rep="-", max_cols=14)


def png_html(png: bytes, alt: str) -> str:
    data = base64.b64encode(png).decode("ascii")
    return f"<img src='data:image/png;base64,{data}' alt='{html.escape(alt)}' style='max-width:480px'/>"


def _figure(width: float = 4.8, height: float = 2.6):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height), dpi=80, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def label_scales(fig) -> None:
    """Append "(log scale)" to the label of every axis that is not linear."""
    for ax in fig.axes:
        for axis, get, set_ in ((ax.xaxis, ax.get_xlabel, ax.set_xlabel), (ax.yaxis, ax.get_ylabel, ax.set_ylabel)):
            scale = axis.get_scale()
            if scale != "linear" and "scale" not in get():
                set_(f"{get()} ({scale} scale)".strip())


def _png(fig) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    return buf.getvalue()


def coverage_png(n: Sequence[int], coverage: Sequence[float], mcse: Sequence[float], *, confidence: float,
                 mark: int | None = None, label: str = "n") -> bytes:
    """Coverage against n with a 2-MCSE band and the nominal level: a small PNG."""
    x = np.asarray(n, dtype=float)
    y = np.asarray(coverage, dtype=float)
    se = np.nan_to_num(np.asarray(mcse, dtype=float))
    if x.size > FIGURE_POINTS:
        keep = np.unique(np.linspace(0, x.size - 1, FIGURE_POINTS).round().astype(int))
        x, y, se = x[keep], y[keep], se[keep]
    fig = _figure()
    ax = fig.add_subplot()
    ax.fill_between(x, y - 2 * se, y + 2 * se, color="0.85", linewidth=0)
    ax.plot(x, y, color="C0", linewidth=1.2, label="coverage ± 2 MCSE")
    ax.axhline(confidence, color="black", linewidth=0.8, label=f"nominal {confidence:g}")
    if mark is not None:
        ax.axvline(mark, color="C3", linestyle="--", linewidth=0.8, label=f"n = {mark:,}")
    if x.size > 1 and x.min() > 0 and x.max() / x.min() > 8:
        ax.set_xscale("log")
    ax.set_xlabel(label)
    ax.set_ylabel("coverage")
    ax.legend(fontsize=7, loc="lower right")
    label_scales(fig)
    return _png(fig)


def margin_png(values: Any, weights: Any, *, target: float | None) -> bytes:
    """Histogram of the achieved half-width with the target margin: a small PNG."""
    v = np.asarray(values, dtype=float)
    w = None if weights is None else np.asarray(weights, dtype=float)
    fig = _figure()
    ax = fig.add_subplot()
    ax.hist(v, bins=40, weights=w, color="C0", alpha=0.8)
    if target is not None:
        ax.axvline(target, color="black", linewidth=0.9, label=f"target margin {target:g}")
        ax.legend(fontsize=7)
    ax.set_xlabel("achieved half-width")
    ax.set_ylabel("weight" if w is not None else "replicates")
    label_scales(fig)
    return _png(fig)
