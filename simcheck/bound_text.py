"""Words for one-sided limits, relative margins, demonstration plans and units.

Pure text helpers shared by the command-line tables and the methods
paragraph. ``data`` is ``Design.to_dict()`` (it carries ``bound``, ``units``,
``relative_margin``, ``limit`` and ``events_allowed`` when they are set).
"""

from __future__ import annotations

from typing import Any, Mapping, Sequence

__all__ = ["units_text", "bound_words", "target_sentences", "result_lines", "coverage_words"]

NO_UNITS = "in the data's units"


def units_text(units: str | None) -> str:
    """"in mg/L", or "in the data's units" when no units were given (never invented)."""
    return f"in {units}" if units else NO_UNITS


def bound_words(bound: str) -> str:
    """"interval", "upper confidence limit" or "lower confidence limit"."""
    return {"upper": "upper confidence limit", "lower": "lower confidence limit"}.get(bound, "interval")


def coverage_words(bound: str) -> str:
    """What coverage counts, for the bound."""
    if bound == "upper":
        return "share of upper limits at or above the true value"
    if bound == "lower":
        return "share of lower limits at or below the true value"
    return "share of intervals that contain the true value"


def target_sentences(data: Mapping[str, Any], confidence: float, margin: float | None) -> list[str]:
    """Methods-paragraph sentences on the bound, the margin's meaning, units and plans."""
    bound = data.get("bound", "two-sided")
    units = data.get("units")
    out = []
    if bound != "two-sided":
        side = "at or above" if bound == "upper" else "at or below"
        out.append(f"The target is a one-sided {bound} {confidence:g} confidence limit: coverage is the share of "
                   f"limits {side} the true value (only one side can miss), and the achieved margin is the distance "
                   f"from the sample estimate to the limit, its counterpart of a half-width.")
    if data.get("scale") == "ratio":
        out.append("Margins are factors: an achieved margin f means the interval runs from the estimate divided by f "
                   "to the estimate multiplied by f (f is the exponential of the half-width on the log scale); the "
                   "mean margin is the geometric mean of the factors.")
    elif data.get("relative_margin") is not None:
        abs_m = "" if margin is None else f" (that is {margin:.4g} {units_text(units)})"
        out.append(f"The target margin is {data['relative_margin']:g} of the true value{abs_m}; achieved "
                   f"margins are also reported relative to the true value.")
    elif margin is not None:
        out.append(f"Margins are {units_text(units)}.")
    if data.get("limit") is not None:
        c = int(data.get("events_allowed") or 0)
        out.append(f"The demonstration plan passes when at most {c} event{'s' if c != 1 else ''} occur, which keeps "
                   f"the one-sided exact upper limit below {data['limit']:g}; the chance of passing is the binomial "
                   f"probability of at most {c} event{'s' if c != 1 else ''} at the planning proportion.")
    return out


def result_lines(rows: Sequence[Any], units: str | None) -> list[str]:
    """Extra lines under a check/curve table: margin at assurance, relative margins, plans."""
    out: list[str] = []
    if len(rows) > 12:  # a long curve table: the JSON output carries these per row
        return out
    u = f" {units}" if units else ""
    for r in rows:
        bits = []
        if r.margin_at_assurance is not None and r.assurance_level is not None:
            bits.append(f"{r.assurance_level:.0%} of samples give a margin <= {r.margin_at_assurance:.4g}{u}")
        if r.target_relative_margin is not None and r.relative_margin_at_assurance is not None:
            bits.append(f"relative margin median {r.relative_margin_median:.3f}, at assurance "
                        f"{r.relative_margin_at_assurance:.3f} (target {r.target_relative_margin:g})")
        if r.pass_probability is not None:
            c = r.events_allowed or 0
            bits.append(f"chance of passing (at most {c} event{'s' if c != 1 else ''}) {r.pass_probability:.4f}"
                        + (f"; the plan needs n = {r.plan_n}" if r.plan_n is not None else ""))
        if bits:
            out.append(f"n = {r.n}: " + "; ".join(bits))
    return out
