"""The decision: does the channel pay, not pay, or is it not yet known, on the interval valid for this look.

The rule (docs/readout-decision.md has its calibration):

- break-even is the iROAS at which incremental profit equals spend, 1 / margin, unless the spec
  names a `target_iroas` the channel must beat;
- the interval is the anytime-valid one at every look before the planned size (`planned_units`,
  or the spec's `end`) is reached, and the fixed-horizon one at the planned final look; with no
  planned size every look is an interim look (anytime);
- *pays* when the whole interval lies above break-even, *does not pay* when it lies below, *not
  yet known* when it contains break-even;
- a gate that is not passed (the readout is not `trustworthy`) withholds the answer: it is *not
  yet known*, and the reason names the checks.

Read weekly this way, the chance of ever saying *pays* for a channel exactly at break-even is at
most alpha / 2 from the anytime looks plus alpha / 2 at the one final look (the union bound).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import date, time, timedelta, timezone

# scipy.stats: imported inside the functions that use it (0.6 s; shared/lazy.py imports it on a thread beside the reading)

from armlock.assign import Spec

from .model import Decision, Interval

# Our choice, from the calibration in docs/readout-decision.md: below this many buyers in the holdout
# or in the exposed arms, heavy-tailed revenue makes the normal approximation of either interval too
# optimistic (false "pays" at break-even 9-10% at 64 holdout buyers), so the answer waits.
MIN_BUYERS = 50


@dataclass(frozen=True)
class Stage:
    """Whether this look is the planned final look, and why (said in the decision's reason)."""

    final: bool
    why: str
    planned_units: int | None
    planned_end: str | None


def stage(spec: Spec, *, units: int, as_of: date, earlier: list[tuple[date, int]] = ()) -> Stage:  # type: ignore[assignment]
    """The look's stage. The planned final look is the first look at which the planned units are
    reached, or the as-of day reaches the spec's planned end (the day before `end` when it falls at
    midnight, else its day). `earlier` holds the scheduled looks before this one (date, units): when
    one of them already reached the plan, that look was the final one and this look is read with
    the anytime interval, so a test read on past its plan never gets a second fixed look."""
    cfg = spec.readout
    planned = cfg.planned_units or None
    end_day = None
    if spec.end is not None:
        end = spec.end.astimezone(timezone.utc)
        end_day = (end - timedelta(microseconds=1)).date() if end.time() == time(0) else end.date()
    end_s = end_day.isoformat() if end_day else None

    def reached(day: date, n: int) -> bool:
        return bool(planned and n >= planned) or (end_day is not None and day >= end_day)

    if reached(as_of, units):
        before = [d for d, n in earlier if d < as_of and reached(d, n)]
        if before:
            return Stage(False, f"the planned final look was {before[0].isoformat()}; a later look is read with the "
                                "anytime interval", planned, end_s)
        if planned and units >= planned:
            return Stage(True, f"the planned size is reached ({units:,} of {planned:,} units)", planned, end_s)
        return Stage(True, f"the planned end ({end_s}) is reached", planned, end_s)
    if planned:
        why = f"this look comes before the planned size ({units:,} of {planned:,} units)"
    elif end_day is not None:
        why = f"this look comes before the planned end ({end_s})"
    else:
        why = "no planned size is set (planned_units or end), so every look is an interim look"
    return Stage(False, why, planned, end_s)


def breakeven(spec: Spec) -> tuple[float, str]:
    """The iROAS the channel must beat, and where it comes from."""
    cfg = spec.readout
    if cfg.target_iroas:
        return float(cfg.target_iroas), f"the spec's target iROAS {cfg.target_iroas:g}"
    return 1.0 / cfg.margin, f"break-even, 1 / margin {cfg.margin:g}"


def p_against(iroas: Interval | None, target: float, df: float | None) -> float | None:
    """Two-sided p of iROAS = target from the estimate and its standard error (t with the Welch
    df when there is one, else normal), so p < alpha exactly when the fixed interval excludes it."""
    from scipy import stats as sps
    if iroas is None or iroas.value is None or not iroas.se or not math.isfinite(iroas.se):
        return None
    t = (iroas.value - target) / iroas.se
    return float(2 * (sps.t.sf(abs(t), df) if df else sps.norm.sf(abs(t))))


def _r(v: float | None) -> str:
    return "n/a" if v is None or not math.isfinite(v) else f"{v:,.2f}"


def decide(spec: Spec, *, iroas: Interval | None, df: float | None, units: int, as_of: str, trustworthy: bool,
           gate_problem: str, earlier: list[tuple[date, int]] = (),  # type: ignore[assignment]
           buyers: int | None = None) -> Decision:
    """The decision at this look (see the module docstring for the rule)."""
    alpha = spec.readout.alpha
    level = round(100 * (1 - alpha))
    st = stage(spec, units=units, as_of=date.fromisoformat(as_of), earlier=earlier)
    target, source = breakeven(spec)
    basis = "fixed" if st.final else "anytime"
    lo = hi = None
    if iroas is not None:
        lo, hi = (iroas.lo, iroas.hi) if st.final else (iroas.anytime_lo, iroas.anytime_hi)
    which = f"{level}% {'fixed-horizon' if st.final else 'anytime'} interval"
    p = p_against(iroas, target, df) if st.final else None
    base = dict(basis=basis, breakeven_iroas=target, breakeven_source=source, iroas=iroas.value if iroas else None,
                lo=lo, hi=hi, level=level, p_breakeven=p, final_look=st.final, stage=st.why,
                planned_units=st.planned_units, planned_end=st.planned_end, units=units)
    if not trustworthy:
        return Decision(answer="not_yet_known", withheld=True, **base,
                        reason=f"The answer is withheld: {gate_problem}.",
                        action="Fix what the audit gate names and read again; do not act on these figures.")
    if iroas is None or iroas.value is None:
        return Decision(answer="not_yet_known", withheld=False, **base,
                        reason="No spend was given (--spend or --spend-file), so iROAS and the decision are not "
                               "computed.",
                        action="Give the channel's spend over the test and read again.")
    if lo is None or hi is None:
        return Decision(answer="not_yet_known", withheld=False, **base,
                        reason="Cannot judge: iROAS has no interval yet (too few units or no variation in "
                               "revenue).",
                        action="Keep the test running and read again.")
    if buyers is not None and buyers < MIN_BUYERS:
        return Decision(answer="not_yet_known", withheld=False, **base,
                        reason=f"Too few buyers to judge: {buyers:,} in the smaller side (holdout or exposed), "
                               f"fewer than {MIN_BUYERS}; with so few the interval is not yet reliable.",
                        action="Keep the test running; the answer comes when both sides have enough buyers.")
    span = f"iROAS {_r(iroas.value)} ({which} {_r(lo)} to {_r(hi)})"
    when = f"; {st.why}" if st.why else ""
    if lo > target:
        answer, said = "pays", f"{span} lies above {source} ({_r(target)}){when}."
        action = ("Keep the channel: at the current spend every incremental revenue the interval allows more than "
                  "covers it. Keep a holdout to see that it stays so.")
    elif hi < target:
        answer, said = "does_not_pay", f"{span} lies below {source} ({_r(target)}){when}."
        action = ("Cut or renegotiate the channel's spend: at the current spend it does not earn back its cost. "
                  "A lower bid or a smaller audience is a new test.")
    else:
        answer, said = "not_yet_known", f"{span} contains {source} ({_r(target)}){when}."
        action = ("Keep the test running to its planned size and decide then; acting on this look is a guess."
                  if not st.final and (st.planned_units or st.planned_end) else
                  "Keep the test running, and set planned_units (or end) in the spec so one look is the final "
                  "one; until then every look reads the anytime interval." if not st.final else
                  "At its planned size the test cannot tell: the channel is close to break-even or the test too "
                  "small. Decide on other grounds, or plan a larger test.")
    return Decision(answer=answer, withheld=False, reason=said, action=action, **base)


__all__ = ["MIN_BUYERS", "Stage", "breakeven", "decide", "p_against", "stage"]
