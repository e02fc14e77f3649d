"""The demo library: an invented shop's twelve-week holdout test written into one folder and audited week by week (`armlock demo`)."""

from __future__ import annotations

import json
import textwrap
import time
from dataclasses import dataclass, field
from datetime import UTC, date, datetime, timedelta
from pathlib import Path

from armlock.assign import InputError, check_lock, load_spec
from armlock.assign.init import render_spec_toml
from armlock.assign.snippet import render_snippet

from armlock.shared.words import status_word

from armlock.shared.files import write_atomic

from .common import progress

SHOP = "Quillmoss Homewares (invented)"
SITE = "shop.example"
NAME = "quillmoss-retargeting"
SALT = "quillmoss-demo-salt-0001"  # fixed so the demo is the same on every machine; never reuse
START = datetime(2026, 1, 5, tzinfo=UTC)  # a Monday
WEEKS = 12
UNITS = 60_000
SEED = 20260105
FAULTS = ("pre_exposure", "cookie_churn", "leakage")
UPLIFT = 0.3  # the channel's true effect by construction: reached visitors buy 30% more often
SPEND = 18_000.0  # what the invented vendor billed for the twelve weeks (invented)
MARKER = "armlock demo folder: an INVENTED scenario"
SPEC_FILE = f"{NAME}.toml"

README = f"""{MARKER}.

{SHOP} at https://{SITE}/ is a homeware shop made up for this demo.
No real company, site, person, customer or ad vendor is modelled: every visitor, campaign and
order here is random numbers from armlock's synthetic-log generator (audit/synth.py).

{{story}}

Files
  {SPEC_FILE}
      the experiment spec (salt + arms), as `armlock init` writes it
  {SPEC_FILE}.lock
      the spec's fingerprint, recorded at first use
  {SPEC_FILE}.history.sqlite
      one audit per week (armlock audit --record), read by `armlock history`
  logs/visits.parquet
      one row per visitor: first seen, recorded arm, browser family, device, country...
  logs/exposures.parquet
      the vendor's impressions and clicks
  logs/identities.parquet
      visitor id -> logged-in customer key
  logs/orders.parquet
      the shop's orders (refunds as negative revenue), with the channel attribution credited
  snippet/armlock-tag.html
      the browser snippet as a <script> block for a tag manager
  snippet/armlock.js
      the same snippet as a file to self-host
  report.html
      the split-health report of the last week: open it in a browser
  report.json
      the same audit as JSON
  readout.html
      the readout of the last week: did the channel cause sales, and did it pay?
  readout.json
      the same readout as JSON
  readout-finance.html
      the readout on one printable page for a finance lead: the answer, net contribution, the design

The logs are Parquet, as warehouses export them. To peek at one:
  python -c "import pandas as pd; print(pd.read_parquet('logs/visits.parquet').head())"

Try next (in this folder)
  armlock history --spec {SPEC_FILE}
  armlock readout --spec {SPEC_FILE} --visits logs/visits.parquet --orders logs/orders.parquet \\
      --exposures logs/exposures.parquet --identities logs/identities.parquet --spend {SPEND:.0f}
  armlock audit --spec {SPEC_FILE} --visits logs/visits.parquet \\
      --exposures logs/exposures.parquet --identities logs/identities.parquet --format text

Visitor ids and cookies are personal data in many places. With real traffic, wait for consent
where the law asks for it (the snippet can), and follow local privacy law and the site's own
counsel.
"""

STORY_FAULTS = ("The story: the shop holds out 10% of its visitors from a display retargeting vendor "
                "for twelve weeks, to measure what the ads really add. Things went wrong, as they "
                "do: an audience was built and exposed before the test started, the vendor reached "
                "part of the holdout in one campaign, and one browser family resets cookies about "
                "weekly, so logged-in customers come back in new arms.")
STORY_SERVER = ("The story: the shop holds out 10% of its visitors from a display retargeting vendor "
                "for twelve weeks, to measure what the ads really add. Two things went wrong: an audience "
                "was built and exposed before the test started, and the vendor reached part of the "
                "holdout in one campaign. This is the variant with server-set ids (armlock demo "
                "--server-ids): the shop's own server sets the visitor id cookie, so the browser family "
                "that caps cookies written by script at 7 days no longer resets ids, and logged-in "
                "customers keep their arm (see docs/identity.md in armlock's repository).")
STORY_CLEAN = ("The story: the shop holds out 10% of its visitors from a display retargeting vendor "
               "for twelve weeks, to measure what the ads really add. This is the clean version "
               "(armlock demo --clean): no fault was injected.")


@dataclass
class DemoResult:
    """What the demo wrote and found."""

    folder: Path
    files: dict[str, Path] = field(default_factory=dict)
    verdict: str = ""
    verdict_text: str = ""
    findings: list[str] = field(default_factory=list)
    readout_headline: str = ""
    readout_status: str = ""
    true_incremental_revenue: float = 0.0  # the channel's effect by construction (synth.generate_orders)
    readout_interval: tuple[float | None, float | None] = (None, None)
    weeks: int = 0
    seconds: float = 0.0


def weekly_as_of(weeks: int = WEEKS) -> list[date]:
    """The as-of dates of the weekly audits: the Sunday that ends each test week."""
    first = START.date()
    return [first + timedelta(days=7 * w - 1) for w in range(1, weeks + 1)]


def _prepare(folder: Path) -> None:
    if folder.exists() and not folder.is_dir():
        raise InputError(f"{folder}: exists and is not a folder; choose another DIR")
    if folder.is_dir() and any(folder.iterdir()):
        readme = folder / "README.txt"
        head = readme.read_text(encoding="utf-8", errors="replace")[:200] if readme.is_file() else ""
        if MARKER not in head:
            raise InputError(f"{folder}: exists and is not an armlock demo folder (no README.txt of a "
                             "demo); choose an empty or new DIR so nothing of yours is overwritten")
    try:
        (folder / "logs").mkdir(parents=True, exist_ok=True)
        (folder / "snippet").mkdir(exist_ok=True)
    except OSError as exc:
        raise InputError(f"{folder}: cannot create the demo folder: {exc.strerror}") from None


def build_demo(folder: Path, *, clean: bool = False, units: int = UNITS, server_ids: bool = False) -> DemoResult:
    """Write the scenario into `folder`, audit it once per week with history, write the report.

    `server_ids`: the shop's server sets the id cookie (the spec says `id_from = "server"`), so the
    cookie_churn fault resets no id (audit/synth.py); every other fault stays.
    """
    from armlock.audit import synth
    from armlock.shared.history import default_history_path, load, record, record_readout
    from armlock.audit.report_html import render_html
    from armlock.readout.report_finance import render_finance
    from armlock.readout.report_html import render_html as render_readout_html
    from armlock.readout.run import run_readout_and_audit

    t0 = time.perf_counter()
    _prepare(folder)
    res = DemoResult(folder=folder)
    spec_path = folder / SPEC_FILE
    text = render_spec_toml(NAME, [("holdout", 1000), ("exposed", 9000)], salt=SALT, start=START,
                            description=f"INVENTED demo: {SHOP}, {SITE}; not a real shop")
    # the shop's plan: about this many visitors over the twelve weeks; orders carry attribution
    text = text.replace("planned_units = 0 ", f"planned_units = {units} ").replace(
        'attributed = "" ', 'attributed = "attributed_channel"')
    if server_ids:
        text = text.replace('id_from = "script"', 'id_from = "server"', 1)
    write_atomic(spec_path, f"# INVENTED demo scenario: {SHOP} at {SITE} is made up (armlock demo).\n" + text,
                 what="the demo's spec")
    spec = load_spec(spec_path)
    check_lock(spec, spec_path, write=True)
    story = textwrap.fill(STORY_CLEAN if clean else STORY_SERVER if server_ids else STORY_FAULTS, width=92)
    write_atomic(folder / "README.txt", README.replace("{story}", story), what="the demo's README")
    logs = synth.generate(spec, units=units, days=7 * WEEKS, seed=SEED, faults=() if clean else FAULTS,
                          server_ids=server_ids)
    paths = synth.write_logs(logs, folder / "logs", fmt="parquet")  # audits read it twice as fast as CSV
    orders = synth.generate_orders(spec, logs, days=7 * WEEKS, seed=SEED + 1, uplift=UPLIFT, duplicates=0.002)
    paths["orders"] = synth.write_orders(orders, folder / "logs", fmt="parquet")
    write_atomic(folder / "snippet" / "armlock-tag.html", render_snippet(spec, "html"), what="the demo's snippet")
    write_atomic(folder / "snippet" / "armlock.js", render_snippet(spec, "js"), what="the demo's snippet")
    history = default_history_path(spec_path)
    dates = weekly_as_of()
    report = readout = None
    with progress(len(dates), "weekly audits and readouts") as advance:
        for as_of in dates:  # the readout runs the audit's checks on the same files: one pass for both
            readout, report = run_readout_and_audit(
                spec, visits=paths["visits"], orders=paths["orders"], exposures=paths["exposures"],
                identities=paths["identities"], spend=SPEND * ((as_of - START.date()).days + 1) / (7 * WEEKS),
                as_of=as_of)
            record(history, report)
            record_readout(history, fingerprint=readout.fingerprint, as_of=readout.as_of,
                           experiment=readout.experiment, status=readout.status,
                           figures={k: f.model_dump() for k, f in readout.figures.items()})
            advance(1)
    assert report is not None and readout is not None
    write_atomic(folder / "readout.json", json.dumps(readout.to_json_dict(), indent=2, ensure_ascii=False),
                 what="the demo's readout")
    write_atomic(folder / "readout.html", render_readout_html(readout), what="the demo's readout page")
    write_atomic(folder / "readout-finance.html", render_finance(readout), what="the demo's finance page")
    write_atomic(folder / "report.json", json.dumps(report.to_json_dict(), indent=2, ensure_ascii=False),
                 what="the demo's audit report")
    write_atomic(folder / "report.html", render_html(report, load(history, spec.fingerprint),
                                                     thresholds=spec.audit.thresholds),
                 what="the demo's audit page")
    res.files = {"README": folder / "README.txt", "spec": spec_path, "history": history,
                 "visits": paths["visits"], "exposures": paths["exposures"],
                 "identities": paths["identities"], "snippet (html)": folder / "snippet" / "armlock-tag.html",
                 "snippet (js)": folder / "snippet" / "armlock.js", "report (html)": folder / "report.html",
                 "report (json)": folder / "report.json", "orders": paths["orders"],
                 "readout (html)": folder / "readout.html", "readout (json)": folder / "readout.json",
                 "finance page": folder / "readout-finance.html"}
    res.readout_headline, res.readout_status = readout.headline, readout.status
    res.true_incremental_revenue = float(orders.truth["incremental_revenue"])
    inc = readout.money.incremental_revenue
    res.readout_interval = (inc.lo, inc.hi)
    res.verdict, res.verdict_text, res.weeks = report.verdict, report.verdict_text, len(dates)
    res.findings = [f"{status_word(c.status)} {c.title}: {_headline(c.summary)}"
                    for c in report.checks if c.status in ("fail", "warn")]
    res.seconds = time.perf_counter() - t0
    return res


def _headline(summary: str) -> str:
    """The first two clauses of a check's summary: what was found, and the next finding if any."""
    from armlock.audit.report_html import first_clause

    parts = summary.split("; ")
    if len(parts) < 2:
        return first_clause(summary)
    second = first_clause(parts[1])
    return first_clause(parts[0]).rstrip(".") + "; " + second[0].lower() + second[1:]
