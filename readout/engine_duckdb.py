"""The readout on the DuckDB engine: the audit's tables from `audit.engine_duckdb`, then the readout's per-unit sums.

The exposure log is counted in DuckDB (each unit's exposed-during-the-test flag comes back as one
array over the units) while the orders are read and matched to the units on a thread; the orders,
the per-unit revenue and the exact moments follow the rules the pandas readout implements
(`readout.engine_pandas.compute`, `readout.rules`), so both engines give the same tables bit for bit.
"""

from __future__ import annotations

from collections.abc import Callable
from concurrent.futures import Future, ThreadPoolExecutor
from datetime import date
from typing import TYPE_CHECKING

from armlock.assign import InputError, Spec
from armlock.shared.engine import Inputs, ReadoutResult, local_path

from armlock.shared.engine_duckdb import unit_rows

from . import engine_pandas
from armlock.shared.load_readout import attach_covariates

if TYPE_CHECKING:
    from armlock.shared.engine_duckdb import DuckDBEngine
    from armlock.shared.read import Frames


def readout(engine: DuckDBEngine, spec: Spec, inputs: Inputs, as_of: date | None,
            advance: Callable[[int], None]) -> ReadoutResult:
    """The whole readout on DuckDB: the audit (the gate), then the orders and the readout's tables.

    The orders are loaded and matched to the units on a thread of their own as soon as the visits
    are read, beside the exposures' count; their errors still come after the audit's."""
    if inputs.orders is None:
        raise InputError("a readout needs the orders log (--orders)")

    def covariates(fr: Frames) -> None:
        attach_covariates(spec, local_path(inputs.visits, "--visits"), fr.visits, [])  # type: ignore[arg-type]

    with ThreadPoolExecutor(max_workers=1, thread_name_prefix="armlock-orders") as pool:
        matching: list[Future[engine_pandas.MatchedOrders]] = []

        def orders(fr: Frames, used: date) -> None:
            matching.append(pool.submit(engine_pandas.match_orders, spec, inputs, fr, used, unit_rows))

        fr, used, audit_tables = engine.load_and_count(spec, inputs, as_of, advance, before_count=covariates,
                                                       after_visits=orders)
        matched = matching[0].result() if matching else None
    return engine_pandas.with_orders(spec, inputs, fr, used, audit_tables, advance, matched)
