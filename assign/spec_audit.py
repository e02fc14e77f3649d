"""Settings of the weekly audit, the `[audit]` table of the spec: column map and thresholds."""

from __future__ import annotations

from pydantic import BaseModel, ConfigDict, Field


class AuditThresholds(BaseModel):
    """Where a check turns from pass to warn or fail."""

    model_config = ConfigDict(extra="forbid")

    # Fabijan et al. (2019, KDD) use p < 0.0005 for SRM (as commonly quoted).
    srm_p: float = Field(0.0005, gt=0, lt=1)
    # The anytime-valid p-value is larger by design; it needs its own threshold.
    srm_anytime_p: float = Field(0.001, gt=0, lt=1)
    # |SMD| > 0.1 is the common imbalance line (Austin 2009, Statistics in Medicine).
    smd_warn: float = Field(0.1, gt=0)


class AuditSettings(BaseModel):
    """The `[audit]` table."""

    model_config = ConfigDict(extra="forbid")

    thresholds: AuditThresholds = AuditThresholds()


def audit_section_toml() -> str:
    """The commented `[audit]` tables written by `armlock init`."""
    return '''
[audit.thresholds]
# Where the weekly audit (`armlock audit`) turns a check from pass to warn/fail.
srm_p = 0.0005          # fixed-horizon chi-square SRM (Fabijan et al. 2019, as commonly quoted)
srm_anytime_p = 0.001   # anytime-valid sequential SRM (Lindon & Malek 2022); p-values are larger by design
smd_warn = 0.1          # covariate balance: |standardized mean difference| above this warns (Austin 2009)
'''
