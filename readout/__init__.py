"""armlock readout: after the test, incremental revenue, iROAS and ROI with honest intervals, gated by the audit."""

from __future__ import annotations

from typing import Any

from armlock.shared.engine import register_readout


# Each engine's readout table builder, registered with the shared engines (armlock.shared.engine), so
# that no engine imports the readout. The builders load lazily: Spark only when it is asked for.
def _pandas(*args: Any) -> Any:
    from .engine_pandas import readout

    return readout(*args)


def _duckdb(*args: Any) -> Any:
    from .engine_duckdb import readout

    return readout(*args)


def _spark(*args: Any) -> Any:
    from .engine_spark import readout_tables

    return readout_tables(*args)


register_readout("pandas", _pandas)
register_readout("duckdb", _duckdb)
register_readout("spark", _spark)
