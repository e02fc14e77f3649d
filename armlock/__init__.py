"""armlock's command-line shell: parses options, calls the assign/audit libraries, formats output."""

import os
import sys

# OpenBLAS (numpy's and scipy's linear algebra) starts a thread per core as it loads, and each spins
# a while before it sleeps. armlock's matrix work is small (a few covariates at most), so those
# threads only take CPU from the work: 0.3-0.5 CPU-s of a 2 M-unit audit's 9 on a 2-core machine.
# One thread, unless the caller chose otherwise (the variable set, or numpy loaded before armlock).
if "numpy" not in sys.modules:
    os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

from armlock.assign import __version__  # noqa: E402  (after the thread setting)

__all__ = ["__version__"]
