"""The native path's counting: exposure rows joined by DuckDB, summed per unit in numpy arrays over the units.

DuckDB reads the log and joins each row to its unit (`ROWS_SQL`); what comes back, batch by batch,
is a unit's row number and a one-byte code per row (plus an id for rows of no unit, and a campaign
and a time for the few rows the other parts need). A hash aggregate over the rows would hash every
row a second time; a unit's row number is already a dense key, so numpy's `bincount` sums them
into arrays as long as the units. Memory: those arrays, the leaked (unit, campaign, week) cells,
the unseen ids and the rows that share a time with another (bounded by the native path's tie
limit), never the rows. `Dense.cells` returns the table `engine_duckdb._CELLS_SQL` would make.
"""

from __future__ import annotations

import numpy as np
import pyarrow as pa

US_DAY = 86_400 * 10**6
# code bits of a row: 1 an exposure during the test, 2 one before it, 4 before the start, 8 after the
# start but before the unit's first visit (the flags of `engine_duckdb._CELLS_SQL`); 16 x the kind
# (0 impression, 1 click, 2 other) of a row during the test; 64 a holdout unit's row during the test (a leak).
DUR, PRE, BEFORE_START, BEFORE_VISIT, LEAK = 1, 2, 4, 8, 64

# Each joined row: its unit's row (NULL: no unit), its code, its id when it has no unit, its campaign
# code and time when it is a leak or its time is one another row has (a possible exact repeat), and
# then its kind label code too. Few rows are either: the rest come back as 5 bytes and null bits.
ROWS_SQL = """
SELECT pos,
       (CASE WHEN dur THEN 1 ELSE 2 END + CASE WHEN bs THEN 4 WHEN t < fs THEN 8 ELSE 0 END
        + CASE WHEN dur THEN 16 * {kind} ELSE 0 END + CASE WHEN dur AND hold THEN 64 ELSE 0 END)::TINYINT AS code,
       CASE WHEN pos IS NULL THEN id END AS uid,
       CASE WHEN tie OR (dur AND hold) THEN {camp} END AS cc,
       CASE WHEN tie OR (dur AND hold) THEN t END AS tt,
       CASE WHEN tie THEN {kl} END AS kk
FROM (
  SELECT e.id, e.t, e.camp, e.kl, v.pos, v.fs, v.hold, {tie} AS tie,
         e.t < {start} AS bs, coalesce(e.t >= {start} AND e.t >= v.fs, false) AS dur
  FROM (SELECT * FROM xs WHERE {kept}) e LEFT JOIN v ON e.id = v.id {tied}
)
"""


class Dense:
    """Per-unit sums of the joined rows (`add` a batch at a time), then `cells`."""

    def __init__(self, units: int) -> None:
        self.n = units
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
        self.ties: list[pa.Table] = []

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
        assert not self.settled
        pos_col = b.column(0)
        seen = np.asarray(pos_col.is_valid().to_numpy(zero_copy_only=False), dtype=bool)
        code = b.column(1).to_numpy(zero_copy_only=False)  # int8
        p = pos_col.fill_null(0).to_numpy(zero_copy_only=False)
        ps, cs = (p, code) if seen.all() else (p[seen], code[seen])
        self.copies += np.bincount(ps, minlength=self.n)  # every row: the one sum over the units per batch
        dur, kind = (cs & DUR) != 0, (cs >> 4) & 3
        self._later("clks", ps[dur & (kind == 1)])
        self._later("oth", ps[dur & (kind == 2)])
        self._later("bs", ps[(cs & BEFORE_START) != 0])
        self._later("bv", ps[(cs & BEFORE_VISIT) != 0])
        if not seen.all():
            uid = b.column(2).filter(pa.array(~seen))
            self.unseen.append(pa.table({"uid": uid}).group_by("uid").aggregate([("uid", "count")]))
        leak = (code & LEAK) != 0
        if leak.any():
            m = pa.array(leak)
            lt = b.column(4).filter(m).to_numpy(zero_copy_only=False)
            k = (code[leak] >> 4) & 3
            t = pa.table({"pos": b.column(0).filter(m), "lcamp": b.column(3).filter(m), "lweek": pa.array(_week(lt)),
                          "lt": pa.array(lt), "i": pa.array((k == 0).astype(np.int64)),
                          "c": pa.array((k == 1).astype(np.int64))})
            self.leaks.append(t.group_by(["pos", "lcamp", "lweek"]).aggregate(
                [("lt", "min"), ("i", "sum"), ("c", "sum")]).rename_columns(["pos", "lcamp", "lweek", "lt", "i", "c"]))
        kk = b.column(5)
        if kk.null_count < len(kk):
            m = kk.is_valid()
            self.ties.append(pa.table({"pos": b.column(0).filter(m), "uid": b.column(2).filter(m),
                                       "tk": b.column(4).filter(m), "ck": b.column(3).filter(m), "kk": kk.filter(m),
                                       "code": b.column(1).filter(m)}))

    def repeats(self, days: dict[int, int]) -> int:
        """Take each exact repeat off the counts (and off `days`); the number of repeats."""
        self._settle()
        if not self.ties:
            return 0
        t = pa.concat_tables(self.ties)
        self.ties = []
        g = t.group_by(["pos", "uid", "tk", "ck", "kk"]).aggregate(
            [("code", "min"), ("tk", "count")])
        extra = g.column("tk_count").to_numpy() - 1
        keep = extra > 0
        if not keep.any():
            return 0
        g, extra = g.filter(pa.array(keep)), extra[keep]
        seen = np.asarray(g.column("pos").is_valid().to_numpy(zero_copy_only=False), dtype=bool)
        pos = g.column("pos").fill_null(0).to_numpy(zero_copy_only=False).astype(np.int64)
        code = g.column("code_min").to_numpy(zero_copy_only=False).astype(np.int64)
        tk = g.column("tk").to_numpy(zero_copy_only=False)
        for d, n in zip((tk // US_DAY).tolist(), extra.tolist()):
            days[d] = days.get(d, 0) - n
        dur, kind = (code & DUR) != 0, (code >> 4) & 3
        ps, es = pos[seen], extra[seen]
        self.copies -= np.bincount(ps, weights=es, minlength=self.n).astype(np.int64)  # now the distinct rows
        self.pre -= np.bincount(ps[~dur[seen]], weights=es[~dur[seen]], minlength=self.n).astype(np.int64)
        for arr, k in ((self.imps, 0), (self.clks, 1)):
            m = dur[seen] & (kind[seen] == k)
            arr -= np.bincount(ps[m], weights=es[m], minlength=self.n).astype(np.int64)
        if not seen.all():
            un = pa.table({"uid": g.column("uid").filter(pa.array(~seen)),
                           "uid_count": pa.array(-extra[~seen])})
            self.unseen.append(un)
        m = (code & LEAK) != 0
        if m.any():
            k = kind[m]
            self.leaks.append(pa.table({
                "pos": g.column("pos").filter(pa.array(m)), "lcamp": g.column("ck").filter(pa.array(m)),
                "lweek": pa.array(_week(tk[m])), "lt": pa.array(tk[m]),
                "i": pa.array(-extra[m] * (k == 0)), "c": pa.array(-extra[m] * (k == 1))}))
        return int(extra.sum())

    def cells(self) -> pa.Table:
        """`cells` as `engine_duckdb._CELLS_SQL` makes it: one row per exposed unit, per unseen id, per
        leaked (unit, campaign, week), each counting distinct rows (`repeats` first)."""
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
            "events": events, "copies": events,  # the repeats are counted apart (`repeats`)
            "pre_rows": col(self.pre[units], ue, zl),  # an unseen id's rows are none "during the test"
            "imps": col(imps[units], zn, li), "clks": col(clks[units], zn, lc),
            "flags": col(flags[units], zn, zl), "t_min": tail("lt"),
        })


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

