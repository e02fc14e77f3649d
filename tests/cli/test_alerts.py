"""Alerts: when an audit posts to a webhook, the message's bound, retries, and a webhook that is down.

The webhook is a local receiver on 127.0.0.1 (http.server in a thread); nothing leaves the machine.
"""

from __future__ import annotations

import json
import threading
from collections.abc import Iterator
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from pathlib import Path
from typing import Any

import pytest

from tests.cli.cli_run import run_cli
from tests.cli.test_audit_cli import SPEC_TOML
from tests.report.fixtures import build_report

from armlock.assign import load_spec, spec_from_dict
from armlock.audit.alerts import MAX_CHARS, alert_message, alert_reasons
from armlock.shared.history import row_from_report
from armlock.audit.model import Check
from armlock.audit.synth import generate, write_logs
from armlock.alert_post import post


class Receiver:
    """Collects posted JSON bodies; answers each request with the next code of `codes` (then 200)."""

    def __init__(self) -> None:
        self.bodies: list[dict[str, Any]] = []
        self.codes: list[int] = []
        outer = self

        class Handler(BaseHTTPRequestHandler):
            def do_POST(self) -> None:  # noqa: N802 (http.server's name)
                n = int(self.headers.get("Content-Length", 0))
                outer.bodies.append(json.loads(self.rfile.read(n)))
                code = outer.codes.pop(0) if outer.codes else 200
                self.send_response(code)
                self.end_headers()

            def log_message(self, *args: Any) -> None:
                pass

        self.server = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
        self.url = f"http://127.0.0.1:{self.server.server_address[1]}/hooks/T0KEN"
        self.thread = threading.Thread(target=self.server.serve_forever, daemon=True)
        self.thread.start()

    def close(self) -> None:
        self.server.shutdown()
        self.server.server_close()


@pytest.fixture
def receiver() -> Iterator[Receiver]:
    r = Receiver()
    yield r
    r.close()


def _spec(end: str | None = None) -> Any:
    data = {"name": "homeware-retargeting", "salt": "s", "start": "2026-02-24T00:00:00Z",
            "arms": [{"name": "holdout", "weight": 1000}, {"name": "exposed", "weight": 9000}]}
    if end:
        data["end"] = end
    return spec_from_dict(data, "spec.toml")


def _passing(as_of: str) -> Any:
    rep = build_report(as_of=as_of)
    rep.checks = [c for c in rep.checks if c.status in ("pass", "skipped")]
    rep.verdict = "pass"
    return rep


def test_when_an_alert_is_news() -> None:
    spec = _spec()
    ok1, ok2 = _passing("2026-03-02"), _passing("2026-03-09")
    assert alert_reasons(spec, ok1, None) == []  # a first PASS is no news
    assert alert_reasons(spec, ok2, row_from_report(ok1)) == []  # never on an unchanged PASS
    bad = build_report(as_of="2026-03-16", leak_share=0.02, srm_p=0.0001)
    assert alert_reasons(spec, bad, row_from_report(ok2)) == ["verdict went from PASS to FAIL"]
    worse = build_report(as_of="2026-03-23", leak_share=0.03, srm_p=0.0001)
    assert alert_reasons(spec, worse, row_from_report(bad)) == []  # an unchanged FAIL is already known
    assert alert_reasons(spec, bad, None) == ["first recorded verdict is FAIL"]
    better = _passing("2026-03-30")
    assert alert_reasons(spec, better, row_from_report(worse)) == []  # getting better is not an alarm


def test_stale_feed_and_planned_end() -> None:
    spec = _spec(end="2026-03-10T00:00:00Z")
    ok = _passing("2026-03-02")
    stale = _passing("2026-03-09")
    stale.checks.append(Check(id="freshness", title="Feed freshness", status="warn",
                              summary="The exposure log ends 2 days before the as-of date. Check the export."))
    stale.verdict = "warn"
    assert alert_reasons(spec, stale, row_from_report(ok)) == [
        "verdict went from PASS to WARN", "a feed went stale (The exposure log ends 2 days before the as-of date)"]
    end = _passing("2026-03-10")
    assert alert_reasons(spec, end, row_from_report(ok)) == ["the test reached its planned end (2026-03-10)"]
    assert alert_reasons(spec, _passing("2026-03-17"), row_from_report(end)) == []  # said once


def test_message_is_bounded_and_keeps_the_link() -> None:
    prev = row_from_report(_passing("2026-03-09"))
    bad = build_report(as_of="2026-03-16", leak_share=0.02, srm_p=0.0001)
    link = "https://reports.example/homeware/2026-03-16.html"
    msg = alert_message(bad, ["verdict went from PASS to FAIL"], prev, link)
    assert msg.startswith("armlock: homeware-retargeting is FAIL as of 2026-03-16. Verdict went from PASS to FAIL.")
    assert "Failing: Sample ratio, Holdout leakage" in msg and msg.endswith(" " + link) and len(msg) <= MAX_CHARS
    bad.experiment = "x" * 120
    for c in bad.checks:
        c.title = "a very long check title\nwith a line break " * 5
    long = alert_message(bad, ["verdict went from PASS to FAIL"] * 5, prev, link)
    assert len(long) <= MAX_CHARS and long.endswith(" " + link) and "\n" not in long and "…" in long


def test_post_retries_with_a_bound(receiver: Receiver) -> None:
    waits: list[float] = []
    receiver.codes = [503, 500]
    ok, what = post(receiver.url, {"text": "hi"}, sleep=waits.append)
    assert ok and what == f"http://127.0.0.1:{receiver.server.server_address[1]}: HTTP 200"
    assert len(receiver.bodies) == 3 and waits == [0.5, 1.0]
    receiver.codes = [503] * 5
    ok, what = post(receiver.url, {"text": "hi"}, sleep=waits.append)
    assert not ok and what.endswith("HTTP 503 after 3 attempts") and "T0KEN" not in what
    receiver.codes = [400]
    ok, what = post(receiver.url, {"text": "hi"}, sleep=waits.append)
    assert not ok and what.endswith("HTTP 400 (not retried)")


@pytest.fixture(scope="module")
def weeks(tmp_path_factory: pytest.TempPathFactory) -> Path:
    d = tmp_path_factory.mktemp("alerts")
    spec = SPEC_TOML.replace("start = 2026-01-05T00:00:00Z", "start = 2026-01-05T00:00:00Z\nend = 2026-02-01T00:00:00Z")
    (d / "spec.toml").write_text(spec, encoding="utf-8")
    s = load_spec(d / "spec.toml")
    write_logs(generate(s, units=6_000, days=28, seed=11), d / "clean", "csv")
    write_logs(generate(s, units=6_000, days=28, seed=11, faults=("leakage",)), d / "leak", "csv")
    return d


def test_a_run_of_weekly_audits_posts_only_news(weeks: Path, receiver: Receiver) -> None:
    plan = [("clean", "2026-01-11"), ("clean", "2026-01-18"), ("leak", "2026-01-25"), ("leak", "2026-02-01")]
    codes = []
    for logs, day in plan:
        r = run_cli(weeks, "audit", "--spec", "spec.toml", "--visits", f"{logs}/visits.csv", "--exposures",
                    f"{logs}/exposures.csv", "--as-of", day, "--record", "--alert", receiver.url,
                    "--alert-link", f"https://reports.example/{day}.html")
        codes.append(r.returncode)
    assert codes == [0, 0, 3, 3]
    texts = [b["text"] for b in receiver.bodies]
    assert len(texts) == 2, texts
    assert texts[0].startswith("armlock: cli-audit is FAIL as of 2026-01-25. Verdict went from PASS to FAIL.")
    assert texts[0].endswith(" https://reports.example/2026-01-25.html")
    assert "reached its planned end (2026-02-01)" in texts[1]  # FAIL unchanged, but the end is news
    assert all(len(t) <= MAX_CHARS for t in texts)
    assert receiver.bodies[0]["status"] == "fail" and receiver.bodies[0]["experiment"] == "cli-audit"


def test_a_webhook_that_is_down_never_fails_the_audit(weeks: Path, tmp_path: Path) -> None:
    r0 = Receiver()
    url = r0.url
    r0.close()  # nothing listens on that port any more: every attempt is refused
    hist = tmp_path / "h.sqlite"
    r = run_cli(weeks, "audit", "--spec", "spec.toml", "--visits", "leak/visits.csv", "--exposures",
                "leak/exposures.csv", "--as-of", "2026-01-25", "--history", str(hist), "--alert", url)
    assert r.returncode == 3
    assert "Alert NOT delivered (http://127.0.0.1:" in r.stderr and "after 3 attempts); the audit's result stands." in r.stderr
    assert "T0KEN" not in r.stderr
    assert r.stderr.splitlines()[-1].startswith("armlock audit: exit 3 split-broken")
    bad = run_cli(weeks, "audit", "--spec", "spec.toml", "--visits", "leak/visits.csv", "--alert", "ftp://x")
    assert bad.returncode == 2 and "is not an http(s) URL" in bad.stderr


def test_a_feed_going_stale_is_news(weeks: Path, receiver: Receiver, tmp_path: Path) -> None:
    """The real feed-health check: the logs end 2026-02-01, the test's planned end; audited as of
    2026-02-04 the exposure log (which should run past the end) is 3 days behind, the `freshness`
    check fails, the exit code is 7 and the alert says a feed went stale."""
    hist = str(tmp_path / "h.sqlite")
    base = ["audit", "--spec", "spec.toml", "--visits", "clean/visits.csv", "--exposures", "clean/exposures.csv",
            "--history", hist, "--alert", receiver.url]
    assert run_cli(weeks, *base, "--as-of", "2026-01-25", "--record").returncode == 0
    r = run_cli(weeks, *base, "--as-of", "2026-02-04", "--record")
    assert r.returncode == 7, r.stderr
    (body,) = receiver.bodies
    assert "a feed went stale (The exposures feed ends on 2026-02-01, 3 day(s) before 2026-02-04" in body["text"]
    assert "the test reached its planned end (2026-02-01)" in body["reasons"]
    assert len(body["text"]) <= MAX_CHARS
