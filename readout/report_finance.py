"""The one-page summary for a finance lead: the decision, net contribution after media cost, the design; prints on one A4.

Self-contained HTML (no script, no network, no chart), every value escaped. The money is quoted on
the interval the decision used (anytime before the planned final look, fixed at it).
"""

from __future__ import annotations


from armlock.shared.html import (
    esc,
)
from armlock.shared.words import STATUS_WORD, page_money, percent_whole, ratio_text

from .model import Interval, ReadoutReport
from .render import decision_word


_COLOURS = {"pays": ("#17603a", "#e3f2e8"), "does_not_pay": ("#9e1f24", "#fbe4e3"),
            "not_yet_known": ("#3d4a50", "#eceff1")}

CSS = """
* { box-sizing: border-box; }
body { margin: 0; font: 15px/1.45 system-ui, -apple-system, "Segoe UI", Roboto, "DejaVu Sans", sans-serif;
  color: #1d2427; background: #fff; }
main { max-width: 48rem; margin: 0 auto; padding: 1rem; }
h1 { font-size: 1.35rem; margin: 0 0 .2rem; overflow-wrap: anywhere; }
h2 { font-size: 1rem; margin: 1rem 0 .3rem; border-bottom: 1px solid #c9d1d4; }
.sub { color: #4f5a5e; margin: 0 0 .6rem; overflow-wrap: anywhere; }
.answer { border: 3px solid currentColor; border-radius: 8px; padding: .7rem .9rem; margin: .4rem 0 .6rem;
  -webkit-print-color-adjust: exact; print-color-adjust: exact; }
.answer .word { font-size: 1.5rem; font-weight: 800; display: block; }
.answer p { margin: .25rem 0 0; color: #1d2427; overflow-wrap: anywhere; }
.kpis { display: grid; grid-template-columns: repeat(auto-fit, minmax(13rem, 1fr)); gap: .4rem; margin: 0; }
.kpis div { background: #f3f5f6; border-radius: 6px; padding: .35rem .6rem; }
.kpis dt { font-size: .8rem; color: #4f5a5e; }
.kpis dd { margin: 0; font-size: 1.1rem; font-weight: 700; font-variant-numeric: tabular-nums; }
.kpis dd.range { font-size: .8rem; font-weight: 400; color: #4f5a5e; }
table { border-collapse: collapse; width: 100%; font-size: .9rem; }
th, td { text-align: left; padding: .15rem .4rem; border-bottom: 1px solid #e1e6e8; vertical-align: top;
  overflow-wrap: anywhere; }
th { width: 38%; color: #4f5a5e; font-weight: 600; }
ul { margin: .2rem 0; padding-left: 1.2rem; }
footer { margin-top: .8rem; font-size: .75rem; color: #4f5a5e; }
@page { size: A4; margin: 12mm; }
@media print {
  body { font-size: 10pt; }
  main { max-width: none; padding: 0; }
  .kpis { grid-template-columns: repeat(3, 1fr); }
  h2 { break-after: avoid; }
  section, .answer, .kpis div { break-inside: avoid; }
}
"""


def _span(iv: Interval | None, f: object, anytime: bool) -> str:
    if iv is None:
        return ""
    lo, hi = (iv.anytime_lo, iv.anytime_hi) if anytime else (iv.lo, iv.hi)
    if lo is None or hi is None:
        return ""
    return f"{f(lo)} to {f(hi)}"  # type: ignore[operator]


def render_finance(r: ReadoutReport) -> str:
    """The finance page as a string."""
    d, m, cur = r.decision, r.money, r.money.currency
    anytime = d.basis == "anytime"
    fg, bg = _COLOURS["not_yet_known" if d.withheld else d.answer]
    which = f"{d.level}% {'anytime' if anytime else 'fixed-horizon'} interval"
    kpis = [
        ("net contribution after media cost", page_money(m.net_contribution.value if m.net_contribution else None, cur),
         _span(m.net_contribution, lambda v: page_money(v, cur), anytime)),
        ("the same a year, at the current spend",
         page_money(m.net_contribution_per_year.value if m.net_contribution_per_year else None, cur),
         _span(m.net_contribution_per_year, lambda v: page_money(v, cur), anytime)),
        ("ROI (incremental profit − spend) / spend", percent_whole(m.roi.value if m.roi else None),
         _span(m.roi, percent_whole, anytime)),
        (f"iROAS against break-even {ratio_text(d.breakeven_iroas)}", ratio_text(m.iroas.value if m.iroas else None),
         _span(m.iroas, ratio_text, anytime)),
        ("incremental revenue", page_money(m.incremental_revenue.value, cur),
         _span(m.incremental_revenue, lambda v: page_money(v, cur), anytime)),
        ("media spend", page_money(m.spend, cur), ""),
    ]
    cells = "".join(f"<div><dt>{esc(k)}</dt><dd>{esc(v)}</dd>" + (f'<dd class="range">{esc(which)}: {esc(rng)}</dd>'
                                                                   if rng else "") + "</div>" for k, v, rng in kpis)
    ds = r.design
    design = ""
    if ds is not None:
        plan = f"{ds.units:,} of {ds.planned_units:,} planned" if ds.planned_units else f"{ds.units:,} (no plan set)"
        arms = ", ".join(f"{n} ({role})" for n, role in ds.arms.items())
        rows = [("test dates", f"{ds.start} to {ds.as_of} ({ds.days} days)"
                 + (f"; planned end {ds.planned_end}" if ds.planned_end else "")),
                ("held out from the channel", f"{ds.holdout_share:.0%} of visitors, at random on first visit"),
                ("arms", arms), ("visitors in the test", plan),
                ("this look", d.stage[:1].upper() + d.stage[1:]),
                ("audit gate", f"{STATUS_WORD[r.status]}" + ("" if r.trustworthy else ": not trustworthy")),
                ("attribution credited", page_money(m.attributed_revenue, cur)
                 + (f" (ROAS {ratio_text(m.attributed_roas)})" if m.attributed_roas is not None else ""))]
        design = "".join(f"<tr><th scope=\"row\">{esc(k)}</th><td>{esc(v)}</td></tr>" for k, v in rows)
    gaps = "".join(f"<li>{esc(x)}</li>" for x in r.not_covered)
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<meta http-equiv="Content-Security-Policy" content="default-src 'none'; style-src 'unsafe-inline'">
<title>Did it pay? {esc(r.experiment)} as of {esc(r.as_of)}</title>
<style>{CSS}</style></head>
<body><main>
<h1>Did the channel pay? {esc(r.experiment)}</h1>
<p class="sub">Holdout test read out as of {esc(r.as_of)} · money in {esc(cur)} · margin {m.margin:.0%}</p>
<div class="answer" id="decision" data-answer="{esc(d.answer)}" data-basis="{esc(d.basis)}"
 style="color:{fg};background:{bg}" role="status"><span class="word">{esc(decision_word(r))}</span>
<p>{esc(d.reason)}</p><p><strong>What to do:</strong> {esc(d.action)}</p></div>
<dl class="kpis">{cells}</dl>
<section><h2>How the test was run</h2><table>{design}</table>
<p class="sub">{esc(r.estimand)}</p></section>
<section><h2>What this test does not cover</h2><ul>{gaps}</ul></section>
<footer>armlock {esc(r.armlock_version)}, {esc(r.generated_at)}, spec {esc(r.fingerprint)}. Read weekly, only the
anytime interval is valid; the fixed interval is read once, at the planned final look. Share this page only as
your consent records and local privacy law allow.</footer>
</main></body></html>
"""
