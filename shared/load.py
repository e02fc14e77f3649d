"""Load the three logs by the spec's column map: set aside empty ids, keep each unit's earliest row, cut at as-of.

Row-level rules (any engine reproduces them; the counts go to `Frames.counts` and the notes):
- visits: rows without an id or a first-seen time are set aside; of several rows of one id the
  earliest is kept; units first seen after the as-of day are ignored;
- exposures: rows without an id or a time, and rows after the as-of day, are set aside; exact
  duplicate rows (same id, time, campaign and kind) are counted once;
- identity links: with a link-time column, links made after the as-of day (or without a time)
  are set aside; without one, only links of units in the visits as of that day are used.
"""

from __future__ import annotations

from datetime import date, datetime, time, timedelta, UTC
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from armlock.assign import InputError, Spec

from .keys import arrow_ids, duplicate_rows, ns_of, positions, repeated_rows, unit_codes
from .read import (
    ARM,
    BROWSER,
    CAMPAIGN,
    CUSTOMER,
    FP,
    KIND,
    TIME,
    UNIT,
    Frames,
    Source,
    read_ids,
    read_mapped,
    read_labels,
    read_numbers,
    read_times,
)

PathLike = str | Path


def check_as_of(as_of: date | None) -> None:
    """Refuse an as-of date outside the years armlock reads times in (1678-2261), before any file is read."""
    if as_of is not None and not date(1678, 1, 1) <= as_of <= date(2261, 12, 31):
        raise InputError(f"--as-of {as_of.isoformat()} is outside the years 1678-2261 that armlock reads times in; "
                         "give the last day the audit or readout should cover, e.g. 2026-12-07")


def cutoff_of(as_of: date) -> pd.Timestamp:
    """The end of the as-of day (UTC): data at or after this instant is ignored."""
    return pd.Timestamp(datetime.combine(as_of + timedelta(days=1), time(0), tzinfo=UTC))


def _note_empty(src: Source, col: str, empty: np.ndarray, what: str, notes: list[str]) -> int:
    n = int(empty.sum())
    if n:
        notes.append(f"{src.path.name}: {n:,} row(s) with an empty or null '{col}' ({src.rows(np.flatnonzero(empty), n)}) "
                     f"were set aside: {what}")
    return n


def settle_as_of(fr: Any, as_of: date | None, last: date) -> date:
    """The as-of rule every engine follows, given the last first-seen day `last` of the visits.

    No date given: the last first-seen day (noted). A date after it: noted and counted
    (`days_after_data`), and the report covers data through `last` only. Sets `fr.data_through`.
    """
    if as_of is None:
        as_of = last
        fr.notes.append(f"as-of date not given: using the last first-seen date in the visits, {as_of}")
    elif as_of > last:
        fr.counts["days_after_data"] = (as_of - last).days
        fr.notes.append(f"the as-of date {as_of} is {(as_of - last).days:,} day(s) after the last first-seen day "
                        f"in the visits ({last}): the report covers data through {last} only")
    fr.data_through = min(as_of, last)
    return as_of


def load_visits(spec: Spec, path: PathLike, as_of: date | None, fr: Frames) -> date:
    """Fill `fr.visits` (one row per unit, earliest first-seen kept); returns the as-of date used."""
    cfg = spec.audit
    cv = cfg.visits
    wanted = {"unit_id": cv.unit_id, "first_seen": cv.first_seen, "arm": cv.arm}
    for key in ("segments", "covariates", "categorical_covariates"):
        wanted.update({f"[audit] {key}[{i}]": c for i, c in enumerate(getattr(cfg, key))})
    m = read_mapped(path, "visits", "[audit.visits]", wanted, fr.notes,
                    optional={"fingerprint": cv.fingerprint, "browser": cv.browser}, delimiter=cv.delimiter)
    src, table = m.src, m.table
    for key, col in (("fingerprint", cv.fingerprint), ("browser", cv.browser)):
        if col and key not in m.columns:
            fr.notes.append(f"{src.path.name}: no '{col}' column ([audit.visits] {key}); "
                            + ("the spec fingerprint in the data is not checked" if key == "fingerprint"
                               else "identity churn is not split by browser"))
    ids, empty = read_ids(src, table, cv.unit_id, fr.notes)
    frame = pd.DataFrame({UNIT: ids, TIME: read_times(src, table, cv.first_seen, fr.notes, cv.first_seen_format,
                                                      "[audit.visits] first_seen_format"),
                          ARM: read_labels(table, cv.arm)})
    if "fingerprint" in m.columns:
        frame[FP] = read_labels(table, cv.fingerprint)
    if "browser" in m.columns:
        frame[BROWSER] = read_labels(table, cv.browser)
    for col in dict.fromkeys([*cfg.segments, *cfg.categorical_covariates]):
        frame[col] = read_labels(table, col)
    for col in cfg.covariates:
        frame[col] = read_numbers(src, table, col)
    del table, m
    fr.counts["visit_rows"] = len(frame)
    fr.counts["empty_ids"] = _note_empty(src, cv.unit_id, empty, "they have no arm", fr.notes)
    no_time = frame[TIME].isna().to_numpy() & ~empty
    fr.counts["missing_first_seen"] = _note_empty(src, cv.first_seen, no_time,
                                                  "a unit needs a first-seen time", fr.notes)
    keep = ~(empty | no_time)
    if not keep.all():
        frame = frame[keep]
    if not frame[TIME].is_monotonic_increasing:  # exports are often sorted already: then no copy
        frame = frame.sort_values(TIME, kind="stable")
    dup = repeated_rows(frame[UNIT])
    n_dup = int(dup.sum())
    fr.counts["duplicate_rows"] = n_dup
    if n_dup:
        units = frame.loc[dup, UNIT].nunique()
        fr.notes.append(f"{src.path.name}: {units:,} unit id(s) had several first-seen rows "
                        f"({n_dup:,} extra row(s)); the earliest row of each was kept")
        frame = frame[~dup]
    if frame.empty:
        why = "it has no data rows" if not fr.counts["visit_rows"] else "every row lacked an id or a time"
        raise InputError(f"{src.path}: no usable rows in the visits file ({why})")
    last = frame[TIME].iloc[-1].date()
    as_of = settle_as_of(fr, as_of, last)
    cut = cutoff_of(as_of)
    late = (frame[TIME] >= cut).to_numpy()
    fr.counts["visits_after_as_of"] = int(late.sum())
    if late.any():
        fr.notes.append(f"{src.path.name}: {int(late.sum()):,} unit(s) first seen after the as-of date "
                        f"{as_of} are ignored")
        frame = frame[~late]
    if frame.empty:
        raise InputError(f"{src.path}: no units first seen on or before the as-of date {as_of}")
    known = set(spec.arm_names)
    counts = frame[ARM].value_counts()
    seen = [str(a) for a, c in counts.items() if c > 0]
    if not known & set(seen):
        raise InputError(
            f"{src.path}: none of the arms recorded in column '{cv.arm}' is an arm of the spec "
            f"(found: {', '.join(seen[:10])}; the spec's arms: {', '.join(spec.arm_names)}); "
            "map the right column in [audit.visits] arm, or check that this is the right test"
        )
    fr.visits = frame.reset_index(drop=True)
    return as_of


def load_exposures(spec: Spec, path: PathLike, as_of: date, fr: Frames) -> None:
    """Fill `fr.exposures`: unit, time, campaign and kind ("impression" | "click" | "other")."""
    ce = spec.audit.exposures
    m = read_mapped(path, "exposures", "[audit.exposures]",
                    {"unit_id": ce.unit_id, "time": ce.time, "campaign": ce.campaign, "kind": ce.kind},
                    fr.notes, delimiter=ce.delimiter)
    src, table = m.src, m.table
    ids, empty = read_ids(src, table, ce.unit_id, fr.notes)
    times = read_times(src, table, ce.time, fr.notes, ce.time_format, "[audit.exposures] time_format")
    campaign = read_labels(table, ce.campaign)
    raw_kind = read_labels(table, ce.kind)
    del table, m
    levels = [str(c) for c in raw_kind.cat.categories]
    mapped = ["impression" if v in ce.impression_values else "click" if v in ce.click_values
              else "other" for v in levels]
    others = [v for v, m in zip(levels, mapped) if m == "other"]
    kind = pd.Categorical.from_codes(
        np.array([("impression", "click", "other").index(m) for m in mapped], dtype=np.int8)[raw_kind.cat.codes.to_numpy()]
        if len(levels) else np.zeros(0, np.int8),
        categories=["impression", "click", "other"])
    frame = pd.DataFrame({UNIT: ids, TIME: times, CAMPAIGN: campaign, KIND: kind})
    fr.counts["exposure_rows"] = len(frame)
    n_other = int((frame[KIND] == "other").sum())
    if n_other:
        fr.notes.append(f"{src.path.name}: {n_other:,} row(s) have a '{ce.kind}' that is neither an "
                        f"impression nor a click ({', '.join(others[:5])}); counted as exposures of "
                        "kind 'other' (map them in [audit.exposures] impression_values / click_values)")
    fr.counts["exposure_empty_ids"] = _note_empty(src, ce.unit_id, empty, "they name no unit", fr.notes)
    no_time = frame[TIME].isna().to_numpy() & ~empty
    fr.counts["exposure_missing_time"] = _note_empty(src, ce.time, no_time, "an exposure needs a time", fr.notes)
    late = (frame[TIME] >= cutoff_of(as_of)).to_numpy() & ~(empty | no_time)
    fr.counts["exposures_after_as_of"] = int(late.sum())
    if late.any():
        fr.notes.append(f"{src.path.name}: {int(late.sum()):,} exposure row(s) after the as-of date {as_of} are ignored")
    keep = ~(empty | no_time | late)
    frame = frame[keep].reset_index(drop=True) if not keep.all() else frame
    # Exact duplicates (the same id, time, campaign and raw kind) are one event logged twice: an
    # export appended twice, or a retried upload. They would multiply impressions, so each is
    # counted once and the extra copies are counted here. Ids are matched to the visits once, and
    # the rows compared on integer keys (audit.keys).
    pos = positions(frame[UNIT], arrow_ids(fr.visits[UNIT]).combine_chunks())
    kind_raw = raw_kind[keep].reset_index(drop=True) if not keep.all() else raw_kind
    dup = duplicate_rows(ns_of(frame[TIME]), unit_codes(frame[UNIT], pos, len(fr.visits)),
                         frame[CAMPAIGN].cat.codes.to_numpy(), kind_raw.cat.codes.to_numpy())
    fr.counts["exposure_duplicate_rows"] = int(dup.sum())
    if dup.any():
        fr.notes.append(f"{src.path.name}: {int(dup.sum()):,} exposure row(s) repeat another row exactly (same id, "
                        "time, campaign and kind) and were counted once; if the vendor logs whole seconds, two real "
                        "impressions in one second look alike")
        frame = frame[~dup].reset_index(drop=True)
        pos = pos[~dup]
    fr.exposure_pos = pos
    fr.exposures = frame


def load_identities(spec: Spec, path: PathLike, as_of: date, fr: Frames) -> None:
    """Fill `fr.identities`: distinct (unit, customer) links known by the end of the as-of day."""
    ci = spec.audit.identities
    m = read_mapped(path, "identities", "[audit.identities]", {"unit_id": ci.unit_id, "customer": ci.customer},
                    fr.notes, optional={"time": ci.time}, delimiter=ci.delimiter)
    src, table = m.src, m.table
    ids, empty = read_ids(src, table, ci.unit_id, fr.notes)
    cust, no_cust = read_ids(src, table, ci.customer, [])
    times = (read_times(src, table, ci.time, fr.notes, ci.time_format, "[audit.identities] time_format")
             if "time" in m.columns else None)
    del table, m
    fr.counts["identity_rows"] = len(ids)
    fr.counts["identity_empty_ids"] = _note_empty(src, ci.unit_id, empty, "they name no unit", fr.notes)
    fr.counts["identity_empty_customers"] = _note_empty(src, ci.customer, no_cust & ~empty,
                                                        "they name no customer", fr.notes)
    usable = ~(empty | no_cust)
    if times is not None:
        no_time = times.isna().to_numpy() & usable
        fr.counts["identity_missing_time"] = _note_empty(src, ci.time, no_time,
                                                         f"a link needs a time to be placed before or after {as_of}",
                                                         fr.notes)
        late = (times >= cutoff_of(as_of)).to_numpy() & usable & ~no_time
        fr.counts["identity_links_after_as_of"] = int(late.sum())
        if late.any():
            fr.notes.append(f"{src.path.name}: {int(late.sum()):,} identity link(s) made after the as-of date "
                            f"{as_of} are ignored")
        usable &= ~(no_time | late)
    else:
        known = ids.isin(fr.visits[UNIT]).to_numpy()
        unknown = usable & ~known
        fr.counts["identity_links_unseen_units"] = int(unknown.sum())
        what = f"no '{ci.time}' column" if ci.time else "no link-time column"
        fr.notes.append(f"{src.path.name}: {what} ([audit.identities] time), so churn as of {as_of} uses only links "
                        f"of units first seen by then" + (f"; {int(unknown.sum()):,} link(s) of other units were "
                                                          "set aside" if unknown.any() else ""))
        usable &= known
    frame = pd.DataFrame({UNIT: ids, CUSTOMER: cust})
    if not usable.all():
        frame = frame[usable]
    dup = repeated_rows(frame[UNIT], frame[CUSTOMER])
    if dup.any():
        fr.notes.append(f"{src.path.name}: {int(dup.sum()):,} repeated (unit, customer) row(s) counted once")
        frame = frame[~dup]
    fr.identities = frame.reset_index(drop=True)
