"""Helpers of the Chromium tests: one fresh browser context per visitor, and test pages."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from armlock.assign.snippet import render_snippet
from armlock.assign.spec import Spec

FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
         "--disable-component-update", "--disable-sync", "--no-first-run"]
VENDOR = "<script>armlock.gate(function (arm) { window.vendorFired = (window.vendorFired || 0) + 1; });</script>"


class Page:
    """One fresh browser context (no cookies, no storage) with page errors collected."""

    def __init__(self, browser: Any, base: str) -> None:
        # the https site has a throw-away self-signed certificate: the context accepts it
        self.ctx = browser.new_context(ignore_https_errors=base.startswith("https:"))
        self.page = self.ctx.new_page()
        self.base = base
        self.errors: list[str] = []
        self.page.on("pageerror", lambda e: self.errors.append(str(e)))

    def open(self, name: str) -> Page:
        self.page.goto(f"{self.base}/{name}", wait_until="load")
        return self

    def js(self, expr: str, arg: Any = None) -> Any:
        return self.page.evaluate(expr, arg)

    def events(self, name: str = "armlock_arm") -> list[dict[str, Any]]:
        return self.js("n => (window.dataLayer || []).filter(e => e && e.event === n)", name)

    def cookie(self, name: str = "armlock_uid") -> dict[str, Any] | None:
        found = [c for c in self.ctx.cookies() if c["name"] == name]
        return found[0] if found else None


def write_page(root: Path, name: str, spec: Spec, before: str = "", after: str = VENDOR) -> str:
    html = ("<!doctype html><html><head><meta charset='utf-8'><title>invented shop</title>"
            f"{before}{render_snippet(spec, 'html')}{after}</head><body>shop.example page</body></html>")
    (root / name).write_text(html, encoding="utf-8")
    return name
