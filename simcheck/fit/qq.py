"""Q-Q figure of fitted candidates against the pilot values."""

from __future__ import annotations

import textwrap

from pathlib import Path

import numpy as np

from simcheck.fit import FitResult


def qq_points(values: np.ndarray, candidate) -> tuple[np.ndarray, np.ndarray]:
    """(fitted quantiles, sorted values) at the plotting positions (i - 0.5) / n.

    References
    ----------
    Wilk, M. B. and Gnanadesikan, R. (1968). Probability plotting methods for
    the analysis of data. Biometrika 55, 1-17.
    """
    xs = np.sort(values)
    q = (np.arange(1, xs.size + 1) - 0.5) / xs.size
    return np.asarray(candidate.ppf(q), dtype=float), xs


def qq_figure(result: FitResult, models: int = 4):
    """A Figure with one Q-Q panel per ranked model (at most ``models``), best first."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    shown = result.models[:models]
    cols = min(len(shown), 2)
    rows = (len(shown) + cols - 1) // cols
    fig = Figure(figsize=(3.4 * cols, 3.1 * rows), layout="constrained")
    FigureCanvasAgg(fig)
    for i, m in enumerate(shown):
        ax = fig.add_subplot(rows, cols, i + 1)
        fq, xs = qq_points(result.values, m.candidate)
        lo, hi = float(min(fq.min(), xs.min())), float(max(fq.max(), xs.max()))
        ax.plot([lo, hi], [lo, hi], color="0.5", linewidth=0.8, linestyle="--")
        ax.plot(fq, xs, "o", markersize=3.5, color="#0072B2")
        ax.set_title(f"{i + 1}. {m.model} (AIC {m.aic:.1f})", fontsize=9)
        ax.set_xlabel("fitted quantile", fontsize=8)
        ax.set_ylabel("pilot value", fontsize=8)
        ax.tick_params(labelsize=7)
    # the source can be a long path: wrap it to the figure's width instead of cutting it off
    title = textwrap.fill(f"Q-Q: {result.source}, n = {result.n}", width=max(30, int(14 * 3.4 * cols)))
    fig.suptitle(title, fontsize=9)
    return fig


def save_qq(result: FitResult, path: str | Path, models: int = 4) -> Path:
    """Draw :func:`qq_figure` and write it to ``path`` (format from the suffix)."""
    path = Path(path)
    fig = qq_figure(result, models)
    fig.savefig(path, dpi=150)
    return path
