"""Two tests at once: are their splits independent on the units they share? (a chi-square cross-tab).

Different salts make two splits independent: the share of this test's holdout that a sibling test
holds out is the sibling's holdout share, whatever arm a unit has here. A copied salt nests the
arms exactly (every holdout unit of one is a holdout unit of the other), which confounds both
tests. The check cross-tabulates every shared unit's arm in both splits (recomputed with the
frozen contract from the unit ids, so it reads no vendor data) and applies Pearson's chi-square
test of independence (the reference is scipy.stats.chi2_contingency, no continuity correction).

Shared units are this audit's units first seen while the sibling ran (on or after its start,
before its end if it has one).
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime

import numpy as np
import pandas as pd
# scipy.stats: imported inside the functions that use it (0.6 s; shared/lazy.py imports it on a thread beside the reading)

from armlock.assign import Spec, assign_many

from armlock.shared.report import Check, Figure, Table
from .srm import holm

# Fail below this p (our choice): with 26 weekly looks at one pair of independent splits, the
# chance of any false alarm stays under 0.5% (measured: docs/portfolio.md, scripts/calib_independence.py).
INDEPENDENCE_P = 1e-4
# Every expected cell at least 5 for the chi-square approximation to hold (Cochran 1954, "Some
# methods for strengthening the common chi-square tests", Biometrics 10:417-451; common practice).
MIN_EXPECTED = 5.0
TITLE = "Independence from concurrent tests"


@dataclass
class CrossTab:
    """The arms of the shared units in both splits: rows this spec's arms, columns the sibling's."""

    sibling: str  # the sibling's experiment name
    source: str  # its spec file, as given
    same_salt: bool
    rows: list[str]
    cols: list[str]
    counts: np.ndarray  # (len(rows), len(cols)) int64

    @property
    def shared_units(self) -> int:
        return int(self.counts.sum())


def _utc(ts: datetime) -> pd.Timestamp:
    t = pd.Timestamp(ts)
    return t.tz_convert("UTC").tz_localize(None) if t.tzinfo is not None else t


def shared_mask(first_seen: pd.Series, sibling: Spec) -> np.ndarray:
    """Units first seen while `sibling` ran (times naive UTC, as the loader keeps them)."""
    times = pd.to_datetime(first_seen)
    if times.dt.tz is not None:
        times = times.dt.tz_convert("UTC").dt.tz_localize(None)
    mask = (times >= _utc(sibling.start)).to_numpy()
    if sibling.end is not None:
        mask &= (times < _utc(sibling.end)).to_numpy()
    return mask


def crosstab(spec: Spec, sibling: Spec, ids: list[str], *, source: str = "") -> CrossTab:
    """Count the units of `ids` by (arm here, arm in the sibling), both by the frozen contract."""
    k, m = len(spec.arms), len(sibling.arms)
    mine = pd.Categorical(assign_many(spec, ids), categories=list(spec.arm_names)).codes.astype(np.int64)
    theirs = pd.Categorical(assign_many(sibling, ids), categories=list(sibling.arm_names)).codes.astype(np.int64)
    ok = (mine >= 0) & (theirs >= 0)
    flat = np.bincount(mine[ok] * m + theirs[ok], minlength=k * m)
    return CrossTab(sibling.name, source, sibling.salt == spec.salt, list(spec.arm_names),
                    list(sibling.arm_names), flat.reshape(k, m))


def independence_p(counts: np.ndarray) -> tuple[float, float, int, float] | None:
    """(chi-square, p, degrees of freedom, smallest expected count) of a cross-tab, or None when
    fewer than two rows and two columns have units (nothing to test)."""
    from scipy import stats
    c = np.asarray(counts, dtype=np.float64)
    c = c[c.sum(axis=1) > 0][:, c.sum(axis=0) > 0]
    if c.shape[0] < 2 or c.shape[1] < 2:
        return None
    res = stats.chi2_contingency(c, correction=False)
    return float(res.statistic), float(res.pvalue), int(res.dof), float(res.expected_freq.min())


def check_independence(spec: Spec, tabs: list[CrossTab]) -> Check:
    """One check over every sibling: FAIL on a shared salt or Holm-adjusted p below INDEPENDENCE_P."""
    if not tabs:
        return Check(id="independence", title=TITLE, status="skipped",
                     summary="No concurrent test was named (--alongside), so independence was not checked.",
                     reason="no concurrent test named")
    rows: list[list[object]] = []
    tested: list[tuple[CrossTab, float]] = []
    cannot: list[str] = []
    apart: list[str] = []
    tables: list[Table] = []
    for t in tabs:
        res = independence_p(t.counts)
        if t.shared_units == 0:
            apart.append(t.sibling)
            rows.append([t.sibling, t.source, 0, None, None, None, "did not run at the same time"])
            continue
        tables.append(Table(title=f"Shared units by arm: {spec.name} (rows) and {t.sibling} (columns)",
                            columns=["arm", *t.cols],
                            rows=[[r, *(int(x) for x in row)] for r, row in zip(t.rows, t.counts)]))
        if res is None or res[3] < MIN_EXPECTED:
            why = ("fewer than two arms of each test have shared units" if res is None
                   else f"the smallest expected cell is {res[3]:.1f} units, under {MIN_EXPECTED:g}")
            cannot.append(f"{t.sibling} ({t.shared_units:,} shared units: {why})")
            rows.append([t.sibling, t.source, t.shared_units, None, None, None, "cannot judge"])
            if t.same_salt:
                tested.append((t, 0.0))
            continue
        chi2, p, dof, _ = res
        tested.append((t, p))
        rows.append([t.sibling, t.source, t.shared_units, round(chi2, 3), dof, p, ""])
    adj = dict(zip((id(t) for t, _ in tested), holm([p for _, p in tested]))) if tested else {}
    broken = [t for t, _ in tested if t.same_salt or adj[id(t)] < INDEPENDENCE_P]
    for r, t in zip(rows, tabs):
        if id(t) in adj and not r[-1]:
            r[-1] = "not independent" if t in broken else "independent"
        elif t.same_salt:
            r[-1] = "same salt"
    min_p = min(adj.values()) if adj else None
    figures = {"shared_units": Figure(label="units shared with concurrent tests",
                                      value=sum(t.shared_units for t in tabs), unit="count")}
    if min_p is not None:
        figures["min_p_holm"] = Figure(label="lowest Holm-adjusted independence p", value=min_p, unit="p")
    table = Table(title="Concurrent tests", rows=rows,
                  columns=["test", "spec file", "shared units", "chi-square", "df", "p", "result"])
    if broken:
        names = ", ".join(t.sibling for t in broken)
        salt = [t.sibling for t in broken if t.same_salt]
        why = (f"it uses the same salt as {', '.join(salt)}" if salt
               else "a shared or related salt, or arms recorded from one test into the other")
        summary = (f"This test's split is not independent of {names}'s on their shared units (likely cause: "
                   f"{why}), so each test's holdout is confounded by the other's; do not read either until "
                   "one gets a fresh salt.")
        return Check(id="independence", title=TITLE, status="fail", summary=summary, figures=figures,
                     tables=[table, *tables])
    if cannot:
        return Check(id="independence", title=TITLE, status="warn", figures=figures, tables=[table, *tables],
                     summary=f"Cannot judge: too few shared units with {'; '.join(cannot)}; the check "
                             "runs again as units accrue.")
    if not tested:
        return Check(id="independence", title=TITLE, status="skipped", figures=figures, tables=[table],
                     summary=f"No unit of this audit was first seen while {', '.join(apart)} ran, so there "
                             "is nothing to compare.", reason="no shared units")
    summary = (f"The split is independent of {', '.join(t.sibling for t, _ in tested)}'s on "
               f"{sum(t.shared_units for t, _ in tested):,} shared units: each test's arms hold the "
               "other's in its planned shares.")
    return Check(id="independence", title=TITLE, status="pass", summary=summary, figures=figures,
                 tables=[table, *tables])
