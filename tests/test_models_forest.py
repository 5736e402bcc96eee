"""Isolation-forest score: the paper's formula, scikit-learn's implementation, our NaN handling."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
from sklearn.ensemble import IsolationForest

from models.forest import SubspaceForests, TripForest

EULER_GAMMA = 0.5772156649


def c_factor(n: int) -> float:
    """Average path length of an unsuccessful BST search: c(n) = 2H(n−1) − 2(n−1)/n,
    H(i) ≈ ln i + γ, c(2) = 1 (Liu, Ting & Zhou, ICDM 2008, eq. 1; CHECKS.md)."""
    if n <= 1:
        return 0.0
    if n == 2:
        return 1.0
    return 2.0 * (math.log(n - 1) + EULER_GAMMA) - 2.0 * (n - 1) / n


def test_c_factor_matches_published_values():
    # CHECKS.md, "Statistics": c(256) = 10.2448, c(100) = 8.3647 (computed, log form)
    assert abs(c_factor(256) - 10.2448) < 5e-4
    assert abs(c_factor(100) - 8.3647) < 5e-4


def _path_length(tree, x: np.ndarray) -> float:
    """Walk one fitted tree: edges to the leaf plus c(samples in the leaf) (paper, Algorithm 3)."""
    node, depth = 0, 0
    t = tree.tree_
    while t.children_left[node] != -1:
        node = t.children_left[node] if x[t.feature[node]] <= t.threshold[node] else t.children_right[node]
        depth += 1
    return depth + c_factor(int(t.n_node_samples[node]))


def test_sklearn_score_samples_is_minus_the_paper_score():
    # s(x, ψ) = 2^(−E[h(x)]/c(ψ)) (Liu, Ting & Zhou 2008); scikit-learn's score_samples returns −s (CHECKS.md)
    rng = np.random.default_rng(3)
    x = np.vstack([rng.normal(size=(200, 3)), [[6.0, 6.0, 6.0]]])
    forest = IsolationForest(n_estimators=50, max_samples=100, random_state=0).fit(x)
    probe = x[[0, 1, 200]]
    mean_h = np.array([
        np.mean([_path_length(est, p[feats]) for est, feats in zip(forest.estimators_, forest.estimators_features_)])
        for p in probe
    ])
    ours = 2.0 ** (-mean_h / c_factor(forest.max_samples_))
    np.testing.assert_allclose(-forest.score_samples(probe), ours, rtol=1e-9)
    assert ours[2] > 0.6 > ours[0]  # the isolated point scores high, an inlier about 0.5 or less


def _trips(n_vehicles: int = 20, per_vehicle: int = 30, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    n = n_vehicles * per_vehicle
    return pd.DataFrame({
        "a": rng.normal(size=n), "b": rng.normal(size=n),
        "vehicle_id": np.repeat([f"V{i}" for i in range(n_vehicles)], per_vehicle),
        "start_time": pd.Timestamp("2026-03-02", tz="UTC") + pd.to_timedelta(np.tile(np.arange(per_vehicle), n_vehicles), "h"),
    })


def test_missing_feature_is_not_scored_as_a_healthy_median():
    trips = _trips()
    forest = TripForest(n_estimators=100, max_samples=128, random_state=0).fit(
        trips[["a", "b"]].assign(a=trips["a"].mask(trips.index % 50 == 0)), trips["vehicle_id"], trips["start_time"],
        neutral_zero=True)
    typical = forest.score(pd.DataFrame({"a": [0.0], "b": [0.0]}))[0]
    missing = forest.score(pd.DataFrame({"a": [np.nan], "b": [0.0]}))[0]
    assert missing > typical  # a rare missing value is itself unusual, never "exactly the median"


def test_training_sample_caps_trips_per_vehicle():
    trips = _trips(n_vehicles=10, per_vehicle=40)
    forest = TripForest(max_trips_per_vehicle=5).fit(trips[["a", "b"]], trips["vehicle_id"], trips["start_time"], True)
    assert forest.n_train_ == 10 * 5


def test_subspace_score_is_the_largest_subspace_score_and_skips_absent_subspaces():
    trips = _trips()
    values = trips[["a", "b"]]
    forests = SubspaceForests({"A": ["a"], "B": ["b"]}, n_estimators=50, random_state=0).fit(
        values, trips["vehicle_id"], trips["start_time"], True)
    probe = pd.DataFrame({"a": [0.0, 8.0], "b": [np.nan, 0.0]})
    sub = forests.score_subspaces(probe)
    assert np.isnan(sub.loc[0, "B"])
    np.testing.assert_allclose(forests.score(probe), sub.max(axis=1, skipna=True))
    assert sub.loc[1, "A"] > sub.loc[0, "A"]
