"""The page for all tests as one static, self-contained HTML file (the audit page's kit: colours, badges, escaping)."""

from __future__ import annotations

from typing import Any

from armlock.shared.html import (
    CSS, STATUS_STYLE, badge, esc, first_clause,
)
from armlock.shared.words import format_value, sentence, status_word

# Statuses the page adds to the audit's: no audit recorded yet, or a spec/history it cannot read.
_OTHER = {"none": "NO AUDIT YET", "unreadable": "CANNOT READ"}
ORDER = {"fail": 0, "unreadable": 1, "warn": 2, "none": 3, "skipped": 4, "pass": 5}

EXTRA_CSS = """
.tests {{ list-style: none; padding: 0; margin: 0 0 1rem; }}
.tests li {{ margin: 0 0 .35rem; }}
.tests a {{ display: flex; flex-wrap: wrap; justify-content: space-between; gap: .2rem .6rem; align-items: center;
  background: #fff; border: 1px solid #d8d2c8; border-radius: 8px; padding: .45rem .6rem; color: inherit; text-decoration: none; }}
.tests a:hover, .tests a:focus {{ outline: 2px solid #0c5c66; outline-offset: 1px; }}
.tests strong {{ overflow-wrap: anywhere; min-width: 0; }}
.tests .why {{ flex-basis: 100%; color: #4f5a5e; font-size: .9rem; overflow-wrap: anywhere; }}
.meta {{ color: #4f5a5e; margin: .3rem 0; overflow-wrap: anywhere; }}
.check h2 {{ min-width: 0; }}
.bar {{ height: .5rem; background: #ece6dc; border-radius: 4px; overflow: hidden; margin-top: .25rem; }}
.bar span {{ display: block; height: 100%; background: #0c5c66; }}
.links a {{ color: #0c5c66; overflow-wrap: anywhere; }}
.check ul {{ padding-left: 1.2rem; margin: .3rem 0; }}
.check li, .verdict li {{ overflow-wrap: anywhere; }}
h3 {{ font-size: 1rem; margin: .8rem 0 .2rem; }}
"""


def status_badge(status: str) -> str:
    """The audit page's badge, or a grey one for a test with no audit yet or an unreadable one."""
    if status in STATUS_STYLE:
        return badge(status)
    _, fg, bg = STATUS_STYLE["skipped"]
    return (f'<span class="badge" data-status="{esc(status)}" style="color:{fg};background:{bg}">'
            f'{esc(_OTHER.get(status, status.upper()))}</span>')


def _word(status: str) -> str:
    return _OTHER.get(status) or status_word(status)


def _bar(value: float | None, planned: float | None, label: str) -> str:
    if value is None or not planned:
        return ""
    share = max(0.0, min(1.0, value / planned))
    return (f'<div class="bar" role="img" aria-label="{esc(label)}">'
            f'<span style="width:{share * 100:.1f}%"></span></div>')


def _progress(t: dict[str, Any]) -> str:
    weeks = t.get("weeks")
    pw = t.get("planned_weeks")
    wtext = (f"{weeks:g} of {pw:g} planned" if pw else f"{weeks:g} (no planned end in the spec)") if weeks is not None else "-"
    if t.get("reached_end"):
        wtext += " · reached its planned end"
    units, pu = t.get("units"), t.get("planned_units")
    utext = "-" if units is None else (f"{format_value(units, 'count')} of {format_value(pu, 'count')} planned"
                                       if pu else f"{format_value(units, 'count')} (no planned size in the spec)")
    ro = t.get("readout")
    if ro:
        decision = ro.get("decision_text")
        rtext = (f"{decision} ({ro.get('basis')} interval)" if decision and ro.get("basis")
                 else decision or f"gate {status_word(ro['status'])}, no decision recorded")
        rtext += f" · as of {ro['as_of']}"
    else:
        rtext = "no readout recorded"
    return (f'<dl class="figures"><div class="wide"><dt>weeks since the start</dt><dd>{esc(wtext)}</dd>'
            f'{_bar(weeks, pw, f"{weeks} of {pw} weeks")}</div>'
            f'<div class="wide"><dt>units in the test</dt><dd>{esc(utext)}</dd>'
            f'{_bar(units, pu, f"{units} of {pu} units")}</div>'
            f'<div class="wide"><dt>latest readout decision</dt><dd>{esc(rtext)}</dd></div></dl>')


def _card(i: int, t: dict[str, Any]) -> str:
    status = t.get("status", "none")
    arms = ", ".join(f"{esc(a['name'])} {a['weight'] / 100:g}%" for a in t.get("arms", []))
    meta = [f"spec <code>{esc(t.get('spec'))}</code>"]
    if arms:
        meta.append(f"arms: {arms}")
    if t.get("as_of"):
        meta.append(f"audited as of {esc(t['as_of'])}")
    if t.get("start"):
        meta.append(f"{esc(t['start'])} to {esc(t.get('end') or 'open end')}")
    bad = [c for c in t.get("checks", []) if c.get("status") in ("fail", "warn")]
    failed = ("<h3>What is not PASS</h3><ul>" + "".join(
        f"<li>{status_badge(c['status'])} {esc(c['title'])}</li>" for c in bad) + "</ul>") if bad else ""
    changes = ("<h3>Since the run before</h3><ul class=\"changes\">"
               + "".join(f"<li>{esc(sentence(s))}</li>" for s in t["changes"]) + "</ul>") if t.get("changes") else ""
    links = ("<h3>Reports</h3><ul class=\"links\">" + "".join(
        f'<li><a href="{esc(r["href"])}">{esc(r["name"])}</a></li>' for r in t["reports"]) + "</ul>") if t.get("reports") else ""
    notes = ("<ul class=\"notes\">" + "".join(f"<li>{esc(n)}</li>" for n in t["notes"]) + "</ul>") if t.get("notes") else ""
    prog = _progress(t) if "weeks" in t else ""
    return (f'<section class="check s-{esc(status if status in STATUS_STYLE else "skipped")}" id="test-{i}" '
            f'data-status="{esc(status)}"><header><h2>{esc(t["experiment"])}</h2>{status_badge(status)}</header>'
            f'<p class="meta">{" · ".join(meta)}</p>{prog}{failed}{changes}{links}{notes}</section>')


def render_overview(doc: dict[str, Any]) -> str:
    """The page for all tests, from `build_overview`'s document: worst first, then by name."""
    order = sorted(range(len(doc["tests"])), key=lambda i: (ORDER.get(doc["tests"][i].get("status"), 9),
                                                          doc["tests"][i]["experiment"]))
    tests = [doc["tests"][i] for i in order]
    counts: dict[str, int] = {}
    for t in tests:
        counts[t.get("status", "none")] = counts.get(t.get("status", "none"), 0) + 1
    tally = ", ".join(f"{n} {_word(s)}" for s, n in sorted(counts.items(), key=lambda x: ORDER.get(x[0], 9)))
    nav = "".join(
        f'<li><a href="#test-{i}"><strong>{esc(t["experiment"])}</strong>{status_badge(t.get("status", "none"))}'
        f'<span class="why">{esc(_why(t))}</span></a></li>' for i, t in enumerate(tests))
    cards = "".join(_card(i, t) for i, t in enumerate(tests))
    notes = "".join(f"<li>{esc(n)}</li>" for n in doc.get("notes", []))
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<meta http-equiv="Content-Security-Policy" content="default-src 'none'; style-src 'unsafe-inline'; img-src data:">
<title>All tests: {esc(doc['folder'])}</title>
<style>{CSS}{EXTRA_CSS.format()}</style></head>
<body><main>
<div class="top"><h1>All tests in {esc(doc['folder'])}</h1>
<p>{len(tests)} test(s): {esc(tally) or 'none'} · written {esc(doc['generated_at'])}</p></div>
{f'<div class="verdict" data-verdict="fail" style="color:{STATUS_STYLE["fail"][1]};background:{STATUS_STYLE["fail"][2]}" role="status"><div><span class="word">Look at the folder first</span><ul>{notes}</ul></div></div>' if notes else ''}
<nav aria-label="Tests"><ol class="tests">{nav}</ol></nav>
{cards}
<footer>Written by armlock {esc(doc['armlock_version'])} · schema {esc(doc['schema'])} · a static page: publish it
wherever the team shares files. It holds aggregate figures only; visitor ids and cookies can be personal data, so
share the reports it links to as your consent records and local privacy law allow, and ask the site's own counsel
when unsure.</footer>
</main></body></html>
"""


def _why(t: dict[str, Any]) -> str:
    """The one line under a test's name in the list: what failed, else where it stands."""
    if t.get("status") in ("fail", "warn"):
        bad = [c["title"] for c in t.get("checks", []) if c.get("status") == t["status"]]
        return f"{'failing' if t['status'] == 'fail' else 'warning'}: {', '.join(bad)}"
    if t.get("notes"):
        return first_clause(t["notes"][0])
    if t.get("as_of"):
        return f"as of {t['as_of']}"
    return ""
