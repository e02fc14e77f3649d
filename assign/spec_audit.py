"""Settings of the weekly audit, the `[audit]` tables of the spec: column maps, segments, thresholds."""

from __future__ import annotations

from pydantic import BaseModel, ConfigDict, Field, field_validator, model_validator

COLUMN = r"^[^\x00-\x1f]{1,200}$"  # a column name: any printable text
OPTIONAL_COLUMN = r"^[^\x00-\x1f]{0,200}$"  # "" = the file has no such column
TIME_FORMATS = ("iso8601", "epoch_seconds", "epoch_milliseconds")
TIME_FORMAT_HELP = ('"iso8601" (default), "epoch_seconds", "epoch_milliseconds", or a strftime pattern '
                    'such as "%d/%m/%Y %H:%M"')


def check_time_format(value: str) -> str:
    """A time format is one of TIME_FORMATS or a strftime pattern (it contains '%')."""
    if value in TIME_FORMATS:
        return value
    if "%" in value and len(value) <= 100:
        from datetime import datetime

        try:  # compiles the pattern first: an unknown directive or a stray % is refused here, not mid-audit
            datetime.strptime("\x00", value)
        except ValueError as exc:
            if "does not match format" not in str(exc) and "unconverted data" not in str(exc):
                raise ValueError(f"time format {value!r}: {exc}; use {TIME_FORMAT_HELP}") from None
        return value
    raise ValueError(f"unknown time format {value!r}; use {TIME_FORMAT_HELP}")


def check_delimiter(value: str) -> str:
    """The CSV field separator: one character that is not a quote, a line break or a space."""
    if value == "\\t":  # written as the two characters \t
        value = "\t"
    if len(value) != 1 or value in "\"\r\n ":
        raise ValueError(f'delimiter must be one character such as "," ";" "|" or "\\t", got {value!r}')
    return value


class FileColumns(BaseModel):
    """What every mapped file shares: the CSV delimiter (ignored for Parquet)."""

    model_config = ConfigDict(extra="forbid")

    # The CSV field separator; many spreadsheet exports use ";" and some tools a tab ("\t").
    delimiter: str = ","

    @field_validator("delimiter")
    @classmethod
    def _delimiter_ok(cls, v: str) -> str:
        return check_delimiter(v)


class VisitColumns(FileColumns):
    """Column names of the visits / first-seen file (one row per unit; repeated rows keep the earliest)."""

    unit_id: str = Field("unit_id", pattern=COLUMN)
    first_seen: str = Field("first_seen", pattern=COLUMN)
    # How `first_seen` is written when it is text or a number (see TIME_FORMAT_HELP).
    first_seen_format: str = "iso8601"
    arm: str = Field("arm", pattern=COLUMN)
    # Optional: the spec fingerprint the site stamped on the row; "" = the file has none.
    fingerprint: str = Field("spec_fingerprint", pattern=OPTIONAL_COLUMN)
    # Optional: the browser family, used by the identity-churn check per browser; "" = none.
    browser: str = Field("browser_family", pattern=OPTIONAL_COLUMN)

    @field_validator("first_seen_format")
    @classmethod
    def _format_ok(cls, v: str) -> str:
        return check_time_format(v)


class ExposureColumns(FileColumns):
    """Column names of the ad vendor's exposure log (one row per impression or click)."""

    unit_id: str = Field("unit_id", pattern=COLUMN)
    time: str = Field("event_time", pattern=COLUMN)
    # How `time` is written when it is text or a number (vendors often export epoch seconds/ms).
    time_format: str = "iso8601"
    campaign: str = Field("campaign", pattern=COLUMN)
    kind: str = Field("event_kind", pattern=COLUMN)
    impression_values: list[str] = Field(default_factory=lambda: ["impression"], min_length=1)
    click_values: list[str] = Field(default_factory=lambda: ["click"], min_length=1)

    @model_validator(mode="after")
    def _disjoint(self) -> ExposureColumns:
        both = sorted(set(self.impression_values) & set(self.click_values))
        if both:
            raise ValueError(f"a kind cannot be both impression and click: {', '.join(both)}")
        return self

    @field_validator("time_format")
    @classmethod
    def _format_ok(cls, v: str) -> str:
        return check_time_format(v)


class IdentityColumns(FileColumns):
    """Column names of the identity-link file (unit id -> logged-in customer key)."""

    unit_id: str = Field("unit_id", pattern=COLUMN)
    customer: str = Field("customer_key", pattern=COLUMN)
    # Optional: when the link was first made. With it, an audit as of a date uses only links made
    # by then; without it ("" or absent), only links of units first seen by then (noted).
    time: str = Field("linked_at", pattern=OPTIONAL_COLUMN)
    time_format: str = "iso8601"

    @field_validator("time_format")
    @classmethod
    def _format_ok(cls, v: str) -> str:
        return check_time_format(v)


class AuditThresholds(BaseModel):
    """Where a check turns from pass to warn or fail."""

    model_config = ConfigDict(extra="forbid")

    # Fabijan et al. (2019, KDD) use p < 0.0005 for SRM (as commonly quoted). Used by SRM by day and
    # segment (Holm-adjusted exact p); the overall fixed-horizon p is shown for information only.
    srm_p: float = Field(0.0005, gt=0, lt=1)
    # The overall SRM fails when the anytime-valid p (valid at every weekly look) falls below this.
    srm_anytime_p: float = Field(0.001, gt=0, lt=1)
    # |SMD| > 0.1 is the common imbalance line (Austin 2009, Statistics in Medicine). The balance
    # status is set by randomization tests (balance_p); a warning says whether |SMD| is above this.
    smd_warn: float = Field(0.1, gt=0)
    # |SMD| > 0.25 (Rubin 2001 / Stuart 2010, as quoted in the SAS PROC PSMATCH guide): a balance
    # difference beyond chance (balance_p) AND this large fails.
    smd_fail: float = Field(0.25, gt=0)
    # Variance ratio range (Rubin 2001: between 0.5 and 2); shown, it no longer sets the status
    # (heavy-tailed covariates make it swing widely by chance).
    variance_ratio_max: float = Field(2.0, gt=1)
    # Holm-adjusted p of a balance test (mean vs randomization, rank-sum, chi-square) below this warns.
    balance_p: float = Field(0.001, gt=0, lt=1)
    # Share of units whose recorded arm differs from the recomputed one: warn above / fail above.
    mismatch_warn: float = Field(0.0, ge=0, lt=1)
    mismatch_fail: float = Field(0.001, ge=0, lt=1)
    # Share of units first seen before the test start that warns.
    pre_start_warn: float = Field(0.0, ge=0, lt=1)
    # Share of the holdout reached by the vendor: warn above / fail above.
    leak_warn: float = Field(0.0, ge=0, lt=1)
    leak_fail: float = Field(0.005, ge=0, lt=1)
    # Share of units exposed before their first assignment or before the start: warn / fail above.
    pre_exposure_warn: float = Field(0.0, ge=0, lt=1)
    pre_exposure_fail: float = Field(0.01, ge=0, lt=1)
    # Share of exposed ids never seen in the visits that warns.
    unseen_warn: float = Field(0.01, ge=0, lt=1)
    # ... above this share the exposure log is judged not to match the visits (another id, a prefix,
    # hashed ids): leakage fails, since its figures would be meaningless (common practice).
    unseen_fail: float = Field(0.5, ge=0, le=1)
    # Share of customers whose ids fall in several arms: warn / fail above (overall or per browser).
    churn_warn: float = Field(0.02, ge=0, lt=1)
    churn_fail: float = Field(0.05, ge=0, lt=1)
    # Segment values with fewer expected units per arm than this are not tested (chi-square rule).
    min_expected: float = Field(5.0, gt=0)
    # Browser families with fewer customers than this are listed but do not set the churn status.
    min_customers: int = Field(200, ge=1)

    @model_validator(mode="after")
    def _ordered(self) -> AuditThresholds:
        pairs = [("smd_warn", "smd_fail"), ("mismatch_warn", "mismatch_fail"),
                 ("leak_warn", "leak_fail"), ("pre_exposure_warn", "pre_exposure_fail"),
                 ("churn_warn", "churn_fail"), ("unseen_warn", "unseen_fail")]
        for lo, hi in pairs:
            if getattr(self, lo) > getattr(self, hi):
                raise ValueError(f"{lo} ({getattr(self, lo)}) must not exceed {hi} ({getattr(self, hi)})")
        return self


class AuditSettings(BaseModel):
    """The `[audit]` tables."""

    model_config = ConfigDict(extra="forbid")

    # Columns of the visits file to test for SRM by segment (categoricals).
    segments: list[str] = Field(
        default_factory=lambda: ["browser_family", "device", "country", "landing_channel"])
    # Numeric covariates to balance (pre-period outcomes included); 0/1 columns count as binary.
    covariates: list[str] = Field(default_factory=lambda: ["pre_orders", "pre_revenue"])
    # Categorical covariates to balance, expanded per level.
    categorical_covariates: list[str] = Field(default_factory=lambda: ["device", "landing_channel"])
    visits: VisitColumns = VisitColumns()
    exposures: ExposureColumns = ExposureColumns()
    identities: IdentityColumns = IdentityColumns()
    thresholds: AuditThresholds = AuditThresholds()

    @model_validator(mode="after")
    def _no_clash(self) -> AuditSettings:
        core = {self.visits.unit_id, self.visits.first_seen, self.visits.arm}
        for field in ("segments", "covariates", "categorical_covariates"):
            bad = sorted(core & set(getattr(self, field)))
            if bad:
                raise ValueError(f"{field} must not list the id, time or arm column: {', '.join(bad)}")
        both = sorted(set(self.covariates) & set(self.categorical_covariates))
        if both:
            raise ValueError(f"a covariate is either numeric or categorical, not both: {', '.join(both)}")
        return self


def audit_section_toml() -> str:
    """The commented `[audit]` tables written by `armlock init`."""
    return '''
[audit]
# The weekly split-health audit (`armlock audit`). Column names are those of YOUR exports:
# change the right-hand sides to match them. Visitor ids are personal data in many places:
# keep these files where your privacy rules allow, and follow local law and your counsel.
segments = ["browser_family", "device", "country", "landing_channel"]  # SRM by segment (visits columns)
covariates = ["pre_orders", "pre_revenue"]          # numeric covariates to balance (0/1 = binary)
categorical_covariates = ["device", "landing_channel"]  # categorical covariates, per level

[audit.visits]
# The visits / first-seen file: one row per unit (repeated rows: the earliest is kept).
unit_id = "unit_id"                 # the visitor id the split hashed
first_seen = "first_seen"           # first-seen time; a time without a zone is read as UTC
first_seen_format = "iso8601"       # or "epoch_seconds", "epoch_milliseconds", or a pattern like "%d/%m/%Y %H:%M"
arm = "arm"                         # the arm the site recorded
fingerprint = "spec_fingerprint"    # optional: spec fingerprint stamped by the site ("" = none)
browser = "browser_family"          # optional: browser family, for identity churn ("" = none)
delimiter = ","                     # CSV field separator (";" or "\\t" for many spreadsheet exports)

[audit.exposures]
# The ad vendor's exposure log: one row per impression or click.
unit_id = "unit_id"                 # the same visitor id as in the visits file
time = "event_time"                 # when the ad was served or clicked
time_format = "iso8601"             # or "epoch_seconds", "epoch_milliseconds", or a pattern like "%d/%m/%Y %H:%M:%S"
campaign = "campaign"               # campaign or line item
kind = "event_kind"                 # impression or click
impression_values = ["impression"]  # values of `kind` that mean an impression
click_values = ["click"]            # values of `kind` that mean a click
delimiter = ","                     # CSV field separator

[audit.identities]
# Optional identity links: unit id -> logged-in customer key (to measure identity churn).
unit_id = "unit_id"                 # the same visitor id as in the visits file
customer = "customer_key"           # the logged-in customer key (pseudonymous is enough)
time = "linked_at"                  # optional: when the link was made; an audit as of a date uses only
                                    # links made by then (without it: links of units first seen by then)
time_format = "iso8601"             # how `time` is written (as for the other files)
delimiter = ","                     # CSV field separator

[audit.thresholds]
# Where the weekly audit turns a check from pass to warn/fail. Shares are fractions (0.01 = 1%).
srm_p = 0.0005          # SRM by day/segment: Holm-adjusted exact p below this fails (Fabijan et al. 2019, as commonly quoted)
srm_anytime_p = 0.001   # overall SRM fails below this anytime-valid p (Lindon & Malek 2022; valid at every weekly look)
smd_warn = 0.1          # balance: a warning says whether |standardized mean difference| is above this (Austin 2009)
smd_fail = 0.25         # balance: a difference beyond chance with |SMD| above this fails (Rubin 2001, Stuart 2010)
variance_ratio_max = 2.0  # balance: variance ratio range (Rubin 2001); shown for information
balance_p = 0.001       # balance: Holm-adjusted randomization / rank-sum / chi-square p below this warns
mismatch_warn = 0.0     # integrity: share of units whose recorded arm differs from the spec's; above warns
mismatch_fail = 0.001   # ... above this fails
pre_start_warn = 0.0    # integrity: share of units first seen before `start`; above warns
leak_warn = 0.0         # leakage: share of the holdout reached by the vendor; above warns
leak_fail = 0.005       # ... above this fails
pre_exposure_warn = 0.0   # leakage: share of units exposed before assignment or start; above warns
pre_exposure_fail = 0.01  # ... above this fails
unseen_warn = 0.01      # leakage: share of exposed ids never seen in the visits; above warns
unseen_fail = 0.5       # ... above this the log does not match the visits (another id, a prefix, hashing): fails
churn_warn = 0.02       # identity churn: share of customers in several arms; above warns
churn_fail = 0.05       # ... above this fails (overall or in one browser family)
min_expected = 5.0      # SRM by segment: values with fewer expected units per arm are not tested
min_customers = 200     # churn: browser families with fewer customers do not set the status
'''
