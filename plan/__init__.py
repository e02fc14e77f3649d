"""armlock plan: before the test, how big a holdout, for how long and at what cost (pure statistics + report)."""

from .compute import make_plan
from .model import Plan, PlanInputs
from armlock.shared.power import mde, power_at, se_difference, units_needed, z_sum

__all__ = ["Plan", "PlanInputs", "make_plan", "mde", "power_at", "se_difference", "units_needed", "z_sum"]
