"""The engine-neutral sufficient statistics: small tables any engine (pandas now, Spark later) must fill.

Every table is counts or sums keyed by arm / day / segment / campaign / week; the statistics
modules read only these, never the raw logs. Arms are always in spec order; "days" are UTC
calendar days of first-seen; "weeks" start on Monday (ISO 8601).

Numeric covariates (`BalanceTables.numeric`) are kept as central moments, not raw sums of squares:
per covariate and arm, over the units with a known recorded arm and a finite value,

- ``n``        values used; ``missing`` empty / NaN cells; ``invalid`` +/-inf cells (left out, counted)
- ``mean``     the arm's mean
- ``m2``       sum of squared deviations from the arm's own mean (sample variance = m2 / (n - 1))
- ``rank_sum`` sum of the arm's ranks among the pooled values of all arms (ties get their average
               rank, ranks 1..N)
- ``ties``     (same on every row of a covariate) sum over groups of tied pooled values of t^3 - t
- ``binary``   (same on every row of a covariate) every pooled value is 0 or 1

Why (n, mean, m2): ``sumsq - n * mean^2`` cancels catastrophically once mean/SD exceeds about 1e7
(1e9 + N(0, 1) would give variance 0 or garbage); n, mean and m2 keep full precision and merge
exactly across partitions (Chan, Golub & LeVeque 1979, "Updating formulae and a pairwise algorithm
for computing sample variances"; see `merge_moments`). A Spark engine fills them with
``count``, ``avg`` and ``var_pop * count`` (Spark's own aggregates merge partial central moments the
same way), or by merging per-partition (n, mean, m2) triples with `merge_moments`.

Rank sums from a value -> count-per-arm table: sort the distinct pooled values; with ``below`` the
number of pooled values smaller than v and ``c`` the pooled count of v, every unit with value v has
the average rank ``below + (c + 1) / 2``; ``rank_sum[arm] = sum_v count[arm, v] * avg_rank(v)`` and
``ties = sum_v (c^3 - c)``. (pandas: the same from one `numpy.unique` sort, equal to
`scipy.stats.rankdata(method="average")`; Spark: a group-by on the value, then a running sum of
counts over the sorted values.)
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import pandas as pd


@dataclass
class SplitTables:
    """Units per arm by recorded arm, overall, per first-seen day and per segment value."""

    arms: list[str]
    units: dict[str, int]  # recorded arm (known arms only) -> units
    daily: pd.DataFrame  # index: date (YYYY-MM-DD str), columns: arms; NEW units that day
    segments: dict[str, pd.DataFrame]  # segment column -> index: level, columns: arms


@dataclass
class IntegrityTables:
    """Recorded arm vs the arm the spec gives, and other signs the split was not applied as specified."""

    units: int  # units with an id and a first-seen time (after de-duplication and as-of)
    recorded_unknown: dict[str, int]  # recorded arm names the spec does not know -> units
    recorded_missing: int  # units with an empty recorded arm
    mismatches: int  # units whose (known) recorded arm differs from the recomputed arm
    pairs: pd.DataFrame  # columns: recorded, recomputed, units (mismatching pairs only)
    by_day: pd.DataFrame  # index: date, columns: units, mismatches
    by_segment: dict[str, pd.DataFrame]  # segment -> index: level, columns: units, mismatches
    pre_start: int  # units first seen before the spec's start
    first_seen_min: str  # ISO time of the earliest first-seen
    first_seen_max: str
    fingerprints: dict[str, int] | None  # fingerprint stamped in the data -> units (None: no column)


@dataclass
class BalanceTables:
    """Per-arm sums for numeric covariates and per-level counts for categorical ones."""

    # columns: covariate, arm, n, missing, invalid, mean, m2, rank_sum, ties, binary (see module docstring)
    numeric: pd.DataFrame
    categorical: dict[str, pd.DataFrame]  # covariate -> index: level, columns: arms


NUMERIC_COLUMNS = ["covariate", "arm", "n", "missing", "invalid", "mean", "m2", "rank_sum", "ties", "binary"]


def merge_moments(a: tuple[int, float, float], b: tuple[int, float, float]) -> tuple[int, float, float]:
    """Merge two partial (n, mean, m2) triples into one (Chan, Golub & LeVeque 1979, pairwise update)."""
    na, ma, qa = a
    nb, mb, qb = b
    n = na + nb
    if n == 0:
        return 0, 0.0, 0.0
    delta = mb - ma
    return n, ma + delta * nb / n, qa + qb + delta * delta * na * nb / n


@dataclass
class LeakageTables:
    """The vendor's exposure log against the split."""

    rows: int  # exposure rows read (after as-of)
    by_arm: pd.DataFrame  # index: arm; columns: units, exposed_units, pre_exposed_units, impressions, clicks
    holdout_by_campaign: pd.DataFrame  # index: campaign; columns: units, impressions, clicks (during the test)
    holdout_by_week: pd.DataFrame  # index: Monday date; columns: units, impressions, clicks
    holdout_first: str | None  # date of the first holdout exposure during the test
    pre_before_start: int  # units exposed before the test start (exposure time < start)
    pre_before_assignment: int  # units exposed after the start but before their first-seen time
    pre_rows: int  # exposure rows before the unit's first assignment or the start
    unseen_ids: int  # distinct exposed ids never seen in the visits
    unseen_rows: int
    unseen_by_arm: dict[str, int]  # the arm the spec gives those ids
    exposed_ids: int  # distinct ids in the exposure log
    # Per visits row (the engine's row order): exposed during the test. The readout's exposure
    # flag; an engine that keeps no row order (Spark) leaves it None and the readout joins instead.
    exposed_rows: Any = field(default=None, repr=False)
    # Row-level counts (rules in shared/load.py): rows in the file, and exact duplicates counted once.
    rows_read: int = 0  # exposure rows in the file, before any row was set aside
    duplicate_rows: int = 0  # rows identical to an earlier one in id, time, campaign and kind
    # Why exposed ids may not match the visits (each over the DISTINCT unseen ids):
    unseen_hash_like: int = 0  # ids of 32, 40 or 64 hex digits (MD5 / SHA-1 / SHA-256 written in hex)
    unseen_prefix: str = ""  # the longest prefix every unseen id shares (at most 40 characters)
    unseen_match_without_prefix: int = 0  # unseen ids that are a visit id once that prefix is removed
    visits_prefix: str = ""  # the longest prefix every visit id shares (at most 40 characters)
    unseen_match_with_visits_prefix: int = 0  # unseen ids that are a visit id once that prefix is added
    # Exposure rows per UTC day of their time (YYYY-MM-DD -> rows; every row kept after the as-of
    # cut, matched to a visit or not): the feed-health check (audit/feeds.py) reads where the log
    # ends and its outage days. pandas: a bincount of the day numbers; Spark: a group-by on the day.
    daily_rows: dict[str, int] = field(default_factory=dict)


@dataclass
class ChurnTables:
    """Customers (identity links) and the arms their unit ids fall in."""

    links: int
    customers: int
    multi_arm: int  # customers whose ids fall in more than one arm
    ids_hist: dict[int, int]  # ids per customer -> customers
    by_browser: pd.DataFrame  # index: browser; columns: customers, multi_arm (a customer counts per browser)
    browser_hist: pd.DataFrame  # columns: browser, ids (the customer's ids on it), customers
    ids_not_in_visits: int
    link_ids: int = 0  # distinct unit ids in the links used


@dataclass
class AuditTables:
    """Everything the statistics need."""

    split: SplitTables
    integrity: IntegrityTables
    balance: BalanceTables
    leakage: LeakageTables | None = None
    churn: ChurnTables | None = None
    extra: dict[str, object] = field(default_factory=dict)
