"""Shared fixtures: the frozen vectors file and small specs."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import pytest

from armlock.assign import Spec

ROOT = Path(__file__).resolve().parents[1]
VECTORS = ROOT / "shared" / "vectors" / "assignment_vectors.json"


def load_vectors() -> dict[str, Any]:
    return json.loads(VECTORS.read_text(encoding="ascii"))


def layout_spec(layout: dict[str, Any]) -> Spec:
    return Spec(
        name=layout["name"],
        salt=layout["salt"],
        start="2026-01-01T00:00:00Z",
        arms=[{"name": n, "weight": w} for n, w in layout["arms"]],
    )


@pytest.fixture
def spec_50() -> Spec:
    return Spec(name="t", salt="test-salt", start="2026-01-01T00:00:00Z",
                arms=[{"name": "holdout", "weight": 5000}, {"name": "exposed", "weight": 5000}])
