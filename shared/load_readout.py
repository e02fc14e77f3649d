"""The readout's I/O edge: the orders log, the spend file and extra visits covariates, by the spec's column map.

Uses the audit's readers (`audit.read`), so a bad file gets the same clear error naming file,
column and rows (InputError, exit 4); rows set aside are counted and become input notes.
"""

from __future__ import annotations

from datetime import date
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from armlock.assign import InputError, Spec
from .exactsum import rounded_sum
from .keys import arrow_ids
from .load import cutoff_of
from .read import (
    Source,
    TIME,
    UNIT,
    read_ids,
    read_labels,
    read_mapped,
    read_numbers,
    read_times,
)

PathLike = str | Path
KEY, REV, ATTR = "_key", "_revenue", "_attributed"
# No single order is worth a quadrillion in any currency; larger (finite) values are a wrong column
# or a broken export, and near 1e308 their sums overflow a float (our choice; both engines refuse).
REVENUE_MAX = 1e15


def _set_aside(src: Source, col: str, mask: np.ndarray, why: str, notes: list[str], what: str = "an empty") -> int:
    n = int(mask.sum())
    if n:
        notes.append(f"{src.path.name}: {n:,} row(s) with {what} '{col}' ({src.rows(np.flatnonzero(mask), n)}) "
                     f"were set aside: {why}")
    return n


def load_orders(spec: Spec, path: PathLike, as_of: date, notes: list[str], counts: dict[str, float]) -> pd.DataFrame:
    """Orders as a frame of _key (unit id or customer key), _time (UTC), _revenue, _attributed (bool).

    Repeated order ids are counted once; rows after the as-of date are ignored; negative revenue
    (refunds) is kept and counted. Sorted by time.
    """
    co = spec.readout.orders
    key = co.unit_id or co.customer
    which = "unit_id" if co.unit_id else "customer"
    # the audit's one reader (shared/read.py): BOM noted, duplicate and nested columns refused, damaged files
    mapped = read_mapped(path, "orders", "[readout.orders]", {which: key, "time": co.time, "revenue": co.revenue},
                         notes, optional={"order_id": co.order_id, "attributed": co.attributed})
    src, table = mapped.src, mapped.table
    optional = {name: mapped.columns[name] for name in ("order_id", "attributed") if name in mapped.columns}
    for name, col in (("order_id", co.order_id), ("attributed", co.attributed)):
        if col and name not in optional:
            notes.append(f"{src.path.name}: no '{col}' column ([readout.orders] {name}); "
                         + ("orders are not de-duplicated" if name == "order_id"
                            else "attributed revenue comes only from --attributed-revenue"))
    if pa.types.is_boolean(table.column(co.revenue).type):
        raise InputError(f"{src.path}: column '{co.revenue}' ([readout.orders] revenue) holds true/false values, "
                         "not amounts: map the order's revenue column")
    ids, empty = read_ids(src, table, key, notes)
    frame = pd.DataFrame({KEY: ids, TIME: read_times(src, table, co.time, notes),
                          REV: read_numbers(src, table, co.revenue)})
    if "attributed" in optional:
        lab = read_labels(table, optional["attributed"])
        frame[ATTR] = (lab == co.attributed_value).to_numpy()
    oid = None
    if "order_id" in optional:
        oid, no_oid = read_ids(src, table, optional["order_id"], [])
    del table
    counts["order_rows"] = len(frame)
    counts["order_empty_keys"] = _set_aside(src, key, empty, "an order needs a key to find its unit", notes)
    no_time = frame[TIME].isna().to_numpy() & ~empty
    counts["order_missing_time"] = _set_aside(src, co.time, no_time, "an order needs a time", notes)
    no_rev = frame[REV].isna().to_numpy() & ~empty & ~no_time
    counts["order_missing_revenue"] = _set_aside(src, co.revenue, no_rev, "an order needs revenue", notes)
    rev = frame[REV].to_numpy()
    huge = np.flatnonzero(np.isfinite(rev) & (np.abs(rev) >= REVENUE_MAX))
    if len(huge):
        raise InputError(f"{src.path}: column '{co.revenue}' ([readout.orders] revenue) has {len(huge):,} value(s) "
                         f"of {REVENUE_MAX:.0e} or more ({src.rows(huge)}; e.g. {rev[huge[0]]:.6g}): an order's "
                         "revenue is an amount; map the right column or fix the export")
    inf_rev = np.isinf(rev) & ~empty & ~no_time
    counts["order_infinite_revenue"] = _set_aside(src, co.revenue, inf_rev, "an order's revenue is an amount",
                                                  notes, "an infinite")
    keep = ~(empty | no_time | no_rev | inf_rev)
    if oid is not None:
        dup, redate = _order_ids(frame, oid, no_oid, keep)
        moved = redate.notna().to_numpy() & ~dup & keep
        n_redated = int(moved.sum())
        late_before = int(((frame[TIME] >= cutoff_of(as_of)).to_numpy() & moved).sum())
        frame[TIME] = frame[TIME].where(redate.isna(), redate)
        counts["refunds_dated_at_order"] = n_redated
        if n_redated:
            notes.append(f"{src.path.name}: {n_redated:,} refund row(s) reuse their order's id and were dated at "
                         f"their order ({late_before:,} of them dated after the as-of {as_of}): a refund is netted "
                         "in the window of the order it refunds")
    late = (frame[TIME] >= cutoff_of(as_of)).to_numpy() & keep
    counts["orders_after_as_of"] = int(late.sum())
    if late.any():
        notes.append(f"{src.path.name}: {int(late.sum()):,} order(s) after the as-of date {as_of} are ignored")
    keep &= ~late
    if oid is not None:
        dup &= keep
        counts["duplicate_orders"] = int(dup.sum())
        if dup.any():
            notes.append(f"{src.path.name}: {int(dup.sum()):,} row(s) repeat an order id already seen "
                         f"({src.rows(np.flatnonzero(dup))}); each order id was counted once (a refund "
                         "repeats only with the same id, time and amount)")
        keep &= ~dup
    frame = frame[keep] if not keep.all() else frame
    refunds = frame[REV].to_numpy() < 0
    counts["refund_rows"] = int(refunds.sum())
    counts["refund_total"] = rounded_sum(frame[REV].to_numpy()[refunds])  # exact: any engine, the same bits
    if refunds.any():
        notes.append(f"{src.path.name}: {int(refunds.sum()):,} refund row(s) (negative revenue, "
                     f"{-counts['refund_total']:,.2f} in total) were kept: revenue is net of refunds")
    return frame.sort_values(TIME, kind="stable").reset_index(drop=True)


def _order_ids(frame: pd.DataFrame, oid: pd.Series, no_oid: np.ndarray,
               keep: np.ndarray) -> tuple[np.ndarray, pd.Series]:
    """Repeated rows, and the time each refund takes from its order.

    A sale (revenue >= 0) repeating an order id seen earlier in the file is a repeat. A refund
    (revenue < 0) is a repeat only when its order id, time and amount all repeat an earlier
    refund: exports often give a refund its order's id, and partial refunds share it. A refund whose
    order id is a sale's gets that sale's time (the first sale row of the id, when it is usable), so
    it is netted in the order's window whatever its own date.
    """
    is_ref = (frame[REV] < 0).to_numpy()
    # order ids as integer codes (Arrow's dictionary encoding: equal codes exactly for equal ids)
    enc = pc.dictionary_encode(arrow_ids(oid)).combine_chunks()
    codes = pc.fill_null(enc.indices, -1).to_numpy(zero_copy_only=False).astype(np.int64)
    has = ~np.asarray(no_oid)
    times = frame[TIME].to_numpy(dtype="datetime64[ns]")  # UTC; not an object array of Timestamps (slow)
    sale_rows = np.flatnonzero(~is_ref)
    first = np.zeros(len(sale_rows), dtype=bool)  # each sale id's first row among the sales
    first[np.unique(codes[sale_rows], return_index=True)[1]] = True
    sale_dup = np.zeros(len(codes), dtype=bool)
    sale_dup[sale_rows[~first]] = True
    sale_dup &= has
    ref_rows = np.flatnonzero(is_ref)  # a refund repeats only an earlier refund's id, time and amount
    ref_key = pd.DataFrame({"o": codes[ref_rows], "t": times[ref_rows], "r": frame[REV].to_numpy()[ref_rows]})
    ref_dup = np.zeros(len(codes), dtype=bool)
    ref_dup[ref_rows[ref_key.duplicated(keep="first").to_numpy()]] = True
    ref_dup &= has
    sales = has & ~is_ref & ~sale_dup
    # each refund's order: its first usable sale (sale ids are unique here), looked up by code
    usable = np.flatnonzero(sales & keep)
    sale_time = np.full(len(enc.dictionary) + 1, np.datetime64("NaT"), dtype="datetime64[ns]")
    sale_time[codes[usable]] = times[usable]
    when = np.full(len(codes), np.datetime64("NaT"), dtype="datetime64[ns]")
    found = is_ref & has & (codes >= 0)
    when[found] = sale_time[codes[found]]
    redate = pd.Series(pd.to_datetime(when, utc=True), index=frame.index)
    return sale_dup | ref_dup, redate


def load_spend(spec: Spec, path: PathLike, as_of: date, notes: list[str]) -> float:
    """Total spend in the spend file on the test's days (start to as-of, UTC); other days noted."""
    return float(sum(load_spend_days(spec, path, as_of, notes).values()))


def load_spend_days(spec: Spec, path: PathLike, as_of: date, notes: list[str]) -> dict[date, float]:
    """Spend per UTC day (all campaigns together) on the test's days (start to as-of); other days noted."""
    cs = spec.readout.spend
    mapped = read_mapped(path, "spend", "[readout.spend]", {"day": cs.day, "amount": cs.amount}, notes)
    src, table = mapped.src, mapped.table
    day = read_times(src, table, cs.day, [])
    amount = read_numbers(src, table, cs.amount)
    del table
    blank = (day.isna() | amount.isna()).to_numpy()
    if blank.any():
        raise InputError(f"{src.path}: {int(blank.sum()):,} row(s) lack a day or an amount "
                         f"({src.rows(np.flatnonzero(blank))}); every spend row needs both")
    neg = (amount < 0).to_numpy()
    if neg.any():
        raise InputError(f"{src.path}: column '{cs.amount}' has {int(neg.sum()):,} negative amount(s) "
                         f"({src.rows(np.flatnonzero(neg))}); spend is never negative")
    huge = ~np.isfinite(amount.to_numpy(dtype=np.float64)) | (amount.to_numpy(dtype=np.float64) >= REVENUE_MAX)
    if huge.any():
        raise InputError(f"{src.path}: column '{cs.amount}' has {int(huge.sum()):,} amount(s) that are infinite or "
                         f"{REVENUE_MAX:.0e} or more ({src.rows(np.flatnonzero(huge))}); spend is a finite amount")
    start = pd.Timestamp(spec.start).normalize()
    inside = ((day >= start) & (day < cutoff_of(as_of))).to_numpy()
    out = int((~inside).sum())
    if out:
        notes.append(f"{src.path.name}: {out:,} spend row(s) outside the test's days ({spec.start.date()} to "
                     f"{as_of}), {float(amount[~inside].sum()):,.2f} in total, were left out")
    days = day[inside].dt.date.to_numpy()
    by_day = pd.Series(amount[inside].to_numpy(dtype=np.float64)).groupby(days).sum()
    return {d: float(v) for d, v in by_day.items()}


def attach_covariates(spec: Spec, path: PathLike, visits: pd.DataFrame, notes: list[str]) -> None:
    """Add the [readout] covariates the audit did not read to `visits` (matched by unit id,
    each unit's earliest row, as the audit keeps)."""
    missing = [c for c in spec.readout.covariates if c not in visits.columns]
    if not missing:
        return
    cv = spec.audit.visits
    cols = {"unit_id": cv.unit_id, "first_seen": cv.first_seen}
    cols.update({f"covariates[{i}]": c for i, c in enumerate(missing)})
    mapped = read_mapped(path, "visits", "[readout]", cols, [], delimiter=cv.delimiter)
    src, table = mapped.src, mapped.table
    ids, _ = read_ids(src, table, cv.unit_id, [])
    extra = pd.DataFrame({UNIT: ids, TIME: read_times(src, table, cv.first_seen, [], cv.first_seen_format,
                                                      "[audit.visits] first_seen_format")})
    for c in missing:
        extra[c] = read_numbers(src, table, c)
    del table
    extra = extra.sort_values(TIME, kind="stable").drop_duplicates(UNIT, keep="first")
    pos = pd.Index(extra[UNIT]).get_indexer(visits[UNIT])
    for c in missing:
        vals = extra[c].to_numpy()
        visits[c] = np.where(pos >= 0, vals[np.maximum(pos, 0)], np.nan)
