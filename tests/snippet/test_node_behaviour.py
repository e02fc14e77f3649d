"""What the snippet does on a page, run in Node with a stubbed window and document."""

from __future__ import annotations

import re
from typing import Any

import pytest

from armlock.assign.batch import arm_for
from armlock.assign.snippet import render_snippet

from .helpers import make_spec, run_node

UUID4 = re.compile(r"^[0-9a-f]{8}-[0-9a-f]{4}-4[0-9a-f]{3}-[89ab][0-9a-f]{3}-[0-9a-f]{12}$")


def events(res: dict[str, Any], name: str) -> list[dict[str, Any]]:
    return [e for e in res["dataLayer"] or [] if isinstance(e, dict) and e.get("event") == name]


def test_first_visit_mints_a_v4_id_sets_cookie_and_mirror_and_pushes_one_event() -> None:
    spec = make_spec()
    res = run_node({"snippet": render_snippet(spec), "protocol": "https:"})
    uid = res["cookies"]["armlock_uid"]
    # RFC 9562 section 5.4: version 4 in the 13th hex digit, variant 10xx in the 17th
    assert UUID4.match(uid), uid
    assert res["storage"] == {"armlock_uid": uid}
    assert res["cookieWrites"] == [
        f"armlock_uid={uid}; Path=/; Max-Age={395 * 86400}; SameSite=Lax; Secure"]
    assert res["arm"] == arm_for(spec, uid) and res["state"] == "ready"
    assert events(res, "armlock_arm") == [{
        "event": "armlock_arm", "armlock_experiment": spec.name, "armlock_arm": res["arm"],
        "armlock_fingerprint": spec.fingerprint, "armlock_forced": False}]


def test_http_page_gets_no_secure_attribute_and_domain_when_configured() -> None:
    res = run_node({"snippet": render_snippet(make_spec(cookie_domain=".shop.example", cookie_days=400)),
                    "protocol": "http:"})
    (write,) = res["cookieWrites"]
    assert write.endswith("; Path=/; Max-Age=34560000; Domain=.shop.example; SameSite=Lax")


def test_existing_cookie_is_kept_and_mirrored() -> None:
    spec = make_spec()
    res = run_node({"snippet": render_snippet(spec), "cookie": "other=1; armlock_uid=visitor-1"})
    assert res["cookieWrites"] == [] and res["storage"] == {"armlock_uid": "visitor-1"}
    assert res["arm"] == arm_for(spec, "visitor-1")


def test_cookie_is_restored_from_local_storage() -> None:
    spec = make_spec()
    res = run_node({"snippet": render_snippet(spec), "storage": {"armlock_uid": "visitor-2"}})
    assert res["cookies"]["armlock_uid"] == "visitor-2"
    assert res["arm"] == arm_for(spec, "visitor-2")


def test_unsafe_local_storage_value_is_not_written_into_a_cookie() -> None:
    res = run_node({"snippet": render_snippet(make_spec()),
                    "storage": {"armlock_uid": "x; Domain=evil.example"}})
    assert UUID4.match(res["cookies"]["armlock_uid"])
    assert "evil" not in "".join(res["cookieWrites"])


def test_id_sources_in_priority_order_with_pattern_and_the_id_found_is_kept() -> None:
    spec = make_spec(id_sources=[
        {"kind": "global", "name": "site.visitor.id"},
        {"kind": "cookie", "name": "site_uid", "pattern": "^v1\\.(.+)$"},
        {"kind": "data_layer", "name": "user.id"},
    ])
    js = render_snippet(spec)
    by_global = run_node({"snippet": js, "globals": {"site": {"visitor": {"id": 12345}}},
                          "cookie": "site_uid=v1.abc"})
    assert by_global["arm"] == arm_for(spec, "12345")
    # the first id found is kept in armlock's own cookie and its mirror (issue 23)
    assert by_global["cookies"]["armlock_uid"] == "12345" and by_global["storage"] == {"armlock_uid": "12345"}
    by_cookie = run_node({"snippet": js, "cookie": "site_uid=v1.abc"})
    assert by_cookie["arm"] == arm_for(spec, "abc")
    no_match = run_node({"snippet": js, "cookie": "site_uid=v2.abc",
                         "before": [{"user": {"id": "u-1"}}, {"user": {"id": "u-9"}}]})
    assert no_match["arm"] == arm_for(spec, "u-9")  # the latest data-layer value wins
    nothing = run_node({"snippet": js})
    assert UUID4.match(nothing["cookies"]["armlock_uid"])
    # an id a cookie cannot hold as it is (a space, a ';') is read from its source on each view
    odd = run_node({"snippet": js, "globals": {"site": {"visitor": {"id": "a b;c"}}}})
    assert odd["arm"] == arm_for(spec, "a b;c") and odd["cookieWrites"] == [] and odd["storage"] == {}


def test_gate_runs_only_for_the_exposed_arms_and_named_arms() -> None:
    spec = make_spec(arms=[("holdout", 5000, "holdout"), ("exposed", 5000, "exposed")])
    ids = {arm_for(spec, f"v{i}"): f"v{i}" for i in range(20)}
    js = render_snippet(spec)
    for arm, uid in ids.items():
        res = run_node({"snippet": js, "cookie": f"armlock_uid={uid}",
                        "gate": [None, "holdout", ["holdout", "exposed"], "nope"]})
        assert res["arm"] == arm
        assert res["gateRan"] == [arm == "exposed", arm == "holdout", True, False]


def test_consent_data_layer_waits_then_works_and_rechecks_later_events() -> None:
    spec = make_spec(consent={"mode": "data_layer", "key": "consent.ads", "value": "granted"})
    js = render_snippet(spec)
    denied = run_node({"snippet": js, "before": [{"consent": {"ads": "denied"}}], "gate": [None, "holdout"]})
    assert denied["state"] == "waiting" and denied["arm"] is None
    assert denied["cookieWrites"] == [] and denied["storage"] == {}
    assert events(denied, "armlock_arm") == [] and denied["gateRan"] == [False, False]
    later = run_node({"snippet": js, "before": [{"consent": {"ads": "denied"}}], "gate": [None, "holdout"],
                      "after": [{"event": "page"}, {"consent": {"ads": "granted"}}]})
    assert later["state"] == "ready" and len(events(later, "armlock_arm")) == 1
    uid = later["cookies"]["armlock_uid"]
    assert later["arm"] == arm_for(spec, uid)
    assert later["gateRan"] == [later["arm"] == "exposed", later["arm"] == "holdout"]
    already = run_node({"snippet": js, "before": [{"consent": {"ads": "granted"}}]})
    assert already["state"] == "ready"
    revoked = run_node({"snippet": js, "before": [{"consent": {"ads": "granted"}}, {"consent": {"ads": "denied"}}]})
    assert revoked["state"] == "waiting"  # the latest consent value decides


def test_consent_function_is_rechecked() -> None:
    spec = make_spec(consent={"mode": "function", "function": "siteConsent"})
    js = render_snippet(spec)
    waiting = run_node({"snippet": js, "gate": [None]})
    assert waiting["state"] == "waiting" and waiting["cookieWrites"] == []
    granted = run_node({"snippet": js, "gate": [None], "consentAfter": "siteConsent"})
    assert granted["state"] == "ready" and granted["gateRan"] == [granted["arm"] == "exposed"]


def test_qa_override_forces_one_view_without_touching_cookies() -> None:
    spec = make_spec(qa_param="armlock_qa")
    js = render_snippet(spec)
    for arm in ("holdout", "exposed"):
        res = run_node({"snippet": js, "search": f"?x=1&armlock_qa={arm}", "gate": [None]})
        assert res["arm"] == arm and res["forced"] is True
        assert res["cookieWrites"] == [] and res["storage"] == {}
        assert events(res, "armlock_arm")[0]["armlock_forced"] is True
        assert res["gateRan"] == [arm == "exposed"]
    bad = run_node({"snippet": js, "search": "?armlock_qa=exposedd", "gate": [None]})
    assert bad["state"] == "failed" and bad["arm"] is None and bad["gateRan"] == [False]
    assert events(bad, "armlock_error")[0]["armlock_error"] == "QA parameter: no such arm"
    off = run_node({"snippet": render_snippet(make_spec()), "search": "?armlock_qa=holdout"})
    assert off["forced"] is False  # off unless configured


@pytest.mark.parametrize("case", ["cookieThrows", "cookieIgnored", "noCrypto"])
def test_fail_closed(case: str) -> None:
    js = render_snippet(make_spec())
    req: dict[str, Any] = {"snippet": js, "gate": [None, "holdout", ["holdout", "exposed"]]}
    req[case] = True
    res = run_node(req)
    assert res["pageError"] is None
    assert res["arm"] is None and res["state"] == "failed"
    assert res["gateRan"] == [False, False, False]
    assert events(res, "armlock_arm") == []
    (err,) = events(res, "armlock_error")
    assert err["armlock_experiment"] == "invented-retargeting-test" and err["armlock_error"]
