"""From the sufficient-statistics tables to the readout: effects, money, exposure, looks, gate, headline."""

from __future__ import annotations

import math
from datetime import UTC, date, datetime

from armlock.assign import Spec, __version__
from armlock.shared.report import Check, Figure, NotChecked, verdict_of
from armlock.audit import holm
from armlock.shared.power import mde

from .model import (
    Adjustment,
    ArmRow,
    Decision,
    Design,
    Effect,
    ExposureEffect,
    GateCheck,
    Interval,
    Look,
    Money,
    NOT_COVERED,
    ReadoutReport,
)
from armlock.shared.words import ANSWER_WORD, fixed, money_text, percent_whole

from .decision import decide
from .money import money
from .stats import Estimate, anytime, cuped, mean_estimate, ratio_diff, ratio_estimate, relative_lift, wald, welch
from armlock.shared.readout_tables import COV_PREFIX, Moments, ReadoutTables

ASSUMPTIONS = [
    "The ad changes sales only through exposure: being in the exposed arm without seeing an ad does nothing.",
    "Exposure is what the vendor's log records; exposures the log misses make this figure too large.",
    "Monotonicity, about exposure: no unit would be exposed if held out yet unexposed if in the exposed arm "
    "(being put in the exposed arm never lowers a unit's exposure); holdout units the vendor reached count as exposed.",
]
READING = ("Reading the result every week? Use the anytime interval: it stays valid at every look. "
           "The fixed interval is valid only for one look planned in advance.")
METRICS = (("revenue_per_unit", "revenue", "revenue per unit", "money"),
           ("conversion", "buyer", "conversion (buyers per unit)", "share"),
           ("orders_per_unit", "orders", "orders per unit", "number"))


def _f(v: float | None) -> float | None:
    return None if v is None or not math.isfinite(v) else float(v)


def interval(e: Estimate, units: int | None = None, *, t_opt: float = 0, alpha: float = 0.05) -> Interval:
    """An `Estimate` as the report's `Interval`, with the anytime interval when `units` is given."""
    lo_a = hi_a = None
    if units:
        lo_a, hi_a = (_f(x) for x in anytime(e, units, t_opt=t_opt, alpha=alpha))
    return Interval(value=_f(e.value), se=_f(e.se), lo=_f(e.lo), hi=_f(e.hi), p=_f(e.p),
                    anytime_lo=lo_a, anytime_hi=hi_a)


def pooled(tables: dict[str, Moments], arms: list[str], names: tuple[str, ...]) -> Moments:
    out = Moments.empty(names)
    for a in arms:
        out = out + tables[a]
    return out


def _primary(a: Moments, b: Moments, covs: list[str], alpha: float) -> Estimate:
    """The pre-registered primary estimate of revenue per unit: CUPED with the spec's covariates, else Welch."""
    if covs:
        return cuped(a, b, "revenue", covs, alpha).estimate
    return welch(a, b, "revenue", alpha)


def headline(m: Money, d: Decision, status: str, failing: list[Check], level: int,
             missing: list[NotChecked] | None = None) -> str:
    """The decision first, then the money on the same interval (anytime before the planned final
    look, fixed at it); on a gate that is not passed, why the answer is withheld."""
    cur, inc = m.currency, m.incremental_revenue
    anytime = d.basis == "anytime"
    lo, hi = (inc.anytime_lo, inc.anytime_hi) if anytime else (inc.lo, inc.hi)
    span = f"{level}% {d.basis} interval {money_text(lo, cur)} to {money_text(hi, cur)}"
    if lo is not None and lo > 0:
        said = f"The channel added {money_text(inc.value, cur)} in revenue ({span})"
    elif hi is not None and hi < 0:
        said = f"The channel lowered revenue by {money_text(-(inc.value or 0), cur)} ({span})"
    else:
        said = (f"The test cannot tell the channel's effect on revenue from zero: {money_text(inc.value, cur)} "
                f"({span})")
    if m.spend:
        said += f" for spend {money_text(m.spend, cur)}"
        if m.roi is not None and m.roi.value is not None:
            rlo, rhi = (m.roi.anytime_lo, m.roi.anytime_hi) if anytime else (m.roi.lo, m.roi.hi)
            said += f"; ROI {percent_whole(m.roi.value)} ({percent_whole(rlo)} to {percent_whole(rhi)})"
    if m.attributed_revenue is not None:
        said += f"; attribution credited {money_text(m.attributed_revenue, cur)}"
        if m.attributed_roas is not None:
            said += f" (ROAS {fixed(m.attributed_roas, missing='n/a')})"
    said += "."
    gaps = [m for m in (missing or []) if m.gate]
    if status == "fail":
        names = ", ".join(c.title for c in failing)
    if status == "fail":
        names = ", ".join(c.title for c in failing)
        why = f"the split audit fails ({names})" + (f" and {_gap_words(gaps)}" if gaps else "")
        return f"NOT TRUSTWORTHY: {why}, so whether the channel pays is withheld and this estimate may be biased. " + said
    if gaps:
        return (f"NOT TRUSTWORTHY: {_gap_words(gaps)}, so nothing shows the split is sound enough to read and "
                f"whether the channel pays is withheld. " + said)
    if d.withheld:
        return f"NOT TRUSTWORTHY: {d.reason} " + said
    return f"{ANSWER_WORD[d.answer].capitalize()}: {d.reason} " + said


def _gap_words(gaps: list[NotChecked]) -> str:
    """'could not check Leakage (not run: no exposure log given)' for a headline."""
    return "could not check " + "; ".join(f"{g.title} ({g.why})" for g in gaps)


def _arm_row(name: str, role: str, m: Moments, alpha: float) -> ArmRow:
    return ArmRow(
        name=name, role=role, units=m.n, buyers=int(round(m.total("buyer"))), orders=int(round(m.total("orders"))),
        revenue=float(m.total("revenue")),
        exposure_rate=_f(m.mean("exposed")) if m.n else None,
        conversion=interval(mean_estimate(m, "buyer", alpha)),
        revenue_per_unit=interval(mean_estimate(m, "revenue", alpha)),
        orders_per_unit=interval(mean_estimate(m, "orders", alpha)),
        aov=interval(ratio_estimate(m, "revenue", "orders", alpha)),
    )


def analyze(spec: Spec, tables: ReadoutTables, *, as_of: str, checks: list[Check], spend: float | None,
            attributed: float | None, notes: list[str], has_exposures: bool) -> ReadoutReport:
    """The readout from the tables, the audit's checks (the gate) and the money inputs."""
    cfg = spec.readout
    alpha, power = cfg.alpha, cfg.power
    level = round(100 * (1 - alpha))
    covs = [COV_PREFIX + c for c in tables.covariates]
    final = tables.final
    holdouts, exposed = list(spec.holdout_arms), list(spec.exposed_arms)
    names = next(iter(final.values())).names
    hold = pooled(final, holdouts, names)
    units_total = sum(m.n for m in final.values())
    t_opt = float(cfg.planned_units or units_total or 1)
    cautions: list[str] = []
    if not cfg.planned_units:
        cautions.append(f"[readout] planned_units is not set: the anytime interval is tuned to the units at this as-of "
                        f"({units_total:,}); set it before the test to read weekly with a fixed rule.")
    versus = "+".join(holdouts)
    effects: list[Effect] = []
    exposure: list[ExposureEffect] = []
    adjustment = None
    for arm in exposed:
        a = final[arm]
        n_ab = a.n + hold.n
        for metric, var, label, _unit in METRICS:
            raw = welch(a, hold, var, alpha)
            rel = relative_lift(a, hold, var, alpha)
            primary_raw = metric == "revenue_per_unit" and not covs
            effects.append(Effect(arm=arm, versus=versus, metric=metric, label=label, method="Welch",
                                  primary=primary_raw, absolute=interval(raw, n_ab, t_opt=t_opt, alpha=alpha),
                                  relative=interval(rel), mde=_f(mde(raw.se, alpha=alpha, power=power))
                                  if math.isfinite(raw.se) else None))
            if metric == "revenue_per_unit" and covs:
                c = cuped(a, hold, "revenue", covs, alpha)
                effects.append(Effect(arm=arm, versus=versus, metric=metric, label=label + " (adjusted)",
                                      method=f"CUPED ({', '.join(tables.covariates)})", primary=True,
                                      absolute=interval(c.estimate, n_ab, t_opt=t_opt, alpha=alpha),
                                      relative=interval(c.relative) if c.relative else None,
                                      mde=_f(mde(c.estimate.se, alpha=alpha, power=power))
                                      if math.isfinite(c.estimate.se) else None))
                if adjustment is None:
                    adjustment = Adjustment(covariates=tables.covariates, theta=c.theta,
                                            variance_reduction=_f(c.variance_reduction), primary="CUPED")
        aov = ratio_diff(a, hold, "revenue", "orders", alpha)
        effects.append(Effect(arm=arm, versus=versus, metric="aov", label="average order value",
                              method="delta method", absolute=interval(aov, n_ab, t_opt=t_opt, alpha=alpha),
                              mde=_f(mde(aov.se, alpha=alpha, power=power)) if math.isfinite(aov.se) else None))
        if has_exposures:
            w = wald(a, hold, "revenue", "exposed", alpha)
            exposure.append(ExposureEffect(
                arm=arm, exposure_rate_exposed=float(w.exposure_a), exposure_rate_holdout=float(w.exposure_b),
                itt_exposure=float(w.itt_d), per_exposed_unit=interval(w.estimate, n_ab, t_opt=t_opt, alpha=alpha),
                assumptions=ASSUMPTIONS))
            if w.exposure_b > 0:
                cautions.append(f"The vendor reached {w.exposure_b:.2%} of the holdout: the effect per exposed unit "
                                "treats that as two-sided non-compliance; the per-unit and money figures are diluted.")
    _holm_by_metric(effects)
    if covs and adjustment is None:
        adjustment = Adjustment(covariates=tables.covariates, theta=[], variance_reduction=None, primary="CUPED")

    # money: all exposed arms together against the holdout
    ex = pooled(final, exposed, names)
    prim = _primary(ex, hold, covs, alpha)
    buyers = welch(ex, hold, "buyer", alpha)
    mf = money(revenue_per_unit=prim, buyers_per_unit=buyers, exposed_units=ex.n, margin=cfg.margin,
               spend=spend, attributed=attributed)
    n_all = ex.n + hold.n

    def scaled_iv(e: Estimate | None, k: float, shift: float = 0.0) -> Interval | None:
        if e is None:
            return None
        lo_a, hi_a = anytime(prim, n_all, t_opt=t_opt, alpha=alpha)
        return Interval(value=_f(e.value), se=_f(e.se), lo=_f(e.lo), hi=_f(e.hi), p=_f(e.p),
                        anytime_lo=_f(k * lo_a + shift), anytime_hi=_f(k * hi_a + shift))

    days = (date.fromisoformat(as_of) - spec.start.date()).days + 1
    net = net_year = None
    if spend:
        net_est = mf.incremental_profit.scaled(1.0, shift=-spend)
        net = scaled_iv(net_est, ex.n * cfg.margin, -spend)
        f = 365.0 / max(days, 1)
        net_year = scaled_iv(net_est.scaled(f), ex.n * cfg.margin * f, -spend * f)
    cpb = None
    if mf.cost_per_incremental_buyer is not None:
        v, lo, hi = mf.cost_per_incremental_buyer
        cpb = Interval(value=_f(v), lo=_f(lo), hi=_f(hi))
    m = Money(
        currency=cfg.currency, margin=cfg.margin, exposed_units=ex.n, spend=spend,
        incremental_revenue=scaled_iv(mf.incremental_revenue, ex.n),
        incremental_profit=scaled_iv(mf.incremental_profit, ex.n * cfg.margin),
        iroas=scaled_iv(mf.iroas, ex.n / spend) if spend else None,
        roi=scaled_iv(mf.roi, ex.n * cfg.margin / spend, -1.0) if spend else None,
        incremental_buyers=interval(mf.incremental_buyers),
        cost_per_incremental_buyer=cpb, attributed_revenue=attributed, attributed_roas=_f(mf.attributed_roas),
        incremental_to_attributed=scaled_iv(mf.incremental_to_attributed, ex.n / attributed) if attributed else None,
        net_contribution=net, net_contribution_per_year=net_year, days=days,
    )
    if spend is None:
        cautions.append("No spend was given (--spend or --spend-file): iROAS, ROI and cost per incremental buyer "
                        "are not computed.")
    if attributed is None:
        cautions.append("No attributed revenue was given (--attributed-revenue or an [readout.orders] attributed "
                        "column): the comparison with attribution is not made.")

    looks = []
    for day, arms_m in tables.looks:
        look_vars = next(iter(arms_m.values())).names  # a look holds only what its estimate reads
        e_m, h_m = pooled(arms_m, exposed, look_vars), pooled(arms_m, holdouts, look_vars)
        if e_m.n < 2 or h_m.n < 2:
            continue
        est = _primary(e_m, h_m, covs, alpha)
        lo_a, hi_a = anytime(est, e_m.n + h_m.n, t_opt=t_opt, alpha=alpha)
        looks.append(Look(date=day, units={a: arms_m[a].n for a in tables.arms}, difference=_f(est.value),
                          lo=_f(est.lo), hi=_f(est.hi), anytime_lo=_f(lo_a), anytime_hi=_f(hi_a)))

    status, missing = verdict_of(checks)
    trusted = status != "fail" and not any(g.gate for g in missing)
    failing = [c for c in checks if c.status == "fail"]
    problem = "; ".join(x for x in (f"the split audit fails ({', '.join(c.title for c in failing)})" if failing else "",
                                    _gap_words([g for g in missing if g.gate])
                                    if any(g.gate for g in missing) else "") if x)
    decision = decide(spec, iroas=m.iroas, df=prim.df, units=units_total, as_of=as_of, trustworthy=trusted,
                      gate_problem=problem or "the audit gate is not passed",
                      earlier=[(date.fromisoformat(day), sum(a.n for a in arms_m.values()))
                               for day, arms_m in tables.looks if day < as_of],
                      buyers=int(round(min(ex.total("buyer"), hold.total("buyer")))))
    warning = [c for c in checks if c.status == "warn" and c.judged]
    if warning and status != "fail":
        cautions.insert(0, "Caution: the split audit warns (" + ", ".join(c.title for c in warning)
                        + "); read the estimate with that in mind.")
    roles = {a.name: a.role for a in spec.arms}
    rows = [_arm_row(a, roles[a], final[a], alpha) for a in tables.arms]
    report = ReadoutReport(
        decision=decision, experiment=spec.name, fingerprint=spec.fingerprint, as_of=as_of,
        generated_at=datetime.now(UTC).replace(microsecond=0).isoformat().replace("+00:00", "Z"),
        armlock_version=__version__, status=status, trustworthy=trusted,
        headline=" ".join(x for x in (headline(m, decision, status, failing, level, missing),
                                      cap_sentence(spec, tables.counts, cfg.currency)) if x),
        reading_advice=READING, estimand=estimand(spec, as_of), cautions=cautions, not_covered=NOT_COVERED,
        design=Design(start=spec.start.date().isoformat(), as_of=as_of, planned_end=decision.planned_end, days=days,
                      holdout_share=sum(a.weight for a in spec.arms if a.role == "holdout") / 10_000,
                      arms={a.name: a.role for a in spec.arms}, units=units_total,
                      planned_units=cfg.planned_units or None),
        gate=[GateCheck(id=c.id, title=c.title, status=c.status, summary=c.summary) for c in checks],
        not_checked=missing,
        arms=rows, effects=effects, adjustment=adjustment, exposure=exposure, money=m, looks=looks,
        settings={"alpha": alpha, "power": power, "margin": cfg.margin, "currency": cfg.currency,
                  "window": cfg.window, "revenue_cap": cfg.revenue_cap, "planned_units": cfg.planned_units,
                  "target_iroas": cfg.target_iroas or None, "breakeven_iroas": decision.breakeven_iroas,
                  "anytime_t_opt": t_opt, "covariates": tables.covariates,
                  "primary": "CUPED" if covs else "raw (Welch)", "arm_rule": "intent to treat: the arm the spec's "
                  "hash gives each unit; customers count in the arm of their first unit"},
        input_notes=notes, figures=_figures(m, prim, adjustment, decision, failing, missing),
    )
    return report


def estimand(spec: Spec, as_of: str) -> str:
    """What the readout estimates, in one line."""
    w = spec.readout.window
    period = ("from each unit's first visit through the end of the as-of day " + as_of if w == "to_as_of" else
              f"from each unit's first visit through {w} days after it (units first seen at least {w} days before "
              f"the end of {as_of})")
    cap = f", each unit's revenue capped at the pooled {spec.readout.revenue_cap:g} quantile" \
        if spec.readout.revenue_cap else ""
    return (f"Estimand: revenue per unit net of refunds{cap}, {period}, exposed arm(s) minus holdout, by the arm "
            "the split assigned (intent to treat); money figures scale it to the exposed arm(s)' units.")


def cap_sentence(spec: Spec, counts: dict[str, float], cur: str) -> str | None:
    """The cap, said in the headline when it changed some unit's revenue (it shrinks a real effect)."""
    capped = int(counts.get("units_capped", 0) or 0)
    if not spec.readout.revenue_cap or not capped:
        return None
    return (f"Revenue was capped at {money_text(counts.get('revenue_cap_value'), cur)} per unit (the pooled "
            f"{spec.readout.revenue_cap:g} quantile) for {capped:,} unit(s): the cap lowers variance but also "
            "shrinks a real effect toward zero.")


def _holm_by_metric(effects: list[Effect]) -> None:
    """Holm's step-down adjustment (Holm 1979) of each metric's p-values across the exposed arms,
    each tested against the same holdout: the family-wise error per metric stays at alpha."""
    groups: dict[tuple[str, str], list[Effect]] = {}
    for e in effects:
        if e.absolute.p is not None:
            groups.setdefault((e.metric, e.method), []).append(e)
    for group in groups.values():
        for e, adj in zip(group, holm([e.absolute.p for e in group])):  # type: ignore[misc]
            e.p_holm = float(adj)


def _figures(m: Money, prim: Estimate, adj: Adjustment | None, d: Decision, failing: list[Check],
             missing: list[NotChecked]) -> dict[str, Figure]:
    """The figures `--record` keeps each week: the decision and the anytime intervals always; the
    fixed-horizon interval and p only at the planned final look, the one look where they are valid."""
    inc = m.incremental_revenue
    out = {
        "decision": Figure(label="decision", value=d.answer, unit="text"),
        "basis": Figure(label="interval the decision used", value=d.basis, unit="text"),
        "gate_failed": Figure(label="gate checks that fail or were not checked",
                              value=", ".join([c.id for c in failing] + [f"{g.id} not checked" for g in missing
                                                                         if g.gate]) or None, unit="text"),
        "breakeven_iroas": Figure(label="break-even iROAS", value=d.breakeven_iroas, unit="ratio"),
        "incremental_revenue": Figure(label="incremental revenue", value=_f(inc.value)),
        "incremental_revenue_anytime_lo": Figure(label="incremental revenue, anytime interval low",
                                                 value=inc.anytime_lo),
        "incremental_revenue_anytime_hi": Figure(label="incremental revenue, anytime interval high",
                                                 value=inc.anytime_hi),
        "revenue_per_unit_difference": Figure(label="revenue per unit difference", value=_f(prim.value)),
    }
    if d.final_look:
        out["incremental_revenue_lo"] = Figure(label="incremental revenue, fixed interval low", value=inc.lo)
        out["incremental_revenue_hi"] = Figure(label="incremental revenue, fixed interval high", value=inc.hi)
        out["p"] = Figure(label="p-value of the revenue difference", value=_f(prim.p), unit="p")
        if d.p_breakeven is not None:
            out["p_breakeven"] = Figure(label="p-value of iROAS = break-even", value=d.p_breakeven, unit="p")
    if m.iroas is not None:
        out["iroas"] = Figure(label="iROAS", value=m.iroas.value, unit="ratio")
        out["iroas_anytime_lo"] = Figure(label="iROAS, anytime interval low", value=m.iroas.anytime_lo, unit="ratio")
        out["iroas_anytime_hi"] = Figure(label="iROAS, anytime interval high", value=m.iroas.anytime_hi, unit="ratio")
        if d.final_look:
            out["iroas_lo"] = Figure(label="iROAS, fixed interval low", value=m.iroas.lo, unit="ratio")
            out["iroas_hi"] = Figure(label="iROAS, fixed interval high", value=m.iroas.hi, unit="ratio")
    if m.roi is not None:
        out["roi"] = Figure(label="ROI", value=m.roi.value, unit="share")
    if m.attributed_roas is not None:
        out["attributed_roas"] = Figure(label="attributed ROAS", value=m.attributed_roas, unit="ratio")
    if adj is not None and adj.variance_reduction is not None:
        out["variance_reduction"] = Figure(label="CUPED variance reduction", value=adj.variance_reduction, unit="share")
    return out
