"""The pandas engine: tidy frames -> the small tables of `audit.tables` (counts, central moments, rank sums)."""

from __future__ import annotations

import math

from collections.abc import Callable
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa

from armlock.assign import Spec, assign_many

from .keys import arrow_ids, distinct_codes, ns_of, positions
from .exactsum import rounded_mean, rounded_sum, to_float, weighted_exact_sum
from .read import ARM, BROWSER, CAMPAIGN, CUSTOMER, FP, KIND, TIME, UNIT, Frames
from .tables import (
    NUMERIC_COLUMNS,
    AuditTables,
    BalanceTables,
    ChurnTables,
    IntegrityTables,
    LeakageTables,
    SplitTables,
)

NS_DAY = 86_400 * 10**9


def hash_arms(spec: Spec, ids: pd.Series) -> np.ndarray:
    """Arm index (spec order) of every id, from the contract; each id hashed once (ids are unique here)."""
    names = assign_many(spec, ids.tolist())
    return pd.Categorical(names, categories=list(spec.arm_names)).codes.astype(np.int16)


def _recorded_codes(spec: Spec, rec: pd.Series) -> tuple[np.ndarray, dict[str, int], int]:
    """Recorded arm -> spec index; -1 for an unknown name, -2 for empty."""
    cats = [str(c) for c in rec.cat.categories]
    names = list(spec.arm_names)
    lut = np.array([names.index(c) if c in names else (-2 if c == "(missing)" else -1) for c in cats] or [0],
                   dtype=np.int16)
    codes = rec.cat.codes.to_numpy()
    out = lut[codes] if len(cats) else np.zeros(len(codes), np.int16)
    per_level = np.bincount(codes, minlength=len(cats))
    unknown = {c: int(n) for c, n, v in zip(cats, per_level, lut) if v == -1 and n > 0}
    missing = int(sum(n for n, v in zip(per_level, lut) if v == -2))
    return out, unknown, missing


def _crosstab(codes: np.ndarray, levels: list[str], arm: np.ndarray, k: int, arms: list[str]) -> pd.DataFrame:
    """Level x arm counts (arm >= 0 only)."""
    ok = arm >= 0
    if not ok.all():
        codes, arm = codes[ok], arm[ok]
    flat = np.bincount(codes.astype(np.int64) * k + arm, minlength=len(levels) * k)
    return pd.DataFrame(flat.reshape(len(levels), k), index=pd.Index(levels, name="level"), columns=arms)


def _days(ts: pd.Series) -> tuple[np.ndarray, list[str], np.ndarray]:
    """Day code per row, the day labels and the day numbers since the epoch (the visits come sorted
    by time: then the days are runs, numbered without a sort)."""
    ns = ts.to_numpy(dtype="datetime64[ns]").view(np.int64)
    dnum = ns // NS_DAY
    step = dnum[1:] != dnum[:-1]
    if len(dnum) and bool((dnum[1:] >= dnum[:-1]).all()):
        codes = np.concatenate([[0], np.cumsum(step)])
        uniq = dnum[np.concatenate([[0], np.flatnonzero(step) + 1])]
    else:
        uniq, codes = np.unique(dnum, return_inverse=True)
    labels = [str(np.datetime64(int(d), "D")) for d in uniq]
    return codes.astype(np.int64), labels, uniq


def split_and_integrity(spec: Spec, fr: Frames, eff: np.ndarray, rec: np.ndarray, hashed: np.ndarray,
                        unknown: dict[str, int], missing: int) -> tuple[SplitTables, IntegrityTables]:
    v = fr.visits
    arms, k = list(spec.arm_names), len(spec.arms)
    units = np.bincount(rec[rec >= 0], minlength=k)
    dcode, dlabels, _ = _days(v[TIME])
    daily = _crosstab(dcode, dlabels, rec, k, arms)
    daily.index.name = "date"
    segs = {}
    mis = (rec >= 0) & (rec != hashed)
    by_seg = {}
    for col in spec.audit.segments:
        cat = v[col]
        codes = cat.cat.codes.to_numpy()
        levels = [str(c) for c in cat.cat.categories]
        segs[col] = _crosstab(codes, levels, rec, k, arms)
        by_seg[col] = pd.DataFrame({"units": np.bincount(codes, minlength=len(levels)),
                                    "mismatches": np.bincount(codes[mis], minlength=len(levels))},
                                   index=pd.Index(levels, name="level"))
    by_day = pd.DataFrame({"units": np.bincount(dcode, minlength=len(dlabels)),
                           "mismatches": np.bincount(dcode[mis], minlength=len(dlabels))},
                          index=pd.Index(dlabels, name="date"))
    pair_codes = rec[mis].astype(np.int64) * k + hashed[mis]
    pc_ = np.bincount(pair_codes, minlength=k * k)
    pairs = pd.DataFrame([{"recorded": arms[i // k], "recomputed": arms[i % k], "units": int(n)}
                          for i, n in enumerate(pc_) if n > 0], columns=["recorded", "recomputed", "units"])
    start = pd.Timestamp(spec.start)
    fps = None
    if FP in v:
        vc = v[FP].value_counts()
        fps = {str(a): int(n) for a, n in vc.items() if n > 0}
    integ = IntegrityTables(
        units=len(v), recorded_unknown=unknown, recorded_missing=missing, mismatches=int(mis.sum()),
        pairs=pairs, by_day=by_day, by_segment=by_seg, pre_start=int((v[TIME] < start).sum()),
        first_seen_min=v[TIME].iloc[0].isoformat(), first_seen_max=v[TIME].iloc[-1].isoformat(),
        fingerprints=fps,
    )
    split = SplitTables(arms=arms, units={a: int(n) for a, n in zip(arms, units)}, daily=daily, segments=segs)
    return split, integ


def numeric_moments(x: np.ndarray, arm: np.ndarray, k: int) -> list[dict[str, object]]:
    """Per arm 0..k-1: n, missing, invalid, mean, m2, rank_sum; plus the pooled ties and binary flag.

    `x` is float64 per unit (NaN = missing), `arm` the recorded arm index (-1/-2: not counted).
    Two-pass central moments keep precision at any offset (see `audit.tables`). Every statistic is
    a function of a row's value and arm, so the values are factorized once and each sum runs over
    the distinct values weighted by their count in the arm (`exactsum.weighted_exact_sum`): the
    same exact sums as over the rows, hence the same bits, in one pass over the rows.
    """
    ok = arm >= 0
    nan = np.isnan(x)
    fin = np.isfinite(x)
    use = ok & fin
    vals, arms_used = (x, arm) if use.all() else (x[use], arm[use])
    # average rank of each distinct value = values below it + (its count + 1) / 2: the distinct values
    # by hashing (O(n); -0.0 counted as 0.0, as a sort would), then only they are sorted (a sort of all
    # n values cost 0.4 s a covariate at 2 M units; the ranks are the same numbers, bit for bit)
    codes, distinct = pd.factorize(vals + 0.0, sort=False)
    nd = len(distinct)
    binary = bool(nd) and bool(np.isin(distinct, (0.0, 1.0)).all())
    per_arm = np.bincount(arms_used.astype(np.int64) * nd + codes, minlength=k * nd).reshape(k, nd)
    order = np.argsort(distinct, kind="stable")
    t = per_arm.sum(axis=0)[order].astype(np.float64)
    ties = rounded_sum(t * t * t - t)  # exact sums (audit.exactsum): every engine gets the same bits
    average = np.empty(nd)
    average[order] = np.cumsum(t) - (t - 1.0) / 2.0
    missing = np.bincount(arm[ok & nan], minlength=k)
    invalid = np.bincount(arm[ok & ~nan & ~fin], minlength=k)
    rows: list[dict[str, object]] = []
    for i in range(k):
        cnt = per_arm[i]
        n = int(cnt.sum())
        mean = rounded_mean(weighted_exact_sum(distinct, cnt), n)
        seen = cnt > 0
        with np.errstate(over="ignore", invalid="ignore"):  # values near 1e308: m2 is inf (balance says so)
            d = distinct - mean
            d = d * d
        m2 = to_float(weighted_exact_sum(d, cnt)) if np.isfinite(d[seen]).all() else math.inf
        rows.append({"arm_index": i, "n": n, "missing": int(missing[i]), "invalid": int(invalid[i]),
                     "mean": mean, "m2": m2, "rank_sum": to_float(weighted_exact_sum(average, cnt)),
                     "ties": ties, "binary": binary})
    return rows


def balance_tables(spec: Spec, fr: Frames, rec: np.ndarray, moments: dict[str, list[dict[str, object]]]) -> BalanceTables:
    v = fr.visits
    arms, k = list(spec.arm_names), len(spec.arms)
    rows = []
    for col in spec.audit.covariates:
        per_arm = [dict(r) for r in moments[col]]
        bad = sum(int(r["invalid"]) for r in per_arm)  # type: ignore[call-overload]
        if bad:
            fr.notes.append(f"covariate {col}: {bad} value(s) were +/-infinity; counted as invalid input and "
                            "left out of the balance check")
        for r in per_arm:
            rows.append({"covariate": col, "arm": arms[int(r.pop("arm_index"))], **r})  # type: ignore[call-overload]
    numeric = pd.DataFrame(rows, columns=NUMERIC_COLUMNS)
    cats = {}
    for col in spec.audit.categorical_covariates:
        cat = v[col]
        cats[col] = _crosstab(cat.cat.codes.to_numpy(), [str(c) for c in cat.cat.categories], rec, k, arms)
    return BalanceTables(numeric=numeric, categorical=cats)


def leakage_tables(spec: Spec, fr: Frames, eff: np.ndarray, vset: pa.Array) -> LeakageTables:
    e, v = fr.exposures, fr.visits
    assert e is not None
    arms, k = list(spec.arm_names), len(spec.arms)
    hold = np.isin(np.arange(k), [arms.index(a) for a in spec.holdout_arms])
    pos = fr.exposure_pos if fr.exposure_pos is not None else positions(e[UNIT], vset)
    seen = pos >= 0
    all_seen = bool(seen.all())
    idx = None if all_seen else np.flatnonzero(seen)
    t = ns_of(e[TIME])
    start = pd.Timestamp(spec.start).value
    fs = ns_of(v[TIME])
    kind = e[KIND].cat.codes.to_numpy()  # 0 impression, 1 click, 2 other
    sp, st, sk = (pos, t, kind) if idx is None else (pos[idx], t[idx], kind[idx])
    before_start = st < start
    pre = st < fs[sp]
    before_assign = pre & ~before_start
    pre |= before_start
    any_pre = bool(pre.any())
    during = ~pre
    arm_row = eff.astype(np.int8 if k < 127 else np.int16)[sp]  # a small table gathers fast; eff >= 0
    nv = len(v)

    def units_of(mask: np.ndarray | None) -> np.ndarray:
        """Units (visits rows) with at least one of the rows in `mask` (None: all rows)."""
        out = np.zeros(nv, dtype=bool)
        out[sp if mask is None else sp[mask]] = True
        return out

    exposed_u = units_of(during if any_pre else None)
    pre_u = units_of(pre) if any_pre else np.zeros(nv, dtype=bool)
    ok = eff >= 0
    units = np.bincount(eff[ok], minlength=k)
    cell = arm_row.astype(np.int16) * 3 + sk
    by_kind = np.bincount(cell[during] if any_pre else cell, minlength=3 * k).reshape(k, 3)
    by_arm = pd.DataFrame({
        "units": units,
        "exposed_units": np.bincount(eff[ok & exposed_u], minlength=k),
        "pre_exposed_units": np.bincount(eff[ok & pre_u], minlength=k),
        "impressions": by_kind[:, 0],
        "clicks": by_kind[:, 1],
    }, index=pd.Index(arms, name="arm"))
    leak = hold[arm_row]
    leak &= during
    li = np.flatnonzero(leak)
    camp_all = e[CAMPAIGN]
    cnames = [str(c) for c in camp_all.cat.categories]
    lrow = li if idx is None else idx[li]
    lc = camp_all.cat.codes.to_numpy()[lrow].astype(np.int64)
    lp, lt, lk = sp[li], st[li], sk[li]
    nc = max(len(cnames), 1)
    ucamp = np.unique(lp * nc + lc) % nc if len(lp) else np.zeros(0, np.int64)
    by_campaign = pd.DataFrame({
        "units": np.bincount(ucamp, minlength=len(cnames)),
        "impressions": np.bincount(lc[lk == 0], minlength=len(cnames)),
        "clicks": np.bincount(lc[lk == 1], minlength=len(cnames)),
    }, index=pd.Index(cnames, name="campaign"))
    by_campaign = by_campaign[(by_campaign.sum(axis=1) > 0)]
    day = lt // NS_DAY
    week = (day + 3) // 7  # 1970-01-01 was a Thursday: Monday-based week number
    weeks, wcode = np.unique(week, return_inverse=True)
    wk_units = np.zeros(len(weeks), np.int64)
    if len(lp):
        upair = np.unique(lp * len(weeks) + wcode)
        wk_units = np.bincount(upair % len(weeks), minlength=len(weeks))
    by_week = pd.DataFrame({
        "units": wk_units,
        "impressions": np.bincount(wcode[lk == 0], minlength=len(weeks)),
        "clicks": np.bincount(wcode[lk == 1], minlength=len(weeks)),
    }, index=pd.Index([str(np.datetime64(int(w) * 7 - 3, "D")) for w in weeks], name="week"))
    first = str(np.datetime64(int(lt.min()) // NS_DAY, "D")) if len(lt) else None
    # exposed ids the visits never saw: the arm the spec would give them, each hashed once
    unseen = e[UNIT].iloc[np.flatnonzero(~seen)] if not all_seen else e[UNIT].iloc[:0]
    uniq = pd.Series(pd.unique(unseen), dtype="str") if len(unseen) else pd.Series([], dtype="str")
    ua = hash_arms(spec, uniq) if len(uniq) else np.zeros(0, np.int16)
    n_seen_ids = int(np.count_nonzero(exposed_u | pre_u))
    diag = _unseen_diagnostics(uniq, v[UNIT], vset)
    dn, dc = np.unique(t // NS_DAY, return_counts=True)
    daily_rows = {str(np.datetime64(int(d), "D")): int(c) for d, c in zip(dn, dc)}
    return LeakageTables(
        rows=len(e), by_arm=by_arm, holdout_by_campaign=by_campaign, holdout_by_week=by_week,
        holdout_first=first,
        pre_before_start=len(np.unique(sp[before_start])),
        pre_before_assignment=len(np.setdiff1d(sp[before_assign], sp[before_start])),
        pre_rows=int(pre.sum()), unseen_ids=len(uniq), unseen_rows=int((~seen).sum()),
        unseen_by_arm={a: int(n) for a, n in zip(arms, np.bincount(ua, minlength=k))},
        exposed_ids=n_seen_ids + len(uniq), exposed_rows=exposed_u,
        rows_read=fr.counts.get("exposure_rows", len(e)), duplicate_rows=fr.counts.get("exposure_duplicate_rows", 0),
        daily_rows=daily_rows, **diag,
    )


HASH_LIKE = r"^(?:[0-9a-fA-F]{32}|[0-9a-fA-F]{40}|[0-9a-fA-F]{64})$"
PREFIX_MAX = 40


def common_prefix(ids: pd.Series) -> str:
    """The longest prefix all ids share (at most PREFIX_MAX characters; '' for fewer than two ids)."""
    if len(ids) < 2:
        return ""
    lo, hi = str(ids.min()), str(ids.max())  # the common prefix of a set is that of its extremes
    n = 0
    while n < min(len(lo), len(hi), PREFIX_MAX) and lo[n] == hi[n]:
        n += 1
    return lo[:n]


def _cuts(prefix: str) -> list[str]:
    """Candidate prefixes: the whole common prefix and each part of it ending in a separator."""
    return list(dict.fromkeys([prefix[:i + 1] for i, ch in enumerate(prefix) if not ch.isalnum()] + [prefix]))


def _unseen_diagnostics(unseen: pd.Series, visit_ids: pd.Series, vset: pa.Array) -> dict[str, Any]:
    """Counts that tell why exposed ids miss the visits: hashed ids, a prefix added or dropped.

    Rule (engine-neutral): P = the longest prefix all distinct unseen ids share; for P and each part
    of P that ends in a non-alphanumeric character, count the unseen ids that are a visit id once
    that part is removed; keep the part with the most matches (the longest on ties). Likewise for
    the visits' common prefix, added to the unseen ids.
    """
    out: dict[str, Any] = {"unseen_hash_like": 0, "unseen_prefix": "", "unseen_match_without_prefix": 0,
                              "visits_prefix": "", "unseen_match_with_visits_prefix": 0}
    if not len(unseen):
        return out
    out["unseen_hash_like"] = int(unseen.str.match(HASH_LIKE).sum())

    def best(prefix: str, make: Callable[[str], pd.Series]) -> tuple[str, int]:
        found = [(int((positions(make(p), vset) >= 0).sum()), len(p), p) for p in _cuts(prefix)]
        n, _, p = max(found)
        return (p, n) if n else (prefix, 0)

    pre = common_prefix(unseen)
    if pre:
        out["unseen_prefix"], out["unseen_match_without_prefix"] = best(pre, lambda p: unseen.str.slice(len(p)))
    vpre = common_prefix(visit_ids)
    if vpre:
        out["visits_prefix"], out["unseen_match_with_visits_prefix"] = best(vpre, lambda p: p + unseen)
    return out


def churn_tables(spec: Spec, fr: Frames, eff: np.ndarray, vset: pa.Array) -> ChurnTables:
    ident, v = fr.identities, fr.visits
    assert ident is not None
    k = len(spec.arms)
    # the distinct link ids are numbered once, and only they are looked up in the visits
    codes, distinct = distinct_codes(ident[UNIT])
    dpos = positions(distinct, vset, distinct=True)
    pos = dpos[codes]
    arm = np.where(pos >= 0, eff[np.maximum(pos, 0)], -1).astype(np.int64)
    missing = pos < 0
    unseen = np.flatnonzero(dpos < 0)
    if len(unseen):  # ids linked to a customer but not in the visits: the spec's arm, hashed once
        darm = np.full(len(distinct), -1, dtype=np.int64)
        darm[unseen] = hash_arms(spec, pd.Series(distinct.take(pa.array(unseen)).to_pylist(), dtype="str"))
        arm[missing] = darm[codes[missing]]
    if BROWSER in v:
        bcat = v[BROWSER]
        blevels = [str(c) for c in bcat.cat.categories] + ["(not in visits)"]
        bcode = np.where(pos >= 0, bcat.cat.codes.to_numpy()[np.maximum(pos, 0)], len(blevels) - 1)
    else:
        blevels = ["(no browser column)"]
        bcode = np.zeros(len(pos), np.int64)
    ccodes, _ = pd.factorize(ident[CUSTOMER])
    ok = arm >= 0
    c, a, b = ccodes[ok].astype(np.int64), arm[ok], bcode[ok].astype(np.int64)
    nids, narms = _ids_and_arms(c, a, k)
    ks, kc = np.unique(nids, return_counts=True)
    ncust = int(c.max()) + 1 if len(c) else 1
    groups, inv = np.unique(b * ncust + c, return_inverse=True)
    g_n, g_arms = _ids_and_arms(inv.astype(np.int64), a, k)
    g_b = groups // ncust
    nb = len(blevels)
    g = pd.DataFrame({
        "customers": np.bincount(g_b, minlength=nb),
        "multi_arm": np.bincount(g_b[g_arms > 1], minlength=nb),
    }, index=pd.Index(blevels, name="browser"))
    g = g[g["customers"] > 0]
    hist_keys, hist_counts = np.unique(g_b * (int(g_n.max()) + 1 if len(g_n) else 1) + g_n, return_counts=True)
    width = int(g_n.max()) + 1 if len(g_n) else 1
    bhist = pd.DataFrame({"browser": [blevels[i] for i in hist_keys // width], "ids": hist_keys % width,
                          "customers": hist_counts})
    return ChurnTables(
        links=len(ident), customers=len(nids), multi_arm=int((narms > 1).sum()),
        ids_hist={int(x): int(n) for x, n in zip(ks, kc)}, by_browser=g, browser_hist=bhist,
        ids_not_in_visits=len(unseen), link_ids=len(distinct),
    )


def _ids_and_arms(group: np.ndarray, arm: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
    """Per group (0..G-1, only groups present): number of rows and of distinct arms."""
    if not len(group):
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    width = int(group.max()) + 1
    n = np.bincount(group, minlength=width)
    distinct = sum((np.bincount(group[arm == j], minlength=width) > 0).astype(np.int64) for j in range(k))
    present = n > 0
    return n[present], np.asarray(distinct)[present]


@dataclass
class VisitArms:
    """The part of the counting that reads only the visits: each unit's arm (hashed and recorded)
    and each numeric covariate's moments per recorded arm."""

    hashed: np.ndarray  # per visits row: the arm index the spec's hash gives
    rec: np.ndarray  # per visits row: the recorded arm index (-1 unknown name, -2 empty)
    unknown: dict[str, int]
    missing: int
    moments: dict[str, list[dict[str, object]]]  # covariate -> numeric_moments rows


def visit_arms(spec: Spec, ids: pd.Series, recorded: pd.Series, covariates: dict[str, np.ndarray],
               hasher: Callable[[Spec, pd.Series], np.ndarray] = hash_arms) -> VisitArms:
    """`VisitArms` of the given visits columns (pure: it reads only its arguments; `hasher` gives the
    contract's arm of each id, `hash_arms` unless an engine has a faster equal one)."""
    hashed = hasher(spec, ids).astype(np.int64)
    rec, unknown, missing = _recorded_codes(spec, recorded)
    rec = rec.astype(np.int64)
    k = len(spec.arms)
    return VisitArms(hashed, rec, unknown, missing, {c: numeric_moments(x, rec, k) for c, x in covariates.items()})


def start_visit_arms(spec: Spec, visits: pd.DataFrame,
                     hasher: Callable[[Spec, pd.Series], np.ndarray] = hash_arms) -> Future[VisitArms]:
    """`visit_arms` on a worker thread, over its own copy of the columns it needs.

    The engine starts it as soon as the visits are loaded, so it runs while the exposures and
    the identity links are read and matched: hashing ids holds Python's lock, while Arrow's
    reading and matching release it, so on two cores the two overlap.
    """
    covs = {c: visits[c].to_numpy(dtype=np.float64, copy=True) for c in spec.audit.covariates}
    pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="armlock-visits")
    try:
        return pool.submit(visit_arms, spec, visits[UNIT].copy(), visits[ARM].copy(), covs, hasher)
    finally:
        pool.shutdown(wait=False)  # the task runs to its end; the pool takes no more


def compute(spec: Spec, fr: Frames, early: Future[VisitArms] | None = None) -> AuditTables:
    """All sufficient statistics of one audit (`early`: `start_visit_arms` of these visits, if started)."""
    v = fr.visits
    va = early.result() if early is not None else visit_arms(
        spec, v[UNIT], v[ARM], {c: v[c].to_numpy(dtype=np.float64) for c in spec.audit.covariates})
    hashed, rec = va.hashed, va.rec
    eff = np.where(rec >= 0, rec, hashed).astype(np.int64)
    split, integ = split_and_integrity(spec, fr, eff, rec, hashed, va.unknown, va.missing)
    tables = AuditTables(split=split, integrity=integ, balance=balance_tables(spec, fr, rec, va.moments))
    tables.extra["hashed_arm"] = hashed  # per visits row, spec order: the readout's intent-to-treat arm
    if fr.exposures is not None or fr.identities is not None:
        vset = arrow_ids(v[UNIT]).combine_chunks()
        # the churn tables on a worker thread while the leakage tables are counted here: both are
        # mostly Arrow and numpy work, which releases Python's lock, so on two cores they overlap
        with ThreadPoolExecutor(max_workers=1, thread_name_prefix="armlock-churn") as pool:
            churn = pool.submit(churn_tables, spec, fr, eff, vset) if fr.identities is not None else None
            if fr.exposures is not None:
                tables.leakage = leakage_tables(spec, fr, eff, vset)
            if churn is not None:
                tables.churn = churn.result()
    return tables
