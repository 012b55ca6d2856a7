"""The trait-pair paragraph and results of the methods text."""

from __future__ import annotations

from ...jobs.analyses import hidden_classes
from ..citations import REFERENCES, cite
from .numbers import count_of, listing, number, p_value, plural


def pairs_paragraph(config, pair_summary) -> str:
    pairs = config["pairs"]
    described = [f"{p} ({spec['traits'][0]} × {spec['traits'][1]})" for p, spec in pairs.items()]
    text = (
        f"For the trait {'pair' if len(pairs) == 1 else 'pairs'} {listing(described)}, the two "
        "traits were combined into one Markov chain on their joint states in which only one "
        f"trait changes at a time {cite('pagel1994')}, and the hypotheses listed above were "
        "fitted on every tree like the models of single traits. Nested hypotheses were "
        "compared on each tree by likelihood-ratio tests, referring twice the difference in "
        "log-likelihood to a chi-square distribution with as many degrees of freedom as the "
        "alternative has extra rates."
    )
    hidden = [p for p in pairs if hidden_classes(config, p) > 1]
    if hidden:
        text += (
            f" For {listing(hidden)}, every hypothesis was fitted with hidden rate classes "
            f"{cite('beaulieu2013')}, so that a burst of change in one clade is not taken "
            f"for correlated evolution {cite('maddison2015', 'boyko2021')}."
        )
    if (
        pair_summary is not None
        and "boundary" in pair_summary
        and pair_summary["boundary"].astype(str).str.lower().eq("true").any()
    ):
        text += (
            " Where the null hypothesis forbids rates that the alternative leaves free, it "
            "lies on the boundary of the alternative's parameter space and the chi-square "
            f"reference is only approximate {cite('self1987')}."
        )
    boot = {p: spec for p, spec in pairs.items() if spec.get("bootstrap", 0) > 0}
    for p, spec in boot.items():
        n_boot = spec.get("bootstrap_trees", 10)
        if pair_summary is not None and "n_trees_bootstrap" in pair_summary:
            rows = pair_summary[pair_summary["pair"] == p]["n_trees_bootstrap"]
            n_boot = int(rows.max()) if len(rows) else n_boot  # as many as were bootstrapped
        text += (
            f" For {p}, the statistic was also compared with its distribution in "
            f"{spec['bootstrap']} data sets simulated under the fitted null hypothesis on each "
            f"of {plural(n_boot, 'tree')} spread evenly through the sample (parametric "
            f"bootstrap; {REFERENCES['goldman1993'].cite()})."
        )
    if boot:
        text += (
            " A null rate estimated at or near zero (its likelihood at the lower bound within "
            "1.92 log-units of the maximum) was simulated at the upper edge of its 95% "
            "interval rather than at its estimate, since a bootstrap from an estimate on the "
            f"boundary rejects too often {cite('andrews2000', 'berger1994')}; p-values are "
            "(1 + the number of simulated statistics at least as large as the observed one) "
            "/ (1 + the number of data sets)."
        )
    alphas = sorted({spec.get("alpha", 0.05) for spec in pairs.values()})
    text += f" Tests used a significance level of {listing(f'{a:g}' for a in alphas)}."
    return text


def pair_results(pair, summary) -> str:
    rows = summary[summary["pair"] == pair]
    sentences = []
    for r in rows.to_dict("records"):
        n = int(r["n_trees"])
        if n == 0:
            sentences.append(
                f"{r['null']} against {r['alternative']}: not tested (no tree has both fits)."
            )
            continue
        k = count_of(r["fraction_reject_chi2"], n)
        s = (
            f"The likelihood-ratio test of {r['null']} against {r['alternative']} "
            f"({plural(int(r['df']), 'degree')} of freedom, critical value "
            f"{number(r['critical_chi2'])} at α = {r['alpha']:g}) rejected {r['null']} on {k} of "
            f"{n} trees (median statistic {number(r['median_statistic'])}, 95% interval across "
            f"trees {number(r['statistic_low95'])} to {number(r['statistic_high95'])}; median "
            f"p = {p_value(r['median_p_chi2'])})"
        )
        nb = int(r.get("n_trees_bootstrap", 0) or 0)
        if nb:
            kb = count_of(r["fraction_reject_bootstrap"], nb)
            s += (
                f"; the parametric bootstrap rejected it on {kb} of {nb} trees (median p = "
                f"{p_value(r['median_p_bootstrap'])})"
            )
        sentences.append(s + ".")
    return " ".join(sentences)
