"""The readout's pandas engine: visits, exposures and orders -> per-arm moment sums (readout.tables).

Joins each order to its unit (by unit id, or by customer key through the identity links with
the first-unit rule), applies the outcome window and the revenue cap, and sums per arm and per
look. The arm is the one the spec's hash gives (intent to treat), taken from the audit's engine.
Every sum is exact or taken in a fixed order (`readout.rules`), so the Spark engine
(`readout.engine_spark`) gives the same tables bit for bit.
"""

from __future__ import annotations

import math
import os
from collections.abc import Callable, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from datetime import date
from fractions import Fraction

import numpy as np
import pandas as pd
import pyarrow as pa

from armlock.assign import InputError, Spec
from armlock.shared import engine_pandas as audit_engine
from armlock.shared.engine import EngineResult, Inputs, ReadoutResult, file_bytes, load_frames, local_path
from armlock.shared.engine_pandas import NS_DAY
from armlock.shared.keys import arrow_ids, positions
from armlock.shared.exactsum import exact_sum, grouped_exact_sums, rounded_sum
from armlock.shared.load import cutoff_of
from armlock.shared.read import CUSTOMER, TIME, UNIT, Frames
from armlock.shared.tables import AuditTables

from armlock.shared.load_readout import ATTR, KEY, REV, attach_covariates, load_orders
from .rules import fill_value, final_names, linear_quantile, look_dates, look_names, means_of, moments_of, pairs
from armlock.shared.readout_tables import Moments, ReadoutTables


def readout(spec: Spec, inputs: Inputs, as_of: date | None, advance: Callable[[int], None]) -> ReadoutResult:
    """The whole embedded readout: the audit's loaders and tables, then the orders and the readout's tables."""
    if inputs.orders is None:
        raise InputError("a readout needs the orders log (--orders)")
    fr, used, early = load_frames(spec, inputs, as_of, advance)
    attach_covariates(spec, local_path(inputs.visits, "--visits"), fr.visits, [])  # type: ignore[arg-type]
    return with_orders(spec, inputs, fr, used, audit_engine.compute(spec, fr, early), advance)


@dataclass
class MatchedOrders:
    """The orders log loaded, with its notes and counts, and each order's unit (its visits row, -1:
    none) when orders are keyed by unit id (None: by customer, matched later through the links)."""

    orders: pd.DataFrame
    notes: list[str]
    counts: dict[str, float]
    pos: np.ndarray | None


def match_orders(spec: Spec, inputs: Inputs, fr: Frames, used: date,
                 locate: Callable[[pd.Series, pa.Array], np.ndarray] = positions) -> MatchedOrders:
    """Load the orders and find each one's unit (`locate`: row of each id in the units, -1 when
    not there): needs only the visits, so it can run beside the exposures' count."""
    notes: list[str] = []
    counts: dict[str, float] = {}
    orders = load_orders(spec, local_path(inputs.orders, "--orders"), used, notes, counts)  # type: ignore[arg-type]
    pos = None
    if not spec.readout.orders.customer:
        pos = locate(orders[KEY], arrow_ids(fr.visits[UNIT]).combine_chunks())
    return MatchedOrders(orders, notes, counts, pos)


def with_orders(spec: Spec, inputs: Inputs, fr: Frames, used: date, audit_tables: AuditTables,
                advance: Callable[[int], None], matched: MatchedOrders | None = None) -> ReadoutResult:
    """The readout once the audit's tables are counted: the orders loaded and matched once (`matched`,
    when that already ran), then the per-unit tables (shared by the embedded engines, pandas and DuckDB)."""
    audit = EngineResult(tables=audit_tables, as_of=used, notes=list(fr.notes), counts=dict(fr.counts),
                         data_through=fr.data_through)
    m = matched if matched is not None else match_orders(spec, inputs, fr, used)
    advance(file_bytes(local_path(inputs.orders, "--orders")))
    tables = compute(spec, fr, audit_tables, m.orders, used, m.counts, m.notes, m.pos)
    return ReadoutResult(audit=audit, tables=tables, notes=m.notes)


def grouped_moments(names: tuple[str, ...], data: np.ndarray | Sequence[np.ndarray], group: np.ndarray,
                    groups: int) -> list[Moments]:
    """Moments of the rows of `data` (units x variables, or one array per variable) in each group
    0..groups-1, exactly (readout.rules).

    Each column's sums, then each pair's sum of centred products, are exact per group (so the
    order they are taken in does not matter); they run a column or a pair at a time on threads
    (numpy's work releases Python's lock), over contiguous columns (no strided copies)."""
    cols = [np.ascontiguousarray(data[:, j]) for j in range(data.shape[1])] if isinstance(data, np.ndarray) \
        else [np.ascontiguousarray(c, dtype=np.float64) for c in data]
    k = len(names)
    n = np.bincount(group, minlength=groups)
    group = group.astype(np.int64)
    with ThreadPoolExecutor(max_workers=_WORKERS, thread_name_prefix="armlock-moments") as pool:
        col_sums = list(pool.map(lambda j: grouped_exact_sums(cols[j], group, groups), range(k)))
        means = np.array([means_of(int(n[g]), [col_sums[j][g] for j in range(k)]) for g in range(groups)]).reshape(
            groups, k)
        d = [cols[j] - means[:, j][group] for j in range(k)]  # the same differences as data - means[group]
        pp = pairs(k)

        def cross(ab: tuple[int, int]) -> tuple[list[Fraction], np.ndarray]:
            with np.errstate(over="ignore", invalid="ignore"):  # values near 1e308: their products overflow
                prod = d[ab[0]] * d[ab[1]]
            bad = ~np.isfinite(prod)
            return grouped_exact_sums(prod, group, groups), np.unique(group[bad]) if bad.any() else group[:0]

        sums = list(pool.map(cross, pp))
    out = [moments_of(names, int(n[g]), means[g], [sums[j][0][g] for j in range(len(pp))]) for g in range(groups)]
    for j, (a, b) in enumerate(pp):  # an overflowing product: that co-moment is infinite (the exact sum skips it)
        for g in sums[j][1].tolist():
            out[g].m2[a, b] = out[g].m2[b, a] = math.inf
    return out


_WORKERS = max(1, min(os.cpu_count() or 1, 4))


def _customer_positions(spec: Spec, fr: Frames, arm: np.ndarray, vset: object,
                        counts: dict[str, float]) -> tuple[pd.Index, np.ndarray]:
    """Each customer's first unit (earliest first-seen; visits are sorted by time), and the count of
    customers whose units fall in more than one arm."""
    ident = fr.identities
    assert ident is not None
    pos = positions(ident[UNIT], vset)
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
    pos = fr.exposure_pos  # matched once by the loader; computed here only for frames built otherwise
    if pos is None:
        pos = positions(e[UNIT], arrow_ids(fr.visits[UNIT]).combine_chunks())
    t = e[TIME].to_numpy(dtype="datetime64[ns]").view(np.int64)
    seen = pos >= 0
    during = seen & (t >= pd.Timestamp(spec.start).value) & (t >= np.where(seen, fs[np.maximum(pos, 0)], 0))
    out = np.zeros(len(fs), dtype=np.float64)
    out[pos[during]] = 1.0
    return out


def compute(spec: Spec, fr: Frames, audit: AuditTables, orders: pd.DataFrame, as_of: date,
            counts: dict[str, float], notes: list[str], order_pos: np.ndarray | None = None) -> ReadoutTables:
    """All sufficient statistics of one readout (`order_pos`: each order's visits row, when already found)."""
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
            fin = np.isfinite(x)
            fill = fill_value(exact_sum(x[fin]), int(fin.sum()), int((x == np.inf).sum()),
                              int((x == -np.inf).sum()))
            x[nan] = fill
            notes.append(f"covariate '{c}': {int(nan.sum()):,} unit(s) with no value were given the pooled "
                         f"mean {fill:,.4g} (arm-blind, so the comparison stays fair)")
        xs.append(x)

    # orders -> units
    def vset() -> pa.Array:  # the units' ids, for the lookups still to do here
        return arrow_ids(v[UNIT]).combine_chunks()

    if spec.readout.orders.customer:
        if fr.identities is None:
            raise InputError("orders are keyed by customer ([readout.orders] customer = "
                             f"\"{spec.readout.orders.customer}\") but no identity links were given: "
                             "pass --identities to join customers to visitors")
        cust, first = _customer_positions(spec, fr, arm, vset(), counts)
        ci = cust.get_indexer(orders[KEY].to_numpy())
        # no usable link at all: no order finds a unit (the orders check then fails on the match rate)
        pos = np.where(ci >= 0, first[np.maximum(ci, 0)], -1) if len(first) else np.full(len(ci), -1, np.int64)
        if counts["customers_multi_arm"]:
            notes.append(f"{int(counts['customers_multi_arm']):,} customer(s) have visitor ids in more than one arm; "
                         "each counts in the arm of their first visitor id (intent to treat)")
    else:
        pos = order_pos if order_pos is not None else positions(orders[KEY], vset())
    t = orders[TIME].to_numpy(dtype="datetime64[ns]").view(np.int64)
    rev = orders[REV].to_numpy(dtype=np.float64)
    dn, dc = np.unique(t // NS_DAY, return_counts=True)
    orders_daily = {str(np.datetime64(int(d), "D")): int(c) for d, c in zip(dn, dc)}
    matched = pos >= 0
    counts["orders_unmatched"] = int((~matched).sum())
    if (~matched).any():
        what = "customer key has no visitor id in the visits" if spec.readout.orders.customer else \
            "unit id is not in the visits"
        lost = rounded_sum(rev[~matched])  # exact, as the Spark engine's
        notes.append(f"orders: {int((~matched).sum()):,} order row(s) ({lost:,.2f} revenue) whose "
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
            raise InputError(f"no unit has a complete {cfg.window}-day outcome window by {as_of}: "
                             "choose a later --as-of or a shorter [readout] window")
    # each unit's orders added in one fixed order, by time and then revenue (the Spark engine's too)
    idx = np.flatnonzero(valid)
    idx = idx[np.lexsort((rev[idx], t[idx] // 1000))]  # microseconds: the finest time both engines hold
    vpos, vt, vrev = pos[idx], t[idx], rev[idx]

    def unit_sums(limit: int) -> tuple[np.ndarray, np.ndarray]:
        m = vt < limit
        r = np.bincount(vpos[m], weights=vrev[m], minlength=n)  # row by row, in the order above
        o = np.bincount(vpos[m & (vrev >= 0)], minlength=n).astype(np.float64)
        return r, o

    revenue, orders_n = unit_sums(cutoff)
    cap = None
    if cfg.revenue_cap:
        pooled = np.sort(revenue[included])
        cap = linear_quantile(len(pooled), cfg.revenue_cap, lambda i: float(pooled[i]))
        capped = int((pooled > cap).sum())
        counts["units_capped"] = capped
        counts["revenue_cap_value"] = cap
        notes.append(f"revenue cap: unit revenue above the pooled {cfg.revenue_cap:g} quantile, {cap:,.2f}, was "
                     f"capped for {capped:,} unit(s) (the quantile is computed over all arms together)")
    attributed = None
    if ATTR in orders:
        a = orders[ATTR].to_numpy()[idx] & (vt < cutoff) & included[vpos]
        attributed = rounded_sum(vrev[a])
    k = len(arms)

    def moments(names: tuple[str, ...], keep: np.ndarray, cols: list[np.ndarray]) -> dict[str, Moments]:
        m = int(keep.sum())
        if keep[:m].all():  # the units first seen before a day: a prefix (the visits are sorted by first-seen)
            return dict(zip(arms, grouped_moments(names, [c[:m] for c in cols], arm[:m], k)))
        return dict(zip(arms, grouped_moments(names, [c[keep] for c in cols], arm[keep], k)))

    def capped_(r: np.ndarray) -> np.ndarray:
        return np.minimum(r, cap) if cap is not None else r

    def look(d: date) -> tuple[str, dict[str, Moments]] | None:
        lim = cutoff_of(d).value
        keep = fs < lim
        if window_ns is not None:
            keep &= fs + window_ns <= lim
        if not keep.any():
            return None
        r = revenue if lim >= cutoff else unit_sums(lim)[0]
        return d.isoformat(), moments(look_names(covs), keep, [capped_(r), *xs])

    # the final moments and each look's on threads of their own (numpy's work releases Python's lock)
    with ThreadPoolExecutor(max_workers=_WORKERS, thread_name_prefix="armlock-looks") as pool:
        final_f = pool.submit(moments, final_names(covs), included,
                              [capped_(revenue), orders_n, (orders_n > 0).astype(np.float64), exposed, *xs])
        looks = [x for x in pool.map(look, look_dates(spec, as_of)) if x is not None]
        final = final_f.result()
    return ReadoutTables(arms=arms, covariates=covs, final=final, looks=looks, attributed=attributed,
                         counts=counts, units=(v[UNIT][included], v[TIME][included], capped_(revenue)[included]),
                         orders_daily=orders_daily)
