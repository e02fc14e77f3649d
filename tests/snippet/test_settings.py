"""The [snippet] table: what validation accepts, what it rejects, and how the error reads."""

from __future__ import annotations

import subprocess
import sys
import tomllib
from pathlib import Path
from typing import Any

import pytest

from armlock.assign import SpecError
from armlock.assign.init import render_spec_toml
from armlock.assign.spec import load_spec, spec_from_dict
from armlock.assign.spec_snippet import MAX_COOKIE_DAYS, SnippetSettings, snippet_section_toml

from .helpers import make_spec


def test_settings_defaults_are_valid_and_documented() -> None:
    s = SnippetSettings()
    text = snippet_section_toml()
    table = tomllib.loads(text)["snippet"]
    # every field of the model appears, commented, in the text `armlock init` writes
    for field in SnippetSettings.model_fields:
        assert field in text, field
    for key, value in table.items():
        if key == "consent":
            assert SnippetSettings(consent=value).consent == s.consent
        else:
            assert getattr(s, key) == value, key


def test_init_output_is_a_valid_spec_and_checks(tmp_path: Path) -> None:
    out = tmp_path / "x.toml"
    for cmd in (["init", "x", "--out", str(out)], ["check", "--spec", str(out)]):
        proc = subprocess.run([sys.executable, "-m", "armlock", *cmd], capture_output=True,
                              text=True, check=False)
        assert proc.returncode == 0, proc.stderr
    assert load_spec(out).snippet == SnippetSettings()


def test_commented_examples_in_init_output_are_valid_when_uncommented() -> None:
    text = render_spec_toml("x", [("holdout", 1000), ("exposed", 9000)], salt="abc")
    lines = text.splitlines()
    start = next(i for i, ln in enumerate(lines) if ln.startswith("# Where a browser's first id comes from"))
    block = [ln[2:] for ln in lines[start + 1:]
             if ln.startswith(("# [[snippet", "# kind", "# name", "# pattern"))]
    data = tomllib.loads("\n".join(block))
    sources = data["snippet"]["id_sources"]
    assert [s["kind"] for s in sources] == ["cookie", "global"]
    spec = make_spec(id_sources=sources,
                     consent={"mode": "data_layer", "key": "consent.ads", "value": "granted"})
    assert spec.snippet.id_sources[0].pattern == "^v1\\.(.+)$"


GOOD: list[dict[str, Any]] = [
    {"cookie_days": MAX_COOKIE_DAYS},
    {"cookie_days": 1},
    {"cookie_domain": ".shop.example"},
    {"cookie_domain": "www.shop.example"},
    {"data_layer": "siteLayer_2", "global_name": "$holdout"},
    {"event_name": "holdout arm known", "error_event_name": "</script><!--\u2028"},
    {"qa_param": "qa.arm-force_1"},
    {"id_from": "server"},
    {"id_from": "script", "id_sources": [{"kind": "cookie", "name": "site_uid"}]},
    {"id_sources": [{"kind": "cookie", "name": "site.uid'$", "pattern": "^(?:v1|v2)\\.([0-9a-f]+)$"}]},
    {"id_sources": [{"kind": "global", "name": "site.customer.key"},
                    {"kind": "data_layer", "name": "user.id"}]},
    {"consent": {"mode": "data_layer", "key": "consent.ads", "value": "granted"}},
    {"consent": {"mode": "function", "function": "site.consent.adsAllowed"}},
]


@pytest.mark.parametrize("snippet", GOOD, ids=range(len(GOOD)))
def test_valid_settings_are_accepted(snippet: dict[str, Any]) -> None:
    make_spec(**snippet)


BAD: list[tuple[dict[str, Any], str, str]] = [
    ({"cookie_days": MAX_COOKIE_DAYS + 1}, "snippet.cookie_days", "less than or equal to 400"),
    ({"cookie_days": 0}, "snippet.cookie_days", "greater than or equal to 1"),
    ({"cookie_days": 30.5}, "snippet.cookie_days", "integer"),
    ({"cookie_name": "uid;x=1"}, "snippet.cookie_name", "letters, digits"),
    ({"cookie_name": ""}, "snippet.cookie_name", "1-64"),
    ({"cookie_domain": "shop.example; Secure"}, "snippet.cookie_domain", "host name"),
    ({"data_layer": "a.b"}, "snippet.data_layer", "JavaScript identifier"),
    ({"data_layer": "</script>"}, "snippet.data_layer", "JavaScript identifier"),
    ({"global_name": "location"}, "snippet.global_name", "built-in property"),
    ({"data_layer": "document"}, "snippet.data_layer", "built-in property"),
    ({"global_name": "x", "data_layer": "x"}, "snippet", "must differ"),
    ({"event_name": "a", "error_event_name": "a"}, "snippet", "must differ"),
    ({"event_name": ""}, "snippet.event_name", "at least 1"),
    ({"event_name": "line\nbreak"}, "snippet.event_name", "control characters"),
    ({"qa_param": "a&b"}, "snippet.qa_param", "URL parameter name"),
    ({"id_from": "browser"}, "snippet.id_from", "'script' or 'server'"),
    ({"id_from": "server", "id_sources": [{"kind": "global", "name": "site.customer.key"}]}, "snippet",
     "the only id; remove the id_sources"),
    ({"qa_param": "x" * 65}, "snippet.qa_param", "URL parameter name"),
    ({"colour": "red"}, "snippet.colour", "unknown key 'colour'; valid keys here: id_sources"),
    ({"id_sources": [{"kind": "header", "name": "x"}]}, "snippet.id_sources[0].kind", "'cookie', 'global' or 'data_layer'"),
    ({"id_sources": [{"kind": "cookie", "name": "a;b"}]}, "snippet.id_sources[0]", "RFC 6265 token"),
    ({"id_sources": [{"kind": "global", "name": "site['x']"}]}, "snippet.id_sources[0]", "dotted path"),
    ({"id_sources": [{"kind": "global", "name": "a..b"}]}, "snippet.id_sources[0]", "dotted path"),
    ({"id_sources": [{"kind": "cookie", "name": "u", "pattern": "^v1\\..+$"}]}, "snippet.id_sources[0].pattern", "capture group"),
    ({"id_sources": [{"kind": "cookie", "name": "u", "pattern": "(unclosed"}]}, "snippet.id_sources[0].pattern", "not a regular expression"),
    ({"id_sources": [{"kind": "cookie", "name": "u", "pattern": "(?P<id>.+)"}]}, "snippet.id_sources[0].pattern", "browser reads differently"),
    ({"id_sources": [{"kind": "cookie", "name": "u", "pattern": "(?i)(x)"}]}, "snippet.id_sources[0].pattern", "browser reads differently"),
    ({"id_sources": [{"kind": "cookie", "name": "u", "pattern": "\\A(x)\\Z"}]}, "snippet.id_sources[0].pattern", "browser reads differently"),
    ({"id_sources": [{"kind": "cookie", "name": "u", "pattern": "(?<=a)(x)"}]}, "snippet.id_sources[0].pattern", "browser reads differently"),
    ({"id_sources": [{"kind": "cookie", "name": "u", "extra": 1}]}, "snippet.id_sources[0].extra", "unknown key"),
    ({"id_sources": [{"kind": "cookie", "name": f"u{i}"} for i in range(9)]}, "snippet.id_sources", "at most 8"),
    ({"consent": {"mode": "data_layer", "key": "consent.ads"}}, "snippet.consent", "needs value"),
    ({"consent": {"mode": "data_layer", "value": "granted"}}, "snippet.consent", "needs key"),
    ({"consent": {"mode": "function"}}, "snippet.consent", "needs function"),
    ({"consent": {"mode": "function", "function": "alert(1)"}}, "snippet.consent", "needs function"),
    ({"consent": {"mode": "none", "key": "x"}}, "snippet.consent", "must stay empty"),
    ({"consent": {"mode": "maybe"}}, "snippet.consent.mode", "'none', 'data_layer' or 'function'"),
]


@pytest.mark.parametrize(("snippet", "where", "says"), BAD, ids=[b[1] + "-" + str(i) for i, b in enumerate(BAD)])
def test_invalid_settings_name_file_field_and_fix(snippet: dict[str, Any], where: str, says: str) -> None:
    base = make_spec().model_dump(mode="json")
    base["snippet"] = snippet
    with pytest.raises(SpecError) as info:
        spec_from_dict(base, "shop.toml")
    lines = str(info.value).splitlines()
    assert lines[0] == "invalid experiment spec"
    assert any(ln.strip().startswith(f"shop.toml: {where}: ") and says in ln for ln in lines[1:]), lines


def test_cli_reports_bad_snippet_settings_without_traceback(tmp_path: Path) -> None:
    spec = tmp_path / "bad.toml"
    text = render_spec_toml("x", [("holdout", 1000), ("exposed", 9000)], salt="abc")
    spec.write_text(text.replace("cookie_days = 395", "cookie_days = 9999"), encoding="utf-8")
    proc = subprocess.run([sys.executable, "-m", "armlock", "snippet", "--spec", str(spec)],
                          capture_output=True, text=True, check=False)
    assert proc.returncode == 4
    assert proc.stdout == ""
    assert proc.stderr.startswith("Error: invalid experiment spec\n")
    assert f"  {spec}: snippet.cookie_days: Input should be less than or equal to 400 (got 9999)\n" in proc.stderr
    assert "Traceback" not in proc.stderr
