"""Identity churn: customers whose unit ids fall in several arms, against the re-randomization expectation."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from armlock.assign import Spec

from armlock.shared.report import Check, Figure, Table, worst
from armlock.shared.tables import ChurnTables

COOKIE_NOTE = ("Common practice: one major browser engine caps cookies written by script at 7 days "
               "(its tracking prevention), so long tests lose returning visitors' ids there; a "
               "first-party cookie set by the shop's own server keeps them (armlock.assign.middleware).")


def expected_multi_arm(ids_per_customer: Sequence[int] | np.ndarray, theta: Sequence[float] | np.ndarray,
                       weights: Sequence[int] | np.ndarray | None = None) -> float:
    """Expected number of customers in more than one arm if each of their ids were hashed afresh.

    A customer with k ids stays in one arm with probability sum_i theta_i^k; `weights` counts
    the customers with each k (default one each).
    """
    k = np.asarray(ids_per_customer, dtype=np.float64)
    w = np.ones_like(k) if weights is None else np.asarray(weights, dtype=np.float64)
    th = np.asarray(theta, dtype=np.float64)
    return float(((1.0 - (th[None, :] ** k[:, None]).sum(axis=1)) * w).sum())


def check_churn(spec: Spec, ct: ChurnTables | None) -> Check:
    """Customers in several arms, overall and per browser family."""
    title = "Identity churn (customers in several arms)"
    if ct is None:
        return Check(id="churn", title=title, status="skipped",
                     summary="No identity-link table was given (--identities), so identity churn was not measured. "
                             + COOKIE_NOTE,
                     reason="no identity-link table given")
    if ct.customers == 0:
        return Check(id="churn", title=title, status="warn",
                     summary="Cannot judge: the identity links name no customer with a usable link "
                             f"({ct.links:,} link(s) used), so identity churn was not measured. Check the input "
                             "notes and that [audit.identities] maps the unit id and customer columns.",
                     figures={"customers": Figure(label="customers with identity links", value=0, unit="count")})
    th = spec.audit.thresholds
    if ct.link_ids and ct.ids_not_in_visits / ct.link_ids > th.unseen_fail:
        found = 1 - ct.ids_not_in_visits / ct.link_ids
        return Check(id="churn", title=title, status="fail",
                     summary=f"The identity links do not match the visits: only {found:.1%} of their {ct.link_ids:,} "
                             "unit ids appear in the visits, so identity churn cannot be measured. Likely causes: the "
                             "links hold another id than the one the snippet sets, a prefix, or hashed ids; map the "
                             "right column in [audit.identities] unit_id.",
                     figures={"link_id_match_rate": Figure(label="link unit ids found in the visits", value=found,
                                                           unit="share")})
    theta = np.array(spec.weights, dtype=np.float64) / 10_000
    share = ct.multi_arm / ct.customers
    exp_share = expected_multi_arm(list(ct.ids_hist), theta, list(ct.ids_hist.values())) / ct.customers
    bb = ct.by_browser.copy()
    bb["share"] = bb["multi_arm"] / bb["customers"]
    exp_b = {name: expected_multi_arm(h["ids"].to_numpy(), theta, h["customers"].to_numpy())
             for name, h in ct.browser_hist.groupby("browser", sort=False)}
    bb["expected_share"] = [exp_b.get(name, 0.0) / n for name, n in zip(bb.index, bb["customers"])]
    levels: list[tuple[str, str]] = []
    overall = (f"{share:.1%} of customers are in more than one arm ({exp_share:.1%} expected if their extra ids "
               "were split afresh)")
    if share > th.churn_fail:
        levels.append(("fail", overall))
    elif share > th.churn_warn:
        levels.append(("warn", overall))
    big = bb[bb["customers"] >= th.min_customers].sort_values("share", ascending=False)
    for name, r in zip(big.index, big.itertuples()):
        one = (f"{name}: {r.share:.1%} of its customers are in several arms "
               f"({r.expected_share:.1%} expected for its customers' ids)")
        if r.share > th.churn_fail:
            levels.append(("fail", one))
        elif r.share > th.churn_warn:
            levels.append(("warn", one))
    status = worst([s for s, _ in levels])
    multi_ids = sum(v for k, v in ct.ids_hist.items() if k > 1)
    dist = {str(i): ct.ids_hist.get(i, 0) for i in range(1, 5)}
    dist["5+"] = sum(v for k, v in ct.ids_hist.items() if k >= 5)
    if levels:
        summary = ("; ".join(t for _, t in levels) + ": those people were assigned to both arms (their ids fall in "
                   "more than one), so some may have been shown ads under one id and held out under another, "
                   "which dilutes the contrast; keep the id stable with a first-party cookie set by the shop's own "
                   "server (a login links ids, it must not replace them). " + COOKIE_NOTE)
    else:
        summary = (f"{share:.2%} of customers are in more than one arm ({exp_share:.2%} expected from their extra ids); "
                   "within limits. " + COOKIE_NOTE)
    figs = {
        "customers": Figure(label="customers with identity links", value=ct.customers, unit="count"),
        "multi_arm_customers": Figure(label="customers in several arms", value=ct.multi_arm, unit="count"),
        "multi_arm_share": Figure(label="customers in several arms", value=share, unit="share",
                                  numerator=int(ct.multi_arm), denominator=int(ct.customers)),
        "expected_share": Figure(label="expected if extra ids were re-randomized", value=exp_share, unit="share"),
        "multi_id_customers": Figure(label="customers with several ids", value=multi_ids, unit="count"),
    }
    if len(big) and levels:
        figs["worst_browser"] = Figure(label="browser with the most churn", value=str(big.index[0]), unit="text")
    tables = [
        Table(title="Customers in several arms by browser family",
              columns=["browser", "customers", "in several arms", "share", "expected share"],
              rows=[[n, int(r.customers), int(r.multi_arm), round(float(r.share), 6), round(float(r.expected_share), 6)]
                    for n, r in zip(bb.index, bb.itertuples())]),
        Table(title="Ids per customer", columns=["ids", "customers"],
              rows=[[k, v] for k, v in dist.items()]),
    ]
    series = [{"browser": str(n), "customers": int(r.customers), "multi_arm": int(r.multi_arm),
               "share": float(r.share), "expected_share": float(r.expected_share)}
              for n, r in zip(bb.index, bb.itertuples())]
    return Check(id="churn", title=title, status=status, summary=summary, figures=figs, tables=tables,
                 series={"by_browser": series})
