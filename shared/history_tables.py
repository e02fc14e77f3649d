"""The history as terminal tables: recorded audits week by week, and recorded readouts with their decisions."""

from __future__ import annotations

import textwrap
from typing import Any

from .history import not_passing, trend_keys
from .words import answer_phrase, format_value, status_word

_UNIT_ORDER = {"share": 0, "p": 1, "ratio": 2, "number": 3, "count": 4}
MAX_COLUMNS = 4
HEADER_WIDTH = 18  # a long figure label wraps onto several header lines; it is never cut


def trend_columns(runs: list[dict[str, Any]], limit: int = MAX_COLUMNS) -> list[str]:
    """The figure keys worth a column: each check's headline figure, problems first."""
    keys = trend_keys(runs, limit)
    latest = runs[-1]["figures"]
    rest = [k for k, f in latest.items() if f.get("unit") in _UNIT_ORDER and k not in keys]
    rest.sort(key=lambda k: (_UNIT_ORDER[latest[k]["unit"]], list(latest).index(k)))
    return (keys + rest)[:limit]


def _header_lines(label: str) -> list[str]:
    return textwrap.wrap(label, width=max(HEADER_WIDTH, *(len(w) for w in label.split()))) or [""]


def trend_table(runs: list[dict[str, Any]]) -> str:
    """A plain terminal table: one row per as-of date, the verdict, the headline figures and what
    failed (the failing checks' ids, else the warning ones).

    Headers are the figures' full labels, wrapped onto as many lines as they need.
    """
    keys = trend_columns(runs)
    latest = runs[-1]["figures"]
    heads = [["as of"], ["verdict"]] + [_header_lines(latest[k]["label"]) for k in keys] + [["failing checks"]]
    rows = [[r["as_of"], status_word(r["verdict"])]
            + [format_value(r["figures"].get(k, {}).get("value"), latest[k]["unit"])
               if k in r["figures"] else "-" for k in keys] + [not_passing(r)] for r in runs]
    depth = max(len(h) for h in heads)
    heads = [[""] * (depth - len(h)) + h for h in heads]  # labels sit on the rule, like the data
    width = [max(len(c) for c in [*h, *(r[i] for r in rows)]) for i, h in enumerate(heads)]

    def line(cells: list[str]) -> str:
        last = len(cells) - 1  # text columns (as of, verdict, failing checks) left, numbers right
        return "  ".join(c.ljust(w) if i < 2 or i == last else c.rjust(w)
                         for i, (c, w) in enumerate(zip(cells, width))).rstrip()

    head_lines = [line([h[j] for h in heads]) for j in range(depth)]
    return "\n".join(head_lines + [line(["-" * w for w in width])] + [line(r) for r in rows])


def readout_table(readouts: list[dict[str, Any]]) -> str:
    """One row per recorded readout: the gate and the checks that failed, the decision and the
    interval it used, incremental revenue and iROAS with their anytime intervals; the fixed
    interval and p only in the row of the planned final look (the one look where they are valid)."""
    def fig(r: dict[str, Any], key: str) -> Any:
        return r["figures"].get(key, {}).get("value")

    def span(r: dict[str, Any], key: str, unit: str) -> str:
        lo, hi = fig(r, key + "_lo"), fig(r, key + "_hi")
        return "-" if lo is None and hi is None else f"{format_value(lo, unit)} to {format_value(hi, unit)}"

    head = ["as of", "gate", "failed", "decision", "incremental revenue", "anytime interval", "iROAS",
            "anytime interval", "fixed interval", "p"]
    rows = [[r["as_of"], status_word(r["status"]), fig(r, "gate_failed") or "-",
             (f"{answer_phrase(fig(r, 'decision'))} ({fig(r, 'basis')})"
              if fig(r, "decision") else "-"),
             format_value(fig(r, "incremental_revenue"), "count"), span(r, "incremental_revenue_anytime", "count"),
             format_value(fig(r, "iroas"), "ratio"), span(r, "iroas_anytime", "ratio"),
             span(r, "incremental_revenue", "count"),
             format_value(fig(r, "p"), "p") if fig(r, "p") is not None else "-"] for r in readouts]
    width = [max(len(str(c)) for c in col) for col in zip(head, *rows)]
    line = lambda cells: "  ".join(  # noqa: E731
        str(c).ljust(w) if i < 4 else str(c).rjust(w) for i, (c, w) in enumerate(zip(cells, width))).rstrip()
    note = ("Each week's decision uses the anytime interval; the fixed interval and p are shown only at the "
            "planned final look.")
    return "\n".join([line(head), line(["-" * w for w in width])] + [line(r) for r in rows] + ["", note])
