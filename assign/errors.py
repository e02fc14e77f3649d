"""The exception tree every armlock library raises; the CLI maps each to an exit code.

    ArmlockError            base: catch this once at the edge (the CLI does)
    ├── SpecError           the experiment spec file is missing, not TOML, or invalid  -> exit 4
    ├── InputError          a data file (ids, visits, exposures...) is missing or bad  -> exit 4
    └── SplitChangedError   the spec's salt or weights differ from its lock file       -> exit 6

An audit or readout that ran sets its own code from its checks (`armlock/routing.py`): 3 when a
split check fails, 7 when only a feed-freshness check does (the data is stale).
"""

from __future__ import annotations

# Exit codes a scheduler can act on (documented in the README, "Exit codes").
EXIT_OK = 0
EXIT_WARN = 1  # audit found warnings and --strict was given
EXIT_USAGE = 2  # bad command line (click's own code)
EXIT_FAIL = 3  # audit found a failing check
EXIT_BAD_INPUT = 4  # spec or data file is wrong: nothing was judged
EXIT_INTERNAL = 5  # a bug in armlock: please report it
EXIT_SPLIT_CHANGED = 6  # the spec's split differs from the one its lock file recorded, unconfirmed
EXIT_STALE = 7  # the data is stale: a feed-freshness check fails and no split check does


class ArmlockError(Exception):
    """Base of every expected failure; its message says what is wrong and how to fix it."""

    exit_code = EXIT_BAD_INPUT


class SpecError(ArmlockError):
    """The experiment spec cannot be used: raised with file, field path and what would be valid."""


class InputError(ArmlockError):
    """A data file cannot be read as asked: the message names file, column and rows."""


class SplitChangedError(ArmlockError):
    """The spec's fingerprint differs from its lock file and the change was not confirmed."""

    exit_code = EXIT_SPLIT_CHANGED
