"""Synthetic logs of an invented shop (visits, vendor exposures, identity links) with switchable faults.

Everything here is invented: the shop, its visitors, campaigns and customers are random numbers
shaped like a mid-size online shop's traffic (browser families, devices, ISO country codes,
landing channels, a pre-period of orders and revenue). No real company, site or person is
modelled. Used by the tests, the benchmark and the demo.

Faults (``FAULTS``), each a known way a holdout split breaks:

- ``browser_loss``  the snippet fails for the holdout arm on one browser family ("webkit"): 30% of
  those units never reach the visits log, so the split is off there (SRM by segment, named).
- ``leakage``       the vendor reaches 2% of the holdout during the test, in one campaign.
- ``pre_exposure``  an audience built before the test: 5% of units were exposed in the 14 days
  before their first assignment, plus ids the visits never saw, exposed before the start.
- ``cookie_churn``  ids on "webkit" are reset about every 7 days, so logged-in customers come
  back with new ids that hash into arms afresh (customers in several arms). The reset is that
  engine's cap on cookies written by script; with ``server_ids=True`` (the shop's own server sets
  the id cookie, docs/identity.md) the cap does not apply and no id is reset.
- ``imbalance``     one covariate (``pre_orders``, and with it ``pre_revenue``) skewed upward in the
  first exposed arm (SMD about 0.16).
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass, field
from datetime import timedelta
from pathlib import Path

import numpy as np
import pandas as pd

from armlock.assign import Spec, assign_many

FAULTS = ("browser_loss", "leakage", "pre_exposure", "cookie_churn", "imbalance")

# The invented shop's traffic mix (made-up shares, shaped like a typical mid-size shop).
BROWSERS = (("chromium-based", 0.62), ("webkit", 0.26), ("gecko", 0.06), ("other", 0.06))
DEVICES = (("mobile", 0.58), ("desktop", 0.36), ("tablet", 0.06))
COUNTRIES = (("US", 0.38), ("GB", 0.16), ("DE", 0.14), ("FR", 0.10), ("CA", 0.08),
             ("NL", 0.05), ("ES", 0.05), ("IT", 0.04))
CHANNELS = (("organic_search", 0.34), ("direct", 0.22), ("paid_search", 0.16), ("email", 0.10),
            ("social", 0.10), ("referral", 0.08))
CAMPAIGNS = (("cart-abandoners", 0.45), ("product-viewers", 0.35), ("seasonal-promo", 0.20))
FAULT_BROWSER = "webkit"
LOSS_SHARE = 0.30  # browser_loss: share of the holdout's units on FAULT_BROWSER lost
LEAK_SHARE = 0.02  # leakage: share of the holdout the vendor reaches
PRE_EXPOSED_SHARE = 0.05  # pre_exposure: share of units in the pre-built audience
REACH = 0.6  # share of exposed-arm units the vendor reaches
CLICK_RATE = 0.012  # clicks per exposure row
LOGGED_IN = 0.30  # share of units with a logged-in customer key
MULTI_DEVICE = 0.02  # share of customers with a second id (another device), even without churn
CHURN_DAYS = 7.0  # cookie_churn: an id lives about this many days on FAULT_BROWSER
RETURN_RATE = 0.6  # cookie_churn: chance a churned customer comes back after each reset

_ID_BITS = 40
_ID_MULT = 0x9E3779B97F & ((1 << _ID_BITS) - 1) | 1  # odd: i -> i*M mod 2^40 is a bijection


@dataclass
class SyntheticLogs:
    """The three logs, with column names from the spec's column map (`[audit.*]` tables)."""

    visits: pd.DataFrame
    exposures: pd.DataFrame
    identities: pd.DataFrame
    faults: tuple[str, ...] = ()
    truth: dict[str, float | int | str] = field(default_factory=dict)


def _ids(codes: np.ndarray, prefix: str) -> np.ndarray:
    """Unique, unordered-looking ids: prefix + 10 hex digits of a bijective scramble of `codes`."""
    mixed = (codes.astype(np.uint64) * np.uint64(_ID_MULT)) % np.uint64(1 << _ID_BITS)
    lut = np.frombuffer(b"0123456789abcdef", dtype=np.uint8)
    shifts = np.arange(_ID_BITS - 4, -1, -4, dtype=np.uint64)
    digits = lut[((mixed[:, None] >> shifts) & np.uint64(15)).astype(np.intp)]
    pre = np.frombuffer(prefix.encode("ascii"), dtype=np.uint8)
    raw = np.concatenate([np.broadcast_to(pre, (len(codes), len(pre))), digits], axis=1)
    width = len(pre) + digits.shape[1]
    return np.ascontiguousarray(raw).view(f"S{width}").ravel().astype(f"U{width}")


def _pick(rng: np.random.Generator, table: tuple[tuple[str, float], ...], n: int) -> pd.Categorical:
    names = [t[0] for t in table]
    p = np.array([t[1] for t in table])
    codes = rng.choice(len(names), size=n, p=p / p.sum())
    return pd.Categorical.from_codes(codes, categories=names)


def _revenue(rng: np.random.Generator, orders: np.ndarray) -> np.ndarray:
    """Pre-period revenue: each order's value is lognormal (median about 40 currency units)."""
    per_order = rng.lognormal(3.7, 0.6, size=len(orders))
    return np.round(orders * per_order * rng.uniform(0.8, 1.2, size=len(orders)), 2)


def _check_faults(faults: Iterable[str]) -> tuple[str, ...]:
    out = tuple(dict.fromkeys(faults))
    bad = [f for f in out if f not in FAULTS]
    if bad:
        raise ValueError(f"unknown fault(s) {', '.join(bad)}; choose from {', '.join(FAULTS)}")
    return out


def generate(
    spec: Spec,
    *,
    units: int = 50_000,
    days: int = 84,
    seed: int = 0,
    faults: Iterable[str] = (),
    events_per_unit: float = 4.0,
    server_ids: bool = False,
) -> SyntheticLogs:
    """Invented logs for `spec`'s test: `units` visitors over `days` days from `spec.start`.

    `events_per_unit` is the mean number of exposure rows per unit in the visits (so the exposure
    log has about units * events_per_unit rows). Deterministic for a given seed. `server_ids`:
    the id cookie is set by the shop's server, so the ``cookie_churn`` cap resets no id (the
    visitors are the same as without it; what is drawn after them, such as exposures, is not).

    >>> from armlock.assign import spec_from_dict
    >>> s = spec_from_dict({"name": "t", "salt": "s", "start": "2026-01-05T00:00:00Z",
    ...     "arms": [{"name": "holdout", "weight": 5000}, {"name": "exposed", "weight": 5000}]})
    >>> logs = generate(s, units=1000, faults=("leakage",))
    >>> sorted(logs.visits.columns)[:3]
    ['arm', 'browser_family', 'country']
    """
    fset = _check_faults(faults)
    if units < 10 or days < 1:
        raise ValueError("need at least 10 units and 1 day")
    rng = np.random.default_rng(seed)
    cv, ce, ci = spec.audit.visits, spec.audit.exposures, spec.audit.identities
    start = pd.Timestamp(spec.start).tz_convert("UTC")
    horizon = days * 86_400.0
    holdouts, exposed = set(spec.holdout_arms), list(spec.exposed_arms)
    truth: dict[str, float | int | str] = {}

    # -- visitors: first-seen time (front-loaded, weekly rhythm) and attributes ----------------
    n = units
    day_w = np.exp(-np.arange(days) / 60.0) * np.where(
        (start + pd.to_timedelta(np.arange(days), "D")).day_of_week >= 5, 1.2, 1.0)
    day = rng.choice(days, size=n, p=day_w / day_w.sum())
    offset = day * 86_400.0 + rng.uniform(0, 86_400.0, size=n)
    ids = _ids(np.arange(n), "v")
    browser = _pick(rng, BROWSERS, n)
    device = _pick(rng, DEVICES, n)
    country = _pick(rng, COUNTRIES, n)
    channel = _pick(rng, CHANNELS, n)
    returning = rng.random(n) < 0.35
    orders = np.where(returning, rng.poisson(0.9, size=n), 0)
    arm = np.asarray(assign_many(spec, ids.tolist()), dtype=object)

    keep = np.ones(n, dtype=bool)
    if "imbalance" in fset:
        skew = arm == exposed[0]
        orders = orders + np.where(skew, rng.poisson(0.12, size=n), 0)
        truth["imbalance_covariate"] = "pre_orders"
    revenue = _revenue(rng, orders)
    if "browser_loss" in fset:
        hit = np.isin(arm, list(holdouts)) & (np.asarray(browser) == FAULT_BROWSER)
        keep &= ~(hit & (rng.random(n) < LOSS_SHARE))
        truth["loss_browser"] = FAULT_BROWSER
        truth["lost_units"] = int((~keep).sum())

    customer = np.full(n, -1, dtype=np.int64)
    logged = rng.random(n) < LOGGED_IN
    customer[logged] = np.arange(int(logged.sum()))
    # multi-device customers: a second logged-in unit shares the key of an earlier one
    n_cust = int(logged.sum())
    second = np.flatnonzero(logged)[rng.random(n_cust) < MULTI_DEVICE]
    if len(second) and n_cust > 1:
        customer[second] = rng.integers(0, n_cust, size=len(second))

    visit_cols = {
        "ids": ids[keep], "offset": offset[keep], "arm": arm[keep], "browser": browser[keep],
        "device": device[keep], "country": country[keep], "channel": channel[keep],
        "orders": orders[keep], "revenue": revenue[keep], "customer": customer[keep],
    }

    # -- cookie churn: customers on FAULT_BROWSER come back with fresh ids -------------------
    if "cookie_churn" in fset and server_ids:
        truth["churn_browser"] = FAULT_BROWSER
        truth["churned_ids"] = 0  # server-set cookies are not capped: nobody comes back with a new id
        truth["server_ids"] = 1
    elif "cookie_churn" in fset:
        c_mask = (np.asarray(visit_cols["browser"]) == FAULT_BROWSER) & (visit_cols["customer"] >= 0)
        src = np.flatnonzero(c_mask)
        remaining = horizon - visit_cols["offset"][src]
        resets = np.floor(remaining / (CHURN_DAYS * 86_400.0)).astype(np.int64)
        k = rng.binomial(np.minimum(resets, 12), RETURN_RATE)
        rep = np.repeat(src, k)
        j = np.concatenate([np.arange(1, m + 1) for m in k]) if len(k) and k.sum() else np.zeros(0, np.int64)
        new_off = visit_cols["offset"][rep] + j * CHURN_DAYS * 86_400.0 + rng.uniform(0, 86_400.0, len(rep))
        new_off = np.minimum(new_off, horizon - 1.0)
        new_ids = _ids(np.arange(n, n + len(rep)), "v")
        new_arm = np.asarray(assign_many(spec, new_ids.tolist()), dtype=object)
        zeros = np.zeros(len(rep), dtype=orders.dtype)
        chan = _pick(rng, CHANNELS, len(rep))
        for key, extra in (("ids", new_ids), ("offset", new_off), ("arm", new_arm),
                           ("orders", zeros), ("revenue", zeros.astype(float)),
                           ("customer", visit_cols["customer"][rep])):
            visit_cols[key] = np.concatenate([visit_cols[key], extra])
        for key in ("browser", "device", "country"):
            old = visit_cols[key]
            visit_cols[key] = pd.Categorical.from_codes(
                np.concatenate([old.codes, old.codes[rep]]), categories=old.categories)
        visit_cols["channel"] = pd.Categorical.from_codes(
            np.concatenate([visit_cols["channel"].codes, chan.codes]),
            categories=visit_cols["channel"].categories)
        truth["churn_browser"] = FAULT_BROWSER
        truth["churned_ids"] = len(rep)

    order = np.argsort(visit_cols["offset"], kind="stable")
    v = {k: (val[order] if not isinstance(val, pd.Categorical) else val.take(order))
         for k, val in visit_cols.items()}
    first_seen = start + pd.to_timedelta(np.round(v["offset"] * 1e3).astype(np.int64), "ms")
    visits = pd.DataFrame({
        cv.unit_id: pd.array(v["ids"], dtype="str"),
        cv.first_seen: first_seen,
        cv.arm: pd.Categorical(v["arm"], categories=list(spec.arm_names)),
    })
    if cv.fingerprint:
        visits[cv.fingerprint] = pd.Categorical([spec.fingerprint] * len(visits))
    segs = {"browser_family": v["browser"], "device": v["device"], "country": v["country"],
            "landing_channel": v["channel"]}
    if cv.browser:
        visits[cv.browser] = segs.pop("browser_family")
    for name, val in segs.items():
        visits[name] = val
    visits["pre_orders"] = v["orders"].astype(np.int32)
    visits["pre_revenue"] = v["revenue"]

    # -- identity links ------------------------------------------------------------------
    has = v["customer"] >= 0
    identities = pd.DataFrame({
        ci.unit_id: pd.array(v["ids"][has], dtype="str"),
        ci.customer: pd.array(_ids(v["customer"][has], "c-"), dtype="str"),
    })
    if ci.time:  # the link is made when the unit is first seen logged in
        identities[ci.time] = first_seen[has]

    # -- the vendor's exposure log -------------------------------------------------------
    nv = len(v["ids"])
    is_exposed_arm = np.isin(v["arm"], exposed)
    reached = is_exposed_arm & (rng.random(nv) < REACH)
    mean_rows = events_per_unit * nv / max(int(reached.sum()), 1)
    counts = np.where(reached, rng.geometric(1.0 / mean_rows, size=nv), 0)
    lo = v["offset"]
    hi = np.full(nv, horizon)
    camp_p = None
    if "leakage" in fset:
        leak = np.isin(v["arm"], list(holdouts)) & (rng.random(nv) < LEAK_SHARE)
        counts = np.where(leak, rng.geometric(1.0 / mean_rows, size=nv), counts)
        truth["leaked_units"] = int(leak.sum())
        camp_p = leak
    if "pre_exposure" in fset:
        pre = rng.random(nv) < PRE_EXPOSED_SHARE
        pre_counts = np.where(pre, rng.geometric(1.0 / 3.0, size=nv), 0)
        truth["pre_exposed_units"] = int(pre.sum())
    unit_idx = np.repeat(np.arange(nv), counts)
    t = lo[unit_idx] + rng.random(len(unit_idx)) * (hi[unit_idx] - lo[unit_idx])
    campaign = _pick(rng, CAMPAIGNS, len(unit_idx))
    if camp_p is not None:  # leaked units are reached by one campaign only
        codes = campaign.codes.copy()
        codes[camp_p[unit_idx]] = 0
        campaign = pd.Categorical.from_codes(codes, categories=campaign.categories)
    ex_ids = pd.Series(pd.array(v["ids"], dtype="str")).take(unit_idx).reset_index(drop=True)
    ex_t = t
    ex_camp = campaign.codes
    if "pre_exposure" in fset:
        p_idx = np.repeat(np.arange(nv), pre_counts)
        p_t = lo[p_idx] - rng.uniform(60.0, 14 * 86_400.0, size=len(p_idx))
        # ids of the pre-built audience that never visit during the test
        n_unseen = max(1, nv // 100)
        u_ids = _ids(np.arange(1 << 39, (1 << 39) + n_unseen), "v")
        u_t = -rng.uniform(60.0, 14 * 86_400.0, size=n_unseen)
        truth["unseen_ids"] = n_unseen
        ex_ids = pd.concat([ex_ids, pd.Series(pd.array(v["ids"], dtype="str")).take(p_idx),
                            pd.Series(pd.array(u_ids, dtype="str"))], ignore_index=True)
        ex_t = np.concatenate([ex_t, p_t, u_t])
        ex_camp = np.concatenate([ex_camp, np.full(len(p_idx) + n_unseen, 1, dtype=ex_camp.dtype)])
    m = len(ex_t)
    kinds = pd.Categorical.from_codes((rng.random(m) < CLICK_RATE).astype(np.int8),
                                      categories=[ce.impression_values[0], ce.click_values[0]])
    ex_order = np.argsort(ex_t, kind="stable")
    exposures = pd.DataFrame({
        ce.unit_id: ex_ids.take(ex_order).reset_index(drop=True),
        ce.time: start + pd.to_timedelta(np.round(ex_t[ex_order] * 1e3).astype(np.int64), "ms"),
        ce.campaign: pd.Categorical.from_codes(ex_camp[ex_order], categories=[c[0] for c in CAMPAIGNS]),
        ce.kind: kinds,
    })
    truth["units"] = nv
    truth["exposure_rows"] = m
    return SyntheticLogs(visits=visits, exposures=exposures, identities=identities,
                         faults=fset, truth=truth)


def write_logs(logs: SyntheticLogs, directory: str | Path, fmt: str = "csv") -> dict[str, Path]:
    """Write visits / exposures / identities as CSV (`csv`, `csv.gz`) or Parquet into `directory`."""
    if fmt not in ("csv", "csv.gz", "parquet"):
        raise ValueError(f"fmt must be csv, csv.gz or parquet, not {fmt!r}")
    out = Path(directory)
    out.mkdir(parents=True, exist_ok=True)
    paths: dict[str, Path] = {}
    for name in ("visits", "exposures", "identities"):
        frame: pd.DataFrame = getattr(logs, name)
        path = out / f"{name}.{fmt}"
        if fmt == "parquet":
            frame.to_parquet(path, index=False)
        else:
            frame.to_csv(path, index=False, date_format="%Y-%m-%dT%H:%M:%S.%fZ")
        paths[name] = path
    return paths


def days_between(spec: Spec, days: int) -> tuple[str, str]:
    """First and last calendar day (UTC, YYYY-MM-DD) the generated logs cover."""
    first = spec.start.date()
    return first.isoformat(), (first + timedelta(days=days - 1)).isoformat()


# --- orders with a known true effect (for the readout) ------------------------------------------

ORDER_VALUE = (3.7, 0.6)  # lognormal order value: median about 40, mean about 48 currency units
OTHER_CHANNELS = ("organic_search", "email", "direct", "paid_search")


@dataclass
class SyntheticOrders:
    """An orders log for `SyntheticLogs` and the truth it was built with."""

    orders: pd.DataFrame
    truth: dict[str, float | int | str] = field(default_factory=dict)


def generate_orders(
    spec: Spec,
    logs: SyntheticLogs,
    *,
    days: int = 84,
    seed: int = 1,
    base_rate: float = 0.04,
    uplift: float = 0.15,
    credit: float = 0.6,
    refunds: float = 0.03,
    duplicates: float = 0.0,
) -> SyntheticOrders:
    """Orders of the invented shop's visitors with a known true effect of the channel.

    Each unit buys at a rate proportional to `base_rate * (0.5 + 1.2 * pre_orders)` per 28 days
    from its first-seen time to the end of the `days`-day test (so the pre-period covariate
    predicts revenue, as lagged sales do). A unit the vendor reached during the test buys at
    `(1 + uplift)` times that rate: the channel's true effect. `truth["incremental_revenue"]`
    is its expected value, summed over the exposed arms' units (what the readout estimates).
    `credit` is the share of orders of reached units that attribution credits to the channel
    (column `attributed_channel`, value "display"): attribution over-credits by construction.
    `refunds` adds that share of refunds (negative revenue, their own order id); `duplicates`
    repeats that share of order rows with the same order id (as an export glitch would).
    Column names follow the spec's `[readout.orders]` map; the key is the unit id.
    """
    co = spec.readout.orders
    key = co.unit_id or "unit_id"
    rng = np.random.default_rng(seed)
    cv, ce = spec.audit.visits, spec.audit.exposures
    v, e = logs.visits, logs.exposures
    start = pd.Timestamp(spec.start).tz_convert("UTC")
    horizon = start + pd.Timedelta(days=days)
    ids = v[cv.unit_id].astype(str).to_numpy()
    fs = pd.to_datetime(v[cv.first_seen], utc=True)
    span_days = ((horizon - fs).dt.total_seconds().to_numpy() / 86_400.0).clip(min=0)
    during = pd.to_datetime(e[ce.time], utc=True) >= start
    # pandas' hash lookup: numpy's isin sorts text arrays, which took most of the demo's time
    reached = pd.Series(ids).isin(e.loc[during.to_numpy(), ce.unit_id].astype(str).unique()).to_numpy()
    exposed_arm = np.isin(v[cv.arm].astype(str).to_numpy(), list(spec.exposed_arms))
    pre = v["pre_orders"].to_numpy(dtype=np.float64) if "pre_orders" in v else np.zeros(len(v))
    rate = base_rate * (0.5 + 1.2 * pre) * span_days / 28.0
    treated = reached  # the ad works on whoever it reaches (leaked holdout units included)
    n_base = rng.poisson(rate)
    n_extra = np.where(treated, rng.poisson(rate * uplift), 0)
    count = n_base + n_extra
    unit = np.repeat(np.arange(len(v)), count)
    fs_ns = fs.to_numpy(dtype="datetime64[ns]").view(np.int64)
    t_ns = fs_ns[unit] + np.round(rng.random(len(unit)) * span_days[unit] * 86_400e9).astype(np.int64)
    t = pd.to_datetime(t_ns, utc=True)
    value = np.round(rng.lognormal(*ORDER_VALUE, size=len(unit)), 2)
    credited = treated[unit] & (rng.random(len(unit)) < credit)
    channel = np.where(credited, "display", np.asarray(OTHER_CHANNELS)[rng.integers(0, len(OTHER_CHANNELS), len(unit))])
    oid = _ids(np.arange(len(unit)), "o-")
    mean_value = float(np.exp(ORDER_VALUE[0] + ORDER_VALUE[1] ** 2 / 2))
    truth: dict[str, float | int | str] = {
        "uplift": uplift, "mean_order_value": mean_value, "orders": int(len(unit)),
        "incremental_revenue": float((rate * uplift * mean_value)[treated & exposed_arm].sum()),
        "incremental_orders": float((rate * uplift)[treated & exposed_arm].sum()),
        "attributed_revenue": float(value[credited & exposed_arm[unit]].sum()),
    }
    frame = pd.DataFrame({key: ids[unit], co.time: t, co.revenue: value, "_oid": oid, "_ch": channel})
    if refunds > 0 and len(frame):
        r = np.flatnonzero(rng.random(len(frame)) < refunds)
        back = frame.iloc[r].copy()
        back[co.time] = back[co.time] + pd.to_timedelta(rng.uniform(1, 14, len(r)) * 86_400.0, "s")
        back[co.revenue] = -back[co.revenue]
        back["_oid"] = _ids(np.arange(len(r)), "r-")
        frame = pd.concat([frame, back[back[co.time] < horizon]], ignore_index=True)
        truth["refunds"] = int((back[co.time] < horizon).sum())
    if duplicates > 0 and len(frame):
        d = np.flatnonzero(rng.random(len(frame)) < duplicates)
        frame = pd.concat([frame, frame.iloc[d]], ignore_index=True)
        truth["duplicate_rows"] = len(d)
    frame = frame.sort_values(co.time, kind="stable").reset_index(drop=True)
    frame[co.time] = pd.to_datetime(frame[co.time], utc=True)
    out = frame.rename(columns={"_oid": co.order_id or "order_id", "_ch": co.attributed or "attributed_channel"})
    return SyntheticOrders(orders=out, truth=truth)


def write_orders(orders: SyntheticOrders, directory: str | Path, fmt: str = "csv") -> Path:
    """Write the orders log as `orders.<fmt>` (csv, csv.gz or parquet) into `directory`."""
    if fmt not in ("csv", "csv.gz", "parquet"):
        raise ValueError(f"fmt must be csv, csv.gz or parquet, not {fmt!r}")
    out = Path(directory)
    out.mkdir(parents=True, exist_ok=True)
    path = out / f"orders.{fmt}"
    if fmt == "parquet":
        orders.orders.to_parquet(path, index=False)
    else:
        orders.orders.to_csv(path, index=False, date_format="%Y-%m-%dT%H:%M:%S.%fZ")
    return path


# Weekday factors (Monday first) and holiday dips of the invented shop's daily traffic: made-up
# shapes of a typical shop (weekends lower; a few holidays a year at a third to two thirds of a
# usual day, a slow week around the year's end), for calibrating the feed-health check.
WEEKDAY_FACTORS = (1.0, 1.02, 1.0, 0.97, 0.92, 0.7, 0.66)


def healthy_daily_counts(rng: np.random.Generator, days: int, level: float, *, decay_days: float | None = 60.0,
                         start_weekday: int = 0, holidays: int = 4, noise_cv: float = 0.12) -> np.ndarray:
    """Rows per day of a healthy feed (no outage): `level` rows on a usual first day, front-loaded
    by `decay_days` (new visitors; None for a flat feed like exposures or orders), weekday swings,
    `holidays` random single days at 35-65% of usual, one slow week at 60-80%, day-to-day
    overdispersion (gamma, coefficient of variation `noise_cv`) and Poisson counts. Invented."""
    d = np.arange(days)
    mean = level * np.asarray(WEEKDAY_FACTORS)[(d + start_weekday) % 7]
    if decay_days:
        mean = mean * np.exp(-d / decay_days)
    factor = np.ones(days)
    if holidays and days > 1:
        factor[rng.choice(days, size=min(holidays, days), replace=False)] = rng.uniform(0.35, 0.65, size=min(holidays, days))
    if days > 14:
        w = int(rng.integers(0, days - 7))
        factor[w:w + 7] *= rng.uniform(0.6, 0.8)
    shape = 1.0 / noise_cv**2
    return rng.poisson(mean * factor * rng.gamma(shape, 1.0 / shape, size=days))
