"""The simulator's physics against textbook formulas and standards (sources beside each check)."""

import numpy as np
import pytest

from synthetic_fleet import trip_samples
from synthetic_fleet.drive import DriveTrace
from synthetic_fleet.platforms import platform
from synthetic_fleet.sensors import SensorHealth, TripCondition, measure
from synthetic_fleet.vehicle_motion import (
    road_wheel_angle_for_curvature,
    understeer_coefficient,
    wheel_centre_speeds,
    yaw_rate_single_track,
)

G0 = 9.80665  # standard gravity, exact (3rd CGPM 1901; ISO 80000-3)


def _ideal_health() -> SensorHealth:
    return SensorHealth(np.ones(4), 0.0, 0.0, 0.0, 0.0, np.zeros(2), np.zeros(2), 1.0)


def _steady_trace(speed_mps: float, radius_m: float | None, grade: float = 0.0, seconds: float = 60.0,
                  rate_hz: float = 50.0) -> DriveTrace:
    t = np.arange(int(seconds * rate_hz)) / rate_hz
    n = len(t)
    kappa = 0.0 if radius_m is None else 1.0 / radius_m
    return DriveTrace(t, np.full(n, speed_mps), np.zeros(n), np.full(n, kappa), np.full(n, np.arctan(grade)),
                      np.zeros(n), np.full(n, speed_mps == 0.0), np.zeros(n, dtype=bool))


def test_single_track_yaw_gain_matches_the_rajamani_worked_example():
    # Rajamani, Vehicle Dynamics and Control, steady-state yaw gain r/δ = V/(L + K_V·V²),
    # K_V = (m/L)·(l_r/C_f − l_f/C_r) (from memory; CHECKS.md). m = 1500 kg, L = 2.7 m,
    # l_f = 1.2, l_r = 1.5, C_f = C_r = 80 kN/rad, V = 20 m/s, δ = 0.02 rad.
    m, L, lf, lr, cf, cr, V, delta = 1500.0, 2.7, 1.2, 1.5, 80e3, 80e3, 20.0, 0.02
    k_v = (m / L) * (lr / cf - lf / cr)  # rad per m/s²
    assert k_v == pytest.approx(2.0833e-3, rel=1e-4)
    # Our form r = v·δ/(L·(1+K·v²)) with K = K_us/(g·L): L·K = K_V, so K_us = K_V·g rad/g.
    k = understeer_coefficient(k_v * G0, L)
    r = yaw_rate_single_track(V, delta, L, k)
    assert r == pytest.approx(0.113208, abs=1e-6)
    assert V * r == pytest.approx(2.26415, abs=1e-5)  # a_y = V·r (CHECKS.md)


def test_road_wheel_angle_for_a_curvature_inverts_the_single_track_model():
    spec = platform("lwb_van")
    k = understeer_coefficient(np.radians(spec.understeer_gradient_deg_per_g), spec.wheelbase_m)
    v = np.array([3.0, 12.0, 30.0])
    delta = road_wheel_angle_for_curvature(v, 1 / 80.0, spec.wheelbase_m, k)
    np.testing.assert_allclose(yaw_rate_single_track(v, delta, spec.wheelbase_m, k), v / 80.0, rtol=1e-12)
    # Understeer: more road-wheel angle than the kinematic L/R at speed (Gillespie δ = 57.3·L/R + K·a_y).
    assert delta[0] > spec.wheelbase_m / 80.0 and delta[2] > delta[1]


def test_wheel_paths_follow_rigid_body_kinematics():
    # CHECKS.md: rear wheels r·(R ∓ t/2), front wheels r·√(L² + (R ∓ t/2)²), R to the rear-axle centre.
    L, tf, tr, R, v = 3.0, 1.6, 1.5, 25.0, 10.0
    r = v / R
    fl, fr, rl, rr = wheel_centre_speeds(np.array([v]), np.array([r]), L, tf, tr)[:, 0]
    assert rl == pytest.approx(r * (R - tr / 2)) and rr == pytest.approx(r * (R + tr / 2))
    assert fl == pytest.approx(r * np.hypot(L, R - tf / 2)) and fr == pytest.approx(r * np.hypot(L, R + tf / 2))
    # CHECKS.md worked example: 19.8 and 20.2 m/s on a 1.5 m track → 0.26667 rad/s.
    assert (20.2 - 19.8) / 1.5 == pytest.approx(0.26667, abs=1e-5)


def test_steady_left_turn_gives_kinematic_yaw_from_the_rear_axle_and_a_y_equal_to_v_r():
    # Kinematic yaw r = (v_rr − v_rl)/track_rear (CHECKS.md, rigid-body kinematics); a_y = v·r.
    spec = platform("pickup")
    sig = measure(_steady_trace(12.0, 60.0), spec, _ideal_health(), TripCondition(), np.random.default_rng(3))
    r_true = 12.0 / 60.0
    r_wheels = (sig["wheel_speed_rr"] - sig["wheel_speed_rl"]) / spec.track_rear_m
    assert np.mean(r_wheels) == pytest.approx(r_true, rel=0.01)
    assert np.mean(sig["yaw_rate"]) == pytest.approx(r_true, rel=0.005)
    assert np.mean(sig["yaw_rate"]) > 0 and np.mean(sig["accel_lat"]) > 0  # ISO 8855: left turn positive
    assert np.mean(sig["accel_lat"]) == pytest.approx(12.0 * r_true, rel=0.01)


@pytest.mark.parametrize("grade", [0.0, 0.08, -0.12])
def test_standing_vehicle_on_a_grade_reads_g_sin_theta(grade):
    # Specific force along x of a vehicle at rest nose-up on slope θ: a_x = g·sin θ,
    # g = 9.80665 m/s² (3rd CGPM; ISO 80000-3).
    theta = np.arctan(grade)
    sig = measure(_steady_trace(0.0, None, grade=grade), platform("compact_van"), _ideal_health(),
                  TripCondition(), np.random.default_rng(5))
    assert np.mean(sig["accel_long"]) == pytest.approx(G0 * np.sin(theta), abs=0.002)
    assert np.all(sig["wheel_speed_fl"] == 0.0)


def test_simulated_trip_yaw_agrees_with_the_rear_axle_wheel_estimate():
    df, spec = trip_samples("compact_van", drive="town", seed=11)
    moving = df[(df.wheel_speed_rl > 5) & (df.wheel_speed_rr > 5)].dropna(subset=["yaw_rate", "accel_lat"])
    r_wheels = (moving.wheel_speed_rr - moving.wheel_speed_rl) / spec["track_rear_m"]
    slope = np.polyfit(r_wheels, moving.yaw_rate, 1)[0]
    assert slope == pytest.approx(1.0, abs=0.05)
    a_y_wheels = moving.wheel_speed_rl.add(moving.wheel_speed_rr) / 2 * moving.yaw_rate
    assert np.median(np.abs(moving.accel_lat - a_y_wheels)) < 0.25  # bank and noise only
