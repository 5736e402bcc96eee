"""Sensor alerts: a non-wheel sensor needs two residuals of its row to agree; an alert latches."""

from __future__ import annotations

import numpy as np

from models.scorer import FleetScorer, _latched

STATS = ["wheel_signal_fl", "wheel_ratio_fl", "yaw", "yaw_vs_wheels", "steering_vs_wheels", "steering_vs_yaw",
         "accel_lat", "accel_lat_vs_wheels"]


def _scorer() -> FleetScorer:
    sc = FleetScorer(confirm_strength=0.5)
    sc.statistics_ = STATS
    return sc


def _strength(**values) -> np.ndarray:
    row = np.zeros((1, len(STATS)))
    for name, v in values.items():
        row[0, STATS.index(name)] = v
    return row


def test_shared_yaw_versus_steering_residual_alone_sends_no_sensor_to_inspection():
    sc = _scorer()
    assert not sc._corroborated(_strength(steering_vs_yaw=3.0), np.array([True]))[0]
    assert sc._corroborated(_strength(steering_vs_yaw=3.0, steering_vs_wheels=0.6), np.array([True]))[0]


def test_level_at_rest_needs_the_residual_against_the_wheels_to_agree():
    sc = _scorer()
    assert not sc._corroborated(_strength(accel_lat=2.0, accel_lat_vs_wheels=0.3), np.array([True]))[0]
    assert sc._corroborated(_strength(accel_lat=2.0, accel_lat_vs_wheels=0.5), np.array([True]))[0]


def test_residual_against_the_wheels_does_not_corroborate_while_a_wheel_ratio_is_off():
    sc = _scorer()
    assert not sc._corroborated(_strength(yaw=1.5, yaw_vs_wheels=4.0), np.array([False]))[0]
    assert sc._corroborated(_strength(yaw=1.5, yaw_vs_wheels=4.0), np.array([True]))[0]


def test_alert_latches_while_sustained_and_restarts_per_vehicle():
    raised = np.array([0, 1, 0, 0, 0, 0, 1, 0], dtype=bool)
    sustained = np.array([1, 1, 1, 0, 1, 1, 1, 1], dtype=bool)
    key = np.array(["a"] * 5 + ["b"] * 3)
    np.testing.assert_array_equal(_latched(raised, sustained, key), [0, 1, 1, 0, 0, 0, 1, 1])
