"""Hostile specs: what cannot be valid is rejected, everything else is escaped and still works."""

from __future__ import annotations

from typing import Any

import pytest

from armlock.assign import SpecError
from armlock.assign.batch import arm_for
from armlock.assign.contract import bucket
from armlock.assign.snippet import render_snippet
from armlock.assign.spec import Spec

from .helpers import acorn_parse, make_spec, run_node, script_body

# Injection attempts: closing the script element, opening an HTML comment, JS line terminators,
# quotes and backslashes, template-literal and comment syntax, CDATA, astral characters and BOM.
HOSTILE = [
    "</script><script>window.pwned=1</script>",
    "</SCRIPT ><!--<script>",
    "x\u2028y\u2029z",
    "'\"\\'\\\"\\\\",
    "${window.pwned=1}`",
    "*/window.pwned=1;/*",
    "]]><![CDATA[&amp;",
    "\U0001f600\U0010ffff\ufffd\ufeff",
]
# A pattern that carries the same characters and still extracts the id after "v1."
PATTERN = "^(?:</script><!--|\u2028|'|\"|\\\\|\\$\\{\\}|`)?v1\\.(.+)$"


def hostile_spec(h: str) -> Spec:
    return make_spec(
        salt="salt-" + h,
        event_name="evt-" + h,
        error_event_name="err-" + h,
        consent={"mode": "data_layer", "key": "consent.ads", "value": "ok-" + h},
        id_sources=[{"kind": "cookie", "name": "site'$|&uid", "pattern": PATTERN}],
    )


@pytest.mark.parametrize("h", HOSTILE, ids=range(len(HOSTILE)))
def test_hostile_values_stay_inside_their_strings(h: str) -> None:
    spec = hostile_spec(h)
    html = render_snippet(spec, "html")
    # HTML Living Standard, script data state: only `</script` ends the element, `<!--` starts an
    # escape; neither may appear before our own closing tag
    body = script_body(html)
    assert "</script" not in body.lower() and "<!--" not in body
    assert "\u2028" not in html and "\u2029" not in html
    assert acorn_parse(body) == ""  # acorn, ecmaVersion 5


@pytest.mark.parametrize("h", HOSTILE, ids=range(len(HOSTILE)))
def test_hostile_spec_does_exactly_what_it_says(h: str) -> None:
    spec = hostile_spec(h)
    js = render_snippet(spec, "js")
    ids = ["abc", "visitor-1", h, "\U0001f600"]
    before = run_node({"snippet": js, "cookie": "site'$|&uid=v1.abc", "gate": [None], "ids": ids})
    assert before["state"] == "waiting" and before["cookieWrites"] == []  # no consent yet
    # Reference: python-xxhash via assign.contract.bucket (the salt is hostile too)
    assert before["buckets"] == [bucket(spec.salt, i) for i in ids]
    res = run_node({"snippet": js, "cookie": "site'$|&uid=v1.abc", "gate": [None],
                    "after": [{"consent": {"ads": "ok-" + h}}]})
    assert res["pageError"] is None and res["state"] == "ready"
    assert res["arm"] == arm_for(spec, "abc")
    assert res["gateRan"] == [res["arm"] == "exposed"]
    (ev,) = [e for e in res["dataLayer"] if e.get("event") == "evt-" + h]
    assert ev["armlock_fingerprint"] == spec.fingerprint
    failed = run_node({"snippet": js, "cookieThrows": True, "after": [{"consent": {"ads": "ok-" + h}}]})
    assert [e["event"] for e in failed["dataLayer"] if "event" in e] == ["err-" + h]


def test_a_near_miss_consent_value_does_not_grant() -> None:
    spec = hostile_spec(HOSTILE[0])
    res = run_node({"snippet": render_snippet(spec), "after": [{"consent": {"ads": "ok-</script>"}}]})
    assert res["state"] == "waiting"


def test_description_never_lands_in_the_snippet() -> None:
    base = make_spec().model_dump(mode="json")
    base["description"] = "</script><!-- secret note"
    from armlock.assign.spec import spec_from_dict

    assert "secret note" not in render_snippet(spec_from_dict(base), "html")


REJECTED: list[tuple[str, Any]] = [
    ("name", "</script>"),
    ("name", "a'b"),
    ("arms", [{"name": "</script>", "weight": 5000, "role": "holdout"},
              {"name": "exposed", "weight": 5000, "role": "exposed"}]),
    ("salt", "a:b"),
    ("salt", "line\nbreak"),
    ("salt", "lone\ud800surrogate"),  # not text: pydantic refuses it before it can reach JS
    ("snippet.cookie_name", "x\";alert(1);//"),
    ("snippet.cookie_domain", ".shop.example; Secure"),
    ("snippet.data_layer", "dataLayer</script>"),
    ("snippet.global_name", "armlock'"),
    ("snippet.qa_param", "qa\"></script>"),
    ("snippet.event_name", "a\nb"),
    ("snippet.consent", {"mode": "data_layer", "key": "a'];alert(1);//", "value": "x"}),
    ("snippet.consent", {"mode": "function", "function": "alert(1)"}),
    ("snippet.id_sources", [{"kind": "global", "name": "a[\"b\"]"}]),
    ("snippet.id_sources", [{"kind": "cookie", "name": "a;b=c"}]),
    ("snippet.id_sources", [{"kind": "cookie", "name": "u", "pattern": "(x)\n"}]),
]


@pytest.mark.parametrize(("field", "value"), REJECTED, ids=[f"{f}-{i}" for i, (f, _) in enumerate(REJECTED)])
def test_values_that_cannot_be_valid_are_rejected(field: str, value: Any) -> None:
    from armlock.assign.spec import spec_from_dict

    data = make_spec().model_dump(mode="json")
    if field.startswith("snippet."):
        data["snippet"] = {field.split(".", 1)[1]: value}
    else:
        data[field] = value
    with pytest.raises(SpecError) as info:
        spec_from_dict(data, "hostile.toml")
    assert f"hostile.toml: {field}" in str(info.value)
