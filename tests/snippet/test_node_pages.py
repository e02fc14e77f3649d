"""The snippet on messy pages, in Node: called early, loaded twice, tampered with (issue 13)."""

from __future__ import annotations

from typing import Any

import pytest

from armlock.assign.batch import arm_for
from armlock.assign.snippet import preload_stub, render_snippet
from armlock.assign.spec import Spec

from .helpers import REPO, make_spec, run_node

HALF = [("holdout", 5000, "holdout"), ("exposed", 5000, "exposed")]
CONSENT = {"mode": "data_layer", "key": "consent.ads", "value": "granted"}
# a page script that records each call of a gated callback in window.ran (by index, not push,
# so the tampering tests, which patch Array.prototype.push, still see every call)
RECORD = ("function rec(tag) { return function (arm) {"
          " var r = window.ran = window.ran || []; r[r.length] = tag + ':' + arm; }; }")


def events(res: dict[str, Any], name: str) -> list[dict[str, Any]]:
    return [e for e in res["dataLayer"] or [] if isinstance(e, dict) and e.get("event") == name]


def visitor(spec: Spec, arm: str) -> str:
    """A visitor id that the contract (Python's arm_for) puts in `arm`."""
    return next(f"visitor-{i}" for i in range(1000) if arm_for(spec, f"visitor-{i}") == arm)


# ---- 1. pre-load stub -------------------------------------------------------------------------

def test_readme_gives_the_stub_line_verbatim() -> None:
    assert preload_stub() in (REPO / "README.md").read_text(encoding="utf-8")


@pytest.mark.parametrize("arm", ["holdout", "exposed"])
def test_calls_before_load_wait_in_the_stub_and_run_once_on_load(arm: str) -> None:
    spec = make_spec(arms=HALF)
    pre = (f"{RECORD} {preload_stub()} armlock.gate(rec('default')); armlock.gate(rec('h'), 'holdout');"
           " var keptStub = armlock, keptGate = armlock.gate;")
    # after load: a tag that kept the stub's gate, and the stub line run again by a late tag
    post = f"keptGate(rec('kept')); {preload_stub()} armlock.gate(rec('late'), ['holdout', 'exposed']);"
    res = run_node({"snippet": render_snippet(spec), "cookie": f"armlock_uid={visitor(spec, arm)}",
                    "pre": pre, "post": post,
                    "probe": "[window.ran || [], armlock !== keptStub, Object.isFrozen(armlock)]"})
    assert res["pageError"] is None and res["scriptErrors"] == []
    ran, replaced, frozen = res["probe"]
    want = ["default:exposed"] if arm == "exposed" else ["h:holdout"]
    want += ["kept:exposed"] if arm == "exposed" else []
    assert ran == want + [f"late:{arm}"]
    assert replaced and frozen and len(events(res, "armlock_arm")) == 1


def test_stub_calls_wait_for_consent_too() -> None:
    spec = make_spec(arms=HALF, consent=CONSENT)
    uid = visitor(spec, "exposed")
    req = {"snippet": render_snippet(spec), "cookie": f"armlock_uid={uid}",
           "pre": f"{RECORD} {preload_stub()} armlock.gate(rec('early'));", "probe": "window.ran || []"}
    waiting = run_node(req)
    assert waiting["state"] == "waiting" and waiting["probe"] == []
    granted = run_node({**req, "after": [{"consent": {"ads": "granted"}}]})
    assert granted["state"] == "ready" and granted["probe"] == ["early:exposed"]


def test_a_placeholder_with_a_malformed_queue_fails_closed_without_throwing() -> None:
    res = run_node({"snippet": render_snippet(make_spec()), "pre": "window.armlock = {q: {length: 2}};"})
    # the two entries are missing: nothing to run, the test goes on normally
    assert res["pageError"] is None and res["state"] == "ready"


# ---- 2. load once -----------------------------------------------------------------------------

def test_a_second_copy_of_the_same_spec_reuses_the_first() -> None:
    spec = make_spec()
    js = render_snippet(spec)
    res = run_node({"snippet": js, "again": ["window.first = armlock;", js],
                    "probe": "window.first === armlock"})
    assert res["pageError"] is None and res["scriptErrors"] == []
    assert len(res["cookieWrites"]) == 1 and len(events(res, "armlock_arm")) == 1
    assert res["probe"] is True and events(res, "armlock_error") == []
    assert res["arm"] == arm_for(spec, res["cookies"]["armlock_uid"])


def test_a_second_copy_waiting_for_consent_adds_no_second_wrapper() -> None:
    spec = make_spec(consent=CONSENT)
    js = render_snippet(spec)
    res = run_node({"snippet": js, "again": [js], "gate": [["holdout", "exposed"]],
                    "after": [{"consent": {"ads": "granted"}}, {"consent": {"ads": "granted"}}]})
    assert len(res["cookieWrites"]) == 1 and len(events(res, "armlock_arm")) == 1
    assert res["gateRan"] == [True]


def test_a_copy_of_another_spec_on_the_same_global_fails_closed_naming_both() -> None:
    first, other = make_spec(), make_spec(salt="another-salt-0123456789")
    assert first.fingerprint != other.fingerprint
    res = run_node({"snippet": render_snippet(first), "again": ["window.first = armlock;", render_snippet(other)],
                    "probe": "window.first === armlock"})
    assert res["probe"] is True and res["fingerprint"] == first.fingerprint
    assert len(res["cookieWrites"]) == 1 and len(events(res, "armlock_arm")) == 1
    (err,) = events(res, "armlock_error")
    assert first.fingerprint in err["armlock_error"] and other.fingerprint in err["armlock_error"]
    assert res["arm"] == arm_for(first, res["cookies"]["armlock_uid"])  # the first copy goes on


# ---- 3. tampering -----------------------------------------------------------------------------

TAMPER = """
armlock.arm = 'exposed'; armlock.state = 'ready'; armlock.forced = true;
armlock.gate = function (cb) { cb('exposed'); };
try { Object.defineProperty(armlock, 'arm', {value: 'exposed'}); } catch (e) { window.refused = String(e.name); }
Array.prototype.indexOf = function () { return 0; };
Array.prototype.push = function () { return 0; };
Array.prototype.shift = function () { return ['exposed']; };
String.prototype.charCodeAt = function () { return 65; };
String.prototype.replace = function () { return 'x'; };
Function.prototype.call = function () { return 'exposed'; };
Math.floor = function () { return 9999; };
window.String = function () { return 'exposed'; };
"""


def test_page_code_cannot_move_a_holdout_visitor_into_the_exposed_arm() -> None:
    spec = make_spec()
    uid = visitor(spec, "holdout")
    res = run_node({"snippet": render_snippet(spec), "cookie": f"armlock_uid={uid}",
                    "post": f"{RECORD} {TAMPER} armlock.gate(rec('vendor')); armlock.gate(rec('named'), ['exposed']);",
                    "probe": "[window.ran || [], window.refused, armlock.armOf('" + uid + "')]"})
    assert res["scriptErrors"] == []
    assert res["arm"] == "holdout" and res["state"] == "ready" and res["forced"] is False
    ran, refused, recomputed = res["probe"]
    assert ran == [] and refused == "TypeError" and recomputed == "holdout"


def test_prototypes_patched_before_consent_do_not_change_the_arm() -> None:
    # the decision happens late (at consent), after the page patched built-ins
    spec = make_spec(arms=HALF, consent=CONSENT)
    for arm in ("holdout", "exposed"):
        uid = visitor(spec, arm)
        res = run_node({"snippet": render_snippet(spec), "cookie": f"armlock_uid={uid}",
                        "post": f"{RECORD} armlock.gate(rec('vendor')); {TAMPER}"
                                " dataLayer.push({consent: {ads: 'granted'}});",
                        "probe": "window.ran || []"})
        assert res["scriptErrors"] == [] and res["state"] == "ready"
        assert res["arm"] == arm  # Reference: arm_for (python-xxhash) via visitor()
        assert res["probe"] == (["vendor:exposed"] if arm == "exposed" else [])


@pytest.mark.parametrize("patch", [
    "String.prototype.charCodeAt = function () { return 65; };",
    "Function.prototype.call = function () { return 0; };",
    "Function.prototype.bind = function () { return function () { return function () { return 66; }; }; };",
])
def test_built_ins_patched_before_load_that_change_the_hash_fail_closed(patch: str) -> None:
    # the self-test: the experiment name's bucket must equal Python's (config key t)
    res = run_node({"snippet": render_snippet(make_spec()), "pre": patch, "gate": [["holdout", "exposed"]]})
    assert res["pageError"] is None and res["state"] == "failed" and res["arm"] is None
    assert res["cookieWrites"] == [] and res["gateRan"] == [False]
    assert events(res, "armlock_error")[0]["armlock_error"] == "self-test failed: this page hashes differently"


@pytest.mark.parametrize(("patch", "state"), [
    ("delete Function.prototype.bind;", "undefined"),  # at load: no snippet, the stub stays
    ("delete Uint8Array;", "failed"),  # when minting an id: fails closed
])
def test_an_engine_without_what_the_snippet_needs_never_throws_into_the_page(patch: str, state: str) -> None:
    res = run_node({"snippet": render_snippet(make_spec()),
                    "pre": f"{RECORD} {preload_stub()} armlock.gate(rec('vendor'), ['holdout', 'exposed']); {patch}",
                    "probe": "[String(armlock.state), window.ran || []]"})
    assert res["pageError"] is None and res["scriptErrors"] == []
    assert res["probe"] == [state, []] and res["cookieWrites"] == []


@pytest.mark.parametrize("patch", [
    "var own = String.prototype.charCodeAt;"
    " String.prototype.charCodeAt = function (i) { return own.call(this, i); };",
    "Object.freeze = function () {};",  # a no-op freeze: the view is not frozen, but it is there
])
def test_a_harmless_replacement_of_a_built_in_before_load_changes_nothing(patch: str) -> None:
    spec = make_spec()
    res = run_node({"snippet": render_snippet(spec), "cookie": "armlock_uid=visitor-1", "pre": patch,
                    "gate": [["holdout", "exposed"]]})
    assert res["state"] == "ready" and res["arm"] == arm_for(spec, "visitor-1") and res["gateRan"] == [True]


# ---- 4. thrown values and isolated callbacks ----------------------------------------------------

THROWERS = """
armlock.gate(function () { throw Symbol('odd'); }, ['holdout', 'exposed']);
armlock.gate(function () { throw Object.create(null); }, ['holdout', 'exposed']);
armlock.gate(function () { throw {get message() { throw 1; }, toString: function () { throw 2; }}; },
             ['holdout', 'exposed']);
armlock.gate(function () { throw null; }, ['holdout', 'exposed']);
armlock.gate(function (arm) { window.lastRan = arm; }, ['holdout', 'exposed']);
"""
THROWN_TEXT = ["callback: Symbol(odd)", "callback: object", "callback: object", "callback: null"]


def test_queued_callbacks_that_throw_odd_values_are_isolated() -> None:
    spec = make_spec(consent=CONSENT)
    res = run_node({"snippet": render_snippet(spec), "cookie": "armlock_uid=visitor-1",
                    "post": THROWERS + "dataLayer.push({consent: {ads: 'granted'}});", "probe": "window.lastRan"})
    assert res["scriptErrors"] == [] and res["state"] == "ready"
    assert res["arm"] == arm_for(spec, "visitor-1") and res["probe"] == res["arm"]
    assert [e["armlock_error"] for e in events(res, "armlock_error")] == THROWN_TEXT


def test_a_callback_throwing_odd_values_after_ready_never_throws_into_the_page() -> None:
    spec = make_spec()
    res = run_node({"snippet": render_snippet(spec), "cookie": "armlock_uid=visitor-1", "post": THROWERS,
                    "probe": "window.lastRan"})
    assert res["scriptErrors"] == [] and res["probe"] == res["arm"] == arm_for(spec, "visitor-1")
    assert [e["armlock_error"] for e in events(res, "armlock_error")] == THROWN_TEXT


# ---- 5. randomness check ----------------------------------------------------------------------

@pytest.mark.parametrize(("random", "why"), [("zero", "no bytes"), ("repeat", "the same bytes twice")])
def test_a_broken_random_source_fails_closed(random: str, why: str) -> None:
    res = run_node({"snippet": render_snippet(make_spec()), "random": random, "gate": [["holdout", "exposed"]]})
    assert res["pageError"] is None and res["state"] == "failed" and res["arm"] is None
    assert res["cookieWrites"] == [] and res["storage"] == {} and res["gateRan"] == [False]
    (err,) = events(res, "armlock_error")
    assert err["armlock_error"] == f"random source failed: {why}"


# ---- 6. URL parameters it does not own --------------------------------------------------------

@pytest.mark.parametrize("search", ["?100%=1", "?a=%E0%A4%A&100%&b", "?%=%&&=", "?armlock_qa%=holdout"])
def test_malformed_parameters_of_others_are_ignored(search: str) -> None:
    spec = make_spec(qa_param="armlock_qa")
    res = run_node({"snippet": render_snippet(spec), "search": search})
    assert res["state"] == "ready" and res["forced"] is False and events(res, "armlock_error") == []
    forced = run_node({"snippet": render_snippet(spec), "search": search + "&armlock_qa=holdout"})
    assert forced["arm"] == "holdout" and forced["forced"] is True


def test_a_malformed_value_of_its_own_parameter_fails_closed() -> None:
    res = run_node({"snippet": render_snippet(make_spec(qa_param="armlock_qa")), "search": "?armlock_qa=%E0"})
    assert res["state"] == "failed" and res["arm"] is None
    assert "URI" in events(res, "armlock_error")[0]["armlock_error"]


# ---- 7. a data layer that is not an array with push -------------------------------------------

PAGE_PUSH = ("try { dataLayer.push({consent: {ads: 'granted'}}); } catch (e) { window.pushError = String(e); }")


@pytest.mark.parametrize("layer", [{"page": "home"}, "not a list", 7, {"push": "no function", "length": 0}])
def test_a_data_layer_without_push_is_left_exactly_as_it_was(layer: Any) -> None:
    for consent in (CONSENT, {"mode": "none"}):
        spec = make_spec(consent=consent)
        res = run_node({"snippet": render_snippet(spec), "globals": {"dataLayer": layer}, "post": PAGE_PUSH,
                        "probe": "[window.pushError, typeof dataLayer, dataLayer && Object.keys(dataLayer)]"})
        assert res["pageError"] is None and res["dataLayer"] == layer
        error, kind, keys = res["probe"]
        # the page's own push fails with the page's own error, not inside armlock's wrapper
        assert error == "TypeError: dataLayer.push is not a function"
        assert kind == type_name(layer) and (keys == list(layer) if isinstance(layer, dict) else True)
        # no consent signal can arrive: nothing stored; without consent rules the gate still works
        assert res["state"] == ("waiting" if consent is CONSENT else "ready")


def type_name(v: Any) -> str:
    return {dict: "object", str: "string", int: "number"}[type(v)]


def test_a_frozen_data_layer_keeps_its_own_push_and_error() -> None:
    res = run_node({"snippet": render_snippet(make_spec(consent=CONSENT)), "pre": "dataLayer = Object.freeze([]);",
                    "post": PAGE_PUSH, "probe": "[window.pushError, Object.isFrozen(dataLayer)]"})
    error, frozen = res["probe"]
    assert frozen and error.startswith("TypeError") and res["state"] == "waiting"
