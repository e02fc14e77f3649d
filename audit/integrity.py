"""Assignment integrity: recorded vs recomputed arms, unknown arms, pre-start units, fingerprints; the verdict."""

from __future__ import annotations

from armlock.assign import Spec

from armlock.shared.report import Check, Figure, Table
from armlock.shared.tables import IntegrityTables


def check_integrity(spec: Spec, it: IntegrityTables, counts: dict[str, int],
                    split_changes: list[str] | None = None) -> Check:
    """Is the split the spec's split? Mismatches and unknown arms mean the site did not apply it."""
    th = spec.audit.thresholds
    n = max(it.units, 1)
    unknown = sum(it.recorded_unknown.values())
    mis_rate = it.mismatches / n
    pre_share = it.pre_start / n
    other_fps = {f: c for f, c in (it.fingerprints or {}).items() if f not in (spec.fingerprint, "(missing)")}
    missing_fp = (it.fingerprints or {}).get("(missing)", 0)
    problems: list[tuple[str, str]] = []  # (status, sentence)
    for change in split_changes or []:  # a confirmed change of salt or weights after the start
        problems.append(("fail", change + ": units counted before it were re-hashed, so the arms mix two splits"))
    if unknown:
        names = ", ".join(f"{a} ({c:,})" for a, c in sorted(it.recorded_unknown.items(), key=lambda x: -x[1])[:5])
        problems.append(("fail", f"{unknown:,} units carry arm names the spec does not know: {names}"))
    if other_fps:
        fps = ", ".join(f"{f} ({c:,})" for f, c in sorted(other_fps.items(), key=lambda x: -x[1])[:3])
        problems.append(("fail", f"{sum(other_fps.values()):,} units were stamped with another spec fingerprint "
                                 f"({fps}; this spec is {spec.fingerprint}): the site runs a different salt or weights"))
    if mis_rate > th.mismatch_fail:
        problems.append(("fail", f"{mis_rate:.3%} of units are recorded in another arm than the spec gives them"))
    elif mis_rate > th.mismatch_warn:
        problems.append(("warn", f"{it.mismatches:,} unit(s) ({mis_rate:.4%}) are recorded in another arm than the spec gives them"))
    if it.recorded_missing:
        problems.append(("warn", f"{it.recorded_missing:,} unit(s) have no recorded arm"))
    if pre_share > th.pre_start_warn:
        problems.append(("warn", f"{it.pre_start:,} unit(s) ({pre_share:.2%}) were first seen before the test start "
                                 f"{spec.start:%Y-%m-%d %H:%M} UTC"))
    if missing_fp:
        problems.append(("warn", f"{missing_fp:,} unit(s) carry no spec fingerprint"))
    empty = counts.get("empty_ids", 0)
    if empty:
        problems.append(("warn", f"{empty:,} visits row(s) had no unit id and got no arm"))
    status = "pass"
    for s, _ in problems:
        if s == "fail" or (s == "warn" and status == "pass"):
            status = s
    if problems:
        summary = ("; ".join(p for _, p in problems) + ". Fix the site's assignment so it uses this spec "
                   "(same salt, arms and weights) before trusting any result.")
    else:
        summary = "Every unit is recorded in the arm the spec gives it; nothing to do."
    figs = {
        "units": Figure(label="units checked", value=it.units, unit="count"),
        "mismatch_rate": Figure(label="recorded-arm mismatch", value=mis_rate, unit="share",
                                numerator=int(it.mismatches), denominator=int(it.units)),
        "mismatches": Figure(label="units in the wrong arm", value=it.mismatches, unit="count"),
        "unknown_arm_units": Figure(label="units with an unknown arm", value=unknown, unit="count"),
        "pre_start_units": Figure(label="units first seen before the start", value=it.pre_start, unit="count"),
        "empty_ids": Figure(label="rows without a unit id", value=empty, unit="count"),
        "duplicate_rows": Figure(label="repeated first-seen rows", value=counts.get("duplicate_rows", 0), unit="count"),
        "first_seen_min": Figure(label="earliest first-seen", value=it.first_seen_min, unit="date"),
    }
    tables = []
    if len(it.pairs):
        tables.append(Table(title="Recorded vs recomputed arm (mismatches)", columns=["recorded", "recomputed", "units"],
                            rows=[[r.recorded, r.recomputed, int(r.units)] for r in it.pairs.itertuples()]))
    if it.recorded_unknown:
        tables.append(Table(title="Unknown recorded arms", columns=["recorded arm", "units"],
                            rows=[[a, c] for a, c in sorted(it.recorded_unknown.items(), key=lambda x: -x[1])]))
    if it.mismatches:
        bd = it.by_day[it.by_day["mismatches"] > 0]
        tables.append(Table(title="Mismatches by first-seen day", columns=["date", "units", "mismatches", "rate"],
                            rows=[[d, int(r.units), int(r.mismatches), round(r.mismatches / r.units, 6)]
                                  for d, r in zip(bd.index, bd.itertuples())]))
        for seg, frame in it.by_segment.items():
            f = frame[frame["mismatches"] > 0].sort_values("mismatches", ascending=False)
            tables.append(Table(title=f"Mismatches by {seg}", columns=[seg, "units", "mismatches", "rate"],
                                rows=[[v, int(r.units), int(r.mismatches), round(r.mismatches / r.units, 6)]
                                      for v, r in zip(f.index, f.itertuples())]))
    if it.fingerprints:
        tables.append(Table(title="Spec fingerprints in the data", columns=["fingerprint", "units", "this spec"],
                            rows=[[f, c, "yes" if f == spec.fingerprint else "no"] for f, c in it.fingerprints.items()]))
    return Check(id="integrity", title="Assignment integrity", status=status, summary=summary,
                 figures=figs, tables=tables)
