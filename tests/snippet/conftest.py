"""Fixtures of the Chromium tests: the browser, a local http(s) site and fresh visitors."""

from __future__ import annotations

import os
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import pytest

from .browser import FLAGS, Page
from .helpers import need, serve


@pytest.fixture(scope="module")
def browser() -> Iterator[Any]:
    if os.environ.get("CI") == "true":
        import playwright.sync_api as sync_api  # under CI a missing playwright fails, never skips
    else:
        sync_api = pytest.importorskip("playwright.sync_api")
    path = need("chromium")
    with sync_api.sync_playwright() as pw:
        b = pw.chromium.launch(executable_path=path, args=FLAGS)
        try:
            yield b
        finally:
            b.close()


@pytest.fixture
def site(tmp_path: Path) -> Iterator[tuple[Path, str]]:
    with serve(tmp_path) as base:
        yield tmp_path, base


@pytest.fixture
def opened(browser: Any, site: tuple[Path, str]) -> Iterator[Callable[[], Page]]:
    """Make a fresh visitor of `site` (its own browser context); all are closed afterwards."""
    pages: list[Page] = []

    def make() -> Page:
        pages.append(Page(browser, site[1]))
        return pages[-1]

    yield make
    for p in pages:
        p.ctx.close()
