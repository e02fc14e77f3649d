"""From the shop's pre-period files to planning numbers: weekly traffic, revenue per unit, conversion, rho.

I/O edge of the planner. Files are read with the audit's reader (same formats, same clear errors naming
file, column and rows); every row set aside is counted and noted, never dropped silently.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from armlock.assign import InputError
from armlock.shared.read import Source, header, read_ids, read_mapped, read_numbers, read_times

from .model import Estimate

MIN_RHO = 0.05  # a weaker correlation shrinks the variance by under 0.25%: not worth planning on
MIN_UNITS = 30  # fewer units than this cannot give a usable SD or correlation (common practice)


@dataclass(frozen=True)
class PrePeriodColumns:
    """Where the planner finds its columns: visits as in the spec's `[audit.visits]`, orders as in the readout."""

    unit_id: str = "unit_id"
    first_seen: str = "first_seen"
    orders_unit_id: str = "unit_id"
    orders_revenue: str = "revenue"
    orders_order_id: str = ""  # optional: an order id repeated in the file is counted once (as the readout does)
    covariates: Sequence[str] = ("pre_revenue",)  # the readout's CUPED covariates (its default: pre_revenue)
    visits_delimiter: str = ","  # CSV delimiters and the first-seen time format, as in the spec's column maps
    orders_delimiter: str = ","
    first_seen_format: str = "iso8601"
    # field -> who named the column ("--covariate", "x.toml: [readout] covariates"); a field not here has its
    # default name, which an error says instead of quoting a spec that was not given
    named_by: dict[str, str] = field(default_factory=dict)

    def origin(self, key: str) -> str:
        return self.named_by.get(key, f"the default name; {_OPTION[key]} names another")


_OPTION = {"unit_id": "--visits-unit-column", "first_seen": "--visits-time-column", "covariates": "--covariate",
           "orders_unit_id": "--orders-unit-column", "orders_revenue": "--orders-revenue-column"}


@dataclass
class PrePeriod:
    """What the files say: PlanInputs keyword values, how each was estimated, and input notes."""

    values: dict[str, float]
    estimates: list[Estimate] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    # 95% range of (revenue SD / mean)^2 and of the revenue variance, each as a ratio to its estimate: the
    # weeks a target needs scale with the first (a --lift target) or the second (--effect, --target-iroas)
    cv2_range: tuple[float, float] = (1.0, 1.0)
    variance_range: tuple[float, float] = (1.0, 1.0)
    revenue_per_unit: np.ndarray | None = None  # each unit's revenue (0 without orders), for the soundness check


def _set_aside(src: Source, mask: np.ndarray, what: str, notes: list[str]) -> None:
    n = int(mask.sum())
    if n:
        notes.append(f"{src.path.name}: {n:,} row(s) {what} ({src.rows(np.flatnonzero(mask), n)}) were set aside")


def _present(path: Path, role: str, delimiter: str, want: dict[str, str], cols: PrePeriodColumns) -> list[str]:
    """Refuse a named column the file lacks, saying who named it (an option, the spec, or the default)."""
    present = header(Source(path, role), delimiter, [])
    for key, col in want.items():
        if col not in present:
            raise InputError(f"{path}: column '{col}' ({cols.origin(key)}) not found in the {role} file; the file "
                             f"has columns: {', '.join(present) or '(none)'}")
    return present


def _visits(path: Path, cols: PrePeriodColumns, notes: list[str]) -> tuple[pd.DataFrame, list[str], Source]:
    present = _present(path, "visits", cols.visits_delimiter, {"unit_id": cols.unit_id, "first_seen": cols.first_seen},
                       cols)
    missing = [c for c in cols.covariates if c not in present]
    if missing and "covariates" in cols.named_by:  # the readout will need them: say so now
        raise InputError(f"{path}: column '{missing[0]}' ({cols.origin('covariates')}) not found in the visits file; "
                         f"the file has columns: {', '.join(present) or '(none)'}")
    covs = [c for c in dict.fromkeys(cols.covariates) if c in present and c not in (cols.unit_id, cols.first_seen)]
    # the audit's one reader: BOM, delimiter, duplicate and nested columns, damaged files (shared/read.py)
    optional = {f"covariate {c}": c for c in covs}
    mapped = read_mapped(path, "visits", "[audit.visits]", {"unit_id": cols.unit_id, "first_seen": cols.first_seen},
                         notes, optional=optional, delimiter=cols.visits_delimiter)
    src, table = mapped.src, mapped.table
    covs = [c for k, c in mapped.columns.items() if k.startswith("covariate ")]
    ids, empty = read_ids(src, table, cols.unit_id, notes)
    where = cols.named_by.get("first_seen", "")  # quote the spec's setting only when a spec named the columns
    fmt_setting = where.split(": ")[0] + ": [audit.visits] first_seen_format" if ": [audit.visits]" in where else ""
    frame = pd.DataFrame({"unit": ids, "time": read_times(src, table, cols.first_seen, notes, cols.first_seen_format,
                                                          fmt_setting)})
    for c in covs:
        frame[c] = read_numbers(src, table, c).to_numpy()
    _set_aside(src, empty, f"with an empty '{cols.unit_id}'", notes)
    no_time = frame["time"].isna().to_numpy() & ~empty
    _set_aside(src, no_time, f"without a '{cols.first_seen}' time", notes)
    frame = frame[~(empty | no_time)].sort_values("time", kind="stable")
    dup = frame["unit"].duplicated(keep="first").to_numpy()
    if dup.any():
        notes.append(f"{src.path.name}: {int(dup.sum()):,} repeated row(s) of a unit; the earliest of each was kept")
        frame = frame[~dup]
    if len(frame) < MIN_UNITS:
        raise InputError(f"{path}: only {len(frame):,} usable unit(s) in the visits file; the planner needs at least "
                         f"{MIN_UNITS} to estimate traffic and the spread of revenue")
    return frame.reset_index(drop=True), covs, src


def _orders(path: Path, cols: PrePeriodColumns, notes: list[str]) -> tuple[pd.Series, pd.Series, Source]:
    _present(path, "orders", cols.orders_delimiter,
             {"orders_unit_id": cols.orders_unit_id, "orders_revenue": cols.orders_revenue}, cols)
    mapped = read_mapped(path, "orders", "[readout.orders]",
                         {"unit_id": cols.orders_unit_id, "revenue": cols.orders_revenue}, notes,
                         optional={"order_id": cols.orders_order_id}, delimiter=cols.orders_delimiter)
    src, table = mapped.src, mapped.table
    with_id = "order_id" in mapped.columns
    if table.num_rows == 0:
        raise InputError(f"{path}: the orders file has no orders (a header but no rows); the planner needs the "
                         "pre-period's orders to estimate revenue per unit")
    ids, empty = read_ids(src, table, cols.orders_unit_id, notes)
    revenue = read_numbers(src, table, cols.orders_revenue)
    _set_aside(src, empty, f"with an empty '{cols.orders_unit_id}'", notes)
    no_rev = revenue.isna().to_numpy() & ~empty
    _set_aside(src, no_rev, f"without a '{cols.orders_revenue}' value", notes)
    keep = ~(empty | no_rev)
    if with_id:
        oid, _ = read_ids(src, table, cols.orders_order_id, notes)
        rep = (oid.duplicated(keep="first") & (oid != "")).to_numpy() & keep
        if rep.any():
            notes.append(f"{src.path.name}: {int(rep.sum()):,} repeated order id(s) in '{cols.orders_order_id}' "
                         f"were counted once ({src.rows(np.flatnonzero(rep), int(rep.sum()))})")
            keep &= ~rep
    neg = int((revenue[keep] < 0).sum())
    if neg:
        notes.append(f"{src.path.name}: {neg:,} order(s) with negative revenue (refunds) were kept and count "
                     "against their unit")
    return ids[keep].reset_index(drop=True), revenue[keep].reset_index(drop=True), src


def estimate_pre_period(visits: str | Path, orders: str | Path, columns: PrePeriodColumns | None = None) -> PrePeriod:
    """Estimate weekly new units, revenue per unit (mean, SD), conversion, order value and rho from two files.

    A unit's revenue is the sum of its orders in the orders file (0 without orders); orders of units that
    are not in the visits file are counted and left out. rho is the correlation of revenue per unit with
    the covariates the readout will use (the spec's `[readout] covariates`, `--covariate`, else its default
    pre_revenue); `PrePeriod` also carries the 95% sampling ranges of the variance and of (SD / mean)^2.
    """
    cols = columns or PrePeriodColumns()
    notes: list[str] = []
    frame, covs, vsrc = _visits(Path(visits), cols, notes)
    ids, revenue, osrc = _orders(Path(orders), cols, notes)
    n = len(frame)
    known = ids.isin(frame["unit"]).to_numpy()
    if not known.any():
        raise InputError(
            f"{osrc.path}: none of its {len(ids):,} order(s) belongs to a unit of the visits file {vsrc.path.name} "
            f"(orders column '{cols.orders_unit_id}', visits column '{cols.unit_id}'); check that both hold the same ids")
    if not known.all():
        lost = int((~known).sum())
        notes.append(f"{osrc.path.name}: {lost:,} order(s) of {len(ids):,} belong to units not in the visits file "
                     f"and were left out ({revenue[~known].sum():,.2f} of revenue)")
    per_unit = revenue[known].groupby(ids[known].to_numpy()).sum()
    y = per_unit.reindex(frame["unit"].to_numpy(), fill_value=0.0).to_numpy(dtype=float)
    buyers = int((per_unit.reindex(frame["unit"].to_numpy()).notna()).sum())
    n_orders = int(known.sum())
    mean, sd = float(y.mean()), float(y.std(ddof=1))
    if not sd > 0:
        raise InputError(f"{osrc.path}: every unit has the same revenue ({mean:g}); the spread of revenue cannot be "
                         "estimated from these files")
    if mean <= 0:
        raise InputError(f"{osrc.path}: revenue per unit is {mean:g} on average (refunds outweigh sales); "
                         "the planner needs a positive mean")
    first, last = frame["time"].iloc[0], frame["time"].iloc[-1]
    days = (last.date() - first.date()).days + 1
    weekly = n / (days / 7.0)
    if days < 7:
        notes.append(f"{vsrc.path.name}: only {days} day(s) of first visits; weekly traffic is scaled up from them "
                     "and misses the weekly cycle: a few weeks of history give a steadier estimate")
    values: dict[str, Any] = {"weekly_units": weekly, "revenue_mean": mean, "revenue_sd": sd,
                              "conversion": buyers / n, "order_value": float(revenue[known].sum()) / n_orders}
    est = [
        Estimate("weekly new units", weekly, n, f"{n:,} units first seen over {days} days, "
                 f"{first.date()} to {last.date()}"),
        Estimate("revenue per unit (mean)", mean, n, f"{n:,} units and their {n_orders:,} orders; "
                 "a unit without orders counts 0"),
        Estimate("revenue per unit (SD)", sd, n, f"{n:,} units"),
        Estimate("conversion", buyers / n, n, f"{buyers:,} of {n:,} units ordered"),
        Estimate("order value (mean)", values["order_value"], buyers, f"{n_orders:,} orders of {buyers:,} buyers"),
    ]
    rho = _readout_rho(frame, covs, y, cols, vsrc.path.name, notes)
    if rho is not None:
        values["rho"] = rho[0]
        est.append(Estimate("pre-period correlation (rho)", rho[0], rho[1], rho[2]))
    cv2, var = sampling_ranges(y)
    values_range = PrePeriod(values=values, estimates=est, notes=notes, cv2_range=cv2, variance_range=var,
                             revenue_per_unit=y)
    notes.append("Revenue per unit is each unit's revenue from its first visit to the end of the orders file; "
                 "a test's window per unit may differ, so check the mean against the test you plan.")
    return values_range


def sampling_ranges(y: np.ndarray, z: float = 1.959964) -> tuple[tuple[float, float], tuple[float, float]]:
    """95% ranges, as ratios to the estimates, of the variance s^2 and of (s / mean)^2 from their sampling error.

    Large-sample moments of the sample mean and variance (the delta method; e.g. Casella & Berger 2002,
    Statistical Inference, §5.5.4, and Exercise 5.8 for Var(s^2)): Var(s^2) ~ (m4 - s^4) / n,
    Cov(s^2, mean) ~ m3 / n, Var(mean) = s^2 / n, taken on the log scale so a range stays positive. It uses the
    data's own fourth moment, not the chi-square interval (which holds for normal data only and is far too
    narrow for skewed revenue); tests/plan/test_estimate.py checks it against a bootstrap.
    """
    n = len(y)
    m, s2 = float(y.mean()), float(y.var(ddof=1))
    d = y - m
    m3, m4 = float(np.mean(d ** 3)), float(np.mean(d ** 4))
    v_log_s2 = max(m4 - s2 ** 2, 0.0) / (n * s2 ** 2)
    v_log_m = s2 / (n * m ** 2)
    c = m3 / (n * s2 * m)
    v_log_cv2 = max(v_log_s2 + 4 * v_log_m - 4 * c, 0.0)
    def rng(v: float) -> tuple[float, float]:
        return float(np.exp(-z * np.sqrt(v))), float(np.exp(z * np.sqrt(v)))
    return rng(v_log_cv2), rng(v_log_s2)


def _readout_rho(frame: pd.DataFrame, covs: list[str], y: np.ndarray, cols: PrePeriodColumns, name: str,
                 notes: list[str]) -> tuple[float, int, str] | None:
    """rho for the covariates the readout will use: the multiple correlation R of revenue per unit with all of
    them (the readout's CUPED fits one pooled theta per covariate, which removes R^2 of the variance)."""
    if not covs:
        if "covariates" in cols.named_by and not cols.covariates:
            notes.append(f"{cols.origin('covariates')} is empty: the readout will use no covariate, so planned "
                         "without CUPED")
        else:
            notes.append(f"{name}: no covariate column of the readout ({', '.join(cols.covariates) or 'none named'}) "
                         "found; planned without CUPED")
        return None
    x = frame[covs].to_numpy(dtype=float)
    ok = ~np.isnan(x).any(axis=1)
    if int((~ok).sum()):
        notes.append(f"{name}: {int((~ok).sum()):,} unit(s) have an empty covariate ({', '.join(covs)}); rho uses "
                     "the others")
    xs, ys = x[ok], y[ok]
    keep = [i for i in range(len(covs)) if len(xs) >= MIN_UNITS and np.std(xs[:, i]) > 0]
    for i, c in enumerate(covs):
        if i not in keep:
            notes.append(f"{name}: '{c}' does not vary (or has fewer than {MIN_UNITS} values); it reduces no variance")
    if not keep:
        return None
    xk = xs[:, keep] - xs[:, keep].mean(axis=0)
    yc = ys - ys.mean()
    beta, *_ = np.linalg.lstsq(xk, yc, rcond=None)  # the readout's pooled theta, Deng et al. 2013
    r2 = max(0.0, 1.0 - float(np.sum((yc - xk @ beta) ** 2)) / float(np.sum(yc ** 2)))
    r = float(np.sqrt(r2))
    used = [covs[i] for i in keep]
    if r < MIN_RHO:
        notes.append(f"{name}: the readout's covariate(s) {', '.join(used)} correlate only {r:.3f} with revenue per "
                     f"unit (over {len(ys):,} units); too weak to plan on, so planned without CUPED")
        return None
    how = (f"correlation of revenue per unit with '{used[0]}'" if len(used) == 1 else
           f"multiple correlation of revenue per unit with {', '.join(repr(c) for c in used)}")
    return r, len(ys), f"{how} over {len(ys):,} units, the covariate(s) the readout will use ({cols.origin('covariates')})"
