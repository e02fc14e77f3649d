"""The native path's counting: exposure rows joined by DuckDB, summed per unit in numpy arrays over the units.

DuckDB reads the log and joins each row to its unit (`ROWS_SQL`); what comes back, batch by batch,
is a unit's row number and a one-byte code per row (plus an id for rows of no unit, and a leak's
time and campaign packed in one number). A hash aggregate over the rows would hash every row a
second time (grouping the joined rows in DuckDB cost 5-10 % more CPU at 20 M rows); a unit's row
number is already a dense key, so numpy's `bincount` sums them into arrays as long as the units.
Exact repeats of a row, found beforehand (`engine_duckdb_native.time_pass`), go through the same
query and are taken off (`Dense.take_off`). Memory: those arrays, the leaked (unit, campaign,
week) cells, the unseen ids and the repeats, never the rows. `Dense.cells` returns the table
`engine_duckdb._CELLS_SQL` would make.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

US_DAY = 86_400 * 10**6
# code bits of a row: 1 an exposure during the test, 2 one before it, 4 before the start, 8 after the
# start but before the unit's first visit (the flags of `engine_duckdb._CELLS_SQL`); 16 x the kind
# (0 impression, 1 click, 2 other) of a row during the test; 64 a holdout unit's row during the test (a leak).
DUR, PRE, BEFORE_START, BEFORE_VISIT, LEAK = 1, 2, 4, 8, 64

# Each joined row of `{rows}` (kept rows of the log `xs` with w = 1, and its exact repeats `reps` with
# w = -1, to be taken off): its unit's row (NULL: no unit), its code, its id when it has no unit,
# for a leak its time and campaign code in one number, (time - {t0}) * {camps} + campaign, and w.
# Few rows are leaks or of no unit: the rest come back as 6 bytes and null bits.
ROWS_SQL = """
SELECT pos,
       (CASE WHEN dur THEN 1 ELSE 2 END + CASE WHEN bs THEN 4 WHEN t < fs THEN 8 ELSE 0 END
        + CASE WHEN dur THEN 16 * {kind} ELSE 0 END + CASE WHEN dur AND hold THEN 64 ELSE 0 END)::TINYINT AS code,
       CASE WHEN pos IS NULL THEN id END AS uid,
       CASE WHEN dur AND hold THEN (t - {t0}) * {camps} + {camp} END AS x,
       w
FROM (
  SELECT e.id, e.t, e.camp, e.kl, e.w, v.pos, v.fs, v.hold,
         e.t < {start} AS bs, coalesce(e.t >= {start} AND e.t >= v.fs, false) AS dur
  FROM ({rows}) e LEFT JOIN v ON e.id = v.id
)
"""


class Dense:
    """Per-unit sums of the joined rows (`add` a batch at a time, the repeats taken off), then `cells`.
    `camps` and `t0` unpack a leak's number (`ROWS_SQL`)."""

    def __init__(self, units: int, camps: int, t0: int) -> None:
        self.n, self.camps, self.t0 = units, max(camps, 1), t0
        z = np.zeros(units, np.int64)
        self.copies, self.pre, self.imps, self.clks = z.copy(), z.copy(), z.copy(), z.copy()
        self.bs, self.bv = z.copy(), z.copy()  # rows before the start, rows before the unit's first visit
        self.oth = z.copy()  # rows during the test of a kind that is neither
        # the units of the rarer rows (clicks, others, before the start, before the first visit), summed
        # once as many are waiting as there are units: a sum walks the units' arrays whatever its rows
        self.waiting: dict[str, list[np.ndarray]] = {k: [] for k in ("clks", "oth", "bs", "bv")}
        self.waiting_rows = dict.fromkeys(self.waiting, 0)
        self.settled = False
        self.unseen: list[pa.Table] = []
        self.leaks: list[pa.Table] = []

    def _later(self, name: str, pos: np.ndarray) -> None:
        if len(pos):
            self.waiting[name].append(pos)
            self.waiting_rows[name] += len(pos)
            if self.waiting_rows[name] >= self.n:
                self._sum(name)

    def _sum(self, name: str) -> None:
        parts = self.waiting[name]
        if parts:
            getattr(self, name)[:] += np.bincount(np.concatenate(parts), minlength=self.n)
        self.waiting[name], self.waiting_rows[name] = [], 0

    def _settle(self) -> None:
        """Sum what waits; then the rows before the test and the impressions, from the other counts."""
        if self.settled:
            return
        for name in self.waiting:
            self._sum(name)
        self.pre = self.bs + self.bv  # a row before the test is before the start or before the first visit
        self.imps = self.copies - self.pre - self.clks - self.oth
        self.settled = True

    def add(self, b: pa.RecordBatch) -> None:
        """Add a batch of joined rows (`ROWS_SQL`), taking off those with w = -1 (the repeats)."""
        w = b.column(4)
        neg = pc.less(w, 0)
        if pc.any(neg).as_py():
            self._add(b.filter(neg), -1)
            b = b.filter(pc.invert(neg))
        self._add(b, 1)

    def _add(self, b: pa.RecordBatch, sign: int) -> None:
        assert not self.settled
        pos_col = b.column(0)
        seen = np.asarray(pos_col.is_valid().to_numpy(zero_copy_only=False), dtype=bool)
        code = b.column(1).to_numpy(zero_copy_only=False)  # int8
        p = pos_col.fill_null(0).to_numpy(zero_copy_only=False)
        ps, cs = (p, code) if seen.all() else (p[seen], code[seen])
        dur, kind = (cs & DUR) != 0, (cs >> 4) & 3
        parts = (("clks", dur & (kind == 1)), ("oth", dur & (kind == 2)), ("bs", (cs & BEFORE_START) != 0),
                 ("bv", (cs & BEFORE_VISIT) != 0))
        if sign > 0:
            self.copies += np.bincount(ps, minlength=self.n)  # every row: the one sum over the units per batch
            for name, m in parts:
                self._later(name, ps[m])
        else:  # a few repeats
            np.subtract.at(self.copies, ps, 1)
            for name, m in parts:
                np.subtract.at(getattr(self, name), ps[m], 1)
        if not seen.all():
            uid = b.column(2).filter(pa.array(~seen))
            g = pa.table({"uid": uid}).group_by("uid").aggregate([("uid", "count")])
            if sign < 0:
                g = pa.table({"uid": g.column("uid"), "uid_count": pc.negate(g.column("uid_count"))})
            self.unseen.append(g)
        leak = (code & LEAK) != 0
        if leak.any():
            m = pa.array(leak)
            x = b.column(3).filter(m).to_numpy(zero_copy_only=False).astype(np.int64)
            lt, lcamp = x // self.camps + self.t0, x % self.camps
            k = (code[leak] >> 4) & 3
            t = pa.table({"pos": b.column(0).filter(m), "lcamp": pa.array(lcamp), "lweek": pa.array(_week(lt)),
                          "lt": pa.array(lt), "i": pa.array(sign * (k == 0).astype(np.int64)),
                          "c": pa.array(sign * (k == 1).astype(np.int64))})
            self.leaks.append(t.group_by(["pos", "lcamp", "lweek"]).aggregate(
                [("lt", "min"), ("i", "sum"), ("c", "sum")]).rename_columns(["pos", "lcamp", "lweek", "lt", "i", "c"]))

    def cells(self) -> pa.Table:
        """`cells` as `engine_duckdb._CELLS_SQL` makes it: one row per exposed unit, per unseen id, per
        leaked (unit, campaign, week), each counting distinct rows (the repeats taken off)."""
        self._settle()
        leak = _leaks(self.leaks)
        lpos = leak.column("pos").to_numpy(zero_copy_only=False).astype(np.int64)
        li, lc = (leak.column(c).to_numpy(zero_copy_only=False).astype(np.int64) for c in ("i", "c"))
        imps = self.imps - np.bincount(lpos, weights=li, minlength=self.n).astype(np.int64)
        clks = self.clks - np.bincount(lpos, weights=lc, minlength=self.n).astype(np.int64)
        units = np.flatnonzero(self.copies > 0)
        flags = (np.where(self.copies > self.pre, DUR, 0) | np.where(self.pre > 0, PRE, 0)
                 | np.where(self.bs > 0, BEFORE_START, 0) | np.where(self.bv > 0, BEFORE_VISIT, 0))
        unseen = _unseen(self.unseen)
        ue = unseen.column("n").to_numpy(zero_copy_only=False).astype(np.int64)
        nl, nu, nn = leak.num_rows, len(units), unseen.num_rows
        zl, zn = np.zeros(nl, np.int64), np.zeros(nn, np.int64)

        def col(a: np.ndarray, b: np.ndarray, c: np.ndarray) -> pa.Array:
            return pa.array(np.concatenate([a, b, c]).astype(np.int64), pa.int64())

        def tail(name: str) -> pa.Array:  # a leak column after the units' and the unseen ids' nulls
            return pa.concat_arrays([pa.nulls(nu + nn, pa.int64()), leak.column(name).combine_chunks().cast(pa.int64())])

        events = col(self.copies[units], ue, zl)
        return pa.table({
            "pos": pa.array(np.concatenate([units, zn, lpos]).astype(np.int32),
                            mask=np.concatenate([np.zeros(nu, bool), np.ones(nn, bool), np.zeros(nl, bool)])),
            "uid": pa.concat_arrays([pa.nulls(nu, pa.string()), unseen.column("uid").combine_chunks().cast(pa.string()),
                                     pa.nulls(nl, pa.string())]),
            "lcamp": tail("lcamp"), "lweek": tail("lweek"),
            "events": events, "copies": events,  # the repeats are counted apart (the scan's `duplicates`)
            "pre_rows": col(self.pre[units], ue, zl),  # an unseen id's rows are none "during the test"
            "imps": col(imps[units], zn, li), "clks": col(clks[units], zn, lc),
            "flags": col(flags[units], zn, zl), "t_min": tail("lt"),
        })


def arrow_of(rel: Any) -> pa.Table:
    """A DuckDB relation as an Arrow table (DuckDB 2 names the call `to_arrow_table`, 1.x `arrow`)."""
    fetch = getattr(rel, "to_arrow_table", None) or rel.arrow
    return fetch()


def _week(t: np.ndarray) -> np.ndarray:
    """Week number of each time (`engine_duckdb`'s: days since 1970 plus 3, floor-divided by 7)."""
    return (t // US_DAY + 3) // 7  # numpy's // rounds down


def _leaks(parts: list[pa.Table]) -> pa.Table:
    schema = pa.schema([("pos", pa.int32()), ("lcamp", pa.int64()), ("lweek", pa.int64()), ("lt", pa.int64()),
                        ("i", pa.int64()), ("c", pa.int64())])
    if not parts:
        return schema.empty_table()
    t = pa.concat_tables([p.cast(schema) for p in parts])
    return t.group_by(["pos", "lcamp", "lweek"]).aggregate([("lt", "min"), ("i", "sum"), ("c", "sum")]).rename_columns(
        ["pos", "lcamp", "lweek", "lt", "i", "c"])


def _unseen(parts: list[pa.Table]) -> pa.Table:
    schema = pa.schema([("uid", pa.string()), ("uid_count", pa.int64())])
    if not parts:
        return pa.schema([("uid", pa.string()), ("n", pa.int64())]).empty_table()
    t = pa.concat_tables([p.cast(schema) for p in parts])
    g = t.group_by("uid").aggregate([("uid_count", "sum")])
    return pa.table({"uid": g.column("uid"), "n": g.column("uid_count_sum")})

