"""The words of a report: labels, number formatting, model descriptions, the methods paragraph.

All text is produced from the numbers; nothing here draws random numbers.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any, Mapping, Sequence

from simcheck import __version__

if TYPE_CHECKING:  # the study module imports this one
    from simcheck.report.study import StudyResults


ESTIMAND_TEXT = {
    "mean": "the mean",
    "proportion": "the proportion",
    "mean-diff": "the difference of two means (group a minus group b)",
    "proportion-diff": "the difference of two proportions (group a minus group b)",
}


# Plain-language names of model parameters in the methods paragraph.
# Published interval names as written in prose.
METHOD_TEXT = {
    "z": "z (known SD)",
    "t": "Student t",
    "welch": "Welch",
    "cox": "Cox lognormal",
    "johnson-t": "skewness-corrected (Johnson) t",
    "bootstrap-percentile": "percentile bootstrap",
    "bootstrap-bca": "bootstrap BCa",
    "bootstrap-t": "bootstrap-t",
    "wald": "Wald",
    "wilson": "Wilson",
    "agresti-coull": "Agresti–Coull",
    "clopper-pearson": "Clopper–Pearson",
    "jeffreys": "Jeffreys",
    "newcombe": "Newcombe",
    "agresti-caffo": "Agresti–Caffo",
    "cluster-t": "cluster-level t",
}


def method_text(name: str) -> str:
    return METHOD_TEXT.get(name, name)


PARAM_TEXT = {
    "cv": "CV",
    "sd": "SD",
    "meanlog": "log-scale mean",
    "sdlog": "log-scale SD",
    "df": "degrees of freedom",
    "p": "event probability",
    "zero_prob": "share of zeros",
}


# ---------------------------------------------------------------------------
# number formatting
# ---------------------------------------------------------------------------
def fmt_num(x: Any, digits: int = 3) -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "–"
    if isinstance(x, bool):
        return "yes" if x else "no"
    if isinstance(x, int):
        return f"{x:,}"
    return f"{float(x):.{digits}f}"


def fmt_g(x: Any) -> str:
    if x is None:
        return "–"
    if isinstance(x, int) and not isinstance(x, bool):
        return f"{x:,}"
    if isinstance(x, float):
        return f"{x:,g}" if abs(x) >= 1000 else f"{x:g}"
    return str(x)


def fmt_pct(x: float | None) -> str:
    return "–" if x is None else f"{100 * x:g}%"


def mcse_digits(se: float | None) -> int:
    """Decimals enough to show the MCSE's first significant digit (at least 3)."""
    if not se or not math.isfinite(se) or se <= 0:
        return 3
    return max(3, min(6, -int(math.floor(math.log10(se)))))


def fmt_estimate(value: float | None, se: float | None, exact: bool | None = False, inline: bool = False) -> str:
    """'0.944 (MCSE 0.002)'; with ``inline`` '0.944, MCSE 0.002' for use inside parentheses."""
    if value is None:
        return "–"
    if exact or not se:
        return f"{value:.{3 if not exact else 4}f}" + ((", exact" if inline else " (exact)") if exact else "")
    d = mcse_digits(se)
    return f"{value:.{d}f}, MCSE {se:.{d}f}" if inline else f"{value:.{d}f} (MCSE {se:.{d}f})"


# ---------------------------------------------------------------------------
# wording
# ---------------------------------------------------------------------------
def join_words(words: Sequence[str]) -> str:
    words = list(words)
    if len(words) <= 1:
        return "".join(words)
    return ", ".join(words[:-1]) + " and " + words[-1]


def describe_model(d: Mapping[str, Any]) -> str:
    """'a lognormal distribution with mean 6 and CV 1.2' from a model's to_dict()."""
    if not d:
        return "the assumed data model"
    name = str(d.get("model", "model"))
    skip = {"model", "true_mean", "true_sd", "true_skewness", "true_value_note"}
    parts = []
    for k, v in d.items():
        if k in skip or isinstance(v, (dict, list)):
            continue
        parts.append(f"{PARAM_TEXT.get(k, k.replace('_', ' '))} {fmt_g(v)}")
    text = f"a {name} distribution" if not name[0:1].lower() in "aeiou" else f"an {name} distribution"
    return text + (f" with {join_words(parts)}" if parts else "")


def strata_text(data: Mapping[str, Any]) -> str:
    """'3 strata sampled without replacement: north (N = 4,000), a lognormal ...; ...' from Design.to_dict()."""
    parts = [f"{s['name']} (N = {s['size']:,}), {describe_model(s['data'])}" for s in data["strata"]]
    rule = data.get("allocation", {}).get("rule", "proportional")
    return (f"{len(parts)} strata, each sampled without replacement and the total n allocated by the "
            f"{rule} rule: " + "; ".join(parts))


def model_text(data: Mapping[str, Any]) -> str:
    if "strata" in data:
        return strata_text(data)
    if "data_a" in data:
        return (f"{describe_model(data['data_a'])} in group a and {describe_model(data['data_b'])} in group b "
                f"(group b {fmt_g(data.get('ratio', 1.0))} times the size of group a)")
    return describe_model(data.get("data", {}))


def interval_text(methods: Sequence[str], confidence: float) -> str:
    names = join_words([method_text(m) for m in methods])
    kind = "interval" if len(methods) == 1 else "intervals"
    return f"the two-sided {fmt_pct(confidence)} {names} {kind}"


def methods_paragraph(study: StudyResults) -> str:
    """A ready-to-paste paragraph: what was simulated, how, and the n chosen and why."""
    s = study
    any_exact = any(c.exact for c in s.checks.values())
    all_exact = bool(s.checks) and all(c.exact for c in s.checks.values())
    est = ESTIMAND_TEXT.get(s.estimand, s.estimand)
    unit = "clusters" if "clusters" in s.data else "observations"
    parts = [f"We checked the planned sample size by simulation (simcheck {s.versions.get('simcheck', __version__)}; "
             f"NumPy {s.versions.get('numpy', '?')}, SciPy {s.versions.get('scipy', '?')})."]
    parts.append(f"Data were assumed to follow {model_text(s.data)}.")
    if "clusters" in s.data:
        cl = s.data["clusters"]
        size = cl.get("size", cl.get("size_mean"))
        parts.append(f"Observations came in clusters of {fmt_g(size)} with intracluster correlation {fmt_g(cl.get('icc'))}; "
                     f"n counts clusters.")
    if "population" in s.data:
        parts.append(f"Samples were drawn without replacement from a finite population of "
                     f"{fmt_g(s.data['population'].get('size'))} units.")
    if all_exact:
        how = ("by enumerating the binomial distribution of the event count"
               if s.estimand in ("proportion", "proportion-diff")
               else "from the sampling law of the sample mean and variance")
        parts.append(f"For each candidate sample size n, coverage of {interval_text(s.methods, s.confidence)} for {est} "
                     f"was computed exactly {how} instead of by simulation, so it carries no Monte Carlo error.")
    else:
        what = (f"n observations in group a and {fmt_g(s.data.get('ratio', 1.0))} × n (rounded up) in group b"
                if "data_a" in s.data else f"n {unit}")
        parts.append(f"For each candidate sample size n we drew {s.replicates:,} independent samples of {what} and "
                     f"computed {interval_text(s.methods, s.confidence)} for {est} in each.")
        parts.append("Coverage is the share of intervals that contained the true value; its Monte Carlo standard "
                     "error (MCSE) is sqrt(c(1 − c)/R) for coverage c estimated from R samples"
                     + (" (methods with an exact path were enumerated instead)." if any_exact else "."))
    if s.margin is not None:
        parts.append(f"The achieved margin of error is half the width of each interval; assurance is the share of "
                     f"samples whose half-width was at most the target of {fmt_g(s.margin)}.")
    if s.n_formula is not None:
        f = s.formula or {}
        kind = f.get("multiplier_kind", "z")
        deff = f.get("design_effect")
        extra = f", design effect {fmt_g(deff)}" if deff not in (None, 1, 1.0) else ""
        fc = [(m, s.formula_checks[m]) for m in s.methods if m in s.formula_checks]
        nf_unit = f" {unit}" if unit == "clusters" else ""
        parts.append(f"The closed-form formula ({kind} multiple{extra}) gives n = {s.n_formula:,}{nf_unit} for a "
                     f"half-width of {fmt_g(s.margin)}" + (";" if fc else "."))
        if fc:
            said = []
            for m, c in fc:
                a = f" and assurance {c.assurance:.3f}" if c.assurance is not None else ""
                who = f" with the {method_text(m)} interval" if len(s.methods) > 1 else ""
                said.append(f"coverage {fmt_estimate(c.coverage, c.coverage_mcse, c.exact)}{a}{who}")
            gave = "the exact computation gave" if all(c.exact for _, c in fc) else "the simulation gave"
            parts[-1] += f" at that n {gave} " + "; ".join(said) + "."
    crit = [f"coverage at least {fmt_g(round(s.confidence - s.coverage_tolerance, 6))} (the nominal "
            f"{fmt_g(s.confidence)} less a tolerance of {fmt_g(s.coverage_tolerance)})"]
    if s.assurance is not None and s.margin is not None:
        crit.append(f"an assurance of at least {fmt_g(s.assurance)}")
    parts.append(f"We searched n from {s.n_min:,} to {s.n_max:,} for the smallest n with {join_words(crit)}.")
    for m in s.methods:
        r = s.searches.get(m)
        if r is None:
            continue
        who = f"With the {method_text(m)} interval the" if len(s.methods) > 1 else "The"
        if r.reached and r.n is not None:
            c = s.checks.get(m)
            cov = (fmt_estimate(c.coverage, c.coverage_mcse, c.exact, inline=True) if c is not None
                   else fmt_estimate(r.coverage, r.coverage_mcse, r.exact, inline=True))
            txt = f"{who} smallest such n was {r.n:,}"
            if r.n_b is not None:
                txt += f" in group a and {r.n_b:,} in group b"
            txt += f" (coverage {cov}"
            if c is not None and not c.exact and c.replicates != s.replicates:
                txt += f", from {c.replicates:,} fresh samples at that n"
            ass = c.assurance if c is not None else r.assurance
            if ass is not None:
                txt += f", assurance {ass:.3f}"
            txt += ")"
            if r.n_range is not None and r.n_range[0] != r.n_range[1]:
                txt += f"; sample sizes from {r.n_range[0]:,} to {r.n_range[1]:,} are consistent with the Monte Carlo error"
            parts.append(txt + ".")
        else:
            txt = f"{who} targets were not met by any n up to {s.n_max:,}"
            if r.best_coverage is not None and r.best_coverage_n is not None:
                txt += f" (highest coverage {r.best_coverage:.3f} at n = {r.best_coverage_n:,})"
            parts.append(txt + ".")
    if len(s.methods) > 1 and s.best:
        best = s.searches.get(s.best)
        if best is not None and best.n is not None:
            parts.append(f"We chose n = {best.n:,} with the {method_text(s.best)} interval, the method that met the targets with "
                         f"the fewest {unit}.")
    if s.seed is not None:
        parts.append(f"All random numbers derive from the seed {s.seed}, so every number here can be reproduced exactly.")
    else:
        parts.append("No seed was fixed, so a rerun gives slightly different numbers.")
    return " ".join(parts)


def n_axis_label(design) -> str:
    if design.clusters is not None:
        return "Sample size n (clusters)"
    if design.two_sample:
        return "Sample size n (observations in group a)"
    return "Sample size n (observations)"


def value_axis_label(scenario, units: str | None = None) -> str:
    if units:
        return f"Achieved half-width ({units})"
    if scenario.design.estimand in ("proportion", "proportion-diff"):
        return "Achieved half-width (proportion)"
    return "Achieved half-width (data units)"
