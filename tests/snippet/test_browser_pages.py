"""The snippet in headless Chromium on messy pages: load order, two copies, tampering, https."""

from __future__ import annotations

import time
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import pytest

from armlock.assign.batch import arm_for
from armlock.assign.snippet import preload_stub, render_snippet

from .browser import VENDOR, Page, write_page
from .helpers import make_spec, serve
from .test_node_pages import CONSENT, HALF, visitor

STUB = f"<script>{preload_stub()}</script>"
HOLDOUT_TAG = "<script>armlock.gate(function (arm) { window.holdoutTag = arm; }, 'holdout');</script>"
# counts the page's writes of armlock's cookie, through the real cookie setter
COUNT_COOKIE_WRITES = """<script>(function () {
  var real = Object.getOwnPropertyDescriptor(Document.prototype, 'cookie');
  window.cookieWrites = 0;
  Object.defineProperty(Document.prototype, 'cookie', {configurable: true,
    get: function () { return real.get.call(this); },
    set: function (v) { if (/^armlock_uid=/.test(v)) window.cookieWrites++; real.set.call(this, v); }});
})();</script>"""
# page code that tries to move the visitor into the exposed arm, then (after the vendor's tag
# ran) puts the built-ins back so the test can read the page
TAMPER = """<script>
var saved = [Array.prototype.indexOf, Array.prototype.push, String.prototype.charCodeAt,
             Function.prototype.call, window.String];
armlock.arm = 'exposed'; armlock.state = 'ready';
armlock.gate = function (cb) { cb('exposed'); };
Array.prototype.indexOf = function () { return 0; };
Array.prototype.push = function () { return 0; };
String.prototype.charCodeAt = function () { return 65; };
Function.prototype.call = function () { return 'exposed'; };
</script>"""
UNTAMPER = """<script>
Array.prototype.indexOf = saved[0]; Array.prototype.push = saved[1]; String.prototype.charCodeAt = saved[2];
Function.prototype.call = saved[3]; window.String = saved[4];
</script>"""


def with_id(p: Page, uid: str) -> Page:
    p.ctx.add_cookies([{"name": "armlock_uid", "value": uid, "url": p.base}])
    return p


@pytest.mark.parametrize("arm", ["holdout", "exposed"])
def test_gate_calls_before_an_async_snippet_wait_in_the_stub(
        arm: str, site: tuple[Path, str], opened: Callable[[], Page]) -> None:
    spec = make_spec(arms=HALF)
    (site[0] / "armlock.js").write_text(render_snippet(spec, "js"), encoding="utf-8")
    # the tags call the gate first; the snippet arrives later, from its own file, async
    (site[0] / "p.html").write_text(
        f"<!doctype html><meta charset='utf-8'>{STUB}{VENDOR}{HOLDOUT_TAG}"
        "<script async src='armlock.js'></script><body>shop.example page</body>", encoding="utf-8")
    p = with_id(opened(), visitor(spec, arm)).open("p.html")
    p.page.wait_for_function("window.armlock.state === 'ready'")
    assert p.js("armlock.arm") == arm and len(p.events()) == 1
    assert p.js("window.vendorFired || 0") == (1 if arm == "exposed" else 0)
    assert p.js("window.holdoutTag || null") == (arm if arm == "holdout" else None)
    assert p.js("Object.isFrozen(armlock) && !Array.isArray(armlock.q)")
    assert p.errors == []


def test_two_copies_of_the_same_snippet_act_once(site: tuple[Path, str], opened: Callable[[], Page]) -> None:
    spec = make_spec()
    (site[0] / "armlock.js").write_text(render_snippet(spec, "js"), encoding="utf-8")
    # a tag-manager copy, then a hard-coded self-hosted copy of the same snippet
    name = write_page(site[0], "p.html", spec, before=COUNT_COOKIE_WRITES,
                      after="<script>window.first = armlock;</script><script src='armlock.js'></script>" + VENDOR)
    p = opened().open(name)
    uid = p.cookie()["value"]
    assert p.js("window.cookieWrites") == 1 and len(p.events()) == 1
    assert p.js("window.first === armlock") and p.events("armlock_error") == []
    assert p.js("armlock.arm") == arm_for(spec, uid)
    assert p.js("window.vendorFired || 0") == (1 if arm_for(spec, uid) == "exposed" else 0)
    assert p.errors == []


def test_a_copy_of_another_spec_reports_both_fingerprints(
        site: tuple[Path, str], opened: Callable[[], Page]) -> None:
    first, other = make_spec(), make_spec(salt="another-salt-0123456789")
    name = write_page(site[0], "p.html", first, before=COUNT_COOKIE_WRITES,
                      after="<script>window.first = armlock;</script>" + render_snippet(other, "html") + VENDOR)
    p = opened().open(name)
    assert p.js("window.cookieWrites") == 1 and len(p.events()) == 1
    assert p.js("window.first === armlock && armlock.fingerprint") == first.fingerprint
    (err,) = p.events("armlock_error")
    assert first.fingerprint in err["armlock_error"] and other.fingerprint in err["armlock_error"]
    assert p.errors == []


def test_page_code_cannot_move_a_holdout_visitor(site: tuple[Path, str], opened: Callable[[], Page]) -> None:
    spec = make_spec()
    name = write_page(site[0], "p.html", spec,
                      after=TAMPER + VENDOR + "<script>armlock.gate(function () { window.named = 1; }, ['exposed']);"
                      "</script>" + UNTAMPER)
    uid = visitor(spec, "holdout")
    p = with_id(opened(), uid).open(name)
    assert p.js("window.vendorFired || 0") == 0 and p.js("window.named || 0") == 0
    assert p.js("[armlock.arm, armlock.state, armlock.forced]") == ["holdout", "ready", False]
    assert p.errors == []


@pytest.mark.parametrize("arm", ["holdout", "exposed"])
def test_built_ins_patched_before_consent_do_not_change_the_arm(
        arm: str, site: tuple[Path, str], opened: Callable[[], Page]) -> None:
    spec = make_spec(arms=HALF, consent=CONSENT)
    name = write_page(site[0], "p.html", spec,
                      after=VENDOR + TAMPER + "<script>dataLayer.push({consent: {ads: 'granted'}});</script>" + UNTAMPER)
    p = with_id(opened(), visitor(spec, arm)).open(name)
    assert p.js("armlock.arm") == arm  # Reference: arm_for (python-xxhash) via visitor()
    assert p.js("window.vendorFired || 0") == (1 if arm == "exposed" else 0)
    assert p.errors == []


def test_a_hash_changed_by_built_ins_patched_before_load_fails_closed(
        site: tuple[Path, str], opened: Callable[[], Page]) -> None:
    patch = "<script>String.prototype.charCodeAt = function () { return 65; };</script>"
    p = opened().open(write_page(site[0], "p.html", make_spec(), before=STUB + VENDOR + patch))
    assert p.js("[armlock.state, armlock.arm]") == ["failed", None] and p.cookie() is None
    assert p.js("window.vendorFired || 0") == 0 and p.events() == []
    assert p.events("armlock_error")[0]["armlock_error"] == "self-test failed: this page hashes differently"
    assert p.errors == []


def test_a_random_source_that_fills_nothing_fails_closed(site: tuple[Path, str], opened: Callable[[], Page]) -> None:
    spec = make_spec()
    broken = "<script>Crypto.prototype.getRandomValues = function (b) { return b; };</script>"
    p = opened().open(write_page(site[0], "p.html", spec, before=broken))
    assert p.js("[armlock.state, armlock.arm]") == ["failed", None] and p.cookie() is None
    assert p.js("window.vendorFired || 0") == 0 and p.events() == []
    assert p.events("armlock_error")[0]["armlock_error"] == "random source failed: no bytes"
    assert p.errors == []


@pytest.fixture
def https_site(tmp_path: Path) -> Iterator[tuple[Path, str]]:
    with serve(tmp_path, tls=True) as base:
        yield tmp_path, base


def test_https_page_secure_cookie_and_the_whole_flow(browser: Any, https_site: tuple[Path, str]) -> None:
    # every option on: consent by data layer, a QA parameter, the pre-load stub and an early tag
    spec = make_spec(consent=CONSENT, qa_param="armlock_qa")
    name = write_page(https_site[0], "p.html", spec, before=STUB + VENDOR, after="")
    p = Page(browser, https_site[1])
    try:
        t0 = time.time()
        p.open(name)
        assert p.js("location.protocol") == "https:"
        assert p.js("armlock.state") == "waiting" and p.cookie() is None and p.events() == []
        p.js("dataLayer.push({consent: {ads: 'granted'}})")
        c = p.cookie()
        assert c is not None
        uid, arm = c["value"], arm_for(spec, c["value"])
        # RFC 6265bis: Secure on https, Path=/, SameSite=Lax, lifetime under 400 days
        assert c["secure"] is True and c["path"] == "/" and c["sameSite"] == "Lax" and c["httpOnly"] is False
        assert 395 * 86_400 - 120 <= c["expires"] - t0 <= 400 * 86_400
        assert p.js("armlock.arm") == arm and len(p.events()) == 1
        assert p.js("window.vendorFired || 0") == (1 if arm == "exposed" else 0)
        assert p.js("document.cookie").count("armlock_uid=") == 1
        p.page.reload(wait_until="load")
        p.js("dataLayer.push({consent: {ads: 'granted'}})")
        assert p.cookie()["value"] == uid and p.js("armlock.arm") == arm and len(p.events()) == 1
        p.open(f"{name}?armlock_qa=holdout&100%=1")
        p.js("dataLayer.push({consent: {ads: 'granted'}})")
        assert p.js("[armlock.arm, armlock.forced]") == ["holdout", True]
        assert p.js("window.vendorFired || 0") == 0 and p.cookie()["value"] == uid
        assert p.errors == []
    finally:
        p.ctx.close()
