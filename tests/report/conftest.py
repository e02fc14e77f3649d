"""Fixtures of the report tests: hand-built reports (see fixtures.py)."""

from __future__ import annotations

from collections.abc import Callable

import pytest

from armlock.audit.model import AuditReport

from .fixtures import build_report, weekly


@pytest.fixture
def make_report() -> Callable[..., AuditReport]:
    return build_report


@pytest.fixture
def weekly_reports() -> list[AuditReport]:
    return weekly()
