"""Qualifying windows, gating on rate and resolution, and NaN (never 0) with a countable reason."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from features.extract import FEATURE_COLUMNS, ROW_COLUMNS, extract_trip_features
from features.row import parse_nan_reasons
from test_features_support import SPEC, make_trip
from tracktrue.schema import POSITIONS
from tracktrue.units import KPH_MPS


def reasons(row) -> dict[str, str]:
    return parse_nan_reasons(row["nan_reasons"])


def test_one_wheel_reading_zero_while_three_roll_is_a_dropout_on_that_wheel_not_a_standstill():
    # Common practice (CHECKS.md, facts of the trade): one wheel at zero while the
    # other three report rolling is a sensor or tone-ring fault, not a stopped vehicle.
    healthy = extract_trip_features(make_trip(seed=1), SPEC)
    faulty = extract_trip_features(make_trip(seed=1, dropout_wheel="rl"), SPEC)
    assert faulty["wheel_dropouts_rl"] > 10.0
    assert all(faulty[f"wheel_dropouts_{p}"] == 0.0 for p in ("fl", "fr", "rr"))
    assert faulty["standstill_s"] == pytest.approx(healthy["standstill_s"], abs=0.5)


def two_stops(seed: int, cut_wheel: str | None = None, cut_below_mps: float = 0.0) -> pd.DataFrame:
    """Two hand-made trips back to back (four low-speed edges per wheel), one wheel optionally
    reading zero below ``cut_below_mps`` as a module does when a passive sensor's signal is too weak."""
    first, second = make_trip(seed=seed), make_trip(seed=seed + 1)
    second["time"] += first["time"].iloc[-1] - first["time"].iloc[0] + pd.Timedelta(seconds=0.1)
    both = pd.concat([first, second.assign(trip_id=first["trip_id"].iloc[0])], ignore_index=True)
    if cut_wheel is not None:
        col = f"wheel_speed_{cut_wheel}"
        both.loc[both[col] < cut_below_mps, col] = 0.0
    return both


def test_a_wheel_whose_signal_appears_late_has_a_high_onset_the_others_near_zero():
    # Common practice: a passive wheel-speed sensor's output grows with wheel speed and shrinks as
    # the air gap widens, so a widening gap raises the speed below which the module reads zero.
    # The feature is the other wheels' speed on the zero side of each edge, so below the cut-off
    # by up to one sample's speed change: the builder's ramps change speed by at most 0.49 m/s per
    # 10 Hz sample between 1.5 and 3.5 m/s.
    healthy = extract_trip_features(two_stops(seed=4), SPEC)
    faulty = extract_trip_features(two_stops(seed=4, cut_wheel="rl", cut_below_mps=2.5), SPEC)
    assert all(healthy[f"wheel_onset_{p}_mps"] < 0.1 for p in POSITIONS)
    assert 2.5 - 0.49 <= faulty["wheel_onset_rl_mps"] < 2.5
    assert all(faulty[f"wheel_onset_{p}_mps"] < 0.1 for p in ("fl", "fr", "rr"))
    one_stop = extract_trip_features(make_trip(seed=4), SPEC)  # a departure and an arrival: too few edges
    assert math.isnan(one_stop["wheel_onset_rl_mps"]) and reasons(one_stop)["wheel_onset_rl_mps"] == "too_few_stops"


def test_every_row_has_every_column_and_a_reason_for_every_nan():
    row = extract_trip_features(make_trip(seed=2), SPEC)
    assert list(row) == list(ROW_COLUMNS)
    nan = {f for f in FEATURE_COLUMNS if math.isnan(row[f])}
    assert nan == set(reasons(row))


def test_a_trip_without_a_stop_has_nan_rest_features_not_zero():
    samples = make_trip(seed=3, stop_s=1.0)
    samples = samples[samples["time"] < samples["time"].iloc[-1] - pd.Timedelta(seconds=7)]  # cut the final stop
    row = extract_trip_features(samples, SPEC)
    for name in ("yaw_rest_dps", "accel_long_rest_g", "accel_lat_rest_g"):
        assert math.isnan(row[name])
        assert reasons(row)[name] == "no_standstill"
    assert row["standstill_s"] == 0.0


def test_a_trip_without_straight_road_at_speed_has_nan_ratio_and_yaw_features_not_zero():
    row = extract_trip_features(make_trip(seed=4, speed_scale=0.35), SPEC)  # never reaches 8 m/s
    assert row["cruise_s"] == 0.0
    for name in (*(f"wheel_ratio_{p}_pct" for p in POSITIONS), "yaw_offset_dps", "yaw_gain", "steer_center_deg"):
        assert math.isnan(row[name]), name
        assert reasons(row)[name] == "no_straight_cruise", name


def test_wheels_at_zero_with_the_brake_released_are_not_a_standstill():
    # Passive sensors read 0 below a few km/h: a creeping vehicle with the brake
    # off must not count as standing still where the brake is logged.
    samples = make_trip(seed=5)
    samples["brake"] = False
    row = extract_trip_features(samples, SPEC)
    assert row["standstill_s"] == 0.0 and math.isnan(row["yaw_rest_dps"])


def test_without_a_brake_signal_standstill_rests_on_wheels_and_quiet_yaw():
    samples = make_trip(seed=5)
    samples["brake"] = None
    row = extract_trip_features(samples, SPEC)
    assert row["standstill_s"] > 20.0 and math.isfinite(row["yaw_rest_dps"])


def test_a_missing_yaw_sensor_makes_yaw_features_nan_and_leaves_wheel_features():
    samples = make_trip(seed=6)
    samples["yaw_rate"] = np.nan
    row = extract_trip_features(samples, SPEC)
    for name in ("yaw_rest_dps", "yaw_offset_dps", "yaw_gain", "steer_yaw_residual_dps"):
        assert reasons(row)[name] == "signal_missing"
    assert all(math.isfinite(row[f"wheel_ratio_{p}_pct"]) for p in POSITIONS)
    assert "yaw_rate" not in row["signals"].split(",")


def test_one_hertz_logs_give_nan_for_features_that_need_a_derivative_or_fast_noise():
    samples = make_trip(seed=7, rate_hz=1.0, cruise_s=300.0)
    row = extract_trip_features(samples, SPEC)
    assert row["sample_rate_hz"] == pytest.approx(1.0)
    for name in ("wheel_jitter_fl_pct", "accel_long_residual_g", "wheel_accel_disagree_rr_g"):
        assert reasons(row)[name] == "rate_too_low"
    assert math.isfinite(row["wheel_ratio_fl_pct"])


def test_a_one_kph_wheel_speed_step_is_too_coarse_for_wheel_yaw():
    # DESIGN.md: a 1 km/h step across a 1.5 m track is already 10 deg/s of wheel-derived yaw.
    assert KPH_MPS / SPEC["track_rear_m"] * 180 / math.pi == pytest.approx(10.6, abs=0.1)
    samples = make_trip(seed=8)
    for p in POSITIONS:
        samples[f"wheel_speed_{p}"] = np.round(samples[f"wheel_speed_{p}"] / KPH_MPS) * KPH_MPS
    row = extract_trip_features(samples, SPEC)
    assert row["resolution_wheel_speed_fl"] == pytest.approx(KPH_MPS, rel=1e-6)
    for name in ("yaw_offset_dps", "yaw_gain", "lat_residual_g", "wheel_jitter_fl_pct"):
        assert reasons(row)[name] == "resolution_too_coarse", name


def test_a_fine_wheel_speed_step_keeps_the_wheel_yaw_features():
    samples = make_trip(seed=8)
    for p in POSITIONS:
        samples[f"wheel_speed_{p}"] = np.round(samples[f"wheel_speed_{p}"] / (0.01 * KPH_MPS)) * 0.01 * KPH_MPS
    row = extract_trip_features(samples, SPEC)
    assert math.isfinite(row["yaw_offset_dps"]) and math.isfinite(row["wheel_jitter_fl_pct"])


def test_a_spec_without_geometry_names_the_missing_column():
    row = extract_trip_features(make_trip(seed=9), {"vehicle_id": "X"})
    assert reasons(row)["yaw_offset_dps"] == "spec_missing:track_rear_m"
    assert reasons(row)["steer_yaw_residual_dps"] == "spec_missing:steering_ratio"


def test_an_empty_trip_is_all_nan_with_a_reason():
    row = extract_trip_features(make_trip(seed=1).iloc[:1], SPEC)
    assert all(reasons(row)[f] == "too_few_samples" for f in FEATURE_COLUMNS)


def test_lamps_and_trouble_codes_are_summarised_per_trip():
    samples = make_trip(seed=2)
    assert not extract_trip_features(samples, SPEC)["lamp_abs_on"]
    samples.loc[samples.index[100:110], "lamp_esc"] = True
    samples["dtc"] = samples["dtc"].astype(object)
    samples.loc[samples.index[100], "dtc"] = "TT-Y01"
    row = extract_trip_features(samples, SPEC)
    assert row["lamp_esc_on"] and not row["lamp_abs_on"] and row["dtc"] == "TT-Y01"


def test_reversing_with_signed_wheel_speeds_is_in_no_window_and_adds_its_distance():
    # active sensors that know the direction report negative speeds while reversing: neither
    # standing still (its rest values would take the manoeuvre's motion) nor a moving window
    forward = make_trip(seed=1)
    still = (forward[[f"wheel_speed_{p}" for p in POSITIONS]] == 0.0).all(axis=1).to_numpy()
    start = np.flatnonzero(still)[len(np.flatnonzero(still)) // 2]
    n = int(15 * 10.0)  # 15 s at 10 Hz, inside one stop
    assert still[start:start + n].all()
    backing = forward.copy()
    for col in (*(f"wheel_speed_{p}" for p in POSITIONS), "vehicle_speed"):
        backing.loc[start:start + n - 1, col] = -1.5
    import warnings
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        a, b = extract_trip_features(forward, SPEC), extract_trip_features(backing, SPEC)
    assert b["standstill_s"] <= a["standstill_s"] - 14.0
    assert b["moving_s"] == a["moving_s"] and b["cruise_s"] == a["cruise_s"]
    assert b["distance_km"] == pytest.approx(a["distance_km"] + 15 * 1.5 / 1000, abs=2e-3)
    assert all(b[f"wheel_dropouts_{p}"] == a[f"wheel_dropouts_{p}"] for p in POSITIONS)
    assert b["wheel_ratio_fl_pct"] == pytest.approx(a["wheel_ratio_fl_pct"], abs=1e-9)


def test_a_flickering_dropout_counts_as_one_episode_whatever_the_logging_rate():
    import synthetic_fleet

    counts = {}
    for hz in (10.0, 50.0, 100.0):
        samples, spec = synthetic_fleet.trip_samples(seed=7, fault="air_gap_fr", duration_s=600.0, rate_hz=hz)
        counts[hz] = extract_trip_features(samples, spec)["wheel_dropouts_fr"]
    assert counts[10.0] > 10.0  # the air gap does drop the signal out
    assert max(counts.values()) <= 1.5 * min(counts.values())  # unmerged: 163, 564 and 1,290 per 100 km
