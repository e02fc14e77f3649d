"""The native path's counting: exposure rows joined by DuckDB, summed per unit in numpy arrays over the units.

DuckDB reads the log and joins each row to its unit (`ROWS_SQL`); what comes back, batch by batch,
is a unit's row number and a one-byte code per row (plus an id for rows of no unit, and a leak's
time and campaign packed in one number). A hash aggregate over the rows would hash every row a
second time (grouping the joined rows in DuckDB cost 5-10 % more CPU at 20 M rows); a unit's row
number is already a dense key, so numpy's `bincount` sums them into arrays as long as the units.
Rows that share their time with another come back marked and are compared at the end
(`Dense.take_off_repeats`); or the exact repeats found beforehand (`engine_duckdb_native.time_pass`)
go through the same query after the log and are taken off (`Dense.add` with sign -1). Memory: those arrays, the leaked (unit, campaign,
week) cells, the unseen ids and the repeats, never the rows. `Dense.sums` returns what the
leakage tables need (`CellSums`), as `engine_duckdb` reads it from the sliced reader's table `cells`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from .keys import duplicate_rows

US_DAY = 86_400 * 10**6
# code bits of a row: 1 an exposure during the test, 2 one before it, 4 before the start, 8 after the
# start but before the unit's first visit (the flags of `engine_duckdb._CELLS_SQL`); 16 x the kind
# (0 impression, 1 click, 2 other) of a row during the test; 64 a holdout unit's row during the test (a leak).
DUR, PRE, BEFORE_START, BEFORE_VISIT, LEAK = 1, 2, 4, 8, 64

TIED_UNSEEN = 32  # code bit of a row of no unit that shares its time with another row (its text: number + id)
NUM_DIGITS = 19  # a row's number (below 2**62) as text, zero-padded, ahead of the id of a row of no unit

# Each joined row of `{rows}` (kept rows of the log, or exact repeats to be taken off; `tie` marks a
# row whose time another row shares): its unit's row (NULL: no unit), its code, and a text `u`:
# for a row of no unit its id, for a leak or a marked row its number ({num}: its time, campaign
# code and kind label code, ((time - {t0}) * {camps} + campaign) * {kinds} + kind label), for a
# marked row of no unit both (the number zero-padded to NUM_DIGITS, then the id). Few rows are
# leaks, marked or of no unit: the rest come back as 5 bytes and null bits.
ROWS_SQL = """
SELECT pos,
       (CASE WHEN dur THEN 1 + 16 * {kind} + CASE WHEN hold THEN 64 ELSE 0 END
             ELSE 2 + CASE WHEN bs THEN 4 WHEN t < fs THEN 8 ELSE 0 END
                    + CASE WHEN tie AND pos IS NULL THEN TIED_UNSEEN ELSE 0 END END)::TINYINT AS code,
       CASE WHEN pos IS NULL THEN CASE WHEN tie THEN lpad(({num})::VARCHAR, NUM_DIGITS, '0') || id ELSE id END
            WHEN (dur AND hold) OR tie THEN ({num})::VARCHAR END AS u
FROM (
  SELECT e.id, e.t, e.camp, e.kl, coalesce(e.tie, false) AS tie, v.pos, v.fs, v.hold,
         e.t < {start} AS bs, coalesce(e.t >= {start} AND e.t >= v.fs, false) AS dur
  FROM ({rows}) e LEFT JOIN v ON e.id = v.id
)
""".replace("NUM_DIGITS", str(NUM_DIGITS)).replace("TIED_UNSEEN", str(TIED_UNSEEN))
NUM_SQL = "((t - {t0}) * {camps} + {camp}) * {kinds} + {klabel}"


class Dense:
    """Per-unit sums of the joined rows (`add` a batch at a time, the repeats taken off), then `sums`.
    `camps`, `kinds` and `t0` unpack a leak's number (`ROWS_SQL`). With `ties` (the times rows
    share, sorted), the rows marked as sharing one wait, and `take_off_repeats` compares them."""

    def __init__(self, units: int, camps: int, t0: int, kinds: int = 1, ties: np.ndarray | None = None) -> None:
        self.n, self.camps, self.kinds, self.t0 = units, max(camps, 1), max(kinds, 1), t0
        self.ties = ties
        self.tied: list[pa.Table] = []  # the rows marked as sharing a time (`take_off_repeats`)
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

    def add(self, b: pa.RecordBatch, sign: int = 1) -> None:
        """Add a batch of joined rows (`ROWS_SQL`); with sign -1, take them off (exact repeats)."""
        assert not self.settled
        pos_col, u = b.column(0), b.column(2)
        code = b.column(1).to_numpy(zero_copy_only=False)  # int8
        if not pos_col.null_count:
            self._count(pos_col.to_numpy(zero_copy_only=False), code, sign)
            rare = u.is_valid() if u.null_count < len(u) else None
            if rare is not None:
                self._rare(pos_col.filter(rare), code[rare.to_numpy(zero_copy_only=False)], u.filter(rare), sign)
            return
        seen = pos_col.is_valid()
        seen_np = seen.to_numpy(zero_copy_only=False)
        self._count(pos_col.filter(seen).to_numpy(zero_copy_only=False), code[seen_np], sign)
        rare = pc.and_(seen, u.is_valid())
        if pc.any(rare).as_py():
            self._rare(pos_col.filter(rare), code[rare.to_numpy(zero_copy_only=False)], u.filter(rare), sign)
        un = pc.invert(seen)
        self._no_unit(code[~seen_np], u.filter(un), sign)

    def _count(self, ps: np.ndarray, cs: np.ndarray, sign: int) -> None:
        """Count rows of units (their rows `ps` and codes `cs`)."""
        if not len(ps):
            return
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

    def _rare(self, pos: pa.Array, code: np.ndarray, u: pa.Array, sign: int) -> None:
        """Rows of units that are leaks or share their time (`u` holds their numbers)."""
        num = pc.cast(u, pa.int64()).to_numpy(zero_copy_only=False)
        p = pos.to_numpy(zero_copy_only=False).astype(np.int64)
        leak = (code & LEAK) != 0
        if leak.any():
            self._leak(p[leak], code[leak], num[leak], sign)
        if sign > 0 and self.ties is not None:
            self._keep_tied(p, code, num, pa.nulls(len(p), pa.string()))

    def _no_unit(self, code: np.ndarray, u: pa.Array, sign: int) -> None:
        """Rows of no unit: their ids counted (those that share their time carry their number first)."""
        tied = (code & TIED_UNSEEN) != 0
        uid = u
        if tied.any():
            m = pa.array(tied)
            uid = pc.if_else(m, pc.utf8_slice_codeunits(u, NUM_DIGITS), u)
            if sign > 0 and self.ties is not None:
                tu = u.filter(m)
                num = pc.cast(pc.utf8_slice_codeunits(tu, 0, NUM_DIGITS), pa.int64()).to_numpy(zero_copy_only=False)
                self._keep_tied(np.full(len(num), -1, np.int64), code[tied], num, pc.utf8_slice_codeunits(tu, NUM_DIGITS))
        self._ids(uid, sign)

    def _ids(self, uid: pa.Array, sign: int) -> None:
        """Count the rows of each id of no unit (taken off with sign -1)."""
        g = pa.table({"uid": uid}).group_by("uid").aggregate([("uid", "count")])
        if sign < 0:
            g = pa.table({"uid": g.column("uid"), "uid_count": pc.negate(g.column("uid_count"))})
        self.unseen.append(g)

    def _leak(self, pos: np.ndarray, code: np.ndarray, num: np.ndarray, sign: int) -> None:
        lt, lcamp, _ = self._unpack(num)
        k = (code >> 4) & 3
        t = pa.table({"pos": pa.array(pos.astype(np.int32)), "lcamp": pa.array(lcamp), "lweek": pa.array(_week(lt)),
                      "lt": pa.array(lt), "i": pa.array(sign * (k == 0).astype(np.int64)),
                      "c": pa.array(sign * (k == 1).astype(np.int64))})
        self.leaks.append(t.group_by(["pos", "lcamp", "lweek"]).aggregate(
            [("lt", "min"), ("i", "sum"), ("c", "sum")]).rename_columns(["pos", "lcamp", "lweek", "lt", "i", "c"]))

    def _unpack(self, num: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """A row's number (`ROWS_SQL`) as its time, campaign code and kind label code."""
        rest, klabel = np.divmod(num.astype(np.int64), self.kinds)
        rest, lcamp = np.divmod(rest, self.camps)
        return rest + self.t0, lcamp, klabel

    def _keep_tied(self, pos: np.ndarray, code: np.ndarray, num: np.ndarray, uid: pa.Array) -> None:
        """Keep the rows that share a time (a leak's number alone does not mark it): their unit's row
        (-1: none), code, number and id (rows of no unit)."""
        ties = self.ties
        assert ties is not None
        if not len(ties) or not len(num):
            return
        t, _, _ = self._unpack(num)
        at = np.minimum(np.searchsorted(ties, t), len(ties) - 1)
        keep = ties[at] == t
        if keep.any():
            self.tied.append(pa.table({"pos": pa.array(pos[keep]), "code": pa.array(code[keep]),
                                       "num": pa.array(num[keep]), "uid": uid.filter(pa.array(keep)).cast(pa.string())}))

    def take_off_repeats(self) -> np.ndarray:
        """Take off the kept rows that repeat an earlier one exactly (same id, time, campaign and
        kind label; identical rows of the log are joined and coded identically); their times."""
        if not self.tied:
            return np.zeros(0, np.int64)
        b = pa.concat_tables(self.tied).combine_chunks()
        self.tied = []
        num = b.column("num").to_numpy()
        t, lcamp, klabel = self._unpack(num)
        unit = b.column("pos").to_numpy().copy()
        none = unit < 0
        if none.any():  # rows of no unit: their ids as codes after the units' rows
            enc = pc.dictionary_encode(b.column("uid")).combine_chunks()
            code = pc.fill_null(enc.indices, 0).to_numpy(zero_copy_only=False).astype(np.int64)
            unit[none] = self.n + code[none]
        dup = duplicate_rows(t, unit, lcamp, klabel)
        if not dup.any():
            return np.zeros(0, np.int64)
        pos, code = unit[dup], b.column("code").to_numpy()[dup]
        seen = pos < self.n
        self._count(pos[seen], code[seen], -1)
        leak = seen & ((code & LEAK) != 0)
        if leak.any():
            self._leak(pos[leak], code[leak], num[dup][leak], -1)
        if (~seen).any():
            self._ids(b.column("uid").filter(pa.array(dup & none)), -1)
        return t[dup]

    def sums(self) -> CellSums:
        """What the leakage tables need, as `sums_of_cells` reads it from `engine_duckdb._CELLS_SQL`'s
        table: counts of distinct rows (the repeats taken off)."""
        self._settle()
        leak = _leaks(self.leaks)
        units = np.flatnonzero(self.copies > 0)
        flags = (np.where(self.copies > self.pre, DUR, 0) | np.where(self.pre > 0, PRE, 0)
                 | np.where(self.bs > 0, BEFORE_START, 0) | np.where(self.bv > 0, BEFORE_VISIT, 0))
        unseen = _unseen(self.unseen)
        unseen_rows = int(pc.sum(unseen.column("n")).as_py() or 0)
        rows = int(self.copies.sum()) + unseen_rows

        def grouped(key: str, extra: list[tuple[str, str]]) -> list[tuple[int, ...]]:
            g = leak.group_by(key).aggregate([("pos", "count_distinct"), ("i", "sum"), ("c", "sum"), *extra])
            cols = [key, "pos_count_distinct", "i_sum", "c_sum", *(f"{c}_{f}" for c, f in extra)]
            return sorted(zip(*(g.column(c).to_pylist() for c in cols)))

        return CellSums(rows=rows, copies=rows, unseen_rows=unseen_rows, pre_rows=int(self.pre.sum()),
                        pos=units, flags=flags[units], imps=self.imps[units], clks=self.clks[units],
                        by_campaign=grouped("lcamp", []), by_week=grouped("lweek", [("lt", "min")]),
                        uids=unseen.column("uid").combine_chunks().cast(pa.string()))


@dataclass
class CellSums:
    """An exposure log's counts as the leakage tables take them (`engine_duckdb._leakage_tables`)."""

    rows: int  # distinct rows counted
    copies: int  # rows read, repeats included (`Dense` counts repeats apart: then equal to `rows`)
    unseen_rows: int  # rows of ids no visit has
    pre_rows: int  # rows of units before the test (before the start or before the unit's first visit)
    pos: np.ndarray  # the units' rows with any exposure row (int64)...
    flags: np.ndarray  # ...their flags (the bits of `engine_duckdb._CELLS_SQL`)...
    imps: np.ndarray  # ...impressions during the test...
    clks: np.ndarray  # ...and clicks during the test
    by_campaign: list[tuple[int, ...]]  # (campaign code, holdout units, impressions, clicks) of leaks
    by_week: list[tuple[int, ...]]  # (week number, holdout units, impressions, clicks, first time) of leaks
    uids: pa.Array  # the ids no visit has, each once


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

