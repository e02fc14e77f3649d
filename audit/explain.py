"""One plain sentence for each non-obvious figure or column of the audit, looked up by the words it is labelled with."""

from __future__ import annotations

from armlock.shared.report import Check

# (words to look for in a figure label or table column, lower case; the sentence shown once per check)
EXPLAIN: list[tuple[str, str]] = [
    ("anytime-valid", "Anytime-valid p: a p-value that stays honest however often the audit is re-run, so weekly "
                      "looks do not raise its false-alarm rate; it alone sets the SRM status."),
    ("fixed-horizon", "Fixed-horizon p: the classic test of this look alone (chi-square, or exact when an arm expects "
                      "few units); right for one planned look, too alarm-prone when judged every week, so shown for "
                      "information."),
    ("caught 99%", "Shortfall caught 99% of the time: the smallest drop in the smallest arm's share (as a fraction of "
                   "its weight) that this audit flags almost surely at the current size; smaller mismatches can go "
                   "unnoticed."),
    ("max |share/expected - 1|", "max |share/expected - 1|: how far the worst arm's share in that day or segment is "
                                 "from its weight, as a fraction of the weight (0.10 = 10% off)."),
    ("p (holm)", "p (Holm): p-values adjusted for testing many days, segments or covariates at once (Holm 1979), so a "
                 "single alarm among many tests stays rare by chance."),
    ("smd by chance", "SMD by chance (SE): how large the SMD typically gets from random allocation alone at this many "
                      "units, sqrt(1/n_arm + 1/n_holdout); an SMD several times this is not chance."),
    ("smd", "SMD (standardized mean difference): the difference of the arms' means in units of the covariate's "
            "standard deviation; 0.1 means the arms differ by a tenth of a typical spread."),
    ("variance ratio", "Variance ratio: the arm's variance over the holdout's (1 = equal spread); shown for "
                       "information, since heavy-tailed values such as revenue make it swing widely by chance."),
    ("mean vs chance", "Mean vs chance: the arms' difference in means against the spread random allocation gives it "
                       "at this many units (a randomization test)."),
    ("rank-sum", "Rank-sum test (Kruskal-Wallis; Mann-Whitney for two arms): compares the arms' whole distributions "
                 "by ranks, so a few very large values (big spenders) cannot set it off on their own."),
    ("itt difference as a share", "ITT difference as a share of the per-exposed effect: the gap between the arms' "
                                  "average revenue is this fraction of the effect on a person the ads reach, because "
                                  "only that share of the exposed arm (less any reached holdout) is reached."),
    ("expected if extra ids", "Expected if extra ids were re-randomized: the share of customers in several arms that "
                              "their number of ids alone would give, if each extra id landed in an arm at random."),
]


def explanations(check: Check) -> list[str]:
    """The sentences for the figures and table columns this check shows, in EXPLAIN's order, once each."""
    words = [f.label.lower() for f in check.figures.values()]
    words += [c.lower() for t in check.tables for c in t.columns]
    words += [str(cell).lower() for t in check.tables for r in t.rows for cell in r if isinstance(cell, str)]
    seen: set[str] = set()
    out = []
    for key, text in EXPLAIN:
        hit = any(key in w for w in words)
        if key == "smd":  # "SMD" alone, not only inside "SMD by chance"
            hit = any(key in w.replace("smd by chance", "") for w in words)
        if hit and text not in seen:
            seen.add(text)
            out.append(text)
    return out
