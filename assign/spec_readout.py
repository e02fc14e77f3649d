"""Settings of the end-of-test readout, the `[readout]` tables of the spec: orders columns, window, money."""

from __future__ import annotations

from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, field_validator, model_validator

COLUMN = r"^[^\x00-\x1f]{1,200}$"  # a column name: any printable text
OPTIONAL = r"^[^\x00-\x1f]{0,200}$"  # "" = the file has no such column


class OrderColumns(BaseModel):
    """Column names of the orders file (one row per order; refunds as negative revenue)."""

    model_config = ConfigDict(extra="forbid")

    # Exactly one key: the visitor id (unit_id) or a customer key joined through the identity links.
    unit_id: str = Field("unit_id", pattern=OPTIONAL)
    customer: str = Field("", pattern=OPTIONAL)
    time: str = Field("order_time", pattern=COLUMN)
    revenue: str = Field("revenue", pattern=COLUMN)
    order_id: str = Field("order_id", pattern=OPTIONAL)  # repeated ids are counted once
    attributed: str = Field("", pattern=OPTIONAL)  # the channel attribution credited the order to
    attributed_value: str = Field("display", pattern=OPTIONAL)  # the value of `attributed` that means this channel

    @model_validator(mode="after")
    def _one_key(self) -> OrderColumns:
        if bool(self.unit_id) == bool(self.customer):
            raise ValueError('give exactly one key for orders: unit_id (the visitor id) or customer '
                             '(a customer key joined through the identity links); set the other to ""')
        return self


class SpendColumns(BaseModel):
    """Column names of the spend file (`--spend-file`): one row per campaign and day."""

    model_config = ConfigDict(extra="forbid")

    day: str = Field("day", pattern=COLUMN)
    amount: str = Field("amount", pattern=COLUMN)
    campaign: str = Field("campaign", pattern=OPTIONAL)


class ReadoutSettings(BaseModel):
    """The `[readout]` tables."""

    model_config = ConfigDict(extra="forbid")

    # Pre-period visits columns for variance reduction (CUPED); [] = no adjustment.
    covariates: list[str] = Field(default_factory=lambda: ["pre_revenue"], max_length=20)
    # Two-sided level of the intervals and the power of the minimum detectable effect.
    alpha: float = Field(0.05, gt=0, lt=0.5)
    power: float = Field(0.8, gt=0.5, lt=1)
    # Gross margin on revenue (0.3 = 30%): incremental profit = margin x incremental revenue.
    margin: float = Field(0.3, gt=0, le=1)
    # The iROAS the channel must beat to pay; 0 = break-even, 1 / margin (revenue that covers the spend).
    target_iroas: float = Field(0.0, ge=0, le=1000)
    currency: str = Field("USD", pattern=r"^[A-Z]{3}$")  # ISO 4217, for display only
    # Outcome window: "to_as_of" (every order from first-seen to the as-of date) or a number of
    # days after each unit's first-seen time (units whose window has not ended are left out).
    window: Literal["to_as_of"] | int = "to_as_of"
    # Cap each unit's revenue at this pooled quantile (arm-blind), e.g. 0.999; 0 = no cap.
    revenue_cap: float = Field(0.0, ge=0, lt=1)
    # Units (all arms) the test plans to reach: the anytime interval is tightest there. 0 = the
    # units at the as-of date (fine for one reading; set it before reading weekly).
    planned_units: int = Field(0, ge=0)
    look_days: int = Field(7, ge=1, le=92)  # the cadence of the looks in the over-time chart
    orders: OrderColumns = OrderColumns()
    spend: SpendColumns = SpendColumns()

    @field_validator("window", mode="before")
    @classmethod
    def _no_bool_window(cls, v: object) -> object:
        if isinstance(v, bool):  # TOML true would otherwise read as a one-day window
            raise ValueError('window is "to_as_of" or a whole number of days from 1 to 730, not true or false')
        return v

    @model_validator(mode="after")
    def _ok(self) -> ReadoutSettings:
        if isinstance(self.window, int) and not 1 <= self.window <= 730:
            raise ValueError(f'window is "to_as_of" or a number of days from 1 to 730, got {self.window}')
        if self.revenue_cap and self.revenue_cap < 0.5:
            raise ValueError(f"revenue_cap is a high quantile such as 0.999 (or 0 for none), got {self.revenue_cap}")
        dup = sorted({c for c in self.covariates if self.covariates.count(c) > 1})
        if dup:
            raise ValueError(f"covariates are listed twice: {', '.join(dup)}")
        return self


def readout_section_toml() -> str:
    """The commented `[readout]` tables written by `armlock init`."""
    return '''
[readout]
# The end-of-test readout (`armlock readout`): did the channel cause sales, and did it pay?
covariates = ["pre_revenue"]  # pre-period visits columns for variance reduction (CUPED); [] = none
alpha = 0.05                  # two-sided level of the intervals (0.05 = 95% intervals)
power = 0.8                   # power of the minimum detectable effect the report states
margin = 0.3                  # gross margin on revenue (0.3 = 30%), for profit and ROI: set yours
target_iroas = 0.0            # iROAS the channel must beat to pay; 0 = break-even, 1 / margin
currency = "USD"              # ISO 4217 code, for display only
window = "to_as_of"           # outcome window: "to_as_of", or days after first-seen (e.g. 28)
revenue_cap = 0.0             # cap unit revenue at this pooled quantile (e.g. 0.999); 0 = no cap
planned_units = 0             # units (all arms) the test plans: the anytime interval is tightest there; 0 = as of now
look_days = 7                 # days between the looks of the over-time chart

[readout.orders]
# The orders file from the shop's back end: one row per order; refunds as negative revenue.
unit_id = "unit_id"           # the visitor id ("" when orders carry only a customer key)
customer = ""                 # or a customer key, joined to visitors through the identity links
time = "order_time"           # when the order was placed; a time without a zone is read as UTC
revenue = "revenue"           # order revenue (negative for a refund)
order_id = "order_id"         # optional: order id, repeated ids counted once ("" = none)
attributed = ""               # optional: the channel attribution credited the order to ("" = none)
attributed_value = "display"  # the value of `attributed` that means this channel

[readout.spend]
# The spend file (--spend-file): one row per campaign and day.
day = "day"                   # the day (YYYY-MM-DD, UTC) the money was spent
amount = "amount"             # the amount, in the currency above
campaign = "campaign"         # optional: campaign or line item ("" = none)
'''
