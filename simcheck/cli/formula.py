"""``simcheck formula``: the closed-form n (the baseline simcheck checks)."""

from __future__ import annotations

import argparse
import sys

from simcheck.cli import formula_estimands
from simcheck.cli.common import emit_json, fmt, table
from simcheck.cli.options import add_closing_options
from simcheck.errors import Collector, InputError
from simcheck.estimands import REGISTRY as ESTIMAND_SPECS
from simcheck.formulas import BOUNDS, ESTIMANDS, demonstration_plan, relative_sample_size, sample_size


def add_parser(subparsers) -> None:
    p = subparsers.add_parser(
        "formula",
        help="closed-form n (the baseline)",
        description=(
            "Closed-form sample size for a confidence interval of half-width at most --margin: "
            "n0 = m^2 V / B^2 (m the z or t multiple, V = sd^2 or p (1 - p)), times the design "
            "effect, then the finite population correction, rounded up. Two-sample estimands "
            "(difference a - b) use n_a = m^2 deff (V_a + V_b / K) / B^2 and n_b = ceil(K n_a). "
            "These formulas assume a normal sampling distribution and a known SD or proportion; "
            "`simcheck check` and `simcheck search` test whether n really delivers the interval."
        ),
    )
    _add_target_options(p)
    _add_design_options(p)
    _add_plan_options(p)
    _add_strata_options(p)
    formula_estimands.add_options(p)
    add_closing_options(p, run)


def _add_target_options(p: argparse.ArgumentParser) -> None:
    """What is estimated, to what margin, and the planning values."""
    p.add_argument("--estimand", choices=ESTIMANDS + ("total",) + tuple(ESTIMAND_SPECS), metavar="E",
                   help="what is estimated: mean, proportion, mean-diff or proportion-diff (difference a - b); "
                        "total (N times the mean; with --stratum, or with --population-size and --sd or --p); "
                        + ", ".join(ESTIMAND_SPECS) + " (their planning values below)")
    p.add_argument("--margin", type=float, metavar="B",
                   help="target half-width of the interval, > 0, in the data's units (0.05 = 5 points for proportions); required")
    p.add_argument("--confidence", type=float, default=0.95, metavar="C",
                   help="confidence level in (0, 1) (default 0.95)")
    p.add_argument("--sd", type=float, metavar="S",
                   help="planning standard deviation of the data (group a); required for mean and mean-diff")
    p.add_argument("--sd-b", dest="sd_b", type=float, metavar="S",
                   help="planning standard deviation of group b (mean-diff; default: the same as --sd)")
    p.add_argument("--p", type=float, metavar="P",
                   help="expected proportion in (0, 1) (group a); default 0.5, the most conservative")
    p.add_argument("--p-b", dest="p_b", type=float, metavar="P",
                   help="expected proportion of group b (proportion-diff; default: the same as --p)")
    p.add_argument("--multiplier", choices=("z", "t"), default="z",
                   help="z (known SD, default) or t: iterate n until t(n-1) * sd / sqrt(n) <= B "
                        "(mean-diff: Welch-Satterthwaite df); means only")


def _add_design_options(p: argparse.ArgumentParser) -> None:
    """Finite populations, clusters, two groups and dropout."""
    p.add_argument("--population-size", dest="population_size", type=float, metavar="N",
                   help="finite population size, a whole number >= 2: applies n0 / (1 + (n0 - 1) / N) (one-sample)")
    p.add_argument("--design-effect", dest="design_effect", type=float, metavar="D",
                   help="design effect given directly (> 0); or give --icc and --cluster-size instead")
    p.add_argument("--icc", type=float, metavar="R",
                   help="intracluster correlation in [0, 1): design effect 1 + (m - 1) ICC (needs --cluster-size)")
    p.add_argument("--cluster-size", dest="cluster_size", type=float, metavar="M",
                   help="(mean) observations per cluster, >= 1; also gives the number of clusters ceil(n / M)")
    p.add_argument("--cluster-size-cv", dest="cluster_size_cv", type=float, metavar="V",
                   help="coefficient of variation of cluster sizes (SD with divisor k), >= 0: "
                        "design effect 1 + ((V^2 + 1) M - 1) ICC")
    p.add_argument("--cluster-count", dest="cluster_count", type=float, metavar="M",
                   help="clusters in the population, a whole number >= 2: clusters drawn without replacement, "
                        "k = k0 / (1 + k0 / M) with k0 = n0 deff / m (needs --icc and --cluster-size; "
                        "not with --population-size)")
    p.add_argument("--ratio", type=float, metavar="K",
                   help="allocation ratio for two-sample estimands: n_b = K * n_a, > 0 (default 1)")
    p.add_argument("--dropout", type=float, metavar="D",
                   help="share of enrolled units lost before analysis, in [0, 1): also reports "
                        "n_enrolled = ceil(n / (1 - D)); n stays the number analysed")


def _add_plan_options(p: argparse.ArgumentParser) -> None:
    """Pilot SDs, one-sided limits, relative margins and demonstration plans."""
    p.add_argument("--pilot-n", dest="pilot_n", type=float, metavar="M",
                   help="the SDs come from a pilot of M (>= 3) values: also reports the n with each SD raised "
                        "to its upper one-sided confidence limit (Browne 1995), side by side (means only)")
    p.add_argument("--pilot-confidence", dest="pilot_confidence", type=float, default=0.8, metavar="L",
                   help="level of that upper confidence limit, in (0, 1) (default 0.8)")
    p.add_argument("--bound", choices=BOUNDS, default="two-sided", metavar="B",
                   help="two-sided (default), upper or lower: a one-sided limit uses the one-sided multiple "
                        "z_{1-alpha} (t_{1-alpha}); the margin is then the distance from the estimate to the limit")
    p.add_argument("--relative-margin", dest="relative_margin", type=float, metavar="R",
                   help="target half-width as a share of the mean, > 0 (0.2 = ±20%%), with --cv: n = (z CV / R)^2; "
                        "instead of --margin and --sd")
    p.add_argument("--cv", type=float, metavar="V",
                   help="planning coefficient of variation SD / mean, > 0 (with --relative-margin)")
    p.add_argument("--limit", type=float, metavar="P0",
                   help="demonstration plan: the smallest n whose upper limit stays below P0 in (0, 1) when at most "
                        "--events-allowed events occur (c = 0: n = ln(alpha) / ln(1 - P0)); --p gives the chance of passing")
    p.add_argument("--events-allowed", dest="events_allowed", type=int, metavar="C",
                   help="demonstration plan: events allowed, whole number >= 0 (default 0)")


def _add_strata_options(p: argparse.ArgumentParser) -> None:
    """A stratified sample: its strata, allocation rule and least n per stratum."""
    p.add_argument("--stratum", action="append", metavar="NAME:SIZE:VALUE[:EXTRA]",
                   help="a stratum of a stratified sample (repeat for each): its name, size N_h, planning SD "
                        "(mean, total) or proportion (proportion), and with --allocation optimum its per-unit "
                        "cost or with --allocation given its n; e.g. --stratum north:4000:35")
    p.add_argument("--allocation", choices=("proportional", "neyman", "optimum", "given"), default=None,
                   help="how the total n is shared among the strata (default proportional)")
    p.add_argument("--minimum", type=int, default=None, metavar="K",
                   help="least n per stratum, >= 2 (default 2)")


def _plan_problems(args: argparse.Namespace) -> None:
    """Refuse option combinations of relative-margin and demonstration plans (all at once)."""
    c = Collector()
    plan, rel = args.limit is not None, args.relative_margin is not None
    if args.events_allowed is not None and not plan:
        c.add("--events-allowed", "needs --limit (the proportion the demonstration plan must bound)")
    if args.cv is not None and not rel:
        c.add("--cv", "needs --relative-margin (the margin as a share of the mean)")
    if plan:
        if rel:
            c.add("--relative-margin", "not with --limit: a demonstration plan has no margin")
        if args.margin is not None:
            c.add("--margin", "not with --limit: a demonstration plan has no margin")
        if args.estimand not in (None, "proportion"):
            c.add("--estimand", f"a demonstration plan bounds a proportion, got {args.estimand!r}")
        if args.bound not in ("two-sided", "upper"):
            c.add("--bound", f"a demonstration plan is an upper limit, got {args.bound!r}")
    elif rel:
        if args.margin is not None:
            c.add("--relative-margin", "give --margin or --relative-margin, not both")
        if args.cv is None:
            c.add("--cv", "is required with --relative-margin: the planning coefficient of variation SD / mean")
        if args.estimand not in (None, "mean"):
            c.add("--estimand", f"--relative-margin applies to a mean (n = (z CV / R)^2), got {args.estimand!r}")
        for opt, v in (("--sd", args.sd), ("--p", args.p), ("--sd-b", args.sd_b), ("--p-b", args.p_b)):
            if v is not None:
                c.add(opt, "not with --relative-margin (the CV gives the spread in units of the mean)")
    c.raise_if_any()


def _not_used(c: Collector, args: argparse.Namespace, dests: tuple[str, ...], message: str) -> None:
    """One problem for each of the options ``dests`` that was given."""
    for dest in dests:
        if getattr(args, dest) is not None:
            c.add("--" + dest.replace("_", "-"), message)


def _strata(args: argparse.Namespace):
    """The stratified closed form from repeated --stratum options."""
    from simcheck.errors import Collector
    from simcheck.strata import MINIMUM, stratified_sample_size

    c = Collector()
    rule = args.allocation or "proportional"
    names, sizes, values, extras = [], [], [], []
    for i, text in enumerate(args.stratum):
        parts = text.split(":")
        want = "NAME:SIZE:VALUE:EXTRA" if rule in ("optimum", "given") else "NAME:SIZE:VALUE"
        if len(parts) != want.count(":") + 1:
            c.add(f"--stratum {i + 1}", f"expected {want}, got {text!r}")
            continue
        try:
            nums = [float(v) for v in parts[1:]]
        except ValueError:
            c.add(f"--stratum {i + 1}", f"SIZE, VALUE{' and EXTRA' if len(parts) > 3 else ''} must be numbers, got {text!r}")
            continue
        names.append(parts[0] or f"stratum {i + 1}")
        sizes.append(int(nums[0]) if nums[0].is_integer() else nums[0])
        values.append(nums[1])
        extras.append(nums[2] if len(nums) > 2 else None)
    _not_used(c, args, ("sd", "sd_b", "p", "p_b", "population_size", "design_effect", "icc", "cluster_size", "ratio",
                        "dropout", "pilot_n", "cluster_count"), "not used with --stratum (give each stratum its own value)")
    c.raise_if_any()
    prop = args.estimand == "proportion"
    given = [int(v) if float(v).is_integer() else v for v in extras] if rule == "given" else None
    return stratified_sample_size(
        args.estimand, args.margin, names=names, sizes=sizes, sds=None if prop else values,
        ps=values if prop else None, rule=rule, costs=extras if rule == "optimum" else None, given=given,
        minimum=MINIMUM if args.minimum is None else args.minimum, confidence=args.confidence)


def _total(args: argparse.Namespace):
    """The total of a finite population from one stage: N times the mean (--sd) or the share of events (--p)."""
    from simcheck.errors import Collector
    from simcheck.formulas import total_sample_size

    c = Collector()
    if args.cluster_count is not None or args.icc is not None or args.cluster_size is not None:
        return _cluster_total(args)
    _not_used(c, args, ("sd_b", "p_b", "design_effect", "icc", "cluster_size", "cluster_size_cv", "ratio", "cluster_count"),
              "not used with --estimand total without --stratum (a one-stage sample of a finite population: give "
              "--population-size and --sd or --p)")
    c.raise_if_any()
    return total_sample_size(args.margin, args.population_size, confidence=args.confidence, sd=args.sd, p=args.p,
                             multiplier=args.multiplier)


def _cluster_total(args: argparse.Namespace):
    """The total of M clusters (--cluster-count): M times the mean cluster total (simcheck.cluster_total)."""
    from simcheck.cluster_total import cluster_total_sample_size
    from simcheck.errors import Collector

    c = Collector()
    for opt, why in (("cluster_count", "the number of clusters in the population"), ("icc", "the intracluster correlation"),
                     ("cluster_size", "the (mean) cluster size")):
        if getattr(args, opt) is None:
            c.add("--" + opt.replace("_", "-"), f"is required for a total of clusters: {why}")
    _not_used(c, args, ("sd_b", "p_b", "design_effect", "ratio", "population_size"),
              "not used with a total of clusters (give --cluster-count, --icc, --cluster-size and --sd or --p)")
    c.raise_if_any()
    return cluster_total_sample_size(args.margin, args.cluster_count, args.cluster_size, args.icc, sd=args.sd, p=args.p,
                                     cluster_size_cv=args.cluster_size_cv, confidence=args.confidence, bound=args.bound)


def run(args: argparse.Namespace) -> int:
    return ANSWERS[_answer_kind(args)](args)


def _answer_kind(args: argparse.Namespace) -> str:
    """Which closed form the options ask for, after refusing the combinations it cannot take."""
    if args.estimand in ESTIMAND_SPECS:
        return "registered"  # the estimand registry's closed form, with its own checks
    if args.stratum:
        if args.bound != "two-sided" or args.relative_margin is not None or args.limit is not None:
            opt = "--bound" if args.bound != "two-sided" else ("--relative-margin" if args.relative_margin is not None else "--limit")
            raise InputError(opt, "not available with --stratum (stratified closed forms are two-sided, absolute margins)")
        return "strata"
    if args.allocation is not None or args.minimum is not None:
        raise InputError("--stratum", "missing: --allocation and --minimum describe a stratified sample; give its strata with --stratum")
    _plan_problems(args)
    if (args.limit is not None or args.relative_margin is not None) and (args.dropout is not None or args.pilot_n is not None):
        raise InputError("--dropout" if args.dropout is not None else "--pilot-n",
                         "not available with --limit or --relative-margin")
    if args.estimand == "total":
        return "total"
    if args.limit is not None:
        return "plan"
    if args.relative_margin is not None:
        return "relative"
    return "margin"


def _show(args: argparse.Namespace, payload: dict, text) -> int:
    """The JSON object, or the text (``text()``, drawn only when printed)."""
    if args.json:
        emit_json(payload)
    else:
        sys.stdout.write(text() + "\n")
    return 0


def _run_strata(args: argparse.Namespace) -> int:
    res = _strata(args)
    return _show(args, res.to_dict(), lambda: render(res))


def _run_total(args: argparse.Namespace) -> int:
    res = _total(args)
    return _show(args, res.to_dict(), lambda: render(res))


def _run_plan(args: argparse.Namespace) -> int:
    plan = demonstration_plan(args.limit, args.events_allowed or 0, confidence=args.confidence, p=args.p)
    return _show(args, plan.to_dict(), lambda: render_plan(plan))


def _run_relative(args: argparse.Namespace) -> int:
    res = relative_sample_size(args.relative_margin, args.cv, confidence=args.confidence,
                               multiplier=args.multiplier, bound=args.bound,
                               population_size=args.population_size, design_effect=args.design_effect)
    return _show(args, res.to_dict(), lambda: render(res))


def _formula_options(args: argparse.Namespace) -> dict:
    """The options of :func:`sample_size` other than the planning values (SDs, proportions)."""
    return dict(
        confidence=args.confidence, multiplier=args.multiplier, population_size=args.population_size,
        design_effect=args.design_effect, icc=args.icc, cluster_size=args.cluster_size,
        cluster_size_cv=args.cluster_size_cv, ratio=args.ratio, dropout=args.dropout, bound=args.bound,
    )


def _run_margin(args: argparse.Namespace) -> int:
    _clusters_and_population(args)
    res = sample_size(args.estimand, args.margin, sd=args.sd, sd_b=args.sd_b, p=args.p, p_b=args.p_b,
                      **_formula_options(args))
    if args.cluster_count is not None:
        from simcheck.formulas import finite_clusters

        res = finite_clusters(res, args.cluster_count)
    browne = None if args.pilot_n is None else _browne(args, res)
    d = res.to_dict()
    if browne is not None:
        d["browne"] = browne
    return _show(args, d, lambda: render(res) + ("" if browne is None else "\n\n" + _browne_text(res, browne)))


#: One function per kind of answer (:func:`_answer_kind`); each prints its JSON object or text.
ANSWERS = {
    "registered": formula_estimands.run_registered,
    "strata": _run_strata,
    "total": _run_total,
    "plan": _run_plan,
    "relative": _run_relative,
    "margin": _run_margin,
}


def _browne(args: argparse.Namespace, res) -> dict:
    """The n with each SD at its upper confidence limit from a pilot (Browne 1995)."""
    from simcheck.errors import Collector
    from simcheck.formulas import upper_sd_limit

    c = Collector()
    m = c.number("--pilot-n", args.pilot_n, low=3, high=10**7, integer=True)
    level = c.number("--pilot-confidence", args.pilot_confidence, low=0, high=1, low_open=True, high_open=True)
    if res.sd is None:
        c.add("--pilot-n", "applies to means only (mean, mean-diff): the SD is what a pilot estimates")
    c.raise_if_any()
    sd_up = upper_sd_limit(res.sd, m, level)
    sd_b_up = None if res.sd_b is None else upper_sd_limit(res.sd_b, m, level)
    up = sample_size(args.estimand, args.margin, sd=sd_up, sd_b=sd_b_up, **_formula_options(args))
    return {"n": up.n, "n_b": up.n_b, "n_enrolled": up.n_enrolled, "sd_upper": sd_up, "sd_b_upper": sd_b_up,
            "pilot_n": m, "level": level,
            "formula": f"sd_upper = sd sqrt((m - 1) / chi2_{{1 - L}}(m - 1)) = {res.sd:g} sqrt({m - 1} / "
                       f"chi2_{1 - level:g}({m - 1})) = {sd_up:.6g}"}


def _browne_text(res, b: dict) -> str:
    rows = [["at the planning SD", res.n, res.sd],
            [f"SD at its upper {b['level']:g} limit (Browne 1995)", b["n"], b["sd_upper"]]]
    return "\n".join([
        f"SD from a pilot of {b['pilot_n']}: {b['formula']}", "",
        table(["answer", "n", "sd"], rows), "",
        "The planning SD is itself an estimate; over the pilot's sampling, the SD's upper limit is at least "
        f"the true SD with probability {b['level']:g} (normal pilot data), and then this n is at least the "
        "formula n at the true SD. `simcheck predictive` gives the "
        "unconditional answer by simulation.",
    ])


def _clusters_and_population(args: argparse.Namespace) -> None:
    """What the engine supports is what the formula takes: a finite population of units is not
    sampled in clusters; clusters from a finite number of clusters are (--cluster-count)."""
    from simcheck.errors import Collector

    c = Collector()
    if args.population_size is not None and (args.icc is not None or args.cluster_size is not None):
        c.add("--population-size", "counts units and cannot be combined with clusters; for clusters drawn from a "
              "finite number of clusters give --cluster-count M")
    if args.cluster_count is not None and (args.icc is None or args.cluster_size is None):
        c.add("--cluster-count", "needs --icc and --cluster-size (the clusters it counts)")
    c.raise_if_any()


def render(res) -> str:
    """Human-readable text: what was assumed, the formula, and n."""
    conf = f"{res.confidence * 100:g}%"
    rel, bound = getattr(res, "relative_margin", None), getattr(res, "bound", "two-sided")
    what = f"margin {res.margin:g}" if rel is None else f"relative margin {rel:g} of the mean"
    side = "" if bound == "two-sided" else f", one-sided {bound} limit"
    lines = [f"Closed-form sample size: {res.estimand}, {conf} confidence{side}, {what}", ""]
    lines.append("Assumed:")
    lines += [f"  - {a}" for a in res.assumptions]
    lines.append("")
    lines.append("Formula:")
    lines += [f"  {s}" for s in res.formula.split("; ")]
    lines.append("")
    kind = "z" if res.multiplier_kind == "z" else f"t (df {fmt(res.df, 2) if res.df % 1 else int(res.df)})"
    rows = [["multiplier", f"{kind} = {res.multiplier:.6f}"], ["design effect", f"{res.design_effect:g}"]]
    if res.n_b is None:
        rows.append(["n", res.n])
    else:
        rows += [["n (group a)", res.n], ["n_b (group b)", res.n_b], ["n total", res.n_total]]
    if res.dropout:
        if res.n_b is None:
            rows.append([f"n to enrol (dropout {res.dropout:g})", res.n_enrolled])
        else:
            rows += [[f"n to enrol, group a (dropout {res.dropout:g})", res.n_enrolled],
                     ["n to enrol, group b", res.n_b_enrolled]]
    for name, k in getattr(res, "allocation", {}).items():
        rows.append([f"  n in {name}", k])
    if res.clusters is not None:
        if res.clusters_b is None:
            rows.append(["clusters", res.clusters])
        else:
            rows += [["clusters (group a)", res.clusters], ["clusters (group b)", res.clusters_b]]
    lines.append(table(["quantity", "value"], rows))
    lines.append("")
    lines.append(
        "n is the formula's answer under a normal sampling distribution; "
        "`simcheck search` checks it by simulation under your data model."
    )
    return "\n".join(lines)


def render_plan(plan) -> str:
    """Human-readable text of a demonstration plan."""
    c = plan.events_allowed
    lines = [f"Demonstration plan: bound a proportion below {plan.limit:g} at {plan.confidence * 100:g}% confidence "
             f"with at most {c} event{'s' if c != 1 else ''}", ""]
    lines.append("Assumed:")
    lines += [f"  - {a}" for a in plan.assumptions]
    lines.append("")
    lines.append("Formula:")
    lines += [f"  {s}" for s in plan.formula.split("; ")]
    lines.append("")
    rows = [["n (trials)", plan.n], ["events allowed", c]]
    if plan.pass_probability is not None:
        rows.append([f"chance of passing at p = {plan.p:g}", f"{plan.pass_probability:.4f}"])
    lines.append(table(["quantity", "value"], rows))
    lines.append("")
    lines.append("The plan passes when the n trials show at most the allowed events; "
                 "`simcheck check` with target.limit reports the chance of passing at any n.")
    return "\n".join(lines)
