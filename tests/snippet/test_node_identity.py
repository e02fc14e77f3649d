"""Issue 23 in Node: the snippet adopts a server-set id, and a login never moves a visitor."""

from __future__ import annotations

from typing import Any

from armlock.assign.batch import arm_for
from armlock.assign.snippet import render_snippet
from armlock.assign.spec import Spec

from .helpers import make_spec, run_node

HALF = [("holdout", 5000, "holdout"), ("exposed", 5000, "exposed")]
BOTH = [None, "holdout"]  # gate() calls: the default (exposed arms) and the holdout arm


def events(res: dict[str, Any], name: str) -> list[dict[str, Any]]:
    return [e for e in res["dataLayer"] or [] if isinstance(e, dict) and e.get("event") == name]


def key_in(spec: Spec, arm: str, prefix: str) -> str:
    """An id that the contract (Python's arm_for) puts in `arm`."""
    return next(f"{prefix}{i}" for i in range(1000) if arm_for(spec, f"{prefix}{i}") == arm)


# ---- the id comes from the server -----------------------------------------------------------

def test_server_id_is_used_as_it_is_and_nothing_is_written() -> None:
    spec = make_spec(id_from="server")
    uid = "0b6f0c1e-5d7a-4c39-9c51-3f1f4f0b9e2a"
    res = run_node({"snippet": render_snippet(spec), "cookie": f"armlock_uid={uid}", "noCrypto": True})
    assert res["state"] == "ready" and res["arm"] == arm_for(spec, uid)
    assert res["cookieWrites"] == [] and res["storage"] == {}  # no write, no mirror, no random draw
    assert events(res, "armlock_arm")[0]["armlock_arm"] == res["arm"]


def test_server_mode_without_the_cookie_fails_closed_and_never_mints() -> None:
    spec = make_spec(id_from="server")
    for req in ({}, {"cookie": "armlock_uid="}, {"cookie": "armlock_uid=a b"},
                {"storage": {"armlock_uid": "kept-in-storage"}}):
        res = run_node({"snippet": render_snippet(spec), "gate": [None, "holdout", ["holdout", "exposed"]], **req})
        assert res["pageError"] is None and res["state"] == "failed" and res["arm"] is None
        assert res["cookieWrites"] == [] and res["gateRan"] == [False, False, False]
        assert events(res, "armlock_arm") == []
        (err,) = events(res, "armlock_error")
        assert err["armlock_error"] == "no server-set id in cookie armlock_uid"


def test_server_mode_takes_the_first_valid_value_as_the_server_does() -> None:
    # the server middleware's rule (armlock.assign.identity.read_id): the first valid value
    from armlock.assign.identity import read_id

    spec = make_spec(id_from="server")
    header = "armlock_uid=not valid; other=1; armlock_uid=v-2; armlock_uid=v-3"
    res = run_node({"snippet": render_snippet(spec), "cookie": header})
    assert read_id(header, "armlock_uid") == "v-2" and res["arm"] == arm_for(spec, "v-2")


def test_server_mode_still_waits_for_consent() -> None:
    spec = make_spec(id_from="server", consent={"mode": "data_layer", "key": "consent.ads", "value": "granted"})
    js = render_snippet(spec)
    waiting = run_node({"snippet": js, "cookie": "armlock_uid=v-1"})
    assert waiting["state"] == "waiting" and events(waiting, "armlock_error") == []
    ready = run_node({"snippet": js, "cookie": "armlock_uid=v-1", "after": [{"consent": {"ads": "granted"}}]})
    assert ready["state"] == "ready" and ready["arm"] == arm_for(spec, "v-1")


# ---- logins never move a visitor -------------------------------------------------------------

def test_a_visitor_exposed_before_login_stays_exposed_after_it() -> None:
    # a spec that (unwisely) lists the customer key as an id source
    spec = make_spec(arms=HALF, id_sources=[{"kind": "global", "name": "site.customer.key"}])
    js = render_snippet(spec)
    first = run_node({"snippet": js, "gate": BOTH})  # anonymous first visit: a new id
    uid = first["cookies"]["armlock_uid"]
    arm = first["arm"]
    assert arm == arm_for(spec, uid) and first["gateRan"] == [arm == "exposed", arm == "holdout"]
    other = "holdout" if arm == "exposed" else "exposed"
    customer = key_in(spec, other, "customer-")  # a key whose own hash is the other arm
    for jar in ({"cookie": f"armlock_uid={uid}"}, {"storage": {"armlock_uid": uid}}):
        after = run_node({"snippet": js, "globals": {"site": {"customer": {"key": customer}}}, "gate": BOTH, **jar})
        assert after["arm"] == arm and after["gateRan"] == first["gateRan"]
        assert after["cookies"]["armlock_uid"] == uid  # still the first id
    # the first id wins even when the login happened before any cookie was kept: the key it
    # found is kept, and a later logout or another login on the same browser changes nothing
    logged = run_node({"snippet": js, "globals": {"site": {"customer": {"key": customer}}}})
    assert logged["cookies"]["armlock_uid"] == customer and logged["arm"] == other
    out = run_node({"snippet": js, "cookie": f"armlock_uid={customer}",
                    "globals": {"site": {"customer": {"key": key_in(spec, arm, "customer-")}}}})
    assert out["arm"] == other


def test_a_login_that_arrives_later_in_the_data_layer_changes_nothing() -> None:
    spec = make_spec(arms=HALF, id_sources=[{"kind": "data_layer", "name": "user.customer"}],
                     consent={"mode": "data_layer", "key": "consent.ads", "value": "granted"})
    uid = key_in(spec, "exposed", "visitor-")
    res = run_node({"snippet": render_snippet(spec), "cookie": f"armlock_uid={uid}", "gate": [None],
                    "after": [{"user": {"customer": key_in(spec, "holdout", "customer-")}},
                              {"consent": {"ads": "granted"}}]})
    assert res["arm"] == "exposed" and res["gateRan"] == [True] and res["cookieWrites"] == []
