"""The audit as one self-contained HTML page: verdict, a section per check, inline SVG charts.

No network: styles are inline and charts are matplotlib SVG written into the page. Every value
that comes from the data goes through `html.escape` (ids may contain markup); text inside the
charts is escaped by matplotlib's SVG writer, and mathtext parsing is off so `$` is literal.
"""

from __future__ import annotations

from typing import Any

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt

from armlock.assign.spec_audit import AuditThresholds

from .explain import explanations
from armlock.shared.history import changes, row_from_report, trend_keys
from armlock.shared.report import Check
from .model import AuditReport
from armlock.shared.html import (
    ACCENT, ARM_COLOURS, BAND, CSS, ICON, INK, MUTED, NARROW, RC, STATUS_STYLE, WIDE, badge, both, breakable, dates,
    date_axis, esc, first_clause, legend, log_axis, share_band, svg, table,
)
from armlock.shared.words import NOTHING_CHANGED, STATUS_MEANING, format_figure, sentence, shown_figures, status_word

_VERDICT_WORDS = {
    "pass": "The split looks healthy.",
    "warn": "The split needs a look: at least one check warns.",
    "fail": "The split is broken: at least one check fails. Fix it before reading any results.",
}

def chart_arm_share(rows: list[dict[str, Any]], arms: list[tuple[str, float]], chart_id: str,
                    narrow: bool = False) -> str:
    """Cumulative share of each arm by day against its expected share, with a ±3 SE band."""
    days = dates([r["date"] for r in rows])
    totals = [max(sum(r["counts"].values()), 1) for r in rows]
    per_arm = 2.6 if narrow else 1.9
    fig, axes = plt.subplots(len(arms), 1, figsize=(NARROW if narrow else WIDE, per_arm * len(arms) + 0.4),
                             sharex=True, squeeze=False)
    for i, ((name, theta), ax) in enumerate(zip(arms, axes[:, 0])):
        colour = ARM_COLOURS[i % len(ARM_COLOURS)]
        share = [r["counts"].get(name, 0) / n * 100 for r, n in zip(rows, totals)]
        band = [share_band(theta, n) for n in totals]
        se = [(hi - theta) * 100 for _, hi in band]
        ax.fill_between(days, [lo * 100 for lo, _ in band], [hi * 100 for _, hi in band],
                        color=BAND, lw=0, label="expected ±3 SE")
        ax.axhline(theta * 100, color=INK, lw=1, ls=(0, (4, 3)), label=f"expected {theta * 100:g}%")
        ax.plot(days, share, color=colour, lw=2, marker="o", ms=2.5, label=f"observed: {name}")
        lo = min(min(share), theta * 100 - se[-1] * 4)
        hi = max(max(share), theta * 100 + se[-1] * 4)
        ax.set_ylim(lo - 0.05 * (hi - lo), hi + (0.05 if narrow else 0.3) * (hi - lo))  # room for the legend
        ax.set_ylabel("%", fontsize=8)  # one short unit per panel; the full label is said once, for all panels
        if narrow:
            ax.set_title(f"arm {name}", loc="right", fontsize=9)
        else:
            ax.set_title(f"arm {name}", loc="left")
        legend(ax, narrow)
    date_axis(axes[-1, 0])
    # one y label for the stacked panels: a label per panel was longer than its panel and collided
    fig.supylabel(f"share % of all units (last day: {totals[-1]:,})", fontsize=8)
    fig.tight_layout()
    return svg(fig, chart_id, "Cumulative arm share by day against the expected share")


def chart_srm_p(rows: list[dict[str, Any]], p_fixed: float, p_anytime: float, chart_id: str,
                narrow: bool = False) -> str:
    """The fixed-horizon and anytime-valid SRM p-value paths on a log scale with their thresholds."""
    days = dates([r["date"] for r in rows])
    floor = 1e-300
    fig, ax = plt.subplots(figsize=(NARROW if narrow else WIDE, 3.4 if narrow else 3.0))
    fixed = [max(float(r["p_fixed"]), floor) for r in rows]
    anytime = [max(float(r["p_anytime"]), floor) for r in rows]
    ax.plot(days, fixed, color=ARM_COLOURS[1], lw=2, marker="s", ms=2.5, label="fixed-horizon p (information only)")
    ax.plot(days, anytime, color=ARM_COLOURS[0], lw=2, ls=(0, (6, 2)), marker="^", ms=3,
            label="anytime-valid p (sequential)")
    # Only the anytime-valid p sets the status (it stays valid at every weekly look); the fixed-horizon
    # p is drawn for information, without a line of its own.
    ax.axhline(p_anytime, color=ARM_COLOURS[0], lw=1, ls="-.", label=f"fails below {p_anytime:g} (anytime-valid p)")
    log_axis(ax)
    low = min(min(fixed), min(anytime), p_anytime) / 10
    ax.set_ylim(max(low, floor), 1.5)
    ax.set_ylabel("p-value (log scale)")
    ax.legend(loc="lower left", bbox_to_anchor=(0, 1.01), fontsize=8, ncol=1 if narrow else 2)
    date_axis(ax)
    fig.tight_layout()
    return svg(fig, chart_id, "SRM p-value paths, fixed-horizon and anytime-valid, on a log scale")


def chart_leakage(rows: list[dict[str, Any]], warn_at: float, fail_at: float, chart_id: str,
                  narrow: bool = False) -> str:
    """Share of holdout units reached by the vendor, week by week (bars labelled with the units), with
    the warn and fail thresholds of the holdout leak share as lines."""
    weeks = [str(r["week"])[:10] for r in rows]
    share = [float(r.get("holdout_share") or 0) * 100 for r in rows]
    sizes = [round(r["holdout_units"] / r["holdout_share"]) for r in rows
             if r.get("holdout_share") and r.get("holdout_units")]
    fig, ax = plt.subplots(figsize=(NARROW if narrow else WIDE, 3.0 if narrow else 2.8))
    bars = ax.bar(range(len(weeks)), share, color=ARM_COLOURS[0], width=0.7, label="holdout units reached")
    for b, r in zip(bars, rows):
        if r.get("holdout_units"):
            ax.annotate(f"{int(r['holdout_units']):,}", (b.get_x() + b.get_width() / 2, b.get_height()),
                        ha="center", va="bottom", fontsize=8, color=MUTED, xytext=(0, 2),
                        textcoords="offset points")
    ax.set_xticks(range(len(weeks)), [w[5:] for w in weeks], rotation=90 if narrow else 0, fontsize=8)
    ax.set_xlabel("week starting (month-day)")
    ax.set_ylabel("% of holdout reached" + (f"\n(of {max(sizes):,} holdout units)" if sizes else ""), fontsize=8)
    if warn_at > 0:  # at 0 (the default) any reached holdout unit warns: the axis itself is the line
        ax.axhline(warn_at * 100, color=MUTED, lw=1, ls=(0, (4, 3)), label=f"warn above {warn_at * 100:g}%")
    ax.axhline(fail_at * 100, color=INK, lw=1.2, ls="-.", label=f"fail above {fail_at * 100:g}%")
    ax.set_ylim(0, max(max(share, default=0) * 1.25, fail_at * 100 * 1.3, 0.5))
    ax.grid(axis="x", visible=False)
    legend(ax, narrow)
    fig.tight_layout()
    return svg(fig, chart_id, "Holdout leakage by week: share of holdout units the vendor reached, with thresholds")


def chart_love(rows: list[dict[str, Any]], line: float, chart_id: str, narrow: bool = False) -> str:
    """Love plot: each covariate's SMD with the range chance alone gives at this size (±1.96 SE).

    The colour says what sets the status: a difference beyond chance (the Holm-adjusted test), not a
    fixed line; the dashed ±line is the size (`smd_fail`) that fails when it is also beyond chance.
    """
    sep = "\n= " if narrow else " = "
    labels = [f"{r['covariate']}" + (f"{sep}{r['level']}" if r.get("level") not in (None, "") else "") for r in rows]
    smd = [float(r["smd"]) for r in rows]
    fig, ax = plt.subplots(figsize=(NARROW if narrow else WIDE, 1.2 + (0.42 if narrow else 0.32) * max(len(rows), 2)))
    y = list(range(len(rows)))[::-1]
    flagged = [bool(r.get("beyond_chance")) for r in rows]
    chance = [r.get("chance") for r in rows]
    for yy, c in zip(y, chance):
        if c:
            ax.plot([-1.96 * c, 1.96 * c], [yy, yy], color=BAND, lw=7, solid_capstyle="butt", zorder=1)
    if any(chance):
        ax.plot([], [], color=BAND, lw=7, label="range chance alone gives (±1.96 SE)")
    for v in (-line, line):
        ax.axvline(v, color=INK, lw=1, ls=(0, (4, 3)))
    ax.axvline(0, color=MUTED, lw=0.8)
    ok = [(yy, s) for yy, s, f in zip(y, smd, flagged) if not f]
    bad = [(yy, s) for yy, s, f in zip(y, smd, flagged) if f]
    if ok:
        ax.scatter([s for _, s in ok], [yy for yy, _ in ok], marker="o", s=30, color=ARM_COLOURS[1],
                   label="within chance", zorder=3)
    if bad:
        ax.scatter([s for _, s in bad], [yy for yy, _ in bad], marker="D", s=36, color=ARM_COLOURS[0],
                   label="beyond chance (Holm)", zorder=3)
    ax.plot([], [], color=INK, lw=1, ls=(0, (4, 3)), label=f"|SMD| {line:g}: fails if also beyond chance")
    ax.set_yticks(y, labels, fontsize=8)
    reach = max([abs(s) for s in smd] + [line * 1.2] + [1.96 * c for c in chance if c])
    ax.set_xlim(-reach * 1.1, reach * 1.1)
    ax.set_xlabel("SMD (exposed − holdout)" if narrow else "standardized mean difference (exposed − holdout)")
    ax.tick_params(axis="x", labelsize=8)
    ax.grid(axis="y", visible=False)
    legend(ax, narrow, outside=True)
    fig.tight_layout()
    return svg(fig, chart_id, "Love plot: standardized mean differences against the range chance alone gives")


def chart_churn(rows: list[dict[str, Any]], warn_at: float, fail_at: float, chart_id: str,
                narrow: bool = False) -> str:
    """Share of customers seen in more than one arm, by browser family, observed against expected."""
    names = [f"{r['browser']}\n({int(r['customers']):,} customers)" if r.get("customers") is not None
             else str(r["browser"]) for r in rows]
    obs = [float(r.get("share") or 0) * 100 for r in rows]
    exp = [float(r.get("expected_share") or 0) * 100 for r in rows]
    fig, ax = plt.subplots(figsize=(NARROW if narrow else WIDE, 0.9 + 0.55 * max(len(rows), 2)))
    y = list(range(len(rows)))[::-1]
    h = 0.38
    ax.barh([v + h / 2 for v in y], obs, height=h, color=ARM_COLOURS[0], label="observed")
    ax.barh([v - h / 2 for v in y], exp, height=h, color=BAND, edgecolor=MUTED, hatch="///", lw=0.6,
            label="expected if extra ids\nwere re-randomized")
    ax.axvline(warn_at * 100, color=INK, lw=1, ls=":", label=f"warns above {warn_at * 100:g}%")
    ax.axvline(fail_at * 100, color=INK, lw=1, ls=(0, (4, 3)), label=f"fails above {fail_at * 100:g}%")
    ax.set_yticks(y, names, fontsize=8)
    ax.set_xlabel("% of the browser's logged-in customers\nseen in more than one arm" if narrow
                  else "% of the browser's logged-in customers seen in more than one arm", fontsize=8)
    ax.tick_params(axis="x", labelsize=8)
    ax.grid(axis="y", visible=False)
    legend(ax, narrow, outside=True)
    fig.tight_layout()
    return svg(fig, chart_id, "Identity churn by browser family, observed against expected")


_STATUS_MARK = {"pass": ("o", "#17603a"), "warn": ("^", "#9a6200"), "fail": ("X", "#9e1f24"), "skipped": ("s", "#777")}


def chart_history(runs: list[dict[str, Any]], chart_id: str, narrow: bool = False) -> str:
    """The verdict of each run as shaped marks, and the headline figures that moved, over time."""
    days = dates([r["as_of"] for r in runs])
    keys = trend_keys(runs)
    fig, axes = plt.subplots(1 + len(keys), 1, figsize=(NARROW if narrow else WIDE, 1.4 + 1.7 * len(keys)), sharex=True,
                             squeeze=False, gridspec_kw={"height_ratios": [0.6] + [1] * len(keys)})
    ax = axes[0, 0]
    for status, (marker, colour) in _STATUS_MARK.items():
        hits = [d for d, r in zip(days, runs) if r["verdict"] == status]
        if hits:
            ax.scatter(hits, [0] * len(hits), marker=marker, s=70, color=colour,
                       label=STATUS_STYLE[status][0], zorder=3)
    ax.set_yticks([])
    ax.set_title("verdict of each run", loc="left", fontsize=9)
    # the legend sits above the row of marks, right-aligned: never among the data
    ax.legend(loc="lower right", bbox_to_anchor=(1.0, 1.0), fontsize=8, ncol=4, borderaxespad=0.2,
              handletextpad=0.3, columnspacing=0.8)
    for (key, ax) in zip(keys, axes[1:, 0]):
        unit = runs[-1]["figures"][key].get("unit")
        pts = [(d, r["figures"].get(key, {}).get("value")) for d, r in zip(days, runs)]
        pts = [(d, float(v)) for d, v in pts if isinstance(v, (int, float)) and not isinstance(v, bool)]
        scale = 100 if unit == "share" else 1
        ax.plot([d for d, _ in pts], [max(v * scale, 1e-300) if unit == "p" else v * scale for _, v in pts],
                color=ACCENT, lw=2, marker="o", ms=3)
        vals = [v for _, v in pts if v > 0]
        if unit == "p" and vals and max(vals) / min(vals) >= 10:
            log_axis(ax)
        ax.set_title(runs[-1]["figures"][key].get("label", key) + (" (%)" if unit == "share" else ""),
                     loc="left", fontsize=9)
    if len(days) <= 13:
        axes[-1, 0].set_xticks(days, [d.strftime("%m-%d") for d in days], fontsize=8, rotation=90 if narrow else 0)
    else:
        date_axis(axes[-1, 0])
    fig.tight_layout()
    return svg(fig, chart_id, "History: verdict and headline figures of each recorded run")


# --- page ----------------------------------------------------------------------------------------

def _figures(check: Check) -> str:
    if not check.figures:
        return ""
    items = "".join(
        f'<div{" class=wide" if f.unit == "text" or f.numerator is not None else ""}><dt>{esc(f.label)}</dt>'
        f"<dd>{breakable(format_figure(f))}</dd></div>"
        for _, f in shown_figures(check.figures))
    return f'<dl class="figures">{items}</dl>'


def _charts_for(check: Check, report: AuditReport, th: AuditThresholds) -> list[str]:
    s, cid = check.series, check.id
    out = []
    total_w = sum(a.weight for a in report.arms) or 1
    if cid == "srm" and s.get("daily"):
        arms = [(a.name, a.weight / total_w) for a in report.arms]
        out.append(both(chart_arm_share, s["daily"], arms, "arm-share"))
        if all("p_fixed" in r and "p_anytime" in r for r in s["daily"]):
            out.append(both(chart_srm_p, s["daily"], th.srm_p, th.srm_anytime_p, "srm-p"))
    elif cid == "leakage" and s.get("weekly"):
        out.append(both(chart_leakage, s["weekly"], th.leak_warn, th.leak_fail, "leakage"))
    elif cid == "balance" and s.get("smd"):
        out.append(both(chart_love, s["smd"], th.smd_fail, "love"))
    elif cid == "churn" and s.get("by_browser"):
        out.append(both(chart_churn, s["by_browser"], th.churn_warn, th.churn_fail, "churn"))
    return out


def _section(check: Check, report: AuditReport, th: AuditThresholds) -> str:
    charts = "".join(f"<figure>{svg}</figure>" for svg in _charts_for(check, report, th))
    reason = f'<p class="reason">{esc(status_word("skipped"))}: {esc(check.reason)}</p>' if check.reason else ""
    tables = "".join(table(t) for t in check.tables)
    expl = explanations(check)
    tables += (f'<ul class="explain">{"".join(f"<li>{esc(e)}</li>" for e in expl)}</ul>' if expl else "")
    return (f'<section class="check s-{esc(check.status)}" id="check-{esc(check.id)}" data-check="{esc(check.id)}">'
            f'<header><h2>{esc(check.title)}</h2>{badge(check.status)}</header>'
            f'<p class="summary">{esc(sentence(check.summary))}</p>{reason}{_figures(check)}{charts}{tables}</section>')


def _history_section(report: AuditReport, history: list[dict[str, Any]] | None, th: AuditThresholds) -> str:
    runs = [r for r in (history or []) if r.get("as_of") != report.as_of]
    runs = sorted(runs + [row_from_report(report)], key=lambda r: r["as_of"])
    earlier = [r for r in runs if r["as_of"] < report.as_of]
    if not earlier:
        body = '<p class="summary">No earlier run is recorded for this spec yet. Record runs with ' \
               '<code>armlock audit --record</code> to see the week-by-week trend here.</p>'
        return f'<section class="check" id="history" data-check="history"><header><h2>Change since the last run</h2></header>{body}</section>'
    prev = earlier[-1]
    said = changes(prev, report, th)
    items = "".join(f"<li>{esc(sentence(s))}.</li>" for s in said) or f"<li>{esc(NOTHING_CHANGED)}</li>"
    chart = f"<figure>{both(chart_history, runs, 'history')}</figure>" if len(runs) >= 2 else ""
    rows = "".join(f"<tr><td>{esc(r['as_of'])}</td><td>{badge(r['verdict'])}</td></tr>" for r in runs[::-1][:12])
    table = (f'<div class="tablewrap"><table><caption>Recorded runs (newest first)</caption>'
             f"<thead><tr><th scope=\"col\">as of</th><th scope=\"col\">verdict</th></tr></thead><tbody>{rows}</tbody></table></div>")
    return (f'<section class="check" id="history" data-check="history"><header><h2>Change since the last run</h2></header>'
            f'<p class="summary">Compared with the run as of {esc(prev["as_of"])} ({len(runs)} runs recorded):</p>'
            f"<ul class=\"changes\">{items}</ul>{chart}{table}</section>")


def render_html(report: AuditReport, history: list[dict[str, Any]] | None = None, *,
                thresholds: AuditThresholds | None = None) -> str:
    """The whole report page as a string; `history` is `audit.history.load(...)`'s rows, if any.

    `thresholds` (the spec's `[audit.thresholds]`) places the threshold lines of the charts;
    without it the defaults are drawn.
    """
    th = thresholds or AuditThresholds()
    word, fg, bg = STATUS_STYLE[report.verdict]
    bad = [c for c in report.checks if c.status in ("fail", "warn")]
    lead = _VERDICT_WORDS[report.verdict]
    with matplotlib.rc_context(RC):  # type: ignore[arg-type]
        sections = "".join(_section(c, report, th) for c in report.checks)
        hist = _history_section(report, history, th)
    nav = "".join(f'<li><a href="#check-{esc(c.id)}"><span>{esc(c.title)}</span>{badge(c.status)}</a></li>'
                  for c in report.checks)
    worst_list = "".join(f'<li><a href="#check-{esc(c.id)}"><strong>{esc(c.title)}</strong></a>: '
                         f"{esc(first_clause(c.summary))}</li>" for c in bad)
    notes = "".join(f"<li>{esc(n)}</li>" for n in report.input_notes)
    arms = ", ".join(f"{esc(a.name)} {a.weight / 100:g}% ({esc(a.role)})" for a in report.arms)
    legend = " · ".join(f"{badge(k)} {esc(v)}" for k, v in STATUS_MEANING.items())
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<meta http-equiv="Content-Security-Policy" content="default-src 'none'; style-src 'unsafe-inline'; img-src data:">
<title>Split health: {esc(report.experiment)} as of {esc(report.as_of)}</title>
<style>{CSS}</style></head>
<body><main>
<div class="top"><h1>Split health of {esc(report.experiment)}</h1>
<p>Data as of {esc(report.as_of)} · arms: {arms} · spec fingerprint <code>{esc(report.fingerprint)}</code></p></div>
<div class="verdict" data-verdict="{esc(report.verdict)}" style="color:{fg};background:{bg}" role="status">
<svg class="icon" viewBox="0 0 16 16" aria-hidden="true" fill="{fg}">{ICON[report.verdict]}</svg>
<div><span class="word">{esc(word)}</span><p>{esc(report.verdict_text or lead)}</p>
{f'<ul>{worst_list}</ul>' if worst_list else ''}</div></div>
{f'<div class="notes"><strong>About the input:</strong><ul>{notes}</ul></div>' if notes else ''}
<nav aria-label="Checks"><ol>{nav}<li><a href="#history"><span>Change since the last run</span></a></li></ol></nav>
{sections}{hist}
<footer><p class="legend">{legend}</p>Written by armlock {esc(report.armlock_version)} at {esc(report.generated_at)} · schema {esc(report.schema_)}.
Visitor ids and cookies can be personal data: share this report only as your consent records and local privacy law
allow, and ask the site's own counsel when unsure.</footer>
</main></body></html>
"""
