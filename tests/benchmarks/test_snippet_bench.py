"""Benchmarks of the browser snippet: rendered size (raw, gzip) and arm computation in Chromium.

Goals (issues 3, 13 and 23): the js form with every option set under 3,100 bytes gzipped; the in-page time per arm is reported as the
median over 10,000 calls (extra_info `median_us_per_arm`), next to Python's arm_for as baseline.
"""

from __future__ import annotations

import gzip
import os
import statistics
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest

from armlock.assign.batch import arm_for
from armlock.assign.snippet import js_literal, render_snippet, snippet_config
from armlock.assign.spec import load_spec

from ..snippet.helpers import HERE as SNIPPET_TESTS
from ..snippet.helpers import make_spec, need, random_ids, serve

pytestmark = pytest.mark.bench

GOLDEN = load_spec(SNIPPET_TESTS / "golden" / "invented-shop.toml")  # all options configured
PLAIN = make_spec()  # the defaults of `armlock init`
N = 10_000
IDS = random_ids(N, seed=10_000)


def sizes() -> dict[str, int]:
    out = {}
    for label, spec in (("full", GOLDEN), ("plain", PLAIN)):
        for form in ("js", "html"):
            data = render_snippet(spec, form).encode("utf-8")
            out[f"{label}_{form}_raw_bytes"] = len(data)
            out[f"{label}_{form}_gzip_bytes"] = len(gzip.compress(data, 9))
    return out


@pytest.mark.benchmark(group="snippet-render")
def test_baseline_config_literal_only(benchmark: Any) -> None:
    out = benchmark(lambda: js_literal(snippet_config(GOLDEN)))
    assert out.startswith("{")


@pytest.mark.benchmark(group="snippet-render")
def test_render_js_form(benchmark: Any) -> None:
    benchmark.extra_info.update(sizes())
    out = benchmark(render_snippet, GOLDEN, "js")
    assert benchmark.extra_info["full_js_gzip_bytes"] == len(gzip.compress(out.encode(), 9))


@pytest.fixture(scope="module")
def page(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Any]:
    if os.environ.get("CI") == "true":
        import playwright.sync_api as sync_api  # under CI a missing playwright fails, never skips
    else:
        sync_api = pytest.importorskip("playwright.sync_api")
    path = need("chromium")
    root: Path = tmp_path_factory.mktemp("bench-site")
    (root / "p.html").write_text(f"<!doctype html><meta charset='utf-8'>{render_snippet(PLAIN, 'html')}",
                                 encoding="utf-8")
    with serve(root) as base, sync_api.sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=path, args=[
            "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
            "--disable-component-update", "--disable-sync", "--no-first-run"])
        try:
            pg = browser.new_page()
            pg.goto(f"{base}/p.html", wait_until="load")
            pg.evaluate("s => { window.benchIds = JSON.parse(s); }", __import__("json").dumps(IDS))
            yield pg
        finally:
            browser.close()


# Runs inside the page: 100 batches of 100 arm computations, each batch timed with
# performance.now (too coarse for one call); returns per-call times in microseconds.
IN_PAGE = """() => {
  const ids = window.benchIds, out = [];
  for (let b = 0; b < 100; b++) {
    const t0 = performance.now();
    for (let i = b * 100; i < b * 100 + 100; i++) armlock.armOf(ids[i]);
    out.push((performance.now() - t0) * 1000 / 100);
  }
  return out;
}"""


@pytest.mark.benchmark(group="snippet-arm-10k")
def test_baseline_python_arm_for_10k(benchmark: Any) -> None:
    out = benchmark(lambda: [arm_for(PLAIN, i) for i in IDS])
    assert len(out) == N


@pytest.mark.benchmark(group="snippet-arm-10k")
def test_chromium_in_page_arm_10k(benchmark: Any, page: Any) -> None:
    per_call = page.evaluate(IN_PAGE)
    benchmark.extra_info["median_us_per_arm"] = round(statistics.median(per_call), 2)
    benchmark.extra_info["batches"] = len(per_call)
    got = benchmark(page.evaluate, "() => window.benchIds.map(armlock.armOf)")
    assert got == [arm_for(PLAIN, i) for i in IDS]
