"""Component attribution (residual-table reasoning) and the inspection suggestion."""

from __future__ import annotations

from models.attribution import SAFETY_NOTE, choose_component, single_wheel_radius_fit, suggestion_for
from models.feature_set import evidence_key, model_features
from tracktrue.schema import COMPONENTS, CORE_FEATURES

import numpy as np
import pandas as pd


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
            wheel, d_pct = single_wheel_radius_fit(_ratio_change_pct(s))
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
