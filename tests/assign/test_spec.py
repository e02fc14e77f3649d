"""The experiment spec: validation messages, exact share conversion, fingerprint stability, lock."""

from __future__ import annotations

import json
import re
import tomllib
from pathlib import Path

import pytest

from armlock.assign import SpecError, check_lock, load_spec, spec_from_dict
from armlock.assign.init import new_salt, parse_arms, render_spec_toml
from armlock.assign.spec import share_to_basis_points


def _spec_text(**repl: str) -> str:
    text = render_spec_toml("t-1", [("holdout", 5000), ("exposed", 5000)], salt="fixed-salt")
    for old, new in repl.items():
        text = text.replace(old.replace("_SP_", " "), new)
    return text


def _errors(tmp_path: Path, text: str) -> str:
    p = tmp_path / "s.toml"
    p.write_text(text, encoding="utf-8")
    with pytest.raises(SpecError) as exc:
        load_spec(p)
    return str(exc.value).replace(str(p), "s.toml")


def test_written_spec_is_valid_and_commented() -> None:
    text = _spec_text()
    spec = spec_from_dict(tomllib.loads(text))
    assert spec.arm_names == ("holdout", "exposed") and spec.weights == (5000, 5000)
    assert spec.holdout_arms == ("holdout",)
    assert text.count("#") > 10


def test_new_salt_is_random_hex_of_96_bits() -> None:
    a, b = new_salt(), new_salt()
    assert a != b and re.fullmatch(r"[0-9a-f]{24}", a)


@pytest.mark.parametrize(("share", "bp"), [(0.1, 1000), (0.5, 5000), (0.0001, 1), (0.3333, 3333), (1, 10000), ("0.07", 700)])
def test_share_conversion_is_exact(share: float, bp: int) -> None:
    assert share_to_basis_points(share) == bp


def test_share_not_whole_basis_points_rejected() -> None:
    with pytest.raises(ValueError, match=r"share 0.12345 is not a whole number of basis points"):
        share_to_basis_points(0.12345)


@pytest.mark.parametrize(
    ("repl", "expected"),
    [
        ({"weight = 5000": "weight = 4000"},
         "s.toml: arms: arm weights must sum to 10000 basis points (100%); got 4000 + 4000 = 8000"),
        ({"format = 1": 'format = 1\ncolour = "red"'},
         "s.toml: colour: unknown key 'colour'; valid keys here: format, name, description, salt, start, end, arms, snippet, audit, readout"),
        ({'role = "holdout"': 'role = "holdout"\nlabel = "x"'},
         "s.toml: arms[0].label: unknown key 'label'; valid keys here: name, weight, role"),
        ({'salt = "fixed-salt"': 'salt = "a:b"'},
         "s.toml: salt: the salt must not contain ':' (it separates salt and id in the key) (got 'a:b')"),
        ({'salt = "fixed-salt"': 'salt = ""'},
         "s.toml: salt: the salt must not be empty (armlock init writes a random one) (got '')"),
        ({'salt = "fixed-salt"\n': ""}, "s.toml: salt: required key is missing"),
        ({"weight = 5000  # basis points: 50% of visitors\nrole = \"holdout\"": 'share = 0.12345\nrole = "holdout"'},
         "s.toml: arms[0]: share 0.12345 is not a whole number of basis points (0.0001); use e.g. 0.1234"),
        ({'name = "exposed"': 'name = "holdout"'}, "s.toml: arms: arm names must be unique; repeated: holdout"),
        ({'name = "exposed"': 'name = "exp osed"'},
         "s.toml: arms[1].name: arm names are identifiers: a letter, then letters, digits or _ (at most 64) (got 'exp osed')"),
        ({'role = "exposed"': 'role = "treated"'},
         "s.toml: arms[1].role: role must be \"holdout\" (the vendor may not reach it) or \"exposed\" (got 'treated')"),
        ({'role = "exposed"': 'role = "holdout"'},
         "s.toml: arms: a holdout test needs at least one arm with role = \"holdout\" and one with role = \"exposed\"; got roles ['holdout']"),
        ({"cookie_days = 395": "cookie_days = 500"}, "s.toml: snippet.cookie_days: Input should be less than or equal to 400 (got 500)"),
    ],
)
def test_invalid_spec_messages(tmp_path: Path, repl: dict[str, str], expected: str) -> None:
    text = _spec_text()
    for old, new in repl.items():
        assert old in text
        text = text.replace(old, new)
    msg = _errors(tmp_path, text)
    assert msg == "invalid experiment spec\n  " + expected


def test_naive_start_rejected(tmp_path: Path) -> None:
    text = re.sub(r"start = (\S+)Z", r"start = \1", _spec_text())
    assert "needs a UTC offset" in _errors(tmp_path, text)


def test_not_toml_and_missing_file(tmp_path: Path) -> None:
    assert _errors(tmp_path, "name = \n").startswith("s.toml: not valid TOML: ")
    with pytest.raises(SpecError, match=r"spec file not found \(create one with `armlock init NAME`\)"):
        load_spec(tmp_path / "nope.toml")


def test_fingerprint_ignores_cosmetic_fields() -> None:
    base = spec_from_dict(tomllib.loads(_spec_text()))
    cosmetic = spec_from_dict(tomllib.loads(_spec_text(**{
        'description = ""': 'description = "changed"', "cookie_days = 395": "cookie_days = 30",
        "srm_p = 0.0005": "srm_p = 0.001"})))
    assert cosmetic.fingerprint == base.fingerprint
    salted = spec_from_dict(tomllib.loads(_spec_text(**{'salt = "fixed-salt"': 'salt = "other"'})))
    weighted = spec_from_dict(tomllib.loads(render_spec_toml("t-1", [("holdout", 1000), ("exposed", 9000)], salt="fixed-salt")))
    renamed = spec_from_dict(tomllib.loads(render_spec_toml("t-1", [("holdout", 5000), ("exposed_b", 5000)], salt="fixed-salt")))
    assert len({base.fingerprint, salted.fingerprint, weighted.fingerprint, renamed.fingerprint}) == 4
    assert re.fullmatch(r"[0-9a-f]{16}", base.fingerprint)


def test_fingerprint_is_pinned() -> None:
    # The canonical form is part of the contract (reports carry it): SHA-256 of this exact text.
    import hashlib

    from armlock.assign import fingerprint

    canon = '{"arms":[["holdout",5000],["exposed",5000]],"contract":"armlock-assign-1","salt":"fixed-salt"}'
    expected = hashlib.sha256(canon.encode()).hexdigest()[:16]
    assert fingerprint("fixed-salt", [("holdout", 5000), ("exposed", 5000)]) == expected == "2f38edc4143c6066"


def test_parse_arms_forms() -> None:
    assert parse_arms("holdout=0.1,exposed=0.9") == [("holdout", 1000), ("exposed", 9000)]
    assert parse_arms("holdout=20%,a=40%,b=4000bp") == [("holdout", 2000), ("a", 4000), ("b", 4000)]
    with pytest.raises(ValueError, match="is not NAME=SHARE"):
        parse_arms("holdout")


def test_lock_records_then_warns_on_change(tmp_path: Path) -> None:
    p = tmp_path / "s.toml"
    p.write_text(_spec_text(), encoding="utf-8")
    first = check_lock(load_spec(p), p)
    assert first.status == "recorded" and (tmp_path / "s.toml.lock").exists()
    assert json.loads((tmp_path / "s.toml.lock").read_text())["fingerprint"] == load_spec(p).fingerprint
    assert check_lock(load_spec(p), p).status == "same"
    p.write_text(_spec_text(**{"weight = 5000  # basis points: 50% of visitors\nrole = \"holdout\"":
                               'weight = 1000\nrole = "holdout"', "weight = 5000": "weight = 9000"}), encoding="utf-8")
    changed = check_lock(load_spec(p), p)
    assert changed.status == "changed"
    assert "THE SPLIT HAS CHANGED. the arms changed from [holdout 5000, exposed 5000] to [holdout 1000, exposed 9000]" in changed.warning
    assert "re-hashes every visitor" in changed.warning
