"""The readout's pandas engine: visits, exposures and orders -> per-arm moment sums (readout.tables).

Joins each order to its unit (by unit id, or by customer key through the identity links with
the first-unit rule), applies the outcome window and the revenue cap, and sums per arm and per
look. The arm is the one the spec's hash gives (intent to treat), taken from the audit's engine.
"""

from __future__ import annotations

from datetime import date, timedelta

import numpy as np
import pandas as pd

from armlock.assign import Spec
from armlock.audit.engine_pandas import NS_DAY, _arrow_ids, _positions
from armlock.audit.load import cutoff_of
from armlock.audit.read import CUSTOMER, TIME, UNIT, Frames
from armlock.audit.tables import AuditTables

from .load import ATTR, KEY, REV
from .tables import COV_PREFIX, VARIABLES, Moments, ReadoutTables


def look_dates(spec: Spec, as_of: date) -> list[date]:
    """The end day of each look: every `look_days` days from the start, and the as-of date last."""
    step = spec.readout.look_days
    first = spec.start.date()
    out = []
    d = first + timedelta(days=step - 1)
    while d < as_of:
        out.append(d)
        d += timedelta(days=step)
    return out + [as_of]


def _customer_positions(spec: Spec, fr: Frames, arm: np.ndarray, vset: object,
                        counts: dict[str, float]) -> tuple[pd.Index, np.ndarray]:
    """Each customer's first unit (earliest first-seen; visits are sorted by time), and the count of
    customers whose units fall in more than one arm."""
    ident = fr.identities
    assert ident is not None
    pos = _positions(ident[UNIT], vset)  # type: ignore[arg-type]
    ok = pos >= 0
    links = pd.DataFrame({"c": ident[CUSTOMER].to_numpy()[ok], "p": pos[ok], "a": arm[pos[ok]]})
    g = links.groupby("c", sort=False)
    first = g["p"].min()
    counts["customers_linked"] = len(first)
    counts["customers_multi_arm"] = int((g["a"].nunique() > 1).sum())
    return pd.Index(first.index), first.to_numpy()


def _exposed_during_test(spec: Spec, fr: Frames, fs: np.ndarray) -> np.ndarray:
    """1.0 for each visits row with an exposure at or after both the start and its first-seen time."""
    e = fr.exposures
    assert e is not None
    pos = _positions(e[UNIT], _arrow_ids(fr.visits[UNIT]).combine_chunks())
    t = e[TIME].to_numpy(dtype="datetime64[ns]").view(np.int64)
    seen = pos >= 0
    during = seen & (t >= pd.Timestamp(spec.start).value) & (t >= np.where(seen, fs[np.maximum(pos, 0)], 0))
    out = np.zeros(len(fs), dtype=np.float64)
    out[pos[during]] = 1.0
    return out


def compute(spec: Spec, fr: Frames, audit: AuditTables, orders: pd.DataFrame, as_of: date,
            counts: dict[str, float], notes: list[str]) -> ReadoutTables:
    """All sufficient statistics of one readout."""
    cfg = spec.readout
    v = fr.visits
    arms = list(spec.arm_names)
    arm = np.asarray(audit.extra["hashed_arm"], dtype=np.int64)
    n = len(v)
    fs = v[TIME].to_numpy(dtype="datetime64[ns]").view(np.int64)
    cutoff = cutoff_of(as_of).value
    exposed = np.zeros(n, dtype=np.float64)
    if audit.leakage is not None and audit.leakage.exposed_rows is not None:
        exposed = np.asarray(audit.leakage.exposed_rows, dtype=np.float64)
    elif fr.exposures is not None:  # an engine that kept no per-row flag: join the exposure log here
        exposed = _exposed_during_test(spec, fr, fs)

    # covariates: an empty cell gets the pooled mean (counted)
    covs = list(cfg.covariates)
    xs = []
    for c in covs:
        x = v[c].to_numpy(dtype=np.float64).copy()
        nan = np.isnan(x)
        if nan.any():
            fill = float(np.nanmean(x)) if (~nan).any() else 0.0
            x[nan] = fill
            notes.append(f"covariate '{c}': {int(nan.sum()):,} unit(s) with no value were given the pooled "
                         f"mean {fill:,.4g} (arm-blind, so the comparison stays fair)")
        xs.append(x)

    # orders -> units
    vset = _arrow_ids(v[UNIT]).combine_chunks()
    if spec.readout.orders.customer:
        if fr.identities is None:
            from armlock.assign import InputError

            raise InputError("orders are keyed by customer ([readout.orders] customer = "
                             f"\"{spec.readout.orders.customer}\") but no identity links were given: "
                             "pass --identities to join customers to visitors")
        cust, first = _customer_positions(spec, fr, arm, vset, counts)
        idx = cust.get_indexer(orders[KEY].to_numpy())
        pos = np.where(idx >= 0, first[np.maximum(idx, 0)], -1)
        if counts["customers_multi_arm"]:
            notes.append(f"{int(counts['customers_multi_arm']):,} customer(s) have visitor ids in more than one arm; "
                         "each counts in the arm of their first visitor id (intent to treat)")
    else:
        pos = _positions(orders[KEY], vset)
    t = orders[TIME].to_numpy(dtype="datetime64[ns]").view(np.int64)
    rev = orders[REV].to_numpy(dtype=np.float64)
    matched = pos >= 0
    counts["orders_unmatched"] = int((~matched).sum())
    if (~matched).any():
        what = "customer key has no visitor id in the visits" if spec.readout.orders.customer else \
            "unit id is not in the visits"
        notes.append(f"orders: {int((~matched).sum()):,} order row(s) ({rev[~matched].sum():,.2f} revenue) whose "
                     f"{what} were left out: they cannot be given an arm")
    fs_o = np.where(matched, fs[np.maximum(pos, 0)], 0)
    before = matched & (t < fs_o)
    counts["orders_before_first_seen"] = int(before.sum())
    if before.any():
        notes.append(f"orders: {int(before.sum()):,} order row(s) placed before their unit was first seen were "
                     "left out: the test cannot have caused them")
    valid = matched & ~before
    window_ns = None if cfg.window == "to_as_of" else int(cfg.window) * NS_DAY
    included = np.ones(n, dtype=bool)
    if window_ns is not None:
        after = valid & (t >= fs_o + window_ns)
        counts["orders_after_window"] = int(after.sum())
        valid &= ~after
        included = fs + window_ns <= cutoff
        counts["units_window_incomplete"] = int((~included).sum())
        if (~included).any():
            notes.append(f"{int((~included).sum()):,} unit(s) first seen less than {cfg.window} days before the end of "
                         f"{as_of} were left out: their outcome window has not ended")
        if not included.any():
            from armlock.assign import InputError

            raise InputError(f"no unit has a complete {cfg.window}-day outcome window by {as_of}: "
                             "choose a later --as-of or a shorter [readout] window")
    vpos, vt, vrev = pos[valid], t[valid], rev[valid]

    def unit_sums(limit: int) -> tuple[np.ndarray, np.ndarray]:
        m = vt < limit
        r = np.bincount(vpos[m], weights=vrev[m], minlength=n)
        o = np.bincount(vpos[m & (vrev >= 0)], minlength=n).astype(np.float64)
        return r, o

    revenue, orders_n = unit_sums(cutoff)
    cap = None
    if cfg.revenue_cap:
        cap = float(np.quantile(revenue[included], cfg.revenue_cap))
        capped = int((revenue[included] > cap).sum())
        counts["units_capped"] = capped
        counts["revenue_cap_value"] = cap
        notes.append(f"revenue cap: unit revenue above the pooled {cfg.revenue_cap:g} quantile, {cap:,.2f}, was "
                     f"capped for {capped:,} unit(s) (the quantile is computed over all arms together)")
    attributed = None
    if ATTR in orders:
        a = orders[ATTR].to_numpy()[valid] & (vt < cutoff) & included[vpos]
        attributed = float(vrev[a].sum())
    names = (*VARIABLES, *(COV_PREFIX + c for c in covs))

    def moments(keep: np.ndarray, r: np.ndarray, o: np.ndarray) -> dict[str, Moments]:
        if cap is not None:
            r = np.minimum(r, cap)
        data = np.column_stack([r, o, (o > 0).astype(np.float64), exposed, *xs])
        return {name: Moments.of(names, data[keep & (arm == i)]) for i, name in enumerate(arms)}

    final = moments(included, revenue, orders_n)
    looks = []
    for d in look_dates(spec, as_of):
        lim = cutoff_of(d).value
        keep = fs < lim
        if window_ns is not None:
            keep &= fs + window_ns <= lim
        if not keep.any():
            continue
        r, o = (revenue, orders_n) if lim >= cutoff else unit_sums(lim)
        looks.append((d.isoformat(), moments(keep, r, o)))
    return ReadoutTables(arms=arms, covariates=covs, final=final, looks=looks, attributed=attributed,
                         counts=counts)
