"""The snippet in real headless Chromium on a page served from 127.0.0.1."""

from __future__ import annotations

import json
import time
from pathlib import Path
from typing import Any

from armlock.assign.batch import arm_for
from armlock.assign.contract import bucket

from .browser import write_page
from .helpers import make_spec, random_ids

DAY = 86_400


def test_cookie_attributes_event_and_persistence_across_reloads(site: tuple[Path, str], opened: Any) -> None:
    spec = make_spec()
    name = write_page(site[0], "p.html", spec)
    p = opened()
    t0 = time.time()
    p.open(name)
    c = p.cookie()
    assert c is not None
    uid = c["value"]
    # RFC 6265bis: Path=/, SameSite=Lax, lifetime at most 400 days; Secure only on https
    assert c["path"] == "/" and c["sameSite"] == "Lax" and c["secure"] is False
    assert c["httpOnly"] is False and c["domain"] == "127.0.0.1"
    lifetime = c["expires"] - t0
    assert 395 * DAY - 120 <= lifetime <= 395 * DAY + 120 and lifetime <= 400 * DAY
    arm = arm_for(spec, uid)
    assert p.js("armlock.arm") == arm
    assert p.events() == [{"event": "armlock_arm", "armlock_experiment": spec.name, "armlock_arm": arm,
                           "armlock_fingerprint": spec.fingerprint, "armlock_forced": False}]
    assert p.js("localStorage.getItem('armlock_uid')") == uid
    for _ in range(2):
        p.page.reload(wait_until="load")
        assert p.cookie()["value"] == uid and p.js("armlock.arm") == arm
        assert len(p.events()) == 1
    assert p.errors == []


def test_cleared_cookie_is_restored_from_local_storage(site: tuple[Path, str], opened: Any) -> None:
    spec = make_spec()
    name = write_page(site[0], "p.html", spec)
    p = opened().open(name)
    uid = p.cookie()["value"]
    p.ctx.clear_cookies()
    assert p.cookie() is None
    p.page.reload(wait_until="load")
    assert p.cookie()["value"] == uid and p.js("armlock.arm") == arm_for(spec, uid)
    # both gone: a new visitor with a new id
    p.ctx.clear_cookies()
    p.js("localStorage.clear()")
    p.page.reload(wait_until="load")
    assert p.cookie()["value"] != uid
    assert p.errors == []


def test_gated_vendor_tag_runs_only_for_the_exposed_arm(site: tuple[Path, str], opened: Any) -> None:
    spec = make_spec(arms=[("holdout", 5000, "holdout"), ("exposed", 5000, "exposed")])
    name = write_page(site[0], "p.html", spec)
    by_arm = {arm_for(spec, f"visitor-{i}"): f"visitor-{i}" for i in range(30)}
    assert set(by_arm) == {"holdout", "exposed"}
    for arm, uid in by_arm.items():
        p = opened()
        p.ctx.add_cookies([{"name": "armlock_uid", "value": uid, "url": p.base}])
        p.open(name)
        assert p.js("armlock.arm") == arm
        assert p.js("window.vendorFired || 0") == (1 if arm == "exposed" else 0)
        assert p.errors == []


def test_consent_gating_in_the_page(site: tuple[Path, str], opened: Any) -> None:
    spec = make_spec(consent={"mode": "data_layer", "key": "consent.ads", "value": "granted"})
    name = write_page(site[0], "p.html", spec)
    p = opened().open(name)
    assert p.cookie() is None and p.js("localStorage.length") == 0
    assert p.js("armlock.state") == "waiting" and p.js("armlock.arm") is None
    assert p.events() == [] and p.js("window.vendorFired || 0") == 0
    p.js("dataLayer.push({consent: {ads: 'denied'}})")
    assert p.cookie() is None and p.events() == []
    p.js("dataLayer.push({consent: {ads: 'granted'}})")
    uid = p.cookie()["value"]
    arm = arm_for(spec, uid)
    assert p.js("armlock.arm") == arm and len(p.events()) == 1
    assert p.js("window.vendorFired || 0") == (1 if arm == "exposed" else 0)
    p.js("dataLayer.push({consent: {ads: 'granted'}})")
    assert len(p.events()) == 1  # decided once per page view
    assert p.errors == []


def test_qa_override_forces_this_view_only(site: tuple[Path, str], opened: Any) -> None:
    spec = make_spec(qa_param="armlock_qa")
    name = write_page(site[0], "p.html", spec)
    p = opened().open(f"{name}?armlock_qa=exposed")
    assert p.js("armlock.arm") == "exposed" and p.js("armlock.forced") is True
    assert p.events()[0]["armlock_forced"] is True and p.js("window.vendorFired || 0") == 1
    assert p.cookie() is None and p.js("localStorage.length") == 0
    p.open(f"{name}?armlock_qa=holdout")
    assert p.js("armlock.arm") == "holdout" and p.js("window.vendorFired || 0") == 0
    assert p.cookie() is None
    p.open(name)
    uid = p.cookie()["value"]
    assert p.js("armlock.forced") is False and p.js("armlock.arm") == arm_for(spec, uid)
    assert p.errors == []


def test_fail_closed_when_cookies_throw(site: tuple[Path, str], opened: Any) -> None:
    spec = make_spec()
    block = ("<script>Object.defineProperty(Document.prototype, 'cookie', {configurable: true,"
             " get: function () { throw new Error('blocked by the test'); },"
             " set: function () { throw new Error('blocked by the test'); }});</script>")
    name = write_page(site[0], "p.html", spec, before=block)
    p = opened().open(name)
    assert p.errors == []
    assert p.js("armlock.arm") is None and p.js("armlock.state") == "failed"
    assert p.js("window.vendorFired || 0") == 0 and p.events() == []
    (err,) = p.events("armlock_error")
    assert err["armlock_experiment"] == spec.name and "blocked by the test" in err["armlock_error"]


def test_5000_ids_hashed_in_the_page_equal_python(site: tuple[Path, str], opened: Any) -> None:
    # Reference: python-xxhash via assign.contract.bucket and assign.batch.arm_for.
    spec = make_spec(salt="page-salt-\u00e9",
                     arms=[("holdout", 1500, "holdout"), ("exposed", 8500, "exposed")])
    name = write_page(site[0], "p.html", spec, after="")
    ids = random_ids(5000, seed=5000)
    p = opened().open(name)
    # ASCII-only JSON text, parsed in the page, so lone surrogates arrive intact
    got = p.js("s => { const ids = JSON.parse(s); return [ids.map(armlock.bucketOf), ids.map(armlock.armOf)]; }",
               json.dumps(ids, ensure_ascii=True))
    assert got[0] == [bucket(spec.salt, i) if i else None for i in ids]
    assert got[1] == [arm_for(spec, i) for i in ids]
    assert p.errors == []


def test_hostile_spec_in_the_real_html_parser(site: tuple[Path, str], opened: Any) -> None:
    from .test_hostile import HOSTILE, hostile_spec

    for i, h in enumerate(HOSTILE):
        spec = hostile_spec(h)
        name = write_page(site[0], f"h{i}.html", spec)
        p = opened()
        p.ctx.add_cookies([{"name": "site'$|&uid", "value": "v1.abc", "url": p.base}])
        p.open(name)
        assert p.errors == [] and p.js("window.pwned || 0") == 0
        # the page holds exactly our one script element plus the vendor tag
        assert p.js("document.scripts.length") == 2
        assert p.js("armlock.state") == "waiting"
        p.js("v => dataLayer.push({consent: {ads: v}})", "ok-" + h)
        assert p.js("armlock.arm") == arm_for(spec, "abc")
        assert p.events("evt-" + h)[0]["armlock_fingerprint"] == spec.fingerprint
        assert p.js("window.vendorFired || 0") == (1 if p.js("armlock.arm") == "exposed" else 0)
        assert p.errors == [] and p.js("window.pwned || 0") == 0
