"""Invented logs of any size written to Parquet in chunks, in memory flat in the rows (large runs).

The data is invented (the shop, visitors and campaigns are random numbers; see audit/synth.py for
the traffic mix it shares). Unlike `synth.generate`, nothing is built whole: visits and identity
links are made in chunks of units, the exposure log in chunks of rows, each chunk one Parquet row
group, so memory is one chunk plus one bit per unit (which units the vendor may reach), however
many rows are written. The exposure log is sorted by time, as a vendor's export usually is.

How the rows are drawn (docs/synthetic-logs.md, "Large logs in chunks"):
- unit i (0 <= i < units) is first seen at F^-1((i + u_i) / units), F the front-loaded arrival
  curve of `synth.generate` (decaying over 60 days, weekends 1.2x); so the units are in first-seen
  order and the first k(t) = floor(units * F(t)) of them are all seen before time t;
- arms by the frozen contract (`armlock.assign.assign_many`); the vendor reaches a share `REACH` of
  the exposed arms' units and, with `leak` > 0, a share `leak` of the holdout's units (leaked units
  are reached by the first campaign only);
- the exposure rows of a chunk, rows a..b, are at times G^-1(q), q sorted uniform draws in
  [a / rows, b / rows), G the curve of F's running integral (each reached unit is exposed at the
  same rate from its first visit on): so the rows come out sorted, exactly `exposure_rows` of
  them, with the gaps between times of random arrivals (as many rows share a millisecond as in a
  real log of that size; `time_unit="us"` writes microseconds instead). A row's unit is drawn
  uniformly from the reached units among the first max(k(t), e + 1), e the first reached unit
  (and the row's time is at least e's first-seen time), so no row falls before its unit's first
  visit. (The units' first-seen times are stratified, one per 1/units of F, which is what makes
  the first k(t) units all seen before t.)
Deterministic for a given seed and chunk size.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from armlock.assign import Spec, assign_many

from .synth import (BROWSERS, CAMPAIGNS, CHANNELS, CLICK_RATE, COUNTRIES, DEVICES, LOGGED_IN, MULTI_DEVICE, REACH,
                    _ID_BITS, _ID_MULT)

INVENTED = ("Invented data, written by armlock.audit.synth_chunked: no real shop, site, person or campaign; "
            "random numbers shaped like an online shop's traffic.")
DAY_S = 86_400.0
_LUT = np.frombuffer(b"0123456789abcdef", dtype=np.uint8)
_ID_WIDTH = 1 + _ID_BITS // 4  # "v" + 10 hex digits, the ids of synth.generate


@dataclass
class ChunkedLogs:
    """What was written: the files and the counts they hold."""

    paths: dict[str, Path]
    truth: dict[str, int | float | str] = field(default_factory=dict)


def hex_ids(codes: np.ndarray, prefix: bytes = b"v") -> pa.LargeStringArray:
    """Ids as `synth._ids` makes them (prefix + 10 hex digits of a bijective scramble), straight into Arrow."""
    n, width = len(codes), len(prefix) + _ID_BITS // 4
    mixed = (codes.astype(np.uint64) * np.uint64(_ID_MULT)) % np.uint64(1 << _ID_BITS)
    raw = np.empty((n, width), dtype=np.uint8)
    raw[:, : len(prefix)] = np.frombuffer(prefix, dtype=np.uint8)
    for j in range(_ID_BITS // 4):
        raw[:, len(prefix) + j] = _LUT[((mixed >> np.uint64(_ID_BITS - 4 - 4 * j)) & np.uint64(15)).astype(np.intp)]
    offsets = np.arange(0, width * (n + 1), width, dtype=np.int64)
    return pa.LargeStringArray.from_buffers(n, pa.py_buffer(offsets), pa.py_buffer(raw))


def _labels(codes: np.ndarray, names: list[str]) -> pa.DictionaryArray:
    return pa.DictionaryArray.from_arrays(pa.array(codes.astype(np.int8), pa.int8()), pa.array(names, pa.string()))


def _times(us: np.ndarray) -> pa.Array:
    return pa.Array.from_buffers(pa.timestamp("us", tz="UTC"), len(us), [None, pa.py_buffer(us.astype(np.int64))])


def _draw(rng: np.random.Generator, table: tuple[tuple[str, float], ...], n: int) -> np.ndarray:
    p = np.array([t[1] for t in table])
    return rng.choice(len(table), size=n, p=p / p.sum()).astype(np.int8)


def _bit(bits: np.ndarray, idx: np.ndarray) -> np.ndarray:
    return ((bits[idx >> 3] >> (7 - (idx & 7)).astype(np.uint8)) & 1).astype(bool)


class _Curves:
    """The arrival curve F and the exposure curve G over [0, days) in seconds, and their inverses."""

    def __init__(self, start: pd.Timestamp, days: int) -> None:
        weekend = (start + pd.to_timedelta(np.arange(days), "D")).day_of_week >= 5
        w = np.exp(-np.arange(days) / 60.0) * np.where(weekend, 1.2, 1.0)
        self.p = w / w.sum()  # share of arrivals per day
        self.cum = np.concatenate([[0.0], np.cumsum(self.p)])
        self.cum[-1] = 1.0
        self.days = days
        grid = np.linspace(0.0, days * DAY_S, days * 1440 + 1)  # one point a minute: F is linear within a day
        f = self.F(grid)
        g = np.concatenate([[0.0], np.cumsum((f[1:] + f[:-1]) / 2.0)])  # F's running integral (trapezoids)
        self.grid, self.g = grid, g / g[-1]

    def F(self, t: np.ndarray) -> np.ndarray:
        d = np.clip((t // DAY_S).astype(np.int64), 0, self.days - 1)
        return np.minimum(self.cum[d] + self.p[d] * (t / DAY_S - d), 1.0)

    def F_inv(self, q: np.ndarray) -> np.ndarray:
        d = np.clip(np.searchsorted(self.cum, q, side="right") - 1, 0, self.days - 1)
        return (d + (q - self.cum[d]) / self.p[d]) * DAY_S

    def G_inv(self, q: np.ndarray) -> np.ndarray:
        return np.interp(q, self.g, self.grid)


def _writer(path: Path, schema: pa.Schema, meta: dict[str, object], compression: str) -> pq.ParquetWriter:
    md = {b"armlock.synthetic": json.dumps({"note": INVENTED, **meta}).encode()}
    dict_cols = [f.name for f in schema if pa.types.is_dictionary(f.type)]
    return pq.ParquetWriter(path, schema.with_metadata(md), compression=compression, use_dictionary=dict_cols)


def write_chunked(
    spec: Spec,
    directory: str | Path,
    *,
    units: int,
    exposure_rows: int,
    days: int = 84,
    seed: int = 0,
    chunk_rows: int = 1_000_000,
    leak: float = 0.0,
    identities: bool = True,
    compression: str = "zstd",
    time_unit: str = "ms",
) -> ChunkedLogs:
    """Write `visits.parquet`, `exposures.parquet` (exactly `exposure_rows` rows, sorted by time) and
    `identities.parquet` for `units` invented visitors into `directory`, `chunk_rows` rows at a time
    (each chunk one row group). `leak`: share of the holdout the vendor reaches (0: none, the clean
    split). `time_unit`: the exposure times' resolution, "ms" (as `synth.generate`) or "us". The column
    names are the spec's `[audit]` map; the values those of `synth.generate`."""
    if units < 10 or days < 1 or exposure_rows < 0 or chunk_rows < 1 or not 0.0 <= leak < 1.0:
        raise ValueError("need units >= 10, days >= 1, exposure_rows >= 0, chunk_rows >= 1 and 0 <= leak < 1")
    if time_unit not in ("ms", "us"):
        raise ValueError(f"time_unit must be ms or us, not {time_unit!r}")
    step_us = 1000 if time_unit == "ms" else 1
    if chunk_rows % 8 and units > chunk_rows:  # each chunk of units fills whole bytes of the bit sets
        raise ValueError("chunk_rows must be a multiple of 8 when there is more than one chunk of units")
    out = Path(directory)
    out.mkdir(parents=True, exist_ok=True)
    cv, ce, ci = spec.audit.visits, spec.audit.exposures, spec.audit.identities
    start = pd.Timestamp(spec.start).tz_convert("UTC")
    start_us = start.value // 1000
    curves = _Curves(start, days)
    arm_names = list(spec.arm_names)
    arm_code = {a: i for i, a in enumerate(arm_names)}
    exposed = np.isin(np.arange(len(arm_names)), [arm_code[a] for a in spec.exposed_arms])
    holdout = np.isin(np.arange(len(arm_names)), [arm_code[a] for a in spec.holdout_arms])
    meta = {"seed": seed, "units": units, "exposure_rows": exposure_rows, "days": days, "chunk_rows": chunk_rows,
            "leak": leak, "time_unit": time_unit, "experiment": spec.name}
    reach_bits = np.zeros((units + 7) // 8, dtype=np.uint8)  # one bit per unit: the vendor may reach it
    leak_bits = np.zeros_like(reach_bits) if leak > 0 else None
    truth: dict[str, int | float | str] = {"units": units, "exposure_rows": exposure_rows, "links": 0,
                                           "reached_units": 0, "leaked_units": 0}
    first_reached, first_reached_s = -1, 0.0

    # -- visits and identity links, a chunk of units at a time -----------------------------------------
    vcols: list[tuple[str, pa.DataType]] = [(cv.unit_id, pa.large_string()), (cv.first_seen, pa.timestamp("us", "UTC")),
                                            (cv.arm, pa.dictionary(pa.int8(), pa.string()))]
    if cv.fingerprint:
        vcols.append((cv.fingerprint, pa.dictionary(pa.int8(), pa.string())))
    segs = [(cv.browser or "browser_family", BROWSERS), ("device", DEVICES), ("country", COUNTRIES),
            ("landing_channel", CHANNELS)]
    vcols += [(name, pa.dictionary(pa.int8(), pa.string())) for name, _ in segs]
    vcols += [("pre_orders", pa.int32()), ("pre_revenue", pa.float64())]
    icols = [(ci.unit_id, pa.large_string()), (ci.customer, pa.large_string())]
    if ci.time:
        icols.append((ci.time, pa.timestamp("us", "UTC")))
    paths = {"visits": out / "visits.parquet", "exposures": out / "exposures.parquet"}
    if identities:
        paths["identities"] = out / "identities.parquet"
    vw = _writer(paths["visits"], pa.schema(vcols), meta, compression)
    iw = _writer(paths["identities"], pa.schema(icols), meta, compression) if identities else None
    try:
        for c, a in enumerate(range(0, units, chunk_rows)):
            rng = np.random.default_rng([seed, 0, c])
            idx = np.arange(a, min(a + chunk_rows, units), dtype=np.int64)
            n = len(idx)
            secs = curves.F_inv((idx + rng.random(n)) / units)
            us = start_us + np.floor(secs * 1e3).astype(np.int64) * 1000  # whole milliseconds, as synth.generate
            ids = hex_ids(idx)
            codes = np.fromiter((arm_code[str(x)] for x in assign_many(spec, ids.to_pylist())), dtype=np.int8, count=n)
            cols: list[pa.Array] = [ids, _times(us), _labels(codes, arm_names)]
            if cv.fingerprint:
                cols.append(_labels(np.zeros(n, np.int8), [spec.fingerprint]))
            cols += [_labels(_draw(rng, table, n), [t[0] for t in table]) for _, table in segs]
            orders = np.where(rng.random(n) < 0.35, rng.poisson(0.9, size=n), 0)
            per_order = rng.lognormal(3.7, 0.6, size=n)
            revenue = np.round(orders * per_order * rng.uniform(0.8, 1.2, size=n), 2)
            cols += [pa.array(orders.astype(np.int32)), pa.array(revenue)]
            vw.write_table(pa.Table.from_arrays(cols, schema=vw.schema), row_group_size=n)

            reached = exposed[codes] & (rng.random(n) < REACH)
            leaked = holdout[codes] & (rng.random(n) < leak)
            hit = reached | leaked
            if first_reached < 0 and hit.any():
                j = int(np.argmax(hit))
                first_reached, first_reached_s = int(idx[j]), float(secs[j])
            lo = a // 8
            reach_bits[lo: lo + (n + 7) // 8] |= np.packbits(hit)
            if leak_bits is not None:
                leak_bits[lo: lo + (n + 7) // 8] |= np.packbits(leaked)
            truth["reached_units"] = int(truth["reached_units"]) + int(reached.sum())
            truth["leaked_units"] = int(truth["leaked_units"]) + int(leaked.sum())

            if iw is not None:
                logged = np.flatnonzero(rng.random(n) < LOGGED_IN)
                cust = idx[logged].copy()
                second = np.flatnonzero(rng.random(len(logged)) < MULTI_DEVICE)  # another customer's second device
                if len(second):
                    cust[second] = idx[logged[rng.integers(0, len(logged), size=len(second))]]
                lcols = [hex_ids(idx[logged]), hex_ids(cust, b"c-")]
                if ci.time:
                    lcols.append(_times(us[logged]))
                iw.write_table(pa.Table.from_arrays(lcols, schema=iw.schema), row_group_size=max(len(logged), 1))
                truth["links"] = int(truth["links"]) + len(logged)
    finally:
        vw.close()
        if iw is not None:
            iw.close()

    # -- the exposure log, sorted by time, a chunk of rows at a time -------------------------------------
    ecols = [(ce.unit_id, pa.large_string()), (ce.time, pa.timestamp("us", "UTC")),
             (ce.campaign, pa.dictionary(pa.int8(), pa.string())), (ce.kind, pa.dictionary(pa.int8(), pa.string()))]
    ew = _writer(paths["exposures"], pa.schema(ecols), meta, compression)
    camp_names, kind_names = [c[0] for c in CAMPAIGNS], [ce.impression_values[0], ce.click_values[0]]
    try:
        if exposure_rows and first_reached < 0:
            raise ValueError("no unit can be exposed (no unit in an exposed arm was reached); use more units")
        for c, a in enumerate(range(0, exposure_rows, chunk_rows)):
            rng = np.random.default_rng([seed, 1, c])
            n = min(chunk_rows, exposure_rows - a)
            q = (a + np.sort(rng.random(n)) * n) / exposure_rows  # n random arrivals in the chunk's share
            secs = np.maximum(curves.G_inv(q), first_reached_s)
            k = np.maximum(np.floor(units * curves.F(secs)).astype(np.int64), first_reached + 1)
            unit = np.empty(n, dtype=np.int64)
            todo = np.arange(n)
            while len(todo):  # draw among the first k units until each row has a reached one
                cand = rng.integers(0, k[todo])
                ok = _bit(reach_bits, cand)
                unit[todo[ok]] = cand[ok]
                todo = todo[~ok]
            camp = _draw(rng, CAMPAIGNS, n)
            if leak_bits is not None:
                camp[_bit(leak_bits, unit)] = 0
            kind = (rng.random(n) < CLICK_RATE).astype(np.int8)
            us = start_us + np.floor(secs * (1e6 / step_us)).astype(np.int64) * step_us
            ew.write_table(pa.Table.from_arrays([hex_ids(unit), _times(us), _labels(camp, camp_names),
                                                 _labels(kind, kind_names)], schema=ew.schema), row_group_size=n)
    finally:
        ew.close()
    return ChunkedLogs(paths=paths, truth=truth)
