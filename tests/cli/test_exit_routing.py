"""Exit codes a scheduler routes on (split broken 3, bad input 4, internal 5, stale data 7) and the
one-line summary an audit ends with on stderr."""

from __future__ import annotations

from pathlib import Path

import pytest
from typer.testing import CliRunner

from tests.cli.cli_run import run_cli
from tests.cli.test_audit_cli import SPEC_TOML

from armlock.assign import load_spec
from armlock.audit.model import Check
from armlock.audit.synth import generate, write_logs
from armlock.routing import CODE_NAMES, SUMMARY_MAX, route, summary_line


@pytest.mark.parametrize("verdict,checks,strict,code", [
    ("pass", [("srm", "pass")], True, 0),
    ("warn", [("balance", "warn")], False, 0),
    ("warn", [("balance", "warn")], True, 1),
    ("fail", [("srm", "fail"), ("balance", "warn")], False, 3),
    ("fail", [("freshness", "fail")], False, 7),
    ("fail", [("freshness_orders", "fail"), ("srm", "pass")], True, 7),
    ("fail", [("freshness", "fail"), ("leakage", "fail")], False, 3),  # a broken split wins
    ("warn", [("freshness", "warn")], False, 0),
    ("warn", [("freshness", "warn"), ("balance", "warn")], True, 7),
    ("fail", [], False, 3),  # a FAIL with no failing check named is still never "ok" nor "stale"
])
def test_route(verdict: str, checks: list[tuple[str, str]], strict: bool, code: int) -> None:
    assert route(verdict, checks, strict) == code


def test_codes_are_distinct_and_named() -> None:
    assert sorted(CODE_NAMES) == [0, 1, 2, 3, 4, 5, 6, 7]
    assert len(set(CODE_NAMES.values())) == len(CODE_NAMES)


def test_summary_line_is_one_bounded_line() -> None:
    line = summary_line("audit", "spring", "2026-12-07", "fail",
                        [("srm", "fail"), ("balance", "warn"), ("leakage", "pass")], 3)
    assert line == ("armlock audit: exit 3 split-broken; spring as of 2026-12-07; verdict FAIL; "
                    "failing: srm; warning: balance")
    long = summary_line("audit", "x\ny", "2026-12-07", "fail", [(f"c{i}\r", "fail") for i in range(200)], 3)
    assert "\n" not in long and "\r" not in long and len(long) <= SUMMARY_MAX


@pytest.fixture(scope="module")
def logs(tmp_path_factory: pytest.TempPathFactory) -> Path:
    d = tmp_path_factory.mktemp("routing")
    (d / "spec.toml").write_text(SPEC_TOML, encoding="utf-8")
    spec = load_spec(d / "spec.toml")
    write_logs(generate(spec, units=4_000, days=21, seed=3), d / "clean", "csv")
    write_logs(generate(spec, units=4_000, days=21, seed=3, faults=("leakage",)), d / "leak", "csv")
    return d


def _args(case: str) -> list[str]:
    return ["audit", "--spec", "spec.toml", "--visits", f"{case}/visits.csv", "--exposures", f"{case}/exposures.csv"]


def test_audit_ends_with_the_summary_line(logs: Path) -> None:
    r = run_cli(logs, *_args("leak"))
    assert r.returncode == 3
    last = r.stderr.splitlines()[-1]
    assert last.startswith("armlock audit: exit 3 split-broken; cli-audit as of 2026-01-25; verdict FAIL; failing: ")
    assert "leakage" in last
    ok = run_cli(logs, *_args("clean"))
    assert ok.returncode == 0
    assert ok.stderr.splitlines()[-1].startswith("armlock audit: exit 0 ok; cli-audit as of 2026-01-25; verdict ")


def test_bad_input_is_4_with_one_error_line(logs: Path) -> None:
    r = run_cli(logs, "audit", "--spec", "spec.toml", "--visits", "nope.csv")
    assert r.returncode == 4 and r.stderr == "Error: nope.csv: visits file not found\n"


@pytest.mark.parametrize("case,code,name", [("clean", 7, "stale-data"), ("leak", 3, "split-broken")])
def test_a_failing_freshness_check_routes_to_stale(logs: Path, monkeypatch: pytest.MonkeyPatch,
                                                   case: str, code: int, name: str) -> None:
    """A freshness check (its id as in `armlock.routing.STALE_CHECKS`) failing alone gives 7; with a
    broken split as well, 3. The check is added to a real audit's checks in process."""
    import armlock.audit.run as run_mod
    from armlock.cli import app

    real = run_mod.checks_from_tables

    def with_stale_feed(*a, **k):  # type: ignore[no-untyped-def]
        return [*real(*a, **k), Check(id="freshness", title="Feed freshness", status="fail",
                                      summary="The visits feed ends 9 days before the as-of date.")]

    monkeypatch.setattr(run_mod, "checks_from_tables", with_stale_feed)
    monkeypatch.chdir(logs)
    res = CliRunner().invoke(app, _args(case))
    assert res.exit_code == code, res.output
    assert res.stderr.splitlines()[-1].startswith(f"armlock audit: exit {code} {name}; ")
    assert "freshness" in res.stderr.splitlines()[-1]


@pytest.mark.parametrize("case,code,name", [("clean", 7, "stale-data"), ("leak", 3, "split-broken")])
def test_real_stale_feeds_exit_7_unless_the_split_is_broken(logs: Path, case: str, code: int, name: str) -> None:
    """The feed-health check (`freshness`, audit/feeds.py) on logs that end 2026-01-25, audited as of
    two days later: the feeds are stale. Alone that is exit 7; with leakage as well, exit 3."""
    r = run_cli(logs, *_args(case), "--as-of", "2026-01-27")
    assert r.returncode == code, r.stderr
    last = r.stderr.splitlines()[-1]
    assert last.startswith(f"armlock audit: exit {code} {name}; cli-audit as of 2026-01-27; verdict FAIL; failing: ")
    assert "freshness" in last
