"""The words and number formats every human-readable output uses (text, markdown, HTML, history).

JSON keeps the machine values (`pass`/`warn`/`fail`/`skipped`, shares as fractions); a person
always reads the same word for a state and the same form for a number, whichever output it is.
"""

from __future__ import annotations

import math
from typing import Any

from .report import Figure

# One word per state, in every human output and in the exit-code documentation.
STATUS_WORD: dict[str, str] = {"pass": "PASS", "warn": "WARN", "fail": "FAIL", "skipped": "NOT RUN"}
# What each word means, for legends and documentation.
STATUS_MEANING: dict[str, str] = {
    "pass": "the check ran and found nothing to act on",
    "warn": "the check found something to look at, or could not judge (its summary says which)",
    "fail": "the split is broken: do not read results until it is fixed",
    "skipped": "the check did not run (its input was not given); it never counts as a pass: the verdict "
               "names it, and is at least WARN when it is SRM, integrity or leakage",
}
# The plan's recommendation, one word per state (the plan's own meaning of pass, warn, fail, skipped):
# upper case in text and markdown, as a title on the HTML page.
PLAN_WORD: dict[str, str] = {"pass": "RECOMMENDED", "warn": "TOO LONG", "fail": "OUT OF REACH", "skipped": "NO TARGET"}
# The readout's answer to "does the channel pay?" (JSON keeps the machine value on the left).
ANSWER_WORD: dict[str, str] = {"pays": "PAYS", "does_not_pay": "DOES NOT PAY", "not_yet_known": "NOT YET KNOWN"}
NOTHING_CHANGED = "No status changed, no threshold was crossed and no rate or p-value moved much."
SHARE_DECIMALS = 2  # shares are written as percent with this many decimals in every human output


def status_word(status: str) -> str:
    """The word a person reads for a status: PASS, WARN, FAIL or NOT RUN."""
    return STATUS_WORD.get(status, status.upper())


def answer_phrase(answer: Any) -> str:
    """The readout's answer inside a sentence or table: 'pays', 'does not pay', 'not yet known'."""
    return ANSWER_WORD[answer].lower() if answer in ANSWER_WORD else str(answer)


def format_share(value: float) -> str:
    """A share (a fraction in JSON) as percent with fixed decimals: 0.0213 -> '2.13%'."""
    pct = value * 100
    if 0 < abs(pct) < 10 ** -SHARE_DECIMALS:
        return f"<{10 ** -SHARE_DECIMALS:.{SHARE_DECIMALS}f}%" if pct > 0 else f">-{10 ** -SHARE_DECIMALS:.{SHARE_DECIMALS}f}%"
    return f"{pct:.{SHARE_DECIMALS}f}%"


def format_p(value: float | None) -> str:
    """A p-value in two significant digits: 0.41, 0.0087, 8.1e-06; '-' when there is none."""
    return "-" if value is None else f"{value:.2g}"


def format_value(value: Any, unit: str = "number") -> str:
    """A figure or table cell as a person reads it, by its unit (see `audit.model.Unit`)."""
    if value is None:
        return "-"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if unit == "date" and isinstance(value, str) and len(value) > 10 and value[10] == "T":
        return value[:16].replace("T", " ") + (" UTC" if value.endswith(("Z", "+00:00")) else "")
    if not isinstance(value, (int, float)):
        return str(value)
    if isinstance(value, float) and math.isnan(value):
        return "-"
    if isinstance(value, float) and math.isinf(value):
        return "inf" if value > 0 else "-inf"
    if unit == "share":
        return format_share(value)
    if unit == "p":
        return format_p(value)
    if unit == "count" or isinstance(value, int):
        return f"{value:,.0f}"
    if unit == "ratio":
        return f"{value:.3f}"
    if value != 0 and (abs(value) < 0.001 or abs(value) >= 1e6):
        return f"{value:.3g}"
    return f"{value:,.4f}".rstrip("0").rstrip(".") or "0"


def format_figure(fig: Figure) -> str:
    """A figure's value; a share with known counts also shows them: '2.13% (170 of 7,995)'."""
    text = format_value(fig.value, fig.unit)
    if fig.unit == "share" and fig.numerator is not None and fig.denominator is not None:
        text += f" ({fig.numerator:,} of {fig.denominator:,})"
    return text


def shown_figures(figures: dict[str, Figure]) -> list[tuple[str, Figure]]:
    """The figures a person reads, in order, without a count that its share already shows.

    A count figure whose label equals a share figure's label and whose value is that share's
    numerator is merged into the share ('5.00% (3,965 of 79,247)'); JSON keeps both keys.
    """
    merged = {(f.label, f.numerator) for f in figures.values() if f.unit == "share" and f.numerator is not None}
    return [(k, f) for k, f in figures.items() if not (f.unit == "count" and (f.label, f.value) in merged)]


def column_unit(name: str) -> str:
    """How a table column is written, from its name: shares and rates as percent, p-values as p."""
    low = name.lower().strip()
    if low in ("p", "p (holm)") or low.startswith("p ") or low.endswith(" p") or "p-value" in low:
        return "p"
    if "mean" in low:  # "holdout mean/share": a mean or a share, by row
        return "number"
    if low.endswith(("share", "rate")) or low.startswith(("share of", "rate of")):
        return "share"
    return "number"


def sentence(text: str) -> str:
    """Text with its first letter capitalised (summaries and changes are read as sentences)."""
    return text[:1].upper() + text[1:]


# --- amounts and percents inside sentences and small tables (plan and readout) ---------------------

def percent_short(share: float) -> str:
    """A share as a short percent, up to four significant digits: 0.05 -> '5%', 0.125 -> '12.5%'."""
    return f"{share * 100:.4g}%"


def amount(x: float) -> str:
    """An amount with thousands separators, to a sensible precision: 12,345; 7.50; 0.0123."""
    a = abs(x)
    if a >= 100:
        return f"{x:,.0f}"
    if a >= 1:
        return f"{x:,.2f}"
    return f"{x:.3g}"


def sig3(x: float) -> str:
    """Three significant digits, trailing zeros kept (0.660, 1.32, 13.7), thousands with separators."""
    if abs(x) >= 1000:
        return f"{x:,.0f}"
    return f"{x:#.3g}".rstrip(".")


def fixed(v: float | None, digits: int = 2, missing: str = "-") -> str:
    """A number with a fixed count of decimals and thousands separators; `missing` when there is none."""
    if v is None or not math.isfinite(v):
        return missing
    return f"{v:,.{digits}f}"


def percent_fixed(v: float | None, digits: int = 1) -> str:
    """A share as percent with a fixed count of decimals: 0.0213 -> '2.1%'; '-' when there is none."""
    return "-" if v is None or not math.isfinite(v) else f"{v * 100:.{digits}f}%"


MINUS = "\u2212"  # the typographic minus the pages write amounts with (text outputs keep the hyphen)


def money_text(v: float | None, currency: str, digits: int = 0, *, minus: str = "-") -> str:
    """An amount with its currency: 'USD 35,203', '-USD 1,735' (or with `minus`); 'n/a' when there is none."""
    if v is None or not math.isfinite(v):
        return "n/a"
    return f"{minus if v < 0 else ''}{currency} {abs(v):,.{digits}f}"


def page_money(v: float | None, currency: str, digits: int = 0) -> str:
    """`money_text` as the HTML pages write it, with the typographic minus: '−USD 1,735'."""
    return money_text(v, currency, digits, minus=MINUS)


def percent_whole(v: float | None) -> str:
    """A ratio as a whole percent: -0.41 -> '-41%'; 'n/a' when there is none (ROI in headlines and pages)."""
    return "n/a" if v is None or not math.isfinite(v) else f"{v * 100:.0f}%"


def ratio_text(v: float | None) -> str:
    """A ratio to two decimals: 4.99; 'n/a' when there is none (iROAS, ROAS on the pages)."""
    return "n/a" if v is None or not math.isfinite(v) else f"{v:.2f}"
