"""The synthetic-log generator: deterministic, arms by the frozen contract, the spec's column names, faults as documented."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from armlock.assign import arm_for, spec_from_dict
from armlock.audit.synth import FAULTS, generate, write_logs

SPEC = spec_from_dict({"name": "synth", "salt": "synth-salt", "start": "2026-03-02T00:00:00Z",
                       "arms": [{"name": "holdout", "weight": 1000}, {"name": "exposed", "weight": 9000}]})


def test_same_seed_same_logs_other_seed_other_logs() -> None:
    a, b = generate(SPEC, units=3000, seed=4), generate(SPEC, units=3000, seed=4)
    pd.testing.assert_frame_equal(a.visits, b.visits)
    pd.testing.assert_frame_equal(a.exposures, b.exposures)
    c = generate(SPEC, units=3000, seed=5)
    assert not a.visits["first_seen"].equals(c.visits["first_seen"])


def test_arms_follow_the_contract_and_ids_are_unique() -> None:
    logs = generate(SPEC, units=5000, seed=1, faults=("cookie_churn",))
    v = logs.visits
    assert v["unit_id"].is_unique
    sample = v.sample(300, random_state=0)
    assert [arm_for(SPEC, u) for u in sample["unit_id"]] == sample["arm"].astype(str).tolist()
    assert set(v["spec_fingerprint"].astype(str)) == {SPEC.fingerprint}
    assert v["first_seen"].is_monotonic_increasing
    assert (v["first_seen"] >= pd.Timestamp(SPEC.start)).all()


def test_mixes_are_generic_and_invented() -> None:
    v = generate(SPEC, units=20_000, seed=2).visits
    assert set(v["browser_family"].cat.categories) == {"chromium-based", "webkit", "gecko", "other"}
    assert set(v["country"].astype(str)) <= {"US", "GB", "DE", "FR", "CA", "NL", "ES", "IT"}  # ISO 3166-1 alpha-2
    share = v["browser_family"].value_counts(normalize=True)
    assert 0.55 < share["chromium-based"] < 0.69 and 0.2 < share["webkit"] < 0.32


def test_no_exposure_in_the_holdout_without_faults() -> None:
    logs = generate(SPEC, units=5000, seed=3)
    holdout = set(logs.visits.loc[logs.visits["arm"] == "holdout", "unit_id"])
    assert not holdout & set(logs.exposures["unit_id"])
    assert set(logs.exposures["event_kind"].astype(str)) == {"impression", "click"}


def test_exposure_rows_scale_with_events_per_unit() -> None:
    logs = generate(SPEC, units=4000, seed=3, events_per_unit=10.0)
    assert 0.9 * 40_000 < len(logs.exposures) < 1.1 * 40_000


def test_unknown_fault_is_refused() -> None:
    with pytest.raises(ValueError, match="unknown fault"):
        generate(SPEC, units=100, faults=("gremlins",))
    assert FAULTS == ("browser_loss", "leakage", "pre_exposure", "cookie_churn", "imbalance")


def test_browser_loss_removes_only_holdout_units_on_one_browser() -> None:
    clean = generate(SPEC, units=20_000, seed=6).visits
    lossy = generate(SPEC, units=20_000, seed=6, faults=("browser_loss",))
    gone = clean[~clean["unit_id"].isin(set(lossy.visits["unit_id"]))]
    assert len(gone) == lossy.truth["lost_units"] > 0
    assert set(gone["arm"].astype(str)) == {"holdout"}
    assert set(gone["browser_family"].astype(str)) == {"webkit"}


def test_write_logs_round_trips(tmp_path) -> None:  # type: ignore[no-untyped-def]
    logs = generate(SPEC, units=1000, seed=7)
    for fmt in ("csv", "csv.gz", "parquet"):
        paths = write_logs(logs, tmp_path / fmt.replace(".", "_"), fmt)
        assert set(paths) == {"visits", "exposures", "identities"}
        back = pd.read_parquet(paths["visits"]) if fmt == "parquet" else pd.read_csv(paths["visits"], dtype=str)
        assert back["unit_id"].tolist() == logs.visits["unit_id"].tolist()
    with pytest.raises(ValueError):
        write_logs(logs, tmp_path, "xlsx")
    assert np.isfinite(logs.visits["pre_revenue"]).all()
