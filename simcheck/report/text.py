"""The words of a report: labels, number formatting, model descriptions, the methods paragraph.

All text is produced from the numbers; nothing here draws random numbers.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import TYPE_CHECKING, Any, Mapping, Sequence

from simcheck.bound_text import coverage_words, target_sentences
from simcheck import __version__

if TYPE_CHECKING:  # the study module imports this one
    from simcheck.report.study import StudyResults


ESTIMAND_TEXT = {
    "mean": "the mean",
    "proportion": "the proportion",
    "mean-diff": "the difference of two means (group a minus group b)",
    "proportion-diff": "the difference of two proportions (group a minus group b)",
}




def estimand_text(estimand: str, data: dict | None = None) -> str:
    """Words for an estimand: built-in ones from ESTIMAND_TEXT, registered ones from their spec
    (given the design's dict ``data``, e.g. "the 0.9 quantile")."""
    from simcheck.estimands import spec_for

    spec = spec_for(estimand)
    return ESTIMAND_TEXT.get(estimand) or (spec.words(data) if spec is not None else estimand)


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
    "land": "Land's exact (H-based)",
    "chen-modified-t": "Chen's modified-t",
    "chebyshev": "Chebyshev (Cantelli)",
    "grice-bain": "gamma-based (Grice–Bain)",
    "bootstrap": "rescaled (Rao–Wu) stratified bootstrap",
}


def method_text(name: str) -> str:
    """A method's name as written in prose: the table above, else the registered method's ``prose``."""
    if name in METHOD_TEXT:
        return METHOD_TEXT[name]
    from simcheck.intervals import REGISTRY

    return next((m.prose for (_, n), m in REGISTRY.items() if n == name and m.prose), name)


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
    d = min(mcse_digits(se), 4)
    # an MCSE below the last shown digit (shares near 0 or 1) is written as a bound, not as 0.00002
    mc = f"< {10.0 ** -d:.{d}f}" if se < 0.5 * 10.0 ** -d else f"{se:.{d}f}"
    return f"{value:.{d}f}, MCSE {mc}" if inline else f"{value:.{d}f} (MCSE {mc})"


# ---------------------------------------------------------------------------
# wording
# ---------------------------------------------------------------------------
def join_words(words: Sequence[str]) -> str:
    words = list(words)
    if len(words) <= 1:
        return "".join(words)
    return ", ".join(words[:-1]) + " and " + words[-1]


MODEL_TEXT = {
    "normal": "a normal distribution",
    "lognormal": "a lognormal distribution",
    "gamma": "a gamma distribution",
    "exponential": "an exponential distribution",
    "weibull": "a Weibull distribution",
    "beta": "a beta distribution",
    "uniform": "a uniform distribution",
    "truncated-normal": "a truncated normal distribution (parameters of the parent normal)",
    "student-t": "a Student t distribution",
    "categorical": "a categorical distribution",
    "bernoulli": "a Bernoulli (0/1) distribution",
    "poisson": "a Poisson distribution",
    "negative-binomial": "a negative binomial distribution",
}


def _params_text(d: Mapping[str, Any], skip: Sequence[str] = ()) -> str:
    """'mean 6 and CV 1.2' from the plain (non-nested) parameters of a model table."""
    drop = {"model", "true_mean", "true_sd", "true_skewness", "true_value_note", *skip}
    parts = []
    for k, v in d.items():
        if k in drop or isinstance(v, dict):
            continue
        if isinstance(v, list):
            v = "(" + ", ".join(fmt_g(x) for x in v) + ")"
        else:
            v = fmt_g(v)
        parts.append(f"{PARAM_TEXT.get(k, k.replace('_', ' '))} {v}")
    return join_words(parts)


def _scipy_text(d: Mapping[str, Any]) -> str:
    """'a gamma distribution (scipy.stats.gamma) with shape a 2 and scale 3': the shape
    parameters by their scipy names, in words."""
    name = str(d.get("distribution", "distribution"))
    shapes: list[str] = []
    try:
        import scipy.stats

        dist = getattr(scipy.stats, name, None)
        if dist is not None and getattr(dist, "shapes", None):
            shapes = [t.strip() for t in dist.shapes.split(",")]
    except ImportError:  # scipy is a dependency; this only guards odd installs
        shapes = []
    parts = []
    for i, a in enumerate(d.get("args") or []):
        label = f"shape {shapes[i]}" if i < len(shapes) else ("location" if i == len(shapes) else "scale")
        parts.append(f"{label} {fmt_g(a)}")
    for k, v in (d.get("kwds") or {}).items():
        parts.append(f"{'location' if k == 'loc' else k} {fmt_g(v)}")
    text = f"a {name} distribution (scipy.stats.{name})"
    return text + (f" with {join_words(parts)}" if parts else "")


def _event_text(d: Mapping[str, Any]) -> str:
    inner = describe_model(d.get("inner") or {})
    if d.get("event_values") is not None:
        vals = [fmt_g(v) for v in d["event_values"]]
        what = f"equals {vals[0]}" if len(vals) == 1 else f"is one of {join_words(vals).replace(' and ', ' or ')}"
    else:
        what = f"exceeds {fmt_g(d.get('event_above'))}"
    return f"a 0/1 indicator that a value from {inner} {what}"


def describe_model(d: Mapping[str, Any]) -> str:
    """The data model in words, from a model's ``to_dict()``.

    'a lognormal distribution with mean 6 and CV 1.2'; an event model reads
    'a 0/1 indicator that a value from <model> exceeds 250'; a scipy.stats
    distribution names its shape parameters instead of listing ``args``.
    """
    if not d:
        return "the assumed data model"
    name = str(d.get("model", "model"))
    if name == "event":
        return _event_text(d)
    if name == "scipy":
        return _scipy_text(d)
    if name == "zero-inflated":
        return (f"a zero-inflated model: zero with probability {fmt_g(d.get('zero_prob'))}, otherwise "
                f"{describe_model(d.get('inner') or {})}")
    if name == "mixture":
        comps = d.get("components") or []
        weights = d.get("weights") or []
        parts = [f"{describe_model(c)} (weight {fmt_g(w)})" for c, w in zip(comps, weights)]
        return "a mixture of " + join_words(parts)
    if name == "empirical":
        return (f"the pilot values in column {d.get('column', '?')} of {Path(str(d.get('file', '?'))).name}, "
                f"resampled with replacement")
    text = MODEL_TEXT.get(name) or (f"an {name} distribution" if name[:1].lower() in "aeiou" else f"a {name} distribution")
    params = _params_text(d)
    return text + (f" with {params}" if params else "")


def ratio_text(ratio: float | None) -> str:
    """'groups of equal size' for ratio 1, else 'group b 1.5 times the size of group a'."""
    r = 1.0 if ratio is None else float(ratio)
    if math.isclose(r, 1.0, rel_tol=0, abs_tol=1e-12):
        return "groups of equal size"
    return f"group b {fmt_g(r)} times the size of group a"


def strata_text(data: Mapping[str, Any]) -> str:
    """'3 strata sampled without replacement: north (N = 4,000), a lognormal ...; ...' from Design.to_dict()."""
    parts = [f"{s['name']} (N = {s['size']:,}), {describe_model(s['data'])}" for s in data["strata"]]
    rule = data.get("allocation", {}).get("rule", "proportional")
    rule = {"neyman": "Neyman", "optimum": "optimum (cost-weighted)"}.get(rule, rule)
    return (f"{len(parts)} {'stratum' if len(parts) == 1 else 'strata'}, each sampled without replacement and the total n allocated by "
            f"{rule} allocation: " + "; ".join(parts))


def _paired(data: Mapping[str, Any]) -> bool:
    """Pairs of two measurements (paired estimands): two margins and no group-size ratio."""
    return "data_a" in data and "ratio" not in data


def model_text(data: Mapping[str, Any]) -> str:
    if "strata" in data:
        return strata_text(data)
    if "selection" in data:
        return selection_text(data)
    if _paired(data):
        return (f"{describe_model(data['data_a'])} for the first measurement (a) and "
                f"{describe_model(data['data_b'])} for the second (b) of each pair, the two joined by a Gaussian "
                f"copula whose normal scores have correlation {fmt_g(data.get('correlation', 0.0))}")
    if "data_a" in data:
        return (f"{describe_model(data['data_a'])} in group a and {describe_model(data['data_b'])} in group b "
                f"({ratio_text(data.get('ratio', 1.0))})")
    return describe_model(data.get("data", {}))


def selection_text(data: Mapping[str, Any]) -> str:
    """The population of a selection design (PPS or monetary-unit) in words."""
    sel, pop = data["selection"], data.get("population", {})
    items = f"{fmt_g(pop.get('size'))} items"
    if sel["rule"] == "monetary-unit":
        books = describe_model(sel["size"]) if "size" in sel else f"column '{pop.get('column')}' of the population file"
        t = sel.get("taint")
        taint = describe_model(t) if isinstance(t, Mapping) else fmt_g(t)
        return (f"a ledger of {items} with book values from {books}, each item misstated with probability "
                f"{fmt_g(sel.get('error_rate'))} by a share of its book value (taint) from {taint}")
    if "size" in sel:
        what = "value per unit of size" if sel.get("data_per_size", True) else "value"
        return f"{items} with sizes from {describe_model(sel['size'])} and a {what} from {describe_model(data.get('data', {}))}"
    return f"{items} with the sizes in column '{sel.get('size_column')}' and the values in column '{pop.get('column')}' of the population file"


#: how the stratified evaluator computes each method (simcheck.engine.stratified)
STRATIFIED_METHOD_TEXT = {
    "t": "stratified t interval (Satterthwaite degrees of freedom)",
    "z": "stratified normal (z) interval",
    "wald": "stratified Wald interval",
}


def interval_text(methods: Sequence[str], confidence: float, stratified: bool = False,
                  bound: str = "two-sided") -> str:
    texts = STRATIFIED_METHOD_TEXT if stratified else {}
    names = join_words([texts.get(m) or method_text(m) for m in methods])
    if bound != "two-sided":
        # "the one-sided 95% Land's exact (H-based) upper limit"
        kind = f"{bound} limit" if len(methods) == 1 else f"{bound} limits"
        return f"the one-sided {fmt_pct(confidence)} {names} {kind}"
    kind = "interval" if len(methods) == 1 and not stratified else ("intervals" if len(methods) > 1 else "")
    return f"the two-sided {fmt_pct(confidence)} {names}{' ' + kind if kind else ''}"


# ---------------------------------------------------------------------------
# decision status
# ---------------------------------------------------------------------------
def decision_status(r) -> str:
    """'clear', 'undecided' or 'not reached' for a SearchResult.

    A search that spent its replicate budget before the Monte Carlo error
    settled the answer is undecided even where an older search left
    ``decision`` at its default (its ``stop_reason`` says so).
    """
    if r is None:
        return "–"
    if getattr(r, "decision", "clear") == "undecided" or r.stop_reason == "replicate budget spent":
        return "undecided"
    if not r.reached:
        return "not reached"
    return "clear"


def cell_outcome(row: Mapping[str, Any]) -> str:
    """'clear', 'undecided', 'undecided-none' (no n) or 'not reached' for one sweep row."""
    def val(k):
        v = row.get(k)
        return None if v is None or (isinstance(v, float) and math.isnan(v)) else v

    n = val("n")
    undecided = val("decision") == "undecided" or val("stop_reason") == "replicate budget spent"
    if undecided:
        return "undecided" if n is not None else "undecided-none"
    if val("reached") is False or (val("reached") is not None and not bool(val("reached"))) or n is None:
        return "not reached"
    return "clear"


STATUS_TEXT = {
    "clear": "clear",
    "undecided": "undecided (replicate budget spent)",
    "not reached": "not reached by the search ceiling",
}


def explain_note(note: str, discrete: bool, exact: bool = False) -> str:
    """A search note with its wiggle explained: oscillation for discrete data,
    Monte Carlo noise for simulated continuous data (an exact path's
    oscillation is real: an order-statistic interval's ranks change in steps)."""
    if "coverage oscillates in n" not in note or discrete or exact:
        return note
    return note.replace("(coverage oscillates in n)", "(Monte Carlo noise: the data are continuous, so the true "
                        "coverage changes smoothly with n)").replace(
        "coverage oscillates in n", "the estimates wiggle by Monte Carlo noise (continuous data)")


def wiggle_sentence(n_first: int, n: int, discrete: bool, exact: bool) -> str:
    """Why the targets first hold at ``n_first`` but the answer is ``n``."""
    if discrete or exact:
        how = "exactly" if exact else "by simulation"
        why = "Because the data are discrete, coverage" if discrete else "Coverage"
        return (f"{why} oscillates in n (computed {how}): the targets first hold "
                f"at n = {n_first:,} but hold for every larger n only from n = {n:,}, which is the answer given.")
    return (f"The targets first appear to hold at n = {n_first:,}; the data are continuous, so the true coverage changes "
            f"smoothly with n and the ups and downs between {n_first:,} and {n:,} are Monte Carlo noise; the answer "
            f"given is n = {n:,}, from which the targets hold for every larger n checked.")


# ---------------------------------------------------------------------------
# the methods paragraph, sentence group by sentence group
# ---------------------------------------------------------------------------
def _n_unit(s: StudyResults) -> str:
    return "clusters" if "clusters" in s.data else "pairs" if _paired(s.data) else "observations"


def _bound(s: StudyResults) -> str:
    return s.data.get("bound", "two-sided")


def _lim(s: StudyResults) -> str:
    return "interval" if _bound(s) == "two-sided" else "limit"


def _design_sentences(s: StudyResults) -> list[str]:
    lead = ("The population was assumed to consist of" if "strata" in s.data or "selection" in s.data
            else "Data were assumed to follow")
    parts = [f"{lead} {model_text(s.data)}."]
    if s.estimand in ("rate", "rate-ratio", "rate-diff"):
        # the data model is the count of one unit; the rate divides by its exposure
        expo = s.data.get("exposure") or 1.0
        parts.append(f"Each unit contributed an event count from that model over an exposure of {fmt_g(expo)}; "
                     f"the rate is the total count divided by the total exposure.")
    parts += target_sentences(s.data, s.confidence, s.margin)
    if "clusters" in s.data:
        cl = s.data["clusters"]
        size = cl.get("size", cl.get("size_mean"))
        parts.append(f"Observations came in clusters of {fmt_g(size)} with intracluster correlation {fmt_g(cl.get('icc'))}; "
                     f"n counts clusters.")
        if cl.get("count") is not None:
            parts.append(f"Clusters were drawn without replacement from {fmt_g(cl['count'])} clusters, with the "
                         f"first-stage finite population correction on the cluster-t interval.")
    if "selection" in s.data:
        parts.append("Each sample drew n items with replacement, each draw picking an item with probability "
                     "proportional to its size (book value); the population was fixed once (drawn from the models or "
                     "read from the file) and the true value is its total.")
    elif "population" in s.data:
        parts.append(f"Samples were drawn without replacement from a finite population of "
                     f"{fmt_g(s.data['population'].get('size'))} units.")
        if s.data["population"].get("events") is not None:
            parts.append(f"The population held exactly {fmt_g(s.data['population']['events'])} units with the event.")
    return parts


def _simulation_sentences(s: StudyResults) -> list[str]:
    est = estimand_text(s.estimand, dict(s.data))
    any_exact = any(c.exact for c in s.checks.values()) or any(r.exact for r in s.searches.values())
    all_exact = bool(s.searches) and all(r.exact for r in s.searches.values())
    if all_exact:
        how = _exact_how(s)
        return [f"For each candidate sample size n, coverage of {interval_text(s.methods, s.confidence, 'strata' in s.data, _bound(s))} for {est} "
                f"was computed exactly {how} instead of by simulation, so it carries no Monte Carlo error."]
    if "data_a" in s.data and not _paired(s.data):
        ratio = float(s.data.get("ratio", 1.0) or 1.0)
        what = ("n observations in each of two groups of equal size" if ratio_text(ratio) == "groups of equal size"
                else f"n observations in group a and {fmt_g(ratio)} × n (rounded up) in group b")
    else:
        what = f"n {_n_unit(s)}"
    return [f"For each candidate sample size n the search drew independent samples of {what} (at least "
            f"{s.replicates:,} per n) and computed {interval_text(s.methods, s.confidence, 'strata' in s.data, _bound(s))} "
            f"for {est} in each.",
            ("Coverage is the share of intervals that contained the true value" if _bound(s) == "two-sided"
             else f"Coverage is the {coverage_words(_bound(s))}") + "; its Monte Carlo standard "
            "error (MCSE) is sqrt(c(1 − c)/R) for coverage c estimated from R samples"
            + (" (methods with an exact path were enumerated instead)." if any_exact else ".")]


def _exact_how(s: StudyResults) -> str:
    """How an exact path computed the measures, in words."""
    from simcheck.estimands import spec_for
    from simcheck.intervals.base import lookup

    if s.estimand in ("proportion", "proportion-diff"):
        return "by enumerating the binomial distribution of the event count"
    spec = spec_for(s.estimand)
    if spec is None:
        return "from the sampling law of the sample mean and variance"
    texts = [m.exact_text for name in s.methods if (m := lookup(s.estimand, name)) is not None and m.exact_text]
    if texts:
        return join_words(list(dict.fromkeys(texts)))
    if spec.zero_one:
        return "by enumerating the binomial distributions of the event counts" + (" in both groups" if spec.data == "two" else "")
    if spec.counts:
        return "by enumerating the law of the total event count" + (" in each group" if spec.data == "two" else "")
    return "from the exact sampling law of the statistic under the data model"


def _formula_sentence(s: StudyResults) -> str:
    f = s.formula or {}
    kind = f.get("multiplier_kind", "z")
    deff = f.get("design_effect")
    extra = f", design effect {float(deff):.3g}" if deff not in (None, 1, 1.0) else ""
    fc = [(m, s.formula_checks[m]) for m in s.methods if m in s.formula_checks]
    nf_unit = " clusters" if _n_unit(s) == "clusters" else ""
    what = "half-width" if _bound(s) == "two-sided" else "margin"
    if s.data.get("scale") == "ratio":
        what = "margin factor"
    text = (f"The closed-form formula ({kind} multiple{extra}) gives n = {s.n_formula:,}{nf_unit} for a "
            f"{what} of {fmt_g(s.margin)}")
    if not fc:
        return text + "."
    said = []
    for m, c in fc:
        a = f" and assurance {c.assurance:.3f}" if c.assurance is not None else ""
        who = f" with the {method_text(m)} {_lim(s)}" if len(s.methods) > 1 else ""
        said.append(f"coverage {fmt_estimate(c.coverage, c.coverage_mcse, c.exact)}{a}{who}")
    reps = {c.replicates for _, c in fc if not c.exact}
    gave = ("the exact computation gave" if not reps
            else f"the simulation ({', '.join(f'{x:,}' for x in sorted(reps))} samples) gave")
    return text + f"; at that n {gave} " + "; ".join(said) + "."


def _criterion_sentences(s: StudyResults) -> list[str]:
    crit = [f"coverage at least {fmt_g(round(s.confidence - s.coverage_tolerance, 6))} (the nominal "
            f"{fmt_g(s.confidence)} less a tolerance of {fmt_g(s.coverage_tolerance)})"]
    if s.assurance is not None and s.margin is not None:
        crit.append(f"an assurance of at least {fmt_g(s.assurance)}")
    parts = [f"We searched n from {s.n_min:,} to {s.n_max:,} for the smallest n with {join_words(crit)}."]
    texts = []
    for r in s.searches.values():
        t = (getattr(r, "criterion_text", "") or "").strip()
        if t and t not in texts:
            texts.append(t)
    parts += [criterion_sentence(t) for t in texts]
    return parts


def criterion_sentence(text: str) -> str:
    """The search's criterion as a sentence: 'The answer n is the smallest n at which ...'."""
    t = " ".join(str(text).split()).rstrip(".").replace("n_range", "the n range")
    if not t:
        return ""
    if t.lower().startswith("n is "):
        t = t[5:]
    if t.lower().startswith(("the smallest", "the largest", "smallest", "the first")):
        t = "the " + t if t.lower().startswith("smallest") else t
        return f"The answer n is {t[0].lower() + t[1:]}."
    return t[0].upper() + t[1:] + "."


def _figures_text(s: StudyResults, m: str, r) -> str:
    """'coverage 0.946, MCSE 0.0006, assurance 1.000; from 140,000 fresh samples at that n, ...'"""
    c = s.checks.get(m)
    if r.exact:
        txt = f"exact coverage {r.coverage:.4f}" if r.coverage is not None else "exact"
        return txt + (f", assurance {r.assurance:.4f}" if r.assurance is not None else "")
    txt = f"coverage {fmt_estimate(r.coverage, r.coverage_mcse, r.exact, inline=True)}"
    if r.assurance is not None:
        txt += f", assurance {fmt_estimate(r.assurance, r.assurance_mcse, r.exact, inline=True)}"
    if not r.exact:
        if c is not None and c.n == r.n:
            txt += f"; from {c.replicates:,} fresh samples at that n, {r.replicates_used:,} simulated in the whole search"
        else:
            txt += f"; {r.replicates_used:,} samples simulated in the whole search"
    return txt


def _result_sentences(s: StudyResults, m: str) -> list[str]:
    r = s.searches.get(m)
    if r is None:
        return []
    status = decision_status(r)
    who = f"With the {method_text(m)} {_lim(s)} the" if len(s.methods) > 1 else "The"
    if r.n is None:
        txt = f"{who} targets were not met by any n up to {s.n_max:,}"
        if status == "undecided":
            txt = f"{who} search was undecided: the replicate budget was spent before any n was confirmed"
        if r.best_coverage is not None and r.best_coverage_n is not None:
            txt += f" (highest coverage {r.best_coverage:.3f} at n = {r.best_coverage_n:,})"
        return [txt + "."]
    group = ("" if r.n_b is None else " in each group" if r.n_b == r.n
             else f" in group a and {r.n_b:,} in group b")
    if status == "undecided":
        txt = (f"{who} search was undecided: its replicate budget was spent before the Monte Carlo error settled "
               f"the answer; the n it gives is {r.n:,}{group}")
    else:
        txt = f"{who} smallest such n was {r.n:,}{group}"
    txt += f" ({_figures_text(s, m, r)})"
    if r.n_range is not None and r.n_range[0] != r.n_range[1]:
        txt += f"; sample sizes from {r.n_range[0]:,} to {r.n_range[1]:,} are consistent with the Monte Carlo error"
    out = [txt + "."]
    if status == "undecided" and getattr(r, "replicates_needed", None):
        out.append(f"About {r.replicates_needed:,} replicates per n would likely settle it.")
    return out


def _wiggle_sentences(s: StudyResults) -> list[str]:
    """Why the targets first held at a smaller n than the answer: said once for all methods."""
    late = [(m, r) for m in s.methods if (r := s.searches.get(m)) is not None and r.n is not None
            and r.n_first is not None and r.n_first != r.n]
    if not late:
        return []
    if len(late) == 1 or len(s.methods) == 1:
        m, r = late[0]
        text = wiggle_sentence(r.n_first, r.n, s.discrete, r.exact)
        if len(s.methods) > 1:
            text = f"With the {method_text(m)} interval, {text[0].lower() + text[1:]}"
        return [text]
    firsts = join_words([f"{method_text(m)} {r.n_first:,}" for m, r in late])
    if s.discrete or all(r.exact for _, r in late):
        how = "exactly" if all(r.exact for _, r in late) else "by simulation"
        why = "Because the data are discrete, coverage" if s.discrete else "Coverage"
        return [f"{why} oscillates in n (computed {how}): the targets first hold at "
                f"a smaller n ({firsts}) but hold for every larger n only from the n given above."]
    return [f"The targets first appear to hold at a smaller n ({firsts}); the data are continuous, so the true "
            f"coverage changes smoothly with n and the ups and downs below the n given are Monte Carlo noise."]


def _fewest_sentence(s: StudyResults) -> str | None:
    """Which method needs the fewest n: a fact for the reader, not a choice made for them."""
    found = [(s.searches[m].n, m) for m in s.methods
             if m in s.searches and s.searches[m].n is not None and s.searches[m].reached]
    if len(s.methods) < 2 or not found:
        return None
    n_min = min(n for n, _ in found)
    fewest = [m for n, m in found if n == n_min]
    names = join_words([f"the {method_text(m)} {_lim(s)}" for m in fewest])
    per = ""
    if "data_a" in s.data and not _paired(s.data):
        per = " per group" if ratio_text(s.data.get("ratio", 1.0)) == "groups of equal size" else " in group a"
    txt = f"Of the methods compared, {names} needed the fewest {_n_unit(s)} (n = {n_min:,}{per})"
    if any(decision_status(s.searches[m]) == "undecided" for m in fewest):
        txt += ", although that answer is undecided"
    return txt + "; which interval to use remains the analyst's choice."


def methods_paragraph(study: StudyResults) -> str:
    """A ready-to-paste paragraph: what was simulated, how, what the search found and how sure it is."""
    s = study
    how = ("by exact computation" if s.searches and all(r.exact for r in s.searches.values())
           else "by simulation")
    parts = [f"We checked the planned sample size {how} (simcheck {s.versions.get('simcheck', __version__)}; "
             f"NumPy {s.versions.get('numpy', '?')}, SciPy {s.versions.get('scipy', '?')})."]
    parts += _design_sentences(s)
    parts += _simulation_sentences(s)
    if s.margin is not None and s.data.get("scale") == "ratio":
        # what a factor means is said with the design (bound_text.target_sentences)
        parts.append(f"Assurance is the share of samples whose margin factor was at most the target of {fmt_g(s.margin)}.")
    elif s.margin is not None and _bound(s) == "two-sided":
        parts.append(f"The achieved margin of error is half the width of each interval; assurance is the share of "
                     f"samples whose half-width was at most the target of {fmt_g(s.margin)}.")
    if s.n_formula is not None:
        parts.append(_formula_sentence(s))
    parts += _criterion_sentences(s)
    for m in s.methods:
        parts += _result_sentences(s, m)
    parts += _wiggle_sentences(s)
    fewest = _fewest_sentence(s)
    if fewest:
        parts.append(fewest)
    if s.searches and all(r.exact for r in s.searches.values()) and all(c.exact for c in s.checks.values()):
        parts.append("No random numbers were needed: every figure here is exact.")
    elif s.seed is not None:
        parts.append(f"All random numbers derive from the seed {s.seed}, so every number here can be reproduced exactly.")
    else:
        parts.append("No seed was fixed, so a rerun gives slightly different numbers.")
    parts.append("These results hold only under the assumed data model.")
    return " ".join(parts)


# ---------------------------------------------------------------------------
# labels for figures and tables
# ---------------------------------------------------------------------------
#: readable names of scenario keys that sweeps vary (axis labels, table headers)
KEY_LABELS = {
    "data.cv": "CV of the data",
    "data.mean": "Mean of the data",
    "data.sd": "SD of the data",
    "data.p": "Event probability",
    "data.shape": "Shape of the data",
    "data.scale": "Scale of the data",
    "data.meanlog": "Log-scale mean of the data",
    "data.sdlog": "Log-scale SD of the data",
    "data.df": "Degrees of freedom of the data",
    "data.zero_prob": "Share of zeros",
    "data.dispersion": "Dispersion of the data",
    "target.margin": "Target margin (half-width)",
    "data.correlation": "Correlation of the normal scores of a pair",
    "target.quantile": "Quantile estimated",
    "target.exposure": "Exposure per unit",
    "target.confidence": "Confidence level",
    "target.assurance": "Required assurance",
    "target.coverage_tolerance": "Coverage tolerance",
    "method.interval": "Interval method",
    "method": "Interval method",
    "method.resamples": "Bootstrap resamples",
    "clusters.icc": "Intracluster correlation (ICC)",
    "clusters.size": "Cluster size",
    "clusters.size_mean": "Mean cluster size",
    "clusters.size_cv": "CV of the cluster sizes",
    "population.size": "Population size",
    "population.events": "Events in the population",
    "clusters.count": "Clusters in the population",
    "simulation.ratio": "Allocation ratio n_b / n_a",
    "simulation.replicates": "Replicates",
    "n": "Sample size n",
}

_FIELD_WORDS = {"cv": "CV", "sd": "SD", "mean": "mean", "p": "event probability", "icc": "ICC"}


def key_label(key: str) -> str:
    """A readable name for a scenario key: 'CV of the data' for ``data.cv``,
    'SD of group b' for ``data.b.sd``; unknown keys keep their dotted name."""
    if key in KEY_LABELS:
        return KEY_LABELS[key]
    parts = key.split(".")
    if len(parts) == 3 and parts[0] == "data" and parts[1] in ("a", "b"):
        word = _FIELD_WORDS.get(parts[2], parts[2].replace("_", " "))
        return f"{word[0].upper() + word[1:]} of group {parts[1]}"
    if len(parts) == 2 and parts[0] == "data":
        word = _FIELD_WORDS.get(parts[1], parts[1].replace("_", " "))
        return f"{word[0].upper() + word[1:]} of the data"
    return key


def n_axis_label(design) -> str:
    if design.clusters is not None:
        return "Sample size n (clusters)"
    if design.two_sample:
        return "Sample size n (observations in group a)"
    if design.paired:
        return "Sample size n (pairs)"
    return "Sample size n (observations)"


def value_axis_label(scenario, units: str | None = None) -> str:
    units = units or scenario.design.units
    if scenario.design.ratio_scale:
        return "Achieved margin as a factor (interval within estimate ÷ f to × f)"
    if scenario.design.bound != "two-sided":
        return f"Achieved margin, limit to estimate ({units or 'data units'})"
    if units:
        return f"Achieved half-width ({units})"
    if scenario.design.estimand in ("proportion", "proportion-diff"):
        return "Achieved half-width (proportion)"
    return "Achieved half-width (data units)"
