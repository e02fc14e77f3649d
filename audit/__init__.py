"""armlock audit: logs -> sufficient statistics (engine) -> statistics -> verdicts -> reports.

This module is the audit's public surface: the readout (its gate) uses the audit only through the
names below, never through the audit's submodules (an import contract in CI: [tool.importlinter] in
pyproject.toml, checked by scripts/layers.py).
"""

from .feeds import FeedHealth, feed_health, feed_sentence
from .model import SCHEMA, ArmInfo, AuditReport, json_schema
from .overlap import shared_mask
from .run import build_report, checks_from_tables, concurrent_check, report_from_checks, run_audit
from .srm import holm

__all__ = ["SCHEMA", "ArmInfo", "AuditReport", "FeedHealth", "build_report", "checks_from_tables",
           "concurrent_check", "feed_health", "feed_sentence", "holm", "json_schema", "report_from_checks",
           "run_audit", "shared_mask"]
