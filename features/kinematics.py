"""The textbook relations between wheel speeds, yaw rate, steering and lateral acceleration.

ISO 8855 axes (x forward, y left, z up): yaw rate and steering are positive in
a left turn, where the right wheels run on the outer, longer path.
"""

from __future__ import annotations

import numpy as np


def rear_axle_yaw_rate(v_rl, v_rr, track_rear_m):
    """Kinematic yaw rate r = (v_rr − v_rl) / track_rear, in rad/s.

    Rigid-body kinematics of a non-steered axle: each rear wheel rolls at the
    body's forward speed ∓ r·t/2, whatever the side slip (CHECKS.md,
    "Kinematic yaw from a non-steered axle").
    """
    return (np.asarray(v_rr) - np.asarray(v_rl)) / track_rear_m


def front_axle_yaw_rate(v_fl, v_fr, track_front_m):
    """Kinematic yaw rate from the steered axle, r = (v_fr² − v_fl²) / (2·v·t_f), in rad/s.

    From the front wheel paths of CHECKS.md: v_f∓² = (v ∓ r·t_f/2)² + (r·L)²,
    so v_fr² − v_fl² = 2·v·r·t_f exactly, whatever the steering angle; v is
    the rear-axle-centre speed, taken here as √((v_fl² + v_fr²)/2), which
    overstates it by (r·L)²/(2v²) (under 1 % above 5 m/s in ordinary turns).
    """
    fl2, fr2 = np.asarray(v_fl) ** 2, np.asarray(v_fr) ** 2
    with np.errstate(invalid="ignore", divide="ignore"):
        return (fr2 - fl2) / (2.0 * np.sqrt(0.5 * (fl2 + fr2)) * track_front_m)


def wheel_path_factors(curvature_1pm, track_front_m, track_rear_m, wheelbase_m) -> np.ndarray:
    """Each wheel's speed over the rear-axle-centre speed in a turn of curvature k = r / v.

    Rear wheels 1 ∓ k·t_r/2; front wheels √((1 ∓ k·t_f/2)² + (k·L)²): the wheel
    paths of CHECKS.md (rear r·(R ∓ t/2), front r·√(L² + (R ∓ t/2)²)) divided
    by v = r·R. Rows fl, fr, rl, rr; dimensionless.
    """
    k = np.asarray(curvature_1pm, dtype=float)
    kl = k * wheelbase_m
    return np.vstack([
        np.sqrt((1.0 - 0.5 * k * track_front_m) ** 2 + kl * kl),
        np.sqrt((1.0 + 0.5 * k * track_front_m) ** 2 + kl * kl),
        1.0 - 0.5 * k * track_rear_m,
        1.0 + 0.5 * k * track_rear_m,
    ])


def single_track_yaw_rate(speed_mps, road_wheel_angle_rad, wheelbase_m, understeer_k_s2pm2):
    """Steady-state yaw rate of the single-track (bicycle) model, in rad/s.

    r = v·δ / (L·(1 + K·v²)), K = K_us/(g·L) in s²/m² (Gillespie, *Fundamentals
    of Vehicle Dynamics*, SAE 1992: r/δ = (V/L)/(1 + K·V²/(57.3·g·L)) with K in
    deg/g; CHECKS.md).
    """
    v = np.asarray(speed_mps, dtype=float)
    return v * np.asarray(road_wheel_angle_rad) / (wheelbase_m * (1.0 + understeer_k_s2pm2 * v * v))
