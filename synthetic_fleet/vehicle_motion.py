"""Body motion of a vehicle from speed and path curvature (ISO 8855: x forward, y left, z up).

The driver follows a path of curvature kappa = 1/R (positive to the left); the
linear single-track (bicycle) model with understeer gradient says which
road-wheel angle that takes, and rigid-body kinematics say how fast each wheel
centre moves. All functions are pure and vectorised over samples.
"""

from __future__ import annotations

import numpy as np

from tracktrue.units import G0_MPS2


def understeer_coefficient(understeer_gradient_rad_per_g: float, wheelbase_m: float) -> float:
    """K in s²/m² of r = v·δ/(L·(1+K·v²)): K = K_us/(g·L) with K_us in rad/g (DESIGN.md)."""
    return understeer_gradient_rad_per_g / (G0_MPS2 * wheelbase_m)


def yaw_rate_single_track(speed_mps, road_wheel_angle_rad, wheelbase_m: float, k_s2pm2: float):
    """Steady-state yaw rate of the linear single-track model, r = v·δ/(L·(1+K·v²)), rad/s."""
    v = np.asarray(speed_mps, dtype=float)
    return v * np.asarray(road_wheel_angle_rad, dtype=float) / (wheelbase_m * (1.0 + k_s2pm2 * v * v))


def road_wheel_angle_for_curvature(speed_mps, curvature_1pm, wheelbase_m: float, k_s2pm2: float):
    """The road-wheel angle δ = κ·L·(1+K·v²) that makes the single-track model follow curvature κ."""
    v = np.asarray(speed_mps, dtype=float)
    return np.asarray(curvature_1pm, dtype=float) * wheelbase_m * (1.0 + k_s2pm2 * v * v)


def wheel_centre_speeds(speed_mps, yaw_rate_rps, wheelbase_m: float, track_front_m: float,
                        track_rear_m: float) -> np.ndarray:
    """Ground speed of each wheel centre (fl, fr, rl, rr), shape (4, n), m/s.

    ``speed_mps`` is the rear-axle centre's speed. With R = v/r the turn radius
    to the rear-axle centre, the rear wheels move at r·(R ∓ t/2) = v ∓ r·t/2 and
    the front wheels at r·√(L² + (R ∓ t/2)²) = √((r·L)² + (v ∓ r·t/2)²), the left
    wheel on the inside of a left turn (r > 0). Written without R so that a
    straight line (r = 0) needs no special case.
    """
    v = np.asarray(speed_mps, dtype=float)
    r = np.asarray(yaw_rate_rps, dtype=float)
    half_f, half_r = 0.5 * track_front_m, 0.5 * track_rear_m
    rl = v - r * half_r
    rr = v + r * half_r
    lateral_sq = (r * wheelbase_m) ** 2  # no overflow at vehicle speeds: √(a² + b²) without hypot's care
    fl = np.sqrt((v - r * half_f) ** 2 + lateral_sq)
    fr = np.sqrt((v + r * half_f) ** 2 + lateral_sq)
    return np.stack([fl, fr, rl, rr])
