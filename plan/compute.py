"""The plan itself: every holdout share x duration, the weeks each share needs, and the one-sentence advice."""

from __future__ import annotations

import math
from collections.abc import Sequence

from .power import N01 as _N

from armlock.assign import InputError
from armlock.readout.confseq import anytime_factor

from .model import (
    DEFAULT_MAX_WEEKS, DEFAULT_SHARES, DEFAULT_WEEKS, MIN_WEEKS, Cell, Estimate, Plan, PlanInputs,
    Recommendation, ShareSummary,
)
from .power import (
    conversion_mde, extra_variance, power_two_variances, se_difference, units_needed_two_variances, z_sum,
)

MAX_WEEKS = 520  # 10 years: the longest duration a plan considers (our choice; a grid is bounded)
MAX_SHARES = 20  # holdout shares compared at once (our choice; the tables stay readable)
SMALL_ARM = 1000  # below this many units in an arm the normal approximation is shaky (common practice)


def _check_grid(shares: Sequence[float], weeks: Sequence[int], max_weeks: int) -> None:
    if not shares:
        raise InputError("--holdout-shares: give at least one share")
    for s in shares:
        if not (isinstance(s, (int, float)) and 0 < s < 1):
            raise InputError(f"--holdout-shares: {s!r} is outside (0, 1); write 0.05 or 5%")
        if abs(s * 10_000 - round(s * 10_000)) > 1e-6:
            raise InputError(f"--holdout-shares: {s!r} is not a whole number of basis points "
                             "(the split works in steps of 0.01%)")
    if len(shares) > MAX_SHARES:
        raise InputError(f"--holdout-shares: {len(shares)} shares; give at most {MAX_SHARES}")
    if not weeks:
        raise InputError("--weeks: give at least one duration")
    for w in weeks:
        if not isinstance(w, int) or isinstance(w, bool) or not 1 <= w <= MAX_WEEKS:
            raise InputError(f"--weeks: {w!r} is not a whole number of weeks from 1 to {MAX_WEEKS} (10 years)")
    if not isinstance(max_weeks, int) or not 1 <= max_weeks <= MAX_WEEKS:
        raise InputError(f"--max-weeks: must be a whole number of weeks from 1 to {MAX_WEEKS} (10 years), "
                         f"got {max_weeks}")


def pct(share: float) -> str:
    """0.05 -> '5%', 0.125 -> '12.5%'."""
    return f"{share * 100:.4g}%"


def money(x: float) -> str:
    """An amount with thousands separators, to a sensible precision."""
    a = abs(x)
    if a >= 100:
        return f"{x:,.0f}"
    if a >= 1:
        return f"{x:,.2f}"
    return f"{x:.3g}"


def num(x: float) -> str:
    """Three significant digits, trailing zeros kept (0.660, 1.32, 13.7), thousands with separators."""
    if abs(x) >= 1000:
        return f"{x:,.0f}"
    return f"{x:#.3g}".rstrip(".")


def _whole_weeks(w: float) -> int:
    return max(MIN_WEEKS, math.ceil(w - 1e-9))


def make_plan(inputs: PlanInputs, *, shares: Sequence[float] = DEFAULT_SHARES,
              weeks: Sequence[int] = DEFAULT_WEEKS, max_weeks: int = DEFAULT_MAX_WEEKS,
              estimates: Sequence[Estimate] = (), notes: Sequence[str] = ()) -> Plan:
    """Plan a holdout test: the detectable effect for each share and duration, and what each choice costs.

    Everything is planned on the arm-level difference in revenue per unit (what the arms will show): an
    effect per exposed unit is diluted by the exposure rate. Returns a `Plan` (see `Plan.to_dict`).

    >>> p = make_plan(PlanInputs(weekly_units=200_000, revenue_mean=7.0, revenue_sd=75.0, lift=0.05))
    >>> p.recommendation.status, p.recommendation.share, p.recommendation.weeks
    ('pass', 0.2, 12)
    """
    shares = sorted(set(float(s) for s in shares))
    weeks = sorted(set(weeks))
    _check_grid(shares, weeks, max_weeks)
    x = inputs
    W, mu, sd, e = x.weekly_units, x.revenue_mean, x.revenue_sd, x.exposure_rate
    k = 1.0 - x.rho ** 2  # CUPED: Var(diff_cv) = Var(diff)(1 - rho^2), Deng, Xu, Kohavi & Walker 2013
    sd_plan = sd * math.sqrt(k)
    zs = z_sum(x.alpha, x.power)
    z_a = float(-_N.inv_cdf(x.alpha / 2))
    z_b = zs - z_a
    f_any = anytime_factor(1.0, t_opt=1.0, alpha=x.alpha)  # at the planned end t = t_opt, scale-free
    spend = x.weekly_spend

    if x.effect is not None:
        per_exposed = x.effect
    elif x.lift is not None:
        per_exposed = x.lift * mu
    elif x.target_iroas is not None:
        assert spend is not None
        per_exposed = x.target_iroas * spend / W / e  # iROAS = diff * W / spend (see assumptions)
    else:
        per_exposed = None
    target = None if per_exposed is None else per_exposed * e
    target_iroas = None if (target is None or spend is None) else target * W / spend
    break_even = None if x.margin is None else 1.0 / x.margin

    def extra(diff: float) -> float:  # the exposed arm's variance grows with the effect (see power.extra_variance)
        return 0.0 if x.equal_variance else extra_variance(diff, mu, sd)

    def se_alt(var: float, n_h: float, n_e: float, diff: float) -> float:
        """SE of the difference when the true difference is `diff`: each arm with its own variance, as the
        readout's Welch interval estimates it (so the critical value and the spread both use it)."""
        return math.sqrt(var / n_h + max(var + extra(diff), 1e-12 * var) / n_e)

    def detectable(var: float, n_h: float, n_e: float, z_crit: float) -> float:
        """Smallest arm difference detected with the planned power: solves diff = (z_crit + z_power) se(diff)
        by fixed-point iteration (the SE moves slowly with diff)."""
        diff = (z_crit + z_b) * se_alt(var, n_h, n_e, 0.0)
        for _ in range(100):
            new = (z_crit + z_b) * se_alt(var, n_h, n_e, diff)
            if abs(new - diff) <= 1e-12 * diff:
                break
            diff = new
        return new

    def power(var: float, n_h: float, n_e: float, z_crit: float) -> float:
        assert target is not None
        se1 = se_alt(var, n_h, n_e, target)
        return power_two_variances(target, se1, se1, z_crit=z_crit)

    def weeks_for(var: float, h: float, z_crit: float) -> float:
        assert target is not None
        var_e = max(var + extra(target), 1e-12 * var)
        pooled = (var / h + var_e / (1 - h)) / (1 / h + 1 / (1 - h))  # critical value on the same SE as power
        return units_needed_two_variances(target, pooled, var, var_e, h, z_crit=z_crit, z_power=z_b) / W

    var_raw, var_plan = sd ** 2, sd_plan ** 2
    cells: list[Cell] = []
    for h in shares:
        for w in weeks:
            n = W * w
            n_h, n_e = h * n, (1 - h) * n
            se = se_difference(sd, n_h, n_e)
            raw_mde = detectable(var_raw, n_h, n_e, z_a)
            planned = detectable(var_plan, n_h, n_e, z_a)
            forgone = None if target is None else target * n_h
            profit = None
            if forgone is not None and x.margin is not None and spend is not None:
                profit = x.margin * forgone - spend * h * w
            cells.append(Cell(
                share=h, weeks=w, units=n, holdout_units=n_h, exposed_units=n_e, se=se,
                mde=raw_mde, mde_cuped=planned, mde_relative=raw_mde / mu, mde_relative_cuped=planned / mu,
                mde_per_exposed=planned / e, mde_weekly_reading=detectable(var_plan, n_h, n_e, f_any),
                mde_conversion=None if x.conversion is None else conversion_mde(x.conversion, n_h, n_e,
                                                                                alpha=x.alpha, power=x.power),
                iroas_vs_zero=None if spend is None else planned * W / spend,
                iroas_vs_break_even=None if (spend is None or break_even is None) else break_even + planned * W / spend,
                revenue_forgone=forgone, profit_forgone=profit,
                power_at_target=None if target is None else power(var_plan, n_h, n_e, z_a),
                power_weekly_reading=None if target is None else power(var_plan, n_h, n_e, f_any),
            ))

    summaries: list[ShareSummary] = []
    if target is not None:
        for h in shares:
            need = weeks_for(var_plan, h, z_a)
            ww = _whole_weeks(need)
            forgone = target * h * W * ww
            profit = None if (x.margin is None or spend is None) else x.margin * forgone - spend * h * ww
            summaries.append(ShareSummary(share=h, weeks_needed=need, weeks_needed_raw=weeks_for(var_raw, h, z_a),
                                          weeks_needed_weekly_reading=weeks_for(var_plan, h, f_any), weeks=ww,
                                          revenue_forgone=forgone, profit_forgone=profit))

    plan = Plan(inputs=x, shares=shares, weeks=weeks, max_weeks=max_weeks, cells=cells,
                target_difference=target, target_per_exposed=per_exposed, target_iroas=target_iroas,
                break_even_iroas=break_even, anytime_factor=f_any, z_alpha=z_a, summaries=summaries,
                recommendation=Recommendation("skipped", None, None, ""), estimates=list(estimates),
                notes=list(notes))
    plan.recommendation = recommend(plan)
    plan.assumptions = _assumptions(plan)
    plan.notes += _notes(plan)
    return plan


def _target_words(p: Plan) -> str:
    x = p.inputs
    assert p.target_difference is not None and p.target_per_exposed is not None
    words = (f"+{money(p.target_per_exposed)} per exposed unit (a lift of {pct(p.target_per_exposed / x.revenue_mean)} "
             "for the units reached")
    if p.target_iroas is not None:
        words += f", iROAS {p.target_iroas:.3g}"
    return words + ")"


def recommend(p: Plan) -> Recommendation:
    """The smallest share that reaches the target within `max_weeks` (a smaller holdout forgoes less
    revenue); else the fastest share within the longest duration planned; else say it cannot be done."""
    x = p.inputs
    if p.target_difference is None:
        return Recommendation("skipped", None, None,
                              "No target effect was given, so there is no recommendation: give --effect, --lift "
                              "or --target-iroas (with --weekly-spend) to see how long each holdout share needs.")
    target = _target_words(p)
    how = f"with {x.power * 100:.3g}% power at alpha {x.alpha:g}" + (" using CUPED" if p.cuped else "")
    in_time = [s for s in p.summaries if s.weeks <= p.max_weeks]
    longest = max(p.max_weeks, max(p.weeks))
    if in_time:
        s = in_time[0]
        smaller = [t for t in p.summaries if t.share < s.share]
        tail = ""
        if smaller:
            t = smaller[-1]
            tail = f"; a {pct(t.share)} holdout would need {t.weeks} weeks, more than the {p.max_weeks} allowed"
        return Recommendation("pass", s.share, s.weeks,
                              f"Hold out {pct(s.share)} of new units for {s.weeks} weeks: that detects {target} "
                              f"{how}, and forgoes about {money(s.revenue_forgone)} of revenue if the channel works "
                              f"that well{tail}.")
    fastest = min(p.summaries, key=lambda s: (s.weeks, s.share))
    if fastest.weeks <= longest:
        return Recommendation("warn", fastest.share, fastest.weeks,
                              f"No holdout share detects {target} within the {p.max_weeks} weeks allowed; the "
                              f"fastest is {pct(fastest.share)} for {fastest.weeks} weeks ({how}, forgoing about "
                              f"{money(fastest.revenue_forgone)} of revenue), or aim at a larger effect, reach more "
                              "of the exposed arm, or add a pre-period covariate.")
    best = p.cell(fastest.share, max(p.weeks))
    return Recommendation("fail", None, None,
                          f"No holdout share up to {pct(max(p.shares))} detects {target} within {longest} weeks "
                          f"({pct(fastest.share)} would need {fastest.weeks} weeks; at {max(p.weeks)} weeks it can "
                          f"only tell apart {money(best.mde_per_exposed)} per exposed unit, "
                          f"{best.mde_per_exposed / p.target_per_exposed:.1f} times the target): as planned the test "
                          "would most likely end inconclusive, so aim at a larger effect, reach more of the exposed "
                          "arm, or add a pre-period covariate.")


def _assumptions(p: Plan) -> list[str]:
    x = p.inputs
    out = [
        "Units are randomized at their first visit; revenue per unit over the test has the given mean and SD "
        "whatever the duration (in practice both grow as early units keep buying, which the plan does not model).",
        ("Both arms have the same revenue SD (the textbook formula, --equal-variance)" if x.equal_variance else
         "The ad adds revenue by bringing more buyers with the same baskets, so the exposed arm's variance grows "
         "with the effect (by about the relative lift; each arm is read with its own variance, as the readout's "
         "Welch interval does)")
        + "; the test is two-sided at alpha on the difference of arm means (normal approximation, which matches "
        "the t-test at these sizes).",
        f"Only reached units respond: the arm-level difference is the effect per exposed unit times the "
        f"exposure rate ({pct(x.exposure_rate)}).",
    ]
    if p.cuped:
        out.append(f"CUPED with a pre-period covariate correlated {x.rho:.3g} with revenue multiplies the variance "
                   f"by 1 - rho^2 = {1 - x.rho ** 2:.3g} (Deng, Xu, Kohavi & Walker 2013); the readout must use "
                   "the same covariate.")
    if x.weekly_spend is not None:
        out.append("Weekly spend is the channel's spend with nobody held out; the exposed arm gets (1 - share) of "
                   "it, so iROAS = difference per unit x weekly units / weekly spend, whatever the share.")
    out.append(f"Reading the test every week with the anytime-valid interval (normal mixture, tightest at the "
               f"planned end) widens the final interval {p.anytime_factor / p.z_alpha:.2f} times; its detectable "
               f"effect takes the anytime factor in place of z_(1-alpha/2), conservative since an earlier crossing "
               "only adds power.")
    return out


def _notes(p: Plan) -> list[str]:
    x = p.inputs
    out = []
    if x.conversion is not None and x.order_value_sd is not None and x.order_value_sd == 0:
        out.append("Order values were taken as constant (no --order-value-sd): real order values vary, so the "
                   "revenue SD and every detectable effect here are understated.")
    if p.target_iroas is not None and p.break_even_iroas is not None and p.target_iroas < p.break_even_iroas:
        out.append(f"At the target the channel would not pay: iROAS {p.target_iroas:.3g} is below break-even "
                   f"{p.break_even_iroas:.3g} (1 / margin), so the holdout saves more spend than the profit it forgoes; "
                   "the iROAS table shows whether the test can tell a paying channel from break-even.")
    small = [c for c in p.cells if c.holdout_units < SMALL_ARM]
    if small:
        out.append(f"{len(small)} plan cell(s) have fewer than {SMALL_ARM:,} units in the holdout, where the normal "
                   "approximation is rough for skewed revenue.")
    return out
