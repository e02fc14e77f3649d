"""The one engine interface: what an engine returns (the tables of `audit.tables`) and how one is chosen.

An engine turns the raw logs into the small sufficient-statistics tables; the statistics, verdicts
and reports downstream read only those. Three engines implement it: DuckDB (embedded, the default:
the exposure rows are counted inside DuckDB, memory grows with units), pandas (embedded, every row
in memory) and Apache Spark (where the data lives). `Engine.compute` gives the audit's tables
(`audit.tables`); `Engine.readout` gives, from the same logs plus the orders, the audit's tables
and the readout's moment tables (`readout.tables`). Another engine, a warehouse's SQL for
instance, implements both and is added to `select_engine`; nothing downstream changes.

Every engine's tables go through `canonical` before the statistics see them, so that the order of
levels, campaigns and dictionary keys never depends on how a file happened to be encoded or how an
engine happened to group: a CSV and a Parquet export of the same rows, or the same rows through
two engines, give the same report.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field, replace
from datetime import date
from pathlib import Path
from typing import TYPE_CHECKING, Any, Protocol

import pandas as pd

from armlock.assign import InputError, Spec

from .tables import AuditTables, BalanceTables, ChurnTables, IntegrityTables, LeakageTables, SplitTables

if TYPE_CHECKING:
    from concurrent.futures import Future

    from armlock.shared.readout_tables import ReadoutTables

    from .engine_pandas import VisitArms
    from .read import Frames

ENGINES = ("duckdb", "pandas", "spark")
SPARK_INSTALL = "pip install 'armlock[spark]'"
TABLE_PREFIX = "table:"  # `table:db.name` names a table of the Spark catalog instead of a path

Source = str | Path


@dataclass
class Inputs:
    """Where the logs are: paths (or, for Spark, `table:db.name`); all but the visits optional
    (the readout needs the orders)."""

    visits: Source
    exposures: Source | None = None
    identities: Source | None = None
    orders: Source | None = None


@dataclass
class EngineResult:
    """An engine's whole answer: the tables, the as-of date it used, input notes and set-aside counts."""

    tables: AuditTables
    as_of: date
    notes: list[str] = field(default_factory=list)
    counts: dict[str, int] = field(default_factory=dict)
    data_through: date | None = None  # the last day with data, when the as-of date lies beyond it


@dataclass
class ReadoutResult:
    """An engine's readout: the audit of the same logs (the gate), the readout's tables, and the
    readout's own input notes (orders, joins, window, cap), which follow the audit's."""

    audit: EngineResult
    tables: ReadoutTables
    notes: list[str] = field(default_factory=list)


class Engine(Protocol):
    """Raw logs -> tables. Raises `InputError` (file or table, column, sample rows) for bad input."""

    name: str

    def compute(self, spec: Spec, inputs: Inputs, as_of: date | None,
                advance: Callable[[int], None]) -> EngineResult: ...

    def readout(self, spec: Spec, inputs: Inputs, as_of: date | None,
                advance: Callable[[int], None]) -> ReadoutResult: ...


def local_path(src: Source | None, what: str) -> Path | None:
    """A local input's path; a catalog table is an input error outside the Spark engine."""
    if src is None:
        return None
    if str(src).startswith(TABLE_PREFIX):
        raise InputError(f"{src}: catalog tables ({what}) need the Spark engine; add --engine spark")
    return Path(src)


def load_frames(spec: Spec, inputs: Inputs, as_of: date | None,
                advance: Callable[[int], None]) -> tuple[Frames, date, Future[VisitArms]]:
    """The embedded engine's loading (`audit.load`): the frames, the as-of date used, and the
    visits' own counting (`engine_pandas.start_visit_arms`), started as soon as the visits are in."""
    from . import engine_pandas
    from .load import load_exposures, load_identities, load_visits
    from .read import Frames

    visits = local_path(inputs.visits, "--visits")
    exposures = local_path(inputs.exposures, "--exposures")
    identities = local_path(inputs.identities, "--identities")
    fr = Frames(visits=None)
    used = load_visits(spec, visits, as_of, fr)  # type: ignore[arg-type]
    early = engine_pandas.start_visit_arms(spec, fr.visits)  # overlaps the loading below
    advance(file_bytes(visits))
    if exposures is not None:
        load_exposures(spec, exposures, used, fr)
        advance(file_bytes(exposures))
    if identities is not None:
        load_identities(spec, identities, used, fr)
        advance(file_bytes(identities))
    return fr, used, early


class PandasEngine:
    """The pandas engine: `audit.load` reads the files into frames, `audit.engine_pandas` counts
    (and `readout.engine_pandas` for a readout)."""

    name = "pandas"

    def compute(self, spec: Spec, inputs: Inputs, as_of: date | None,
                advance: Callable[[int], None]) -> EngineResult:
        from . import engine_pandas

        fr, used, early = load_frames(spec, inputs, as_of, advance)
        tables = engine_pandas.compute(spec, fr, early)
        return EngineResult(tables=tables, as_of=used, notes=fr.notes, counts=fr.counts,
                            data_through=fr.data_through)

    def readout(self, spec: Spec, inputs: Inputs, as_of: date | None,
                advance: Callable[[int], None]) -> ReadoutResult:
        return readout_builder(self.name)(spec, inputs, as_of, advance)


# The readout's table builders, one per engine, registered by `armlock.readout` when it is imported
# (readout/__init__.py), so that no engine imports the readout: data flows one way. Each engine calls
# its own builder with its own arguments (see `Engine.readout` of each).
_READOUT_BUILDERS: dict[str, Callable[..., Any]] = {}


def register_readout(engine: str, builder: Callable[..., Any]) -> None:
    """Register the readout's table builder for the engine called `engine`."""
    _READOUT_BUILDERS[engine] = builder


def readout_builder(engine: str) -> Callable[..., Any]:
    """The readout's table builder registered for `engine` (importing `armlock.readout` registers them)."""
    try:
        return _READOUT_BUILDERS[engine]
    except KeyError:
        raise LookupError(f"no readout is registered for the {engine} engine; import armlock.readout first") from None


def file_bytes(*paths: Source | None) -> int:
    """Total size of the inputs that are local files (a progress bar's total); tables count 0."""
    return sum(Path(p).stat().st_size for p in paths
               if p is not None and not str(p).startswith(TABLE_PREFIX) and Path(p).is_file())


def select_engine(name: str = "duckdb", *, spark_master: str | None = None,
                  spark_conf: dict[str, str] | None = None, memory_limit: str | None = None,
                  temp_directory: str | None = None) -> Engine:
    """The engine called `name`. Spark loads only here, and only when asked for.

    `memory_limit` and `temp_directory` are the DuckDB engine's (its memory limit, e.g. "8GB", and
    the folder it spills to)."""
    if name == "pandas":
        return PandasEngine()
    if name == "duckdb":
        from .engine_duckdb import DuckDBEngine

        return DuckDBEngine(memory_limit=memory_limit, temp_directory=temp_directory)
    if name == "spark":
        try:
            import pyspark  # noqa: F401
        except ImportError:
            raise InputError("--engine spark needs PySpark, which is not installed; install the extra: "
                             f"{SPARK_INSTALL} (and Java 17)") from None
        from .engine_spark import SparkEngine

        return SparkEngine(master=spark_master, conf=spark_conf or {})
    raise InputError(f"unknown engine {name!r}; choose one of: {', '.join(ENGINES)}")


# -- canonical order -------------------------------------------------------------------------------

def _sorted_index(frame: pd.DataFrame) -> pd.DataFrame:
    return frame.loc[sorted(frame.index, key=str)] if len(frame) else frame


def _by_count(d: dict[str, int]) -> dict[str, int]:
    return dict(sorted(d.items(), key=lambda kv: (-kv[1], kv[0])))


def canonical(t: AuditTables) -> AuditTables:
    """The same tables in one fixed order: levels, campaigns and browsers sorted by name (code points),
    days and weeks by date, dictionaries of counts by count then name. Values are untouched."""
    s, i, b = t.split, t.integrity, t.balance
    split = SplitTables(arms=s.arms, units=s.units, daily=s.daily.sort_index(),
                        segments={k: _sorted_index(v) for k, v in s.segments.items()})
    pairs = i.pairs.sort_values(["recorded", "recomputed"], key=lambda c: c.map(s.arms.index)).reset_index(drop=True)
    integ = replace(i, recorded_unknown=_by_count(i.recorded_unknown), pairs=pairs, by_day=i.by_day.sort_index(),
                    by_segment={k: _sorted_index(v) for k, v in i.by_segment.items()},
                    fingerprints=None if i.fingerprints is None else _by_count(i.fingerprints))
    bal = BalanceTables(numeric=b.numeric.reset_index(drop=True),
                        categorical={k: _sorted_index(v) for k, v in b.categorical.items()})
    leak: LeakageTables | None = None
    if t.leakage is not None:
        lt = t.leakage
        leak = replace(lt, holdout_by_campaign=_sorted_index(lt.holdout_by_campaign),
                       holdout_by_week=lt.holdout_by_week.sort_index(), daily_rows=dict(sorted(lt.daily_rows.items())))
    churn: ChurnTables | None = None
    if t.churn is not None:
        ct = t.churn
        hist = ct.browser_hist.sort_values(["browser", "ids"]).reset_index(drop=True)
        churn = replace(ct, ids_hist=dict(sorted(ct.ids_hist.items())), by_browser=_sorted_index(ct.by_browser),
                        browser_hist=hist)
    return AuditTables(split=split, integrity=IntegrityTables(**vars(integ)), balance=bal, leakage=leak,
                       churn=churn, extra=t.extra)
