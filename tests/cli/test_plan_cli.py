"""`armlock plan` as a user runs it: formats, the spec it writes, estimates from files, and bad input (exit 4)."""

from __future__ import annotations

import json
import tomllib
from pathlib import Path

import pytest
import typer

from armlock.cli import app

from .cli_run import run_cli

SHOP = ["--weekly-units", "300000", "--revenue-mean", "7", "--revenue-sd", "75", "--exposure-rate", "0.8",
        "--lift", "0.05", "--weekly-spend", "40000", "--margin", "0.4", "--rho", "0.4"]


def test_plan_is_the_first_command() -> None:
    group = typer.main.get_command(app)
    assert group.list_commands(None)[:2] == ["plan", "init"]  # type: ignore[attr-defined,arg-type]


def test_text_plan(tmp_path: Path) -> None:
    r = run_cli(tmp_path, "plan", *SHOP)
    assert r.returncode == 0, r.stderr
    out = r.stdout
    assert out.startswith("armlock plan: 300,000 new units a week")
    assert "RECOMMENDED: Hold out" in out and "PASS" not in out  # the plan's own status word, not the audit's
    assert "Each holdout share:" in out and "Alternatives:" in out
    assert "Smallest detectable difference in revenue per unit" not in out  # short by default: one table
    assert "Reading the result every week" in out
    assert "Traceback" not in r.stderr
    full = run_cli(tmp_path, "plan", *SHOP, "--full").stdout
    assert "Smallest detectable difference in revenue per unit" in full and "Assumptions:" in full
    assert "Smallest iROAS distinguishable from zero / from break-even (2.50)" in full
    assert "Welch's t-test" in full  # the test the readout uses is said, and simulated


def test_json_and_markdown(tmp_path: Path) -> None:
    r = run_cli(tmp_path, "plan", *SHOP, "--format", "json", "--holdout-shares", "10%,0.2", "--weeks", "2-4,8")
    d = json.loads(r.stdout)
    assert d["schema"] == "armlock.plan/1" and d["shares"] == [0.1, 0.2] and d["weeks"] == [2, 3, 4, 8]
    md = run_cli(tmp_path, "plan", *SHOP, "--format", "markdown").stdout
    assert md.startswith("# Holdout plan") and "| weeks | holdout 5% |" in md


def test_write_spec_uses_the_recommended_share(tmp_path: Path) -> None:
    r = run_cli(tmp_path, "plan", *SHOP, "--format", "json", "--write-spec", "spring-test")
    assert r.returncode == 0, r.stderr
    rec = json.loads(r.stdout)["recommendation"]  # stdout stays pure JSON; the spec message is on stderr
    spec = tomllib.loads((tmp_path / "spring-test.toml").read_text())
    weights = {a["name"]: a["weight"] for a in spec["arms"]}
    assert weights == {"holdout": round(rec["share"] * 10_000), "exposed": 10_000 - round(rec["share"] * 10_000)}
    assert "Wrote spring-test.toml" in r.stderr and f"{rec['weeks']} weeks" in r.stderr
    if "readout" in spec:  # specs with the readout's tables carry the plan: planned size, margin, alpha, power
        assert spec["readout"]["planned_units"] == 300_000 * rec["weeks"]
        assert spec["readout"]["margin"] == 0.4 and spec["readout"]["power"] == 0.8
    # the same code as `armlock init`: `check` accepts it, and a second write is refused before any work
    assert run_cli(tmp_path, "check", "--spec", "spring-test.toml").returncode == 0
    again = run_cli(tmp_path, "plan", *SHOP, "--write-spec", "spring-test")
    assert again.returncode == 4 and "already exists" in again.stderr and again.stdout == ""


def test_write_spec_refused_without_a_recommendation(tmp_path: Path) -> None:
    r = run_cli(tmp_path, "plan", "--weekly-units", "50", "--revenue-mean", "7", "--revenue-sd", "75",
                "--lift", "0.05", "--write-spec", "tiny")
    assert r.returncode == 4 and "no spec written" in r.stderr
    assert not (tmp_path / "tiny.toml").exists()


def test_html_out(tmp_path: Path) -> None:
    r = run_cli(tmp_path, "plan", *SHOP, "--format", "html", "--out", "plan.html")
    assert r.returncode == 0, r.stderr
    page = (tmp_path / "plan.html").read_text()
    assert page.count('data-chart="') == 6 and "Holdout plan" in page  # three charts, wide and narrow


def test_from_files(tmp_path: Path) -> None:
    lines = ["unit_id,first_seen,pre_revenue"] + [f"u{i},2026-10-{1 + i % 28:02d}T10:00:00Z,{(i * 37) % 50}"
                                                   for i in range(2000)]
    (tmp_path / "v.csv").write_text("\n".join(lines) + "\n")
    (tmp_path / "o.csv").write_text("unit_id,revenue\n" + "".join(f"u{i},{20 + (i * 37) % 50}\n" for i in range(0, 2000, 9)))
    r = run_cli(tmp_path, "plan", "--visits", "v.csv", "--orders", "o.csv", "--lift", "0.1")
    assert r.returncode == 0, r.stderr
    assert "Estimated from the pre-period files:" in r.stdout
    assert "weekly new units: 500 (2,000 units first seen over 28 days" in r.stdout
    assert "pre-period correlation (rho)" in r.stdout
    assert "95% range from the pre-period's sampling error" in r.stdout  # the weeks come with a range
    assert "Order values were taken as constant" not in r.stdout  # the SD was measured, not assumed
    over = run_cli(tmp_path, "plan", "--visits", "v.csv", "--orders", "o.csv", "--lift", "0.1",
                   "--weekly-units", "9000", "--format", "json")
    d = json.loads(over.stdout)
    assert d["inputs"]["weekly_units"] == 9000 and any("instead of the estimate" in n for n in d["notes"])


@pytest.mark.parametrize("args,message", [
    (["--weekly-units", "0", "--revenue-mean", "7", "--revenue-sd", "75"], "--weekly-units: must be positive"),
    (["--weekly-units", "1000", "--revenue-mean", "7", "--revenue-sd", "0"], "--revenue-sd: must be positive"),
    (["--weekly-units", "1000", "--revenue-mean", "7", "--revenue-sd", "5", "--holdout-shares", "5,10"],
     "--holdout-shares: 5 is outside (0, 1); did you mean 5%?; write 0.05 or 5%"),
    (["--weekly-units", "1000", "--revenue-mean", "7", "--revenue-sd", "5", "--holdout-shares", "0%"],
     "outside (0, 1)"),
    (["--weekly-units", "1000", "--revenue-mean", "7", "--revenue-sd", "5", "--holdout-shares", "100%"],
     "outside (0, 1)"),
    (["--weekly-units", "1000", "--revenue-mean", "7", "--revenue-sd", "5", "--weeks", "0-3"], "--weeks"),
    (["--weekly-units", "1000", "--revenue-mean", "7", "--revenue-sd", "5", "--weeks", "26-2"], "write it as 2-26"),
    (["--weekly-units", "1000", "--revenue-mean", "7"], "give revenue per unit"),
    (["--revenue-mean", "7", "--revenue-sd", "5"], "--weekly-units"),
    (["--weekly-units", "1000", "--conversion", "0.02"], "go together"),
    (["--weekly-units", "1000", "--conversion", "1.5", "--order-value", "50"], "--conversion: 1.5 is not a share"),
    (["--weekly-units", "1000", "--conversion", "150%", "--order-value", "50"], "--conversion: must lie in (0, 1)"),
    # a bare lift or share above 1 is refused with the fix; a percent is accepted (test_percent_inputs)
    (["--weekly-units", "1000", "--revenue-mean", "7", "--revenue-sd", "75", "--lift", "8"],
     "--lift: 8 would mean +800%; did you mean 8%? Write 8% or 0.08 (or 800% if you really mean it)"),
    (["--weekly-units", "1000", "--revenue-mean", "7", "--revenue-sd", "75", "--exposure-rate", "60"],
     "--exposure-rate: 60 is not a share between 0 and 1; did you mean 60%?"),
    (["--weekly-units", "1000", "--revenue-mean", "7", "--revenue-sd", "75", "--margin", "40"], "did you mean 40%?"),
    # nonsense levels and magnitudes: a range, never a recommendation or an internal error
    (["--weekly-units", "1000", "--revenue-mean", "7", "--revenue-sd", "75", "--alpha", "0.99"],
     "--alpha: must lie in (0, 0.5) (and be at least 0.000001), got 0.99"),
    (["--weekly-units", "1000", "--revenue-mean", "7", "--revenue-sd", "75", "--power", "0.01"],
     "--power: must lie in [0.5, 1), got 0.01"),
    (["--weekly-units", "1e300", "--revenue-mean", "7", "--revenue-sd", "75"], "--weekly-units: 1e+300 is out of range"),
    (["--weekly-units", "1000", "--revenue-mean", "1e-300", "--revenue-sd", "75"], "--revenue-mean: 1e-300 is out of range"),
    (["--weekly-units", "1000", "--revenue-mean", "7", "--revenue-sd", "1e300"], "--revenue-sd: 1e+300 is out of range"),
    (["--weekly-units", "1000", "--revenue-mean", "7", "--revenue-sd", "75", "--lift", "1e6"], "--lift: 1e6 would mean"),
    (["--weekly-units", "1000", "--revenue-mean", "7", "--revenue-sd", "75", "--lift", "100000000%"],
     "--lift: 1e+06 means +100,000,000% per reached unit"),
    (["--weekly-units", "1000", "--conversion", "1%", "--order-value", "1e300"], "--order-value: 1e+300 is out of range"),
    (["--weekly-units", "1000", "--revenue-mean", "7", "--revenue-sd", "75", "--target-iroas", "1e-6",
      "--weekly-spend", "1e12"], "--target-iroas: 1e-06 at a weekly spend of 1e+12 means at least"),
    (["--weekly-units", "1000", "--revenue-mean", "7", "--revenue-sd", "75", "--weeks", "1-2000000"],
     "--weeks: '1-2000000' goes beyond 520 weeks"),
    (["--weekly-units", "1000", "--revenue-mean", "7", "--revenue-sd", "75", "--max-weeks", "100000"],
     "--max-weeks: must be a whole number of weeks from 1 to 520"),
    (["--weekly-units", "1000", "--revenue-mean", "7", "--revenue-sd", "75", "--covariate", "pre_revenue"],
     "--covariate: only apply with --visits and --orders"),
    (["--weekly-units", "1000", "--revenue-mean", "7", "--revenue-sd", "5", "--target-iroas", "3"], "--weekly-spend"),
    (["--visits", "missing.csv", "--weekly-units", "10"], "give both --visits and --orders"),
    (["--visits", "missing.csv", "--orders", "o.csv"], "missing.csv: visits file not found"),
])
def test_bad_input_exit_4_with_a_clear_message(tmp_path: Path, args: list[str], message: str) -> None:
    r = run_cli(tmp_path, "plan", *args)
    assert r.returncode == 4, (r.stdout, r.stderr)
    assert r.stderr.startswith("Error: ") and message in r.stderr, r.stderr
    assert "Traceback" not in r.stderr and r.stdout == ""


def test_percent_inputs_and_the_default_reach_said(tmp_path: Path) -> None:
    pct = run_cli(tmp_path, "plan", "--weekly-units", "300000", "--revenue-mean", "7", "--revenue-sd", "75",
                  "--lift", "8%", "--exposure-rate", "80%", "--margin", "40%", "--alpha", "5%", "--power", "80%",
                  "--format", "json")
    frac = run_cli(tmp_path, "plan", "--weekly-units", "300000", "--revenue-mean", "7", "--revenue-sd", "75",
                   "--lift", "0.08", "--exposure-rate", "0.8", "--margin", "0.4", "--format", "json")
    assert pct.returncode == 0 and frac.returncode == 0, pct.stderr + frac.stderr
    a, b = json.loads(pct.stdout), json.loads(frac.stdout)
    assert a["inputs"]["lift"] == pytest.approx(0.08) and a["inputs"]["exposure_rate"] == pytest.approx(0.8)
    assert a["recommendation"] == b["recommendation"]
    full = run_cli(tmp_path, "plan", "--weekly-units", "300000", "--revenue-mean", "7", "--revenue-sd", "75",
                   "--lift", "8%")
    assert "--exposure-rate was not given" in full.stdout and "full reach" in full.stdout


def test_write_spec_writes_nothing_unless_it_validates(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    from armlock.assign import SpecError
    from armlock.plan.spec_out import write_spec_atomically

    carry = dict(planned_units=1000, margin=None, alpha=0.05, power=0.8)
    dest = tmp_path / "t.toml"
    spec = write_spec_atomically("t", 0.1, dest, force=False, carry=carry)
    assert dest.exists() and spec.arms[0].weight == 1000
    import armlock.plan.spec_out as cp

    real = cp.carry_plan_into_spec_text
    monkeypatch.setattr(cp, "carry_plan_into_spec_text", lambda text, **kw: real(text, **kw) + "\n[nonsense\n")
    with pytest.raises(SpecError, match="no spec written"):
        write_spec_atomically("u", 0.1, tmp_path / "u.toml", force=False, carry=carry)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["t.toml"]  # no spec, no temporary file left behind


def test_pre_period_file_without_orders(tmp_path: Path) -> None:
    (tmp_path / "v.csv").write_text("unit_id,first_seen\n" + "".join(f"u{i},2026-10-0{1 + i % 7}T00:00:00Z\n" for i in range(100)))
    (tmp_path / "o.csv").write_text("unit_id,revenue\n")
    r = run_cli(tmp_path, "plan", "--visits", "v.csv", "--orders", "o.csv")
    assert r.returncode == 4 and "o.csv: the orders file has no orders" in r.stderr


READOUT_SECTION = '''
[audit]
x = 1

[readout]
covariates = ["pre_revenue"]  # pre-period columns
alpha = 0.05                  # two-sided level
power = 0.8                   # power
margin = 0.3                  # gross margin
planned_units = 0             # units the test plans; 0 = as of now

[readout.orders]
unit_id = "unit_id"           # the visitor id
'''


def test_plan_carries_into_the_readout_section() -> None:
    from armlock.plan.spec_out import carry_plan_into_spec_text

    out = carry_plan_into_spec_text(READOUT_SECTION, planned_units=1_260_000, margin=0.35, alpha=0.1, power=0.9)
    assert "planned_units = 1260000       # units the test plans; 0 = as of now" in out  # comment keeps its column
    assert "margin = 0.35                 # gross margin" in out
    assert "alpha = 0.1                   # two-sided level" in out and "power = 0.9" in out
    assert "[audit]\nx = 1" in out and 'unit_id = "unit_id"' in out  # other sections untouched
    assert carry_plan_into_spec_text("[audit]\nplanned_units = 0\n", planned_units=5, margin=None, alpha=0.05,
                                     power=0.8) == "[audit]\nplanned_units = 0\n"  # no [readout]: unchanged


def test_from_files_with_the_specs_column_maps(tmp_path: Path) -> None:
    assert run_cli(tmp_path, "init", "colmap", "--holdout-share", "0.1").returncode == 0
    spec = (tmp_path / "colmap.toml").read_text()
    if "[readout.orders]" not in spec:
        pytest.fail("armlock init writes no [readout.orders] table")
    spec = spec.replace('[readout.orders]\n', '[readout.orders]\nrevenue = "amount"\n', 1)
    lines = [ln for ln in spec.splitlines() if not ln.startswith("revenue = \"revenue\"")]
    (tmp_path / "colmap.toml").write_text("\n".join(lines) + "\n")
    (tmp_path / "v.csv").write_text("unit_id,first_seen,pre_revenue\n" + "".join(
        f"u{i},2026-10-{1 + i % 14:02d}T10:00:00Z,{(i * 7) % 30}\n" for i in range(600)))
    (tmp_path / "o.csv").write_text("unit_id,amount\n" + "".join(f"u{i},{10 + (i * 7) % 30}\n" for i in range(0, 600, 5)))
    r = run_cli(tmp_path, "plan", "--visits", "v.csv", "--orders", "o.csv", "--spec", "colmap.toml", "--lift", "0.2",
                "--format", "json")
    assert r.returncode == 0, r.stderr
    d = json.loads(r.stdout)
    assert d["inputs"]["weekly_units"] == pytest.approx(300.0)
    assert any("pre_revenue" in e["how"] for e in d["estimated"])


@pytest.mark.parametrize("doc", ["README.md", "docs/planner.md"])
def test_readme_example_is_the_live_output(tmp_path: Path, doc: str) -> None:
    # the planner session, re-run: every line it shows (elisions aside) is in the real output, in order;
    # the README shows an excerpt, docs/planner.md the whole session
    readme = (Path(__file__).resolve().parents[2] / doc).read_text(encoding="utf-8")
    start = readme.index("```console\n$ armlock plan")
    block = readme[start:readme.index("```\n", start + 10)].splitlines()[1:]
    cmd_lines = []
    while block and (block[0].startswith("$ ") or block[0].startswith("    ")):
        cmd_lines.append(block.pop(0).removeprefix("$ ").rstrip("\\").strip())
    args = " ".join(cmd_lines).split()[1:]
    out = run_cli(tmp_path, *args).stdout.splitlines()
    i = 0
    for line in (ln for ln in block if ln.strip() and ln.strip() != "..."):
        while i < len(out) and out[i] != line:
            i += 1
        assert i < len(out), f"{doc} line not in the live output (or out of order): {line!r}"


def test_visits_column_options_without_a_spec(tmp_path: Path) -> None:
    (tmp_path / "v.csv").write_text("vid,ts,pre_revenue\n" + "".join(
        f"u{i},2026-10-{1 + i % 14:02d}T10:00:00Z,{(i * 7) % 30}\n" for i in range(600)))
    (tmp_path / "o.csv").write_text("unit_id,revenue\n" + "".join(f"u{i},{10 + (i * 7) % 30}\n" for i in range(0, 600, 5)))
    r = run_cli(tmp_path, "plan", "--visits", "v.csv", "--orders", "o.csv", "--visits-unit-column", "vid",
                "--visits-time-column", "ts", "--lift", "20%", "--currency", "EUR", "--format", "json")
    assert r.returncode == 0, r.stderr
    d = json.loads(r.stdout)
    assert d["inputs"]["weekly_units"] == pytest.approx(300.0) and d["inputs"]["currency"] == "EUR"
    assert d["simulated_revenue"]["resampled_pre_period"] is True  # the shop's own revenue, resampled
    bad = run_cli(tmp_path, "plan", "--visits", "v.csv", "--orders", "o.csv", "--lift", "20%")
    assert bad.returncode == 4
    assert "column 'unit_id' (the default name; --visits-unit-column names another) not found" in bad.stderr
    assert "spec" not in bad.stderr
