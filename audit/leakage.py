"""Leakage: holdout units in the vendor's exposure log, exposure before assignment, and the ITT dilution it causes."""

from __future__ import annotations

from armlock.assign import Spec

from armlock.shared.report import Check, Figure, Table, worst
from armlock.shared.tables import LeakageTables
from armlock.shared.words import sentence


def itt_dilution(rate_exposed: float, rate_holdout: float) -> float:
    """The factor by which the ITT difference shrinks relative to the effect on the exposed.

    With exposure D and assignment Z, ITT_Y = effect_on_compliers x (E[D|Z=1] - E[D|Z=0])
    (Angrist, Imbens & Rubin 1996, JASA), so the ITT difference is the exposure-rate gap times
    the per-exposed effect; leakage into the holdout raises E[D|Z=0] and shrinks the gap. This holds
    when the arm moves outcomes only through exposure (exclusion restriction), nobody is exposed
    *because* they are in the holdout (monotonicity), and, to call it "the per-exposed effect", when
    the effect is alike for everyone exposed (leaked holdout units included).
    """
    return rate_exposed - rate_holdout


TITLE = "Leakage (holdout reached by the vendor)"


def _cannot_judge(lt: LeakageTables) -> Check:
    """An exposure log with no usable row measures nothing: say so, never pass."""
    why = ("the file has no data rows" if lt.rows_read == 0 else
           f"none of its {lt.rows_read:,} rows has both an id and a time on or before the as-of date")
    return Check(id="leakage", title=TITLE, status="warn",
                 summary=f"Cannot judge: the exposure log has no usable rows ({why}), so leakage was not "
                         "measured. Check that the vendor's export is complete and that [audit.exposures] maps "
                         "its id and time columns.",
                 figures={"exposure_rows": Figure(label="exposure rows in the file", value=lt.rows_read, unit="count")})


def _mismatch_summary(lt: LeakageTables, limit: float) -> str:
    """Why the exposure log's ids do not match the visits, with the match rate and the likely causes."""
    u, n = lt.unseen_ids, lt.exposed_ids
    causes = []
    if lt.unseen_match_without_prefix:
        causes.append(f"the vendor's ids carry the prefix '{lt.unseen_prefix}' (without it, "
                      f"{lt.unseen_match_without_prefix:,} of the {u:,} unmatched ids are visit ids)")
    if lt.unseen_match_with_visits_prefix:
        causes.append(f"the vendor's ids lack the prefix '{lt.visits_prefix}' the site writes (with it, "
                      f"{lt.unseen_match_with_visits_prefix:,} of the {u:,} unmatched ids are visit ids)")
    if lt.unseen_hash_like * 2 > u:
        causes.append(f"{lt.unseen_hash_like:,} of them look like hex hashes (MD5, SHA-1 or SHA-256): the log "
                      "holds hashed ids, which cannot be matched to the visitor ids the split hashed")
    causes.append("the log holds another id than the one the snippet sets (the vendor's own cookie or "
                  "device id, or a customer key): map the right column in [audit.exposures] unit_id")
    return (f"The exposure log does not match the visits: only {1 - u / n:.1%} of its {n:,} distinct ids appear "
            f"in the visits ({u:,} do not; more than {limit:.0%} unmatched fails), so leakage cannot be measured. "
            "Likely causes: " + "; ".join(causes) + ".")


def check_leakage(spec: Spec, lt: LeakageTables | None) -> Check:
    """Holdout exposure (count, share, by campaign and week), pre-assignment exposure, unseen ids."""
    if lt is None:
        return Check(id="leakage", title=TITLE, status="skipped",
                     summary="No exposure log was given (--exposures), so leakage was not checked.",
                     reason="no exposure log given")
    th = spec.audit.thresholds
    if lt.rows == 0:
        return _cannot_judge(lt)
    ba = lt.by_arm
    hold = list(spec.holdout_arms)
    expo = list(spec.exposed_arms)
    h_units = int(ba.loc[hold, "units"].sum())
    h_leak = int(ba.loc[hold, "exposed_units"].sum())
    e_units = int(ba.loc[expo, "units"].sum())
    e_reach = int(ba.loc[expo, "exposed_units"].sum())
    all_units = int(ba["units"].sum())
    if h_units == 0:  # no holdout unit to be reached: a leak share of 0 would read as "no leakage"
        return Check(id="leakage", title=TITLE, status="warn",
                     summary="Cannot judge: the visits have no holdout unit, so nobody could be found reached in the "
                             "holdout; see SRM (an arm with no units is a broken split) and check the recorded arms.",
                     figures={"exposure_rows": Figure(label="exposure rows in the file", value=lt.rows_read,
                                                      unit="count")})
    leak_share = h_leak / h_units if h_units else 0.0
    rate_h = leak_share
    rate_e = e_reach / e_units if e_units else 0.0
    dil = itt_dilution(rate_e, rate_h)
    lost = rate_h / rate_e if rate_e else 0.0
    pre_units = int(ba["pre_exposed_units"].sum())
    pre_share = pre_units / all_units if all_units else 0.0
    unseen_share = lt.unseen_ids / lt.exposed_ids if lt.exposed_ids else 0.0
    parts: list[tuple[str, str]] = []
    if leak_share > th.leak_fail:
        parts.append(("fail", f"the vendor reached {h_leak:,} holdout units ({leak_share:.2%} of the holdout)"))
    elif leak_share > th.leak_warn:
        parts.append(("warn", f"the vendor reached {h_leak:,} holdout unit(s) ({leak_share:.3%} of the holdout)"))
    if pre_share > th.pre_exposure_fail:
        parts.append(("fail", f"{pre_units:,} units ({pre_share:.2%}) were exposed before their first assignment "
                              f"or before the start ({lt.pre_before_start:,} before the start): an audience built "
                              "before the test is still being served"))
    elif pre_share > th.pre_exposure_warn:
        parts.append(("warn", f"{pre_units:,} unit(s) ({pre_share:.3%}) were exposed before their first assignment or the start"))
    if unseen_share > th.unseen_warn:
        parts.append(("warn", f"{lt.unseen_ids:,} exposed ids ({unseen_share:.2%} of exposed ids) never appear in the "
                              "visits: the vendor targets people the split never saw (an old audience, or an id mismatch)"))
    status = worst([p[0] for p in parts])
    dilution = (f"the arms' difference in revenue per unit (the ITT difference) is about {dil:.1%} of the effect on a "
                f"person the ads reach, because the ads reached {rate_e:.1%} of the exposed arm and {rate_h:.2%} of the "
                "holdout (assuming the arm changes sales only through the ads, and the ads work alike on everyone "
                "they reach)")
    if unseen_share > th.unseen_fail:
        status = "fail"
        summary = _mismatch_summary(lt, th.unseen_fail)
    elif parts:
        summary = (sentence("; ".join(p for _, p in parts)) + f". So {dilution}. Have the vendor suppress the "
                   "holdout list and drop audiences built before the test.")
    else:
        summary = (f"No holdout unit was reached and nobody was exposed before assignment. The ads reached {rate_e:.1%} "
                   f"of the exposed arm, so {dilution}.")
    figs = {
        "holdout_leak_share": Figure(label="holdout leakage", value=leak_share, unit="share",
                                     numerator=h_leak, denominator=h_units),
        "holdout_leak_units": Figure(label="holdout units reached", value=h_leak, unit="count"),
        "exposure_rate_exposed": Figure(label="exposure rate, exposed arm(s)", value=rate_e, unit="share",
                                        numerator=e_reach, denominator=e_units),
        "exposure_rate_holdout": Figure(label="exposure rate, holdout", value=rate_h, unit="share",
                                        numerator=h_leak, denominator=h_units),
        "itt_dilution": Figure(label="ITT difference as a share of the per-exposed effect", value=dil, unit="share"),
        "effect_lost_to_leakage": Figure(label="share of the contrast lost to leakage", value=lost, unit="share"),
        "pre_exposed_share": Figure(label="units exposed before assignment or start", value=pre_share, unit="share",
                                    numerator=pre_units, denominator=all_units),
        "pre_exposed_units": Figure(label="units exposed before assignment or start", value=pre_units, unit="count"),
        "unseen_ids": Figure(label="exposed ids never seen in the visits", value=lt.unseen_ids, unit="count"),
        "holdout_first_exposure": Figure(label="first holdout exposure", value=lt.holdout_first, unit="date"),
        "id_match_rate": Figure(label="exposed ids found in the visits", value=1 - unseen_share, unit="share"),
        "duplicate_rows": Figure(label="exact duplicate exposure rows (counted once)", value=lt.duplicate_rows,
                                 unit="count"),
    }
    leak_imp = int(ba.loc[hold, "impressions"].sum())
    leak_clk = int(ba.loc[hold, "clicks"].sum())
    figs["holdout_impressions"] = Figure(label="impressions served to the holdout", value=leak_imp, unit="count")
    figs["holdout_clicks"] = Figure(label="clicks by the holdout", value=leak_clk, unit="count")
    tables = [Table(
        title="Exposure by arm (during the test, after assignment)",
        columns=["arm", "role", "units", "exposed units", "exposure rate", "impressions", "clicks", "exposed before assignment/start"],
        rows=[[a, "holdout" if a in hold else "exposed", int(r.units), int(r.exposed_units),
               round(r.exposed_units / r.units, 6) if r.units else None, int(r.impressions), int(r.clicks),
               int(r.pre_exposed_units)] for a, r in zip(ba.index, ba.itertuples())])]
    if len(lt.holdout_by_campaign):
        c = lt.holdout_by_campaign.sort_values("units", ascending=False)
        tables.append(Table(title="Holdout exposure by campaign", columns=["campaign", "holdout units", "impressions", "clicks"],
                            rows=[[k, int(r.units), int(r.impressions), int(r.clicks)] for k, r in zip(c.index, c.itertuples())]))
    weekly = [{"week": w, "holdout_units": int(r.units), "holdout_share": (r.units / h_units if h_units else 0.0),
               "impressions": int(r.impressions), "clicks": int(r.clicks)}
              for w, r in zip(lt.holdout_by_week.index, lt.holdout_by_week.itertuples())]
    if weekly:
        tables.append(Table(title="Holdout exposure by week (Monday)", columns=["week", "holdout units", "share of holdout", "impressions", "clicks"],
                            rows=[[w["week"], w["holdout_units"], round(w["holdout_share"], 6), w["impressions"], w["clicks"]] for w in weekly]))
    tables.append(Table(title="Exposure before assignment", columns=["what", "units or ids", "rows"],
                        rows=[["exposed before the test start", lt.pre_before_start, None],
                              ["exposed after the start, before first assignment", lt.pre_before_assignment, None],
                              ["all exposure rows before assignment or start", None, lt.pre_rows],
                              ["exposed ids never seen in the visits", lt.unseen_ids, lt.unseen_rows],
                              *[[f"  of which the spec puts in {a}", n, None] for a, n in lt.unseen_by_arm.items()]]))
    return Check(id="leakage", title=TITLE, status=status, summary=summary,
                 figures=figs, tables=tables, series={"weekly": weekly})
