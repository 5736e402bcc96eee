"""A full set of new tyres must not pass for a yaw-rate gain error (models.scorer, the wheel-scale test).

New tyres all round make the wheels read v/k: yaw_gain becomes k·g and the slope of a_y on
v·r_wheels k² (features.accel.lat_scale_witness, and its physics test in test_features_physics.py),
while a yaw-rate gain error moves yaw_gain alone. The numbers here are hand-made series, not
simulator output: the test pins the decision rule, not a tuned threshold.
"""

import numpy as np
import pandas as pd
import pytest

from models.scorer import FleetScorer

STEP_TRIP, N_TRIPS = 20, 36


def series(gain_step: float, scale_step: float, seed: int = 0) -> pd.DataFrame:
    """One vehicle's trips: yaw_gain and scale_ay_per_vr with 0.1 % noise, stepping at STEP_TRIP."""
    rng = np.random.default_rng(seed)
    after = np.arange(N_TRIPS) >= STEP_TRIP
    return pd.DataFrame({
        "yaw_gain": 0.998 * (1 + gain_step * after) * (1 + 0.001 * rng.standard_normal(N_TRIPS)),
        "scale_ay_per_vr": 0.97 * (1 + scale_step * after) * (1 + 0.001 * rng.standard_normal(N_TRIPS)),
    })


def capped(features: pd.DataFrame) -> np.ndarray:
    scorer = FleetScorer()
    scorer.statistics_ = ["yaw", "yaw_gain", "steering_vs_yaw"]
    strength = np.full((len(features), 3), 3.0)
    out = scorer._scale_explained(strength, features, np.array(["VAN-01|0"] * len(features), dtype=object))
    assert (out[:, 0] == 3.0).all()  # the yaw rate at rest never leans on the wheels' scale
    assert (out[:, 1] == out[:, 2]).all()
    return out[:, 1] < 3.0


@pytest.mark.parametrize("k", [1.008, 0.994])  # new tyres (deeper tread), or a smaller winter set
def test_a_tyre_set_caps_the_yaw_gain_and_steering_evidence(k):
    hit = capped(series(k - 1.0, k ** 2 - 1.0))
    assert hit[STEP_TRIP + 2:].all()


@pytest.mark.parametrize("g", [1.01, 0.985])
def test_a_yaw_gain_error_keeps_its_evidence(g):
    hit = capped(series(g - 1.0, 0.0))
    assert not hit[STEP_TRIP + 2:].any()


def test_without_the_witness_nothing_changes():
    features = series(0.01, 0.02).drop(columns="scale_ay_per_vr")
    assert not capped(features).any()
