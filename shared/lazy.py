"""Heavy imports started on a thread ahead of need, while a command reads its logs."""

from __future__ import annotations

import importlib
import sys
import threading


def warm_up_stats() -> None:
    """Import scipy.stats on a thread (0.6 s of a fresh process) while an engine reads the logs.

    Only the checks and the readout's statistics need it, after the reading, and Arrow's and
    DuckDB's reading mostly leave Python's lock free; the modules that use it import it inside
    their functions. A function that asks first waits for the import to end."""
    if "scipy.stats" not in sys.modules:
        threading.Thread(target=importlib.import_module, args=("scipy.stats",), name="armlock-import",
                         daemon=True).start()
