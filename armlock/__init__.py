"""armlock's command-line shell: parses options, calls the assign/audit libraries, formats output."""

from armlock.assign import __version__

__all__ = ["__version__"]
