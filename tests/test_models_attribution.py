"""Component attribution (residual-table reasoning) and the inspection suggestion."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from models.attribution import SAFETY_NOTE, choose_component, single_wheel_radius_fit, suggestion_for
from models.feature_set import evidence_key, model_features
from models.scorer import FleetScorer
from models.service import service_table
from tracktrue.schema import COMPONENTS, CORE_FEATURES, POSITIONS


def pick(**ev):
    return choose_component(ev, signal_z=4.0, attribution_z=4.0)[0]


def test_steady_ratio_error_without_jitter_or_dropouts_is_a_tyre():
    assert pick(wheel_ratio_rl=9.0, wheel_signal_rl=1.0) == "tyre_rl"


def test_jitter_or_dropouts_point_at_the_wheel_sensor_even_with_a_ratio_error():
    assert pick(wheel_ratio_fr=9.0, wheel_signal_fr=6.0) == "wheel_sensor_fr"


def test_yaw_offset_against_the_wheels_is_blamed_on_a_tyre_when_a_wheel_ratio_is_off():
    assert pick(wheel_ratio_rr=6.0, yaw_vs_wheels=20.0, steering_vs_wheels=15.0) == "tyre_rr"


def test_yaw_sensor_needs_an_independent_witness_for_the_yaw_versus_steering_residual():
    assert pick(yaw=8.0, steering_vs_yaw=7.0) == "yaw_sensor"
    assert pick(steering_vs_yaw=7.0) == "steering_angle_sensor"
    assert pick(steering_vs_wheels=9.0, steering_vs_yaw=6.0) == "steering_angle_sensor"


def test_accelerometer_offsets_and_nothing_abnormal():
    assert pick(accel_long=6.0) == "accel_long_sensor"
    assert pick(accel_lat_vs_wheels=6.0) == "accel_lat_sensor"
    assert pick(yaw=1.0, wheel_ratio_fl=2.0) == "none"


def test_every_choice_is_in_the_ranking_vocabulary_and_every_suggestion_ends_with_the_safety_note():
    for c in COMPONENTS:
        assert suggestion_for(c).endswith(SAFETY_NOTE)
    assert "tone ring" in suggestion_for("wheel_sensor_rl") and "rear-left" in suggestion_for("wheel_sensor_rl")
    assert "pressures" in suggestion_for("tyre_fl")
    assert "recalibrate" in suggestion_for("steering_angle_sensor") and "alignment" in suggestion_for("steering_angle_sensor")


def test_feature_selection_takes_core_features_and_chassis_extras_but_no_bookkeeping():
    cols = {c: [0.1] for c in (*CORE_FEATURES, "wheel_accel_agreement_fl_pct", "wheel_speed_resolution_mps",
                               "duration_s", "sample_rate_hz", "lamp_abs_on", "dtc_count")}
    cols.update(trip_id=["t"], vehicle_id=["v"], nan_reasons=[""])
    feats = model_features(pd.DataFrame(cols))
    assert feats[: len(CORE_FEATURES)] == list(CORE_FEATURES)
    assert feats[len(CORE_FEATURES):] == ["wheel_accel_agreement_fl_pct"]
    assert evidence_key("wheel_accel_agreement_fl_pct") == "wheel_signal_fl"
    assert evidence_key("yaw_offset_dps") == "yaw_vs_wheels"


def _ratio_change_pct(radius_shrink_frac: np.ndarray) -> np.ndarray:
    """wheel_ratio_<pos> change from a known radius change, computed exactly (not linearised).

    Kinematics (common practice): a wheel of rolling radius r(1 − s) rolling at ground speed v
    turns at v / (r(1 − s)), so its speed sensor (calibrated for r) reads v / (1 − s); the ratio
    is each reading over the mean of the four readings, minus 1 (features/wheels.py).
    """
    reading = 1.0 / (1.0 - radius_shrink_frac)
    return 100.0 * (reading / reading.mean() - 1.0)


def test_a_known_radius_change_on_each_wheel_is_fitted_to_that_wheel_with_its_sign():
    for k in range(4):
        for shrink in (0.02, -0.015, 0.004):
            s = np.zeros(4)
            s[k] = shrink
            wheel, d_pct, _ = single_wheel_radius_fit(_ratio_change_pct(s))
            assert wheel == k
            assert np.sign(d_pct) == np.sign(shrink)
            assert abs(d_pct - 100.0 * shrink) < 0.05 * abs(100.0 * shrink) + 0.01


def test_the_fit_uses_the_whole_pattern_when_a_wheel_is_missing():
    x = _ratio_change_pct(np.array([0.0, 0.0, 0.02, 0.0]))
    x[3] = np.nan  # the rear-right ratio not measured: the three others still say rear-left
    assert single_wheel_radius_fit(x)[0] == 2
    x = _ratio_change_pct(np.array([0.0, 0.02, 0.0, 0.0]))
    x[1] = np.nan  # the changed wheel itself unmeasured: the three −¼d still point at it
    assert single_wheel_radius_fit(x)[0] == 1


def test_jitter_on_one_wheel_names_that_wheel_sensor_not_the_tyre_of_the_largest_ratio():
    # a tone-ring fault shows as that wheel's own jitter/dropouts; a ratio elsewhere does not override it
    assert pick(wheel_signal_rl=7.0, wheel_ratio_rl=2.0, wheel_ratio_fr=5.0) == "wheel_sensor_rl"


def test_one_tyre_is_explained_by_its_pattern_an_axle_is_not():
    # kinematics as above: one wheel's exact ratio change is the one-tyre pattern to second order
    one = single_wheel_radius_fit(_ratio_change_pct(np.array([0.0, 0.008, 0.0, 0.0])))
    assert one[0] == 1 and one[2] > 0.99
    axle = single_wheel_radius_fit(_ratio_change_pct(np.array([0.008, 0.008, 0.0, 0.0])))
    assert axle[2] < 0.5  # two new front tyres: no single tyre explains it


def _history(radius_shrink_late: np.ndarray, n_early: int = 12, n_late: int = 12) -> pd.DataFrame:
    """A vehicle's trips with raw ratios: n_early as built, then n_late with a radius change, plus scatter."""
    rng = np.random.default_rng(3)
    rows = []
    start = pd.Timestamp("2026-03-02 08:00", tz="UTC")
    for i in range(n_early + n_late):
        s = radius_shrink_late if i >= n_early else np.zeros(4)
        ratios = _ratio_change_pct(s) + rng.normal(0.0, 0.03, 4)
        rows.append({"trip_id": f"t{i}", "vehicle_id": "V1", "start_time": start + pd.Timedelta(hours=12 * i),
                     **{f"raw__wheel_ratio_{p}_pct": r for p, r in zip(POSITIONS, ratios)}})
    return pd.DataFrame(rows)


def _changed_tyre(history: pd.DataFrame, events=None):
    scorer = FleetScorer()
    scorer.service_events_ = service_table(events)
    return scorer._changed_tyre(history, history.tail(scorer.vehicle_trips))


def test_a_quiet_vehicle_with_one_tyre_well_off_its_early_radius_is_named_for_that_tyre():
    pos, d, against = _changed_tyre(_history(np.array([0.0, 0.0, 0.0, 0.008])))
    assert pos == "rr" and d == pytest.approx(0.8, abs=0.1) and against == "in the vehicle's early trips"
    assert _changed_tyre(_history(np.array([0.0, 0.0, 0.003, 0.0]))) is None  # within low-pressure range
    assert _changed_tyre(_history(np.array([0.0, 0.0, 0.008, 0.008]))) is None  # a rear axle of new tyres
    assert _changed_tyre(_history(np.array([0.0, 0.0, 0.0, 0.008]), n_early=5)) is None  # too little history
    # tyre work recorded at the change: the trips since are the vehicle's new early trips
    long = _history(np.array([0.0, 0.0, 0.0, 0.008]), n_late=24)
    work = pd.DataFrame([{"vehicle_id": "V1", "date": "2026-03-08", "kind": "tyre_change"}])
    assert _changed_tyre(long)[0] == "rr" and _changed_tyre(long, work) is None
