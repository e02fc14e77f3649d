"""CLI tests for `armlock readout`: exit codes, formats, the audit gate, bad input, --record and history."""

from __future__ import annotations

import json
import re
from pathlib import Path

import pytest

from armlock.assign import load_spec
from armlock.audit import synth
from tests.cli.cli_run import run_cli

run = run_cli


@pytest.fixture(scope="module")
def shop(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """An `armlock init` spec and small invented logs: a clean set and one with holdout leakage."""
    d = tmp_path_factory.mktemp("shop")
    r = run(d, "init", "readout-cli", "--holdout-share", "0.2")
    assert r.returncode == 0, r.stderr
    spec_path = d / "readout-cli.toml"
    text = spec_path.read_text().replace('attributed = ""', 'attributed = "attributed_channel"')
    text = re.sub(r"(?m)^start = .*$", "start = 2026-01-05T00:00:00Z", text)
    spec_path.write_text(text)
    spec = load_spec(spec_path)
    out = {"spec": spec_path}
    for name, faults in (("clean", ()), ("leaky", ("leakage",))):
        logs = synth.generate(spec, units=6_000, days=28, seed=8, faults=faults)
        orders = synth.generate_orders(spec, logs, days=28, seed=9)
        paths = synth.write_logs(logs, d / name, fmt="csv")
        for k, p in paths.items():
            out[f"{name}_{k}"] = p
        out[f"{name}_orders"] = synth.write_orders(orders, d / name, fmt="csv")
    return out


def _args(shop: dict[str, Path], which: str = "clean") -> list[str]:
    return ["readout", "--spec", str(shop["spec"]), "--visits", str(shop[f"{which}_visits"]),
            "--orders", str(shop[f"{which}_orders"]), "--exposures", str(shop[f"{which}_exposures"])]


def test_help_explains_the_gate_and_has_an_example(tmp_path: Path) -> None:
    r = run(tmp_path, "readout", "--help")
    assert r.returncode == 0
    for word in ("Example", "--orders", "--spend-file", "--attributed-revenue", "anytime", "Exit codes"):
        assert word in r.stdout


def test_clean_readout_exits_0_with_a_headline(shop: dict[str, Path]) -> None:
    r = run(shop["spec"].parent, *_args(shop), "--spend", "3000")
    assert r.returncode == 0, r.stderr
    assert "armlock readout: readout-cli" in r.stdout
    assert "iROAS" in r.stdout and "attribution credited" in r.stdout
    assert "Did it pay?" in r.stdout


def test_failing_audit_exits_3_and_says_why(shop: dict[str, Path]) -> None:
    r = run(shop["spec"].parent, *_args(shop, "leaky"), "--spend", "3000", "--format", "json")
    assert r.returncode == 3, r.stderr
    data = json.loads(r.stdout)
    assert data["schema"] == "armlock.readout/1" and data["status"] == "fail"
    assert data["headline"].startswith("NOT TRUSTWORTHY")
    assert [g["id"] for g in data["gate"] if g["status"] == "fail"] == ["leakage"]


def test_markdown_and_html_to_a_file(shop: dict[str, Path], tmp_path: Path) -> None:
    md = run(shop["spec"].parent, *_args(shop), "--format", "markdown")
    assert md.returncode == 0 and md.stdout.startswith("**Does the channel pay? ") and "## armlock readout" in md.stdout
    out = tmp_path / "readout.html"
    h = run(shop["spec"].parent, *_args(shop), "--spend", "3000", "--format", "html", "--out", str(out))
    assert h.returncode == 0, h.stderr
    page = out.read_text()
    assert page.startswith("<!DOCTYPE html>") and 'data-chart="readout-looks"' in page
    assert "Wrote the html readout" in h.stderr


@pytest.mark.parametrize("extra,code,message", [
    (["--spend", "10", "--spend-file", "x.csv"], 2, "not both"),
    (["--spend", "-5"], 2, "must not be negative"),
    (["--format", "pdf"], 2, "unknown format"),
    (["--as-of", "last week"], 2, "is not a date"),
])
def test_usage_errors_exit_2(shop: dict[str, Path], extra: list[str], code: int, message: str) -> None:
    r = run(shop["spec"].parent, *_args(shop), *extra)
    assert r.returncode == code and message in r.stderr


def test_bad_orders_file_exits_4_naming_file_and_column(shop: dict[str, Path], tmp_path: Path) -> None:
    bad = tmp_path / "orders.csv"
    bad.write_text("unit_id,placed_at,revenue\nv1,2026-01-06T00:00:00Z,10\n")
    args = _args(shop)
    args[args.index("--orders") + 1] = str(bad)
    r = run(shop["spec"].parent, *args)
    assert r.returncode == 4
    assert "orders.csv: column 'order_time' not found in the orders file" in r.stderr
    assert "Traceback" not in r.stderr


def test_record_then_history_shows_the_estimate(shop: dict[str, Path], tmp_path: Path) -> None:
    hist = tmp_path / "h.sqlite"
    for day in ("2026-01-18", "2026-01-25"):
        r = run(shop["spec"].parent, *_args(shop), "--spend", "3000", "--as-of", day, "--record",
                "--history", str(hist), "--format", "json")
        assert r.returncode == 0, r.stderr
    h = run(shop["spec"].parent, "history", "--spec", str(shop["spec"]), "--history", str(hist))
    assert h.returncode == 0, h.stderr
    assert "Readout history" in h.stdout and "2026-01-18" in h.stdout and "2026-01-25" in h.stdout
    j = json.loads(run(shop["spec"].parent, "history", "--spec", str(shop["spec"]), "--history", str(hist),
                       "--format", "json").stdout)
    assert [r["as_of"] for r in j["readouts"]] == ["2026-01-18", "2026-01-25"]
    assert "incremental_revenue" in j["readouts"][0]["figures"]
