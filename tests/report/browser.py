"""Headless Chromium for the report tests: the system browser only, no downloads, no network."""

from __future__ import annotations

import os
import shutil
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import pytest

FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
         "--disable-component-update", "--disable-sync", "--no-first-run"]


def chromium_path() -> str:
    """The system chromium; skip without it, except in CI where its absence is a failure."""
    path = shutil.which("chromium") or shutil.which("chromium-browser")
    if path is None:
        if os.environ.get("CI") == "true":
            pytest.fail("chromium is not installed but CI=true: the report must be checked in a browser")
        pytest.skip("chromium is not installed")
    return path


@contextmanager
def open_page(html_file: Path, width: int, height: int = 900) -> Iterator[tuple[Any, dict[str, list[str]]]]:
    """Open a local file; every non-file request is aborted and logged with console errors and dialogs."""
    try:
        from playwright import sync_api
    except ImportError:
        if os.environ.get("CI") == "true":
            pytest.fail("playwright (Python) is not installed but CI=true")
        pytest.skip("playwright (Python) is not installed")
    seen: dict[str, list[str]] = {"console_errors": [], "page_errors": [], "dialogs": [],
                                  "non_file_requests": [], "failed_requests": []}
    with sync_api.sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=chromium_path(), args=FLAGS)
        try:
            page = browser.new_page(viewport={"width": width, "height": height})

            def route(r: Any) -> None:
                if r.request.url.startswith("file:"):
                    r.continue_()
                else:
                    seen["non_file_requests"].append(r.request.url)
                    r.abort()

            page.route("**/*", route)
            page.on("request", lambda req: None if req.url.startswith("file:")
                    else seen["non_file_requests"].append(req.url))
            page.on("requestfailed", lambda req: seen["failed_requests"].append(req.url))
            page.on("console", lambda m: seen["console_errors"].append(m.text) if m.type == "error" else None)
            page.on("pageerror", lambda e: seen["page_errors"].append(str(e)))

            def dialog(d: Any) -> None:
                seen["dialogs"].append(d.message)
                d.dismiss()

            page.on("dialog", dialog)
            page.goto(html_file.resolve().as_uri(), wait_until="load")
            yield page, seen
        finally:
            browser.close()
