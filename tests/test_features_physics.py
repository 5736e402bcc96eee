"""The physics and arithmetic the features rest on, checked against outside sources."""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd
import pytest
from scipy.signal import savgol_coeffs, savgol_filter

import synthetic_fleet

from features.extract import extract_trip_features
from features.kinematics import (
    front_axle_yaw_rate,
    rear_axle_yaw_rate,
    single_track_yaw_rate,
    wheel_path_factors,
)
from features.signals import _savgol_derivative_weights, deming_fit, smooth_derivative, three_cornered_hat, trip_arrays, window_samples
from features.spec import VehicleSpec
from features.wheels import linear_quantile
from test_features_support import SPEC, make_trip
from tracktrue.units import DEG_RAD, FOOT_M, G0_MPS2, MPH_MPS


def test_kinematic_yaw_from_the_rear_axle_speed_difference():
    # CHECKS.md "Kinematic yaw from a non-steered axle": 19.8 and 20.2 m/s on a
    # 1.5 m track -> 0.26667 rad/s (computed from r = (v_right - v_left)/track).
    assert rear_axle_yaw_rate(19.8, 20.2, 1.5) == pytest.approx(0.26667, abs=1e-5)


def test_wheel_path_factors_follow_the_rigid_body_wheel_paths():
    # CHECKS.md: in a turn of radius R to the rear-axle centre, rear wheels run
    # at r*(R -/+ t/2), front wheels at r*sqrt(L^2 + (R -/+ t/2)^2) (rigid-body kinematics).
    radius, track_f, track_r, base = 40.0, 1.6, 1.5, 3.0
    expected = np.array([
        math.sqrt(base**2 + (radius - track_f / 2) ** 2), math.sqrt(base**2 + (radius + track_f / 2) ** 2),
        radius - track_r / 2, radius + track_r / 2]) / radius
    assert wheel_path_factors(1 / radius, track_f, track_r, base)[:, 0] == pytest.approx(expected, rel=1e-12)


def test_front_axle_yaw_inverts_the_front_wheel_paths():
    # Same CHECKS.md wheel paths; v_fr^2 - v_fl^2 = 2*v*r*t_f exactly, v estimated
    # from the two front wheels (overstated by (r*L)^2/(2 v^2), here 0.3 %).
    yaw, radius, track_f, base = 0.4, 40.0, 1.6, 3.0
    fl = yaw * math.sqrt(base**2 + (radius - track_f / 2) ** 2)
    fr = yaw * math.sqrt(base**2 + (radius + track_f / 2) ** 2)
    assert front_axle_yaw_rate(fl, fr, track_f) == pytest.approx(yaw, rel=0.005)


def test_single_track_yaw_gain_matches_the_gillespie_worked_example():
    # CHECKS.md, Gillespie, Fundamentals of Vehicle Dynamics (SAE 1992), formula
    # from memory, computed: L = 10.5 ft, K = 1.364 deg/g -> r/delta at 60 mph = 5.42 1/s.
    wheelbase = 10.5 * FOOT_M
    spec = VehicleSpec(wheelbase, 1.5, 1.5, 16.0, 1.364)
    speed = 60 * MPH_MPS
    gain = single_track_yaw_rate(speed, 1.0, wheelbase, spec.understeer_k_s2pm2)
    assert gain == pytest.approx(5.42, abs=0.005)
    # characteristic speed V_char = sqrt(57.3*L*g/K) = 119.1 ft/s: there the gain is half the neutral one
    v_char = 119.1 * FOOT_M
    neutral = v_char / wheelbase
    assert single_track_yaw_rate(v_char, 1.0, wheelbase, spec.understeer_k_s2pm2) == pytest.approx(neutral / 2, rel=2e-3)


def test_single_track_yaw_matches_the_rajamani_si_example():
    # CHECKS.md, Rajamani, Vehicle Dynamics and Control (from memory), computed:
    # r = V*delta/(L + K_V*V^2), K_V = 2.0833e-3 rad/(m/s^2), L = 2.7 m, V = 20 m/s,
    # delta = 0.02 rad -> r = 0.113208 rad/s; K_V*V^2 = L*K*V^2 gives K = K_V/L.
    assert single_track_yaw_rate(20.0, 0.02, 2.7, 2.0833e-3 / 2.7) == pytest.approx(0.113208, abs=2e-6)


def test_lateral_residual_is_zero_when_a_y_equals_v_times_r_and_finds_an_offset():
    # CHECKS.md: steady-state a_y = V*r (ISO 8855 signs, positive in a left turn).
    clean = extract_trip_features(make_trip(seed=3), SPEC)
    biased = extract_trip_features(make_trip(seed=3, ay_offset=0.03 * G0_MPS2), SPEC)
    assert clean["lat_residual_g"] == pytest.approx(0.0, abs=0.003)
    assert biased["lat_residual_g"] == pytest.approx(0.03, abs=0.003)


def test_speed_scale_witness_sees_a_set_of_new_tyres_and_not_a_yaw_gain_error():
    # CHECKS.md: a_y = V*r. Wheels reading (1 + e) times the true speed (all four rolling radii
    # off by the same factor) give v*r_wheels = (1 + e)^2 * V*r, so the slope of a_y on it is
    # 1/(1 + e)^2, and yaw_gain (yaw against the wheels) 1/(1 + e); a yaw-rate gain error g moves
    # yaw_gain by g and leaves the slope alone (it uses neither the yaw sensor nor steering).
    e, g = 0.01, 1.02
    clean = extract_trip_features(make_trip(seed=7), SPEC)
    tyres = extract_trip_features(make_trip(seed=7, radius_error=(e, e, e, e)), SPEC)
    sensor = extract_trip_features(make_trip(seed=7, yaw_gain=g), SPEC)
    assert clean["scale_ay_per_vr"] == pytest.approx(1.0, abs=0.01)
    assert tyres["scale_ay_per_vr"] / clean["scale_ay_per_vr"] == pytest.approx(1 / (1 + e) ** 2, abs=3e-4)
    assert tyres["yaw_gain"] / clean["yaw_gain"] == pytest.approx(1 / (1 + e), abs=3e-4)
    assert sensor["scale_ay_per_vr"] == pytest.approx(clean["scale_ay_per_vr"], abs=3e-4)
    assert sensor["yaw_gain"] / clean["yaw_gain"] == pytest.approx(g, abs=3e-3)


def test_accelerometer_at_rest_on_a_grade_reads_g_sin_theta():
    # A still accelerometer reads the gravity component g*sin(theta) along x
    # (textbook statics); 5 % grade -> theta = atan(0.05), sin = 0.049938.
    row = extract_trip_features(make_trip(seed=4, grade=0.05), SPEC)
    assert row["accel_long_rest_g"] == pytest.approx(math.sin(math.atan(0.05)), abs=0.002)


def test_distance_weighted_long_residual_finds_an_accelerometer_offset():
    # DESIGN.md: the distance-weighted mean of a_x - dv/dt equals offset + g*dh/distance; flat road, dh = 0.
    row = extract_trip_features(make_trip(seed=5, ax_offset=0.04 * G0_MPS2), SPEC)
    assert row["accel_long_residual_g"] == pytest.approx(0.04, abs=0.003)


def _uniform_trip(x: np.ndarray, rate_hz: float):
    t = pd.Timestamp("2026-03-02", tz="UTC") + pd.to_timedelta(np.arange(x.size) / rate_hz, unit="s")
    return trip_arrays(pd.DataFrame({"time": t, "wheel_speed_fl": x}))


def test_derivative_matches_scipy_savgol_filter_and_a_local_quadratic_fit():
    # Reference implementation: scipy.signal.savgol_filter (Savitzky & Golay 1964),
    # and the definition itself: slope of the least-squares quadratic over the window.
    rng = np.random.default_rng(0)
    rate = 10.0
    t = np.arange(400) / rate
    x = 10 + 2 * np.sin(0.3 * t) + rng.normal(0, 0.05, t.size)
    trip = _uniform_trip(x, rate)
    ours = smooth_derivative(x, trip, window_s=1.5)
    w = window_samples(1.5, rate, minimum=5)
    half = w // 2
    reference = savgol_filter(x, w, 2, deriv=1, delta=1 / rate)
    assert np.allclose(ours[half:-half], reference[half:-half])
    assert np.isnan(ours[:half]).all() and np.isnan(ours[-half:]).all()  # no full window at the ends
    i = 200
    coef = np.polyfit(t[i - half:i + half + 1] - t[i], x[i - half:i + half + 1], 2)
    assert ours[i] == pytest.approx(coef[1], rel=1e-9)


def test_derivative_weights_are_scipy_savgol_coeffs_to_the_last_bit():
    # Reference implementation: scipy.signal.savgol_coeffs. Bit-equal, not close: samples lying exactly on a
    # threshold (quantised polled speeds) would flip on a last-bit difference and change feature values.
    for width in (5, 7, 15, 31, 101, 151, 301):
        for rate_hz in (1.0, 2.0, 3.0, 4.7, 10.0, 25.0, 50.0, 100.0):
            reference = savgol_coeffs(width, 2, deriv=1, delta=1.0 / rate_hz, use="dot")
            assert np.array_equal(_savgol_derivative_weights(width, 1.0 / rate_hz), reference), (width, rate_hz)


def test_linear_quantile_is_numpys_default_quantile():
    # Reference implementation: numpy.quantile, method "linear" (Hyndman & Fan 1996, definition 7).
    rng = np.random.default_rng(5)
    for n in (1, 2, 4, 7, 40):
        x = rng.exponential(1.0, n)
        for q in (0.0, 0.1, 0.25, 0.5, 1.0):
            assert linear_quantile(x, q) == pytest.approx(np.quantile(x, q), rel=1e-12, abs=1e-15), (n, q)


def test_derivative_is_not_taken_across_a_time_gap():
    rate = 10.0
    x = np.linspace(0, 10, 200)
    t = np.arange(200) / rate
    t[100:] += 60.0  # a minute without samples
    stamps = pd.Timestamp("2026-03-02", tz="UTC") + pd.to_timedelta(t, unit="s")
    trip = trip_arrays(pd.DataFrame({"time": stamps, "wheel_speed_fl": x}))
    d = smooth_derivative(x, trip)
    assert np.isnan(d[98:102]).all() and np.isfinite(d[50]) and np.isfinite(d[150])


def test_deming_regression_agrees_with_orthogonal_distance_regression():
    # Reference implementation: ODRPACK through scipy.odr (deprecated in SciPy 1.17,
    # still shipped); with equal noise in x and y (ratio 1) Deming regression is
    # orthogonal regression.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)
        from scipy import odr
    rng = np.random.default_rng(1)
    truth = rng.normal(0, 1, 500)
    x = truth + rng.normal(0, 0.3, truth.size)
    y = 0.2 + 1.5 * truth + rng.normal(0, 0.3, truth.size)
    fit = odr.ODR(odr.RealData(x, y), odr.unilinear, beta0=[1.0, 0.0]).run()
    slope, intercept = deming_fit(x, y, 1.0)
    assert slope == pytest.approx(fit.beta[0], rel=2e-5)  # ODRPACK stops at its convergence tolerance
    assert intercept == pytest.approx(fit.beta[1], abs=1e-4)


def test_three_cornered_hat_recovers_each_sources_own_noise():
    # Gray & Allan (1974): var(x_i - x_j) = s_i^2 + s_j^2 for independent noises.
    own = np.array([0.1, 0.2, 0.3, 0.4]) ** 2
    pairs = {(i, j): own[i] + own[j] for i in range(4) for j in range(i + 1, 4)}
    assert three_cornered_hat(pairs, 4) == pytest.approx(own)


def test_kinematic_yaw_reference_yields_unit_gain_and_the_injected_offset():
    row = extract_trip_features(make_trip(seed=6, yaw_offset_radps=1.0 * DEG_RAD, cruise_s=200.0), SPEC)
    assert row["yaw_offset_dps"] == pytest.approx(1.0, abs=0.1)
    assert row["yaw_rest_dps"] == pytest.approx(1.0, abs=0.05)
    assert row["yaw_gain"] == pytest.approx(1.0, abs=0.03)


def test_steering_centre_is_the_straight_ahead_steering_wheel_angle():
    row = extract_trip_features(make_trip(seed=7, steer_offset_rad=5 * DEG_RAD), SPEC)
    assert row["steer_center_deg"] == pytest.approx(5.0, abs=0.2)


@pytest.mark.parametrize("offset_dps", [0.013, 0.043, 0.077])
def test_yaw_rest_of_a_polled_log_in_tenth_degree_steps_finds_an_offset_between_steps(offset_dps):
    # Quantisation with dither (Widrow & Kollár, *Quantization Noise*, 2008, from memory): a
    # signal carrying noise of about half a step or more, rounded to step q, keeps its mean
    # to within ~q·exp(−2π²σ²/q²)/π, while its median sits on a step. The simulator's yaw
    # noise at rest is 0.07 deg/s; polled loggers export it in 0.1 deg/s steps.
    samples, spec = synthetic_fleet.trip_samples(seed=7, duration_s=900.0)
    fine = extract_trip_features(samples, spec)["yaw_rest_dps"]
    step_rad = 0.1 * DEG_RAD
    polled = samples.assign(yaw_rate=np.round((samples["yaw_rate"] + offset_dps * DEG_RAD) / step_rad) * step_rad)
    rest = extract_trip_features(polled, spec)["yaw_rest_dps"]
    assert rest == pytest.approx(fine + offset_dps, abs=0.01)
