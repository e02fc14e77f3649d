"""The plan itself: every holdout share x duration, the weeks each share needs, and the one-sentence advice."""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from armlock.assign import InputError
from armlock.shared.confseq import anytime_factor
from armlock.shared.words import amount, percent_short, sig3

from . import soundness, weekly
from armlock.shared.power import N01 as _N

from .model import (
    DEFAULT_MAX_WEEKS, DEFAULT_SHARES, DEFAULT_WEEKS, MIN_WEEKS, Cell, Estimate, Plan, PlanInputs,
    Recommendation, ShareSummary,
)
from armlock.shared.power import (
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


def _whole_weeks(w: float) -> int:
    return max(MIN_WEEKS, math.ceil(w - 1e-9))


def weeks_words(w: float) -> str:
    """'7 weeks'; beyond the longest a plan considers, 'more than 10 years' instead of a meaningless count."""
    if not math.isfinite(w) or w > MAX_WEEKS:
        return f"more than {MAX_WEEKS // 52} years"
    w = int(w)
    return f"{w:,} week" + ("" if w == 1 else "s")


PREFER = {
    "balanced": "the fastest design that forgoes at most 25% more revenue than the cheapest one in time",
    "money": "the design that forgoes the least revenue within the weeks allowed",
    "time": "the fastest design within the weeks allowed, whatever it forgoes",
}
BALANCED_EXTRA = 0.25  # --prefer balanced: pay up to 25% more forgone revenue to finish sooner (our choice)


def make_plan(inputs: PlanInputs, *, shares: Sequence[float] = DEFAULT_SHARES,
              weeks: Sequence[int] = DEFAULT_WEEKS, max_weeks: int = DEFAULT_MAX_WEEKS,
              estimates: Sequence[Estimate] = (), notes: Sequence[str] = (), prefer: str = "balanced",
              spread: tuple[float, float] | None = None, simulate: bool = True,
              revenue_sample: Sequence[float] | None = None) -> Plan:
    """Plan a holdout test: the detectable effect for each share and duration, and what each choice costs.

    Everything is planned on the arm-level difference in revenue per unit (what the arms will show): an
    effect per reached unit is diluted by the exposure rate. Each share's weeks are the normal arithmetic's,
    then checked by simulating the readout's Welch test on the revenue shape the inputs imply
    (`plan.soundness`): a design is recommended only where that test keeps its level (false wins at most
    alpha + 1 point) and its power (at most 1 point under the planned power). `spread` is the 95% range of
    the weeks as ratios (the pre-period's sampling error, from `estimate.PrePeriod`). Returns a `Plan`.

    >>> p = make_plan(PlanInputs(weekly_units=200_000, revenue_mean=7.0, revenue_sd=75.0, lift=0.05))
    >>> p.recommendation.status, p.recommendation.share, p.recommendation.weeks
    ('pass', 0.3, 9)
    """
    if prefer not in PREFER:
        raise InputError(f"--prefer: choose one of {', '.join(PREFER)}, got {prefer!r}")
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
    break_even = None if x.margin is None else 1.0 / x.margin

    def per_iroas(h: float) -> float:
        """Arm difference per unit of iROAS at share h, the readout's convention: iROAS = difference x exposed
        units / the whole spend (all of it on the exposed arm), so difference = iROAS x spend / ((1 - h) W)."""
        assert spend is not None
        return spend / ((1 - h) * W)

    def target_at(h: float) -> float | None:
        if x.effect is not None:
            return x.effect * e
        if x.lift is not None:
            return x.lift * mu * e
        if x.target_iroas is not None:
            return x.target_iroas * per_iroas(h)
        return None

    def null_at(h: float) -> float:  # the difference the test must tell the target from
        if x.against == "break-even":
            assert break_even is not None
            return break_even * per_iroas(h)
        return 0.0

    def extra(diff: float) -> float:  # the exposed arm's variance grows with the effect (see power.extra_variance)
        return 0.0 if x.equal_variance else extra_variance(diff, mu, sd)

    def se_alt(var: float, n_h: float, n_e: float, diff: float) -> float:
        """SE of the difference when the true difference is `diff`: each arm with its own variance, as the
        readout's Welch interval estimates it (so the critical value and the spread both use it)."""
        return math.sqrt(var / n_h + max(var + extra(diff), 1e-12 * var) / n_e)

    def detectable(var: float, n_h: float, n_e: float, z_crit: float, null: float = 0.0) -> float:
        """Smallest arm difference beyond `null` detected with the planned power: solves
        gap = (z_crit + z_power) se(null + gap) by fixed-point iteration (the SE moves slowly with it)."""
        gap = (z_crit + z_b) * se_alt(var, n_h, n_e, null)
        new = gap
        for _ in range(100):
            new = (z_crit + z_b) * se_alt(var, n_h, n_e, null + gap)
            if abs(new - gap) <= 1e-12 * gap:
                break
            gap = new
        return new

    def power(var: float, n_h: float, n_e: float, z_crit: float, h: float) -> float:
        t, n0 = target_at(h), null_at(h)
        assert t is not None
        se1 = se_alt(var, n_h, n_e, t)  # the readout compares the gap with the SE it estimates, at the truth
        return power_two_variances(t - n0, se1, se1, z_crit=z_crit)

    def weeks_for(var: float, h: float, z_crit: float) -> float:
        t, n0 = target_at(h), null_at(h)
        assert t is not None
        var_e = max(var + extra(t), 1e-12 * var)
        pooled = (var / h + var_e / (1 - h)) / (1 / h + 1 / (1 - h))  # critical value on the SE the readout estimates
        if t <= n0:
            return math.inf
        return units_needed_two_variances(t - n0, pooled, var, var_e, h, z_crit=z_crit, z_power=z_b) / W

    var_raw, var_plan = sd ** 2, sd_plan ** 2
    cells: list[Cell] = []
    for h in shares:
        target = target_at(h)
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
            drift_w = weekly.drift_needed(w, x.alpha, x.power)  # weekly looks at the readout's boundary
            cells.append(Cell(
                share=h, weeks=w, units=n, holdout_units=n_h, exposed_units=n_e, se=se,
                mde=raw_mde, mde_cuped=planned, mde_relative=raw_mde / mu, mde_relative_cuped=planned / mu,
                mde_per_exposed=planned / e, mde_weekly_reading=planned * drift_w / zs,
                mde_conversion=None if x.conversion is None else conversion_mde(x.conversion, n_h, n_e,
                                                                                alpha=x.alpha, power=x.power),
                iroas_vs_zero=None if spend is None else planned / per_iroas(h),
                iroas_vs_break_even=None if (spend is None or break_even is None)
                else break_even + detectable(var_plan, n_h, n_e, z_a, break_even * per_iroas(h)) / per_iroas(h),
                revenue_forgone=forgone, profit_forgone=profit,
                power_at_target=None if target is None else power(var_plan, n_h, n_e, z_a, h),
                power_weekly_reading=None if target is None else weekly.power_weekly(
                    (target - null_at(h)) / se_alt(var_plan, n_h, n_e, target), w, x.alpha),
            ))

    largest = max([(t or 0.0) / mu for t in map(target_at, shares)] + [null_at(h) / mu for h in shares]) / math.sqrt(k)
    shape: soundness.Shape | soundness.Empirical = soundness.shape_of(mu, sd, x.conversion, x.order_value_sd, largest)
    if revenue_sample is not None:  # the pre-period's own revenue per unit, resampled (when it makes room)
        shape = soundness.empirical(np.asarray(revenue_sample, dtype=float), largest) or shape
    summaries: list[ShareSummary] = []
    if target_at(shares[0]) is not None:
        for h in shares:
            target = target_at(h)
            assert target is not None
            need = weeks_for(var_plan, h, z_a)
            raw_need = weeks_for(var_raw, h, z_a)
            weekly_need, factor = ((math.inf, math.nan) if not math.isfinite(need) else
                                   weekly.weeks_read_weekly(need, x.alpha, x.power))
            check = _sound_weeks(x, shape, h, need, target, null_at(h), k) if simulate else None
            if simulate:
                ww = None if check is None else check.weeks
            else:
                ww = _whole_weeks(need) if math.isfinite(need) and need <= MAX_WEEKS else None
            forgone = None if ww is None else target * h * W * ww
            profit = None if (ww is None or x.margin is None or spend is None) else \
                x.margin * target * h * W * ww - spend * h * ww
            summaries.append(ShareSummary(
                share=h, target_difference=target, weeks_needed=need, weeks_needed_raw=raw_need,
                weeks_needed_weekly_reading=weekly_need, weekly_factor=factor, weeks=ww,
                weeks_normal=_whole_weeks(need) if math.isfinite(need) and need <= MAX_WEEKS else None,
                revenue_forgone=forgone, profit_forgone=profit,
                false_win_rate=None if check is None else check.false_wins,
                power_simulated=None if check is None else check.power,
                false_win_rate_normal=None if check is None else check.false_wins_at_normal,
                weeks_range=None if (spread is None or ww is None) else  # the sound weeks, scaled by the range
                (_whole_weeks(ww * spread[0]), _whole_weeks(ww * spread[1]))))

    first_target = target_at(shares[0])
    plan = Plan(inputs=x, shares=shares, weeks=weeks, max_weeks=max_weeks, cells=cells,
                target_difference=first_target, target_per_exposed=None if first_target is None else first_target / e,
                target_iroas=None if (first_target is None or spend is None) else first_target / per_iroas(shares[0]),
                break_even_iroas=break_even, anytime_factor=f_any, z_alpha=z_a, summaries=summaries,
                recommendation=Recommendation("skipped", None, None, ""), estimates=list(estimates),
                notes=list(notes), prefer=prefer, shape=(shape.p, shape.mu, shape.sigma))
    plan.resampled = isinstance(shape, soundness.Empirical)
    plan.recommendation = recommend(plan)
    rec = plan.summary(plan.recommendation.share) if plan.recommendation.share is not None else None
    if rec is not None:  # the headline target is the recommended share's (an iROAS target differs by share)
        plan.target_difference = rec.target_difference
        plan.target_per_exposed = rec.target_difference / e
        plan.target_iroas = None if spend is None else rec.target_difference / per_iroas(rec.share)
    plan.assumptions = _assumptions(plan)
    plan.notes += _notes(plan)
    return plan


class _Check:
    """A share's whole weeks where the readout's test keeps level and power, with the simulated rates."""

    def __init__(self, weeks: int | None, false_wins: float, power: float, false_wins_at_normal: float) -> None:
        self.weeks, self.false_wins, self.power, self.false_wins_at_normal = weeks, false_wins, power, false_wins_at_normal


LEVEL_SLACK = 0.01  # a design is sound when simulated false wins are at most alpha + 1 point (our choice)
POWER_SLACK = 0.01  # ... and simulated power at most 1 point under the planned power (about one Monte Carlo SE)


def _sound_weeks(x: PlanInputs, shape: soundness.Shape | soundness.Empirical, h: float, need: float, target: float, null: float,
                 k: float) -> _Check | None:
    """Starting at the normal arithmetic's whole weeks, the fewest whole weeks at which the simulated readout
    test (Welch, this revenue shape) keeps its level and power; None when not within MAX_WEEKS."""
    if not math.isfinite(need) or need > MAX_WEEKS:
        return None
    scale = 1 / math.sqrt(k)  # CUPED: the adjusted values, revenue's shape with (1 - rho^2) of its variance

    def rates(w: int) -> tuple[float, float]:
        n = x.weekly_units * w
        n_h, n_e = max(2, round(h * n)), max(2, round((1 - h) * n))
        fw = soundness.rejection_rate(shape, n_h, n_e, null * scale, alpha=x.alpha, null=null * scale)
        pw = soundness.rejection_rate(shape, n_h, n_e, target * scale, alpha=x.alpha, null=null * scale)
        return fw, pw

    def ok(r: tuple[float, float]) -> bool:
        return r[0] <= x.alpha + LEVEL_SLACK and r[1] >= x.power - POWER_SLACK

    w = _whole_weeks(need)
    first = rates(w)
    if ok(first):
        return _Check(w, first[0], first[1], first[0])
    lo, hi, r = w, None, first
    z_a = -_N.inv_cdf(x.alpha / 2)
    for _ in range(10):  # grow until sound
        if r[1] < x.power - POWER_SLACK and r[1] > 0.01:
            grow = ((z_a + _N.inv_cdf(x.power)) / (z_a + _N.inv_cdf(min(r[1], 0.999)))) ** 2
        else:
            grow = 1.5
        nxt = min(MAX_WEEKS, max(lo + 1, math.ceil(lo * min(max(grow, 1.1), 4.0))))
        r = rates(nxt)
        if ok(r):
            hi = nxt
            break
        lo = nxt
        if nxt >= MAX_WEEKS:
            return _Check(None, r[0], r[1], first[0])
    if hi is None:
        return _Check(None, r[0], r[1], first[0])
    best = r
    while hi - lo > 1:  # the fewest whole weeks between the last unsound and the first sound
        mid = (lo + hi) // 2
        rm = rates(mid)
        if ok(rm):
            hi, best = mid, rm
        else:
            lo = mid
    return _Check(hi, best[0], best[1], first[0])


def _target_words(p: Plan, h: float) -> str:
    x = p.inputs
    s = p.summary(h)
    per_reached = s.target_difference / x.exposure_rate
    words = f"+{cash(p, per_reached)} per reached unit (a lift of {percent_short(per_reached / x.revenue_mean)})"
    if x.weekly_spend is not None:
        words = words[:-1] + f", iROAS {sig3(s.target_difference * (1 - h) * x.weekly_units / x.weekly_spend)})"
    return words


def cash(p: Plan, value: float) -> str:
    """An amount with thousands separators and the currency code when one was given."""
    c = p.inputs.currency
    return amount(value) + (f" {c}" if c else "")


def _weeks(s: ShareSummary) -> int:
    """The whole weeks of a share already known to be sound (its `weeks` is set)."""
    assert s.weeks is not None
    return s.weeks


def _forgone(s: ShareSummary) -> float:
    """The revenue a sound share forgoes (set whenever its `weeks` is)."""
    assert s.revenue_forgone is not None
    return s.revenue_forgone


def _choose(p: Plan, options: list[ShareSummary]) -> ShareSummary:
    if p.prefer == "time":
        return min(options, key=lambda s: (_weeks(s), _forgone(s), s.share))
    cheapest = min(options, key=lambda s: (_forgone(s), _weeks(s), s.share))
    if p.prefer == "money":
        return cheapest
    near = [s for s in options if _forgone(s) <= _forgone(cheapest) * (1 + BALANCED_EXTRA)]
    return min(near, key=lambda s: (_weeks(s), _forgone(s), s.share))


def _sound_words(p: Plan, s: ShareSummary) -> str:
    """What the simulation of the readout's test changed, said with the measured rates."""
    x = p.inputs
    if s.false_win_rate is None or s.power_simulated is None:
        return ""
    on = "the pre-period's own revenue, resampled" if p.resampled else "this revenue shape"
    said = (f"that power is the readout's test simulated (Welch's t on {on}, {soundness.SIMS:,} tests), with "
            f"{s.false_win_rate * 100:.1f}% false wins at alpha {x.alpha * 100:g}%")
    if s.weeks_normal is not None and s.weeks is not None and s.weeks > s.weeks_normal:
        units = amount(s.share * x.weekly_units * s.weeks_normal)
        fw = s.false_win_rate_normal
        if fw is not None and fw > x.alpha + LEVEL_SLACK:
            said += (f"; the normal arithmetic's {weeks_words(s.weeks_normal)} would not do: with {units} holdout "
                     f"units the readout's test claims a false win {fw * 100:.1f}% of the time")
        elif fw is not None:
            said += (f"; the normal arithmetic's {weeks_words(s.weeks_normal)} would not do: with {units} holdout "
                     f"units the readout's test has too little power on this skewed revenue")
    return said


def _decision_words(p: Plan, h: float, w: int) -> str:
    """What the recommended design can and cannot decide against break-even (needs spend and margin)."""
    x = p.inputs
    if x.weekly_spend is None or p.break_even_iroas is None:
        return ""
    be = p.break_even_iroas
    c = _cell_at(p, h, w)
    pays = c.iroas_vs_break_even
    if pays is None:  # set whenever spend and margin are given, as checked above
        return ""
    not_pays = be - (pays - be)
    words = (f"Against break-even (iROAS {sig3(be)} = 1 / margin {percent_short(x.margin or 1)}): it shows the channel pays "
             f"when its iROAS is {sig3(pays)} or more")
    if not_pays > 0:
        words += f", shows it does not pay at {sig3(not_pays)} or less, and between those most likely ends undecided"
    else:
        words += (f", and cannot show that it does not pay (that would need an iROAS below zero); between "
                  f"0 and {sig3(pays)} it most likely ends undecided")
    return words + " (iROAS = incremental revenue / the whole spend, as the readout divides)."


def _cell_at(p: Plan, h: float, w: int) -> Cell:
    try:
        return p.cell(h, w)
    except KeyError:  # not on the grid the user asked for: the same arithmetic for this one design
        one = make_plan(p.inputs, shares=[h], weeks=[w], max_weeks=p.max_weeks, simulate=False)
        return one.cell(h, w)


def recommend(p: Plan) -> Recommendation:
    """The design to run: among the shares whose sound weeks fit `max_weeks`, the one `--prefer` picks
    (balanced by default), with the faster and the cheaper alternatives and what each costs; else the
    fastest sound share; else say it cannot be done."""
    x = p.inputs
    if not p.summaries:
        return Recommendation("skipped", None, None,
                              "No target effect was given, so there is no recommendation: give --effect, --lift "
                              "or --target-iroas (with --weekly-spend) to see how long each holdout share needs.")
    def how(s: ShareSummary) -> str:  # the power the design has (simulated), and what was asked for
        had = (f"with {s.power_simulated * 100:.1f}% power ({x.power * 100:.3g}% asked for)"
               if s.power_simulated is not None else f"with {x.power * 100:.3g}% power")
        return had + f" at alpha {x.alpha * 100:g}%" + (" using CUPED" if p.cuped else "")

    question = " from break-even" if x.against == "break-even" else ""
    if x.against == "break-even" and all(not math.isfinite(s.weeks_needed) for s in p.summaries):
        t = p.summaries[-1]
        assert x.weekly_spend is not None and p.break_even_iroas is not None
        iroas = t.target_difference * (1 - t.share) * x.weekly_units / x.weekly_spend
        return Recommendation("fail", None, None,
                              f"The target's iROAS ({sig3(iroas)} at a {percent_short(t.share)} holdout) is not above break-even "
                              f"({sig3(p.break_even_iroas)} = 1 / margin): there is no paying channel to tell from "
                              "break-even; aim at a higher target, or plan with --against zero.")
    sound = [s for s in p.summaries if s.weeks is not None]
    in_time = [s for s in sound if _weeks(s) <= p.max_weeks]
    if in_time:
        s = _choose(p, in_time)
        assert s.weeks is not None and s.revenue_forgone is not None
        parts = [f"Hold out {percent_short(s.share)} of new units for {weeks_words(s.weeks)}"
                 + (f" (between {s.weeks_range[0]} and {s.weeks_range[1]} weeks given the pre-period's sampling "
                    "error)" if s.weeks_range and s.weeks_range[0] != s.weeks_range[1] else "")
                 + f": that tells {_target_words(p, s.share)}{question} {how(s)}, and forgoes about "
                 f"{cash(p, s.revenue_forgone)} of revenue if the channel works that well."]
        sim = _sound_words(p, s)
        if sim:
            parts.append(sim[0].upper() + sim[1:] + ".")
        faster = sorted((t for t in sound if _weeks(t) < s.weeks), key=lambda t: (_weeks(t), _forgone(t)))
        cheaper = sorted((t for t in in_time if _forgone(t) < s.revenue_forgone and t is not s),
                         key=_forgone)
        alt = []
        for t in faster[:2]:
            alt.append(f"{percent_short(t.share)} for {weeks_words(_weeks(t))} ends {weeks_words(s.weeks - _weeks(t))} sooner and "
                       f"forgoes {cash(p, _forgone(t) - s.revenue_forgone)} more")
        if cheaper:
            t = cheaper[0]
            alt.append(f"{percent_short(t.share)} for {weeks_words(_weeks(t))} forgoes {cash(p, s.revenue_forgone - _forgone(t))} "
                       f"less and takes {weeks_words(_weeks(t) - s.weeks)} longer")
        if alt:
            parts.append("Alternatives: " + "; ".join(alt) + ".")
        dec = _decision_words(p, s.share, s.weeks)
        if dec:
            parts.append(dec)
        return Recommendation("pass", s.share, s.weeks, " ".join(parts), s.power_simulated, s.false_win_rate)
    if sound:
        f = min(sound, key=lambda t: (t.weeks, t.share))
        assert f.weeks is not None and f.revenue_forgone is not None
        rng = (f" (between {f.weeks_range[0]} and {f.weeks_range[1]} weeks given the pre-period's sampling error)"
               if f.weeks_range and f.weeks_range[0] != f.weeks_range[1] else "")
        parts = [f"No holdout share tells {_target_words(p, f.share)}{question} within the {p.max_weeks} weeks "
                 f"allowed; the fastest is {percent_short(f.share)} for {weeks_words(f.weeks)}{rng}, {how(f)}, forgoing about "
                 f"{cash(p, f.revenue_forgone)} of revenue; or aim at a larger effect, reach more of the exposed "
                 "arm, or add a pre-period covariate."]
        sim = _sound_words(p, f)
        if sim:
            parts.append(sim[0].upper() + sim[1:] + ".")
        return Recommendation("warn", f.share, f.weeks, " ".join(parts), f.power_simulated, f.false_win_rate)
    best_share = max(p.shares)
    best = p.cell(best_share, max(p.weeks))
    target = p.summary(best_share).target_difference
    return Recommendation("fail", None, None,
                          f"No holdout share up to {percent_short(best_share)} tells {_target_words(p, best_share)}{question} "
                          f"within {MAX_WEEKS // 52} years in a sound design: at {weeks_words(max(p.weeks))} "
                          f"the {percent_short(best_share)} holdout can only tell apart {cash(p, best.mde_per_exposed)} per "
                          f"reached unit, {best.mde_cuped / target:.1f} times the target; as planned the test would "
                          "most likely end inconclusive, so aim at a larger effect, reach more of the exposed arm, or "
                          "add a pre-period covariate.")


def _assumptions(p: Plan) -> list[str]:
    x = p.inputs
    sp = p.shape
    out = [
        "Units are randomized at their first visit; revenue per unit over the test has the given mean and SD "
        "whatever the duration (in practice both grow as early units keep buying, which the plan does not model).",
        ("Both arms have the same revenue SD (the textbook formula, --equal-variance)" if x.equal_variance else
         "The ad adds revenue by bringing more buyers with the same baskets, so the exposed arm's variance grows "
         "with the effect (by about the relative lift; each arm is read with its own variance, as the readout's "
         "Welch interval does)")
        + "; the normal arithmetic gives each share's weeks, two-sided at alpha.",
        f"The readout reads revenue per unit with Welch's t-test{' on the CUPED-adjusted values' if p.cuped else ''};"
        f" every recommended design is that test simulated ({soundness.SIMS:,} seeded tests) on "
        + (f"the pre-period's own revenue per unit, resampled ({percent_short(sp[0])} of units with revenue)" if p.resampled else
           f"zero-inflated lognormal revenue with the inputs' mean and SD ({percent_short(sp[0])} of units buy; order values "
           f"lognormal, sigma {sp[2]:.2f}"
           f"{'' if x.conversion is not None else ', the share at which order values have a CV of 1'})")
        + f", and kept only where false wins stay within alpha + {LEVEL_SLACK * 100:g} point and power within "
        f"{POWER_SLACK * 100:g} point of the plan.",
        f"Only reached units respond: the arm-level difference is the effect per reached unit times the "
        f"exposure rate ({percent_short(x.exposure_rate)} of the exposed arm reached).",
    ]
    if p.cuped:
        out.append(f"CUPED with the readout's pre-period covariate(s), correlated {x.rho:.3g} with revenue, multiplies "
                   f"the variance by 1 - rho^2 = {1 - x.rho ** 2:.3g} (Deng, Xu, Kohavi & Walker 2013); the readout "
                   "must use the same covariate(s).")
    if x.weekly_spend is not None:
        out.append("Weekly spend is the channel's whole spend during the test, all of it on the exposed arm; iROAS = "
                   "incremental revenue of the exposed arm / the whole spend, as the readout divides, so at share h "
                   "iROAS = difference per unit x (1 - h) x weekly units / weekly spend.")
    out.append(f"{PREFER[p.prefer][0].upper()}{PREFER[p.prefer][1:]} is recommended (--prefer {p.prefer}).")
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
    unsound = [s for s in p.summaries if s.weeks_normal is not None and (s.weeks is None or s.weeks > s.weeks_normal)]
    if unsound:
        out.append("For " + ", ".join(percent_short(s.share) for s in unsound) + " the normal arithmetic's weeks were too few "
                   "for the readout's test on this skewed revenue (simulated), so more weeks are planned.")
    return out
