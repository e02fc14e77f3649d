"""Two concurrent holdouts read together: each channel's effect and their interaction (a 2x2 analysis).

When two tests with independent salts run at once, every shared unit sits in one of four cells
(held out or exposed by test A, times held out or exposed by test B). With cell means m[a][b] of
an outcome (revenue per unit):

    effect of A where B holds out   m10 - m00
    effect of A where B exposes     m11 - m01
    effect of A as B runs           (1 - pB)(m10 - m00) + pB (m11 - m01)   (pB: B's planned exposed share)
    interaction                     m11 - m10 - m01 + m00   (does one channel add less when the other
                                                             also reaches the person?)

Each is a contrast of independent cell means, so its variance is sum(c^2 s^2 / n) over the cells
(unequal variances, as Welch). These equal the coefficients and HC2 standard errors of the OLS fit
y ~ a + b + a:b (the saturated model; checked against statsmodels in tests/readout/test_factorial.py).
Intervals are normal (z) intervals: fixed-horizon, valid for one planned look; coverage measured by
simulation with skewed revenue (docs/portfolio.md). Pure: cell sums in, estimates out.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any
from statistics import NormalDist

import numpy as np

from armlock.assign import Spec, assign_many

CELLS = ((0, 0), (1, 0), (0, 1), (1, 1))  # (exposed by A, exposed by B)
MIN_CELL = 2  # units per cell for a variance; fewer and the analysis cannot judge


@dataclass(frozen=True)
class CellStats:
    """Sufficient statistics of one cell: units, sum and sum of squares of the outcome."""

    n: int
    total: float
    total_sq: float

    @property
    def mean(self) -> float:
        return self.total / self.n

    @property
    def var(self) -> float:
        """Sample variance (n - 1 denominator)."""
        return max(self.total_sq - self.total * self.total / self.n, 0.0) / (self.n - 1)


@dataclass(frozen=True)
class Contrast:
    """One effect: estimate, standard error, two-sided interval and p-value against 0."""

    label: str
    estimate: float
    se: float
    lo: float
    hi: float
    p: float


def cell_stats(a_exposed: np.ndarray, b_exposed: np.ndarray, y: np.ndarray) -> dict[tuple[int, int], CellStats]:
    """Cell sums of an outcome from per-unit flags (True = exposed by that test) and values."""
    a = np.asarray(a_exposed, dtype=bool)
    b = np.asarray(b_exposed, dtype=bool)
    y = np.asarray(y, dtype=np.float64)
    out = {}
    for ca, cb in CELLS:
        m = (a == bool(ca)) & (b == bool(cb))
        v = y[m]
        out[(ca, cb)] = CellStats(int(m.sum()), float(v.sum()), float((v * v).sum()))
    return out


def _contrast(label: str, cells: dict[tuple[int, int], CellStats], weights: dict[tuple[int, int], float],
              level: float) -> Contrast:
    est = sum(w * cells[c].mean for c, w in weights.items())
    se = float(np.sqrt(sum(w * w * cells[c].var / cells[c].n for c, w in weights.items())))
    z = NormalDist().inv_cdf(0.5 + level / 2)
    p = 2 * (1 - NormalDist().cdf(abs(est) / se)) if se > 0 else (1.0 if est == 0 else 0.0)
    return Contrast(label, est, se, est - z * se, est + z * se, p)


def two_holdouts(cells: dict[tuple[int, int], CellStats], name_a: str, name_b: str, share_a_exposed: float,
                 share_b_exposed: float, level: float = 0.95) -> list[Contrast] | None:
    """The 2x2 readout, or None when a cell has fewer than MIN_CELL units (it cannot judge)."""
    if any(cells[c].n < MIN_CELL for c in CELLS):
        return None
    pa, pb = share_a_exposed, share_b_exposed
    c = _contrast
    return [
        c(f"{name_a}: effect where {name_b} holds out", cells, {(1, 0): 1, (0, 0): -1}, level),
        c(f"{name_a}: effect where {name_b} exposes", cells, {(1, 1): 1, (0, 1): -1}, level),
        c(f"{name_a}: effect as {name_b} runs", cells,
          {(1, 0): 1 - pb, (0, 0): -(1 - pb), (1, 1): pb, (0, 1): -pb}, level),
        c(f"{name_b}: effect where {name_a} holds out", cells, {(0, 1): 1, (0, 0): -1}, level),
        c(f"{name_b}: effect where {name_a} exposes", cells, {(1, 1): 1, (1, 0): -1}, level),
        c(f"{name_b}: effect as {name_a} runs", cells,
          {(0, 1): 1 - pa, (0, 0): -(1 - pa), (1, 1): pa, (1, 0): -pa}, level),
        c("interaction (both exposed, beyond the two effects added)", cells,
          {(1, 1): 1, (1, 0): -1, (0, 1): -1, (0, 0): 1}, level),
    ]


def exposed_share(spec: Spec) -> float:
    """The planned share of units in the spec's exposed arms."""
    return sum(a.weight for a in spec.arms if a.role == "exposed") / 10_000


def exposed_flags(spec: Spec, ids: list[str]) -> np.ndarray:
    """Per unit: True when the spec's frozen split puts it in an exposed arm (any arm of role exposed)."""
    roles = {a.name: a.role for a in spec.arms}
    return np.array([roles.get(arm or "") == "exposed" for arm in assign_many(spec, ids)], dtype=bool)


def two_holdouts_from_units(spec_a: Spec, spec_b: Spec, ids: list[str], y: np.ndarray,
                            level: float = 0.95) -> list[Contrast] | None:
    """The 2x2 readout of per-unit outcomes `y` of units `ids`, both arms recomputed from the specs."""
    cells = cell_stats(exposed_flags(spec_a, ids), exposed_flags(spec_b, ids), y)
    return two_holdouts(cells, spec_a.name, spec_b.name, exposed_share(spec_a), exposed_share(spec_b), level)


def concurrent_readout(spec: Spec, sibling: Spec, units: tuple[Any, Any, Any] | None) -> dict[str, Any]:
    """The `TwoHoldouts` fields for one concurrent test, from the engine's per-unit outcome table.

    Shared units are those first seen while the other test ran (as the audit's independence check).
    """
    from armlock.audit import shared_mask

    name = sibling.name
    if units is None:
        return {"with_test": name, "shared_units": 0,
                "note": "The 2x2 readout needs per-unit outcomes, which only the embedded engines keep "
                        "(--engine pandas or duckdb); it was not computed."}
    ids, times, y = units
    keep = shared_mask(times, sibling)
    id_list = list(np.asarray(ids)[keep])
    yy = np.asarray(y, dtype=np.float64)[keep]
    a, b = exposed_flags(spec, id_list), exposed_flags(sibling, id_list)
    cells = cell_stats(a, b, yy)
    rows = [{"this": "exposed" if ca else "holdout", "other": "exposed" if cb else "holdout",
             "units": cells[(ca, cb)].n,
             "revenue_per_unit": cells[(ca, cb)].mean if cells[(ca, cb)].n else None} for ca, cb in CELLS]
    res = two_holdouts(cells, spec.name, name, exposed_share(spec), exposed_share(sibling))
    if res is None:
        return {"with_test": name, "shared_units": len(id_list), "cells": rows,
                "note": f"Cannot judge: a cell has fewer than {MIN_CELL} shared units."}
    return {"with_test": name, "shared_units": len(id_list), "cells": rows,
            "effects": [{"label": c.label, "estimate": c.estimate, "se": c.se, "lo": c.lo, "hi": c.hi, "p": c.p}
                        for c in res]}


def render_two_holdouts(blocks: list[Any], fmt: str) -> str:
    """The 2x2 readouts as a text or markdown section (appended to the readout's report)."""
    out = []
    for t in blocks:
        head = f"Read together with {t.with_test} ({t.shared_units:,} shared units; revenue per unit, 95% intervals)"
        out.append(f"\n## {head}\n" if fmt == "markdown" else f"\n{head}\n")
        if t.note:
            out.append(t.note)
            continue
        if fmt == "markdown":
            out.append("| effect | estimate | 95% interval | p |\n|---|---:|---:|---:|")
        for e in t.effects:
            cells = [e["label"], f"{e['estimate']:,.3f}", f"{e['lo']:,.3f} to {e['hi']:,.3f}", f"{e['p']:.2g}"]
            out.append("| " + " | ".join(c.replace("|", "\\|") for c in cells) + " |" if fmt == "markdown"
                       else f"  {cells[0]:<58} {cells[1]:>10}  ({cells[2]})  p {cells[3]}")
        out.append("Fixed-horizon intervals: valid for one planned look. Seven intervals are read at once, so one "
                   "excluding 0 by chance alone is not rare; the interaction is the one to act on "
                   "(docs/portfolio.md).")
    return "\n".join(out) + "\n"
