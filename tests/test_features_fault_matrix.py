"""Fault × feature matrix: each fault moves its own features, pinned to the right wheel, and nothing else.

Every fault is injected into the same simulated vehicle (same seed) and trip
conditions as a healthy reference trip, with the simulator's healthy
confounders switched on (rough road, full load, extreme temperature, parking
on slopes). Its *effect* on a feature is the difference from that reference.
The *healthy spread* of a feature is how much it moves between a vehicle's own
healthy trips under the different confounders (largest over the vehicles),
but at least a tenth of its healthy spread across the fleet. The tyre
confounders (tyre change, spare wheel) draw from the trip's random stream and
so also change the route; their other features are held to the vehicle's
healthy values widened by one spread instead of a paired difference. A responding
feature must move by MARGIN healthy spreads; every other feature must stay
within one, or become NaN for lack of qualifying data (a faulty wheel fails
the axle-agreement test more often, so a borderline trip may lose its yaw
gain): a fault may cost a feature its data, never move it.

The vehicle seeds here were not used while the features were tuned.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np
import pandas as pd
import pytest

import synthetic_fleet
from features.extract import FEATURE_COLUMNS, extract_trip_features
from features.row import parse_nan_reasons
from tracktrue.schema import POSITIONS

VEHICLE_SEEDS = (41, 42, 43)
DURATION_S = 1200.0
ON = ("rough_road", "full_load", "temperature", "slope_parking")
#: Healthy variety: each confounder alone and together; those that draw from
#: the trip's random stream (temperature, slope parking) also change the route.
HEALTHY_SETS = ((), ("rough_road",), ("full_load",), ("temperature",), ("slope_parking",),
                ("temperature", "slope_parking"), ("rough_road", "temperature"), ("full_load", "slope_parking"), ON)
MARGIN = 2.5
FLEET_SHARE = 0.1


@lru_cache(maxsize=None)
def trip_row(seed: int, fault: str | None, confounders: tuple[str, ...]) -> dict:
    samples, spec = synthetic_fleet.trip_samples(seed=seed, fault=fault, confounders=confounders,
                                                 duration_s=DURATION_S)
    return extract_trip_features(samples, spec)


def features(seed: int, fault: str | None, confounders: tuple[str, ...]) -> pd.Series:
    return pd.Series(trip_row(seed, fault, confounders))[list(FEATURE_COLUMNS)].astype(float)


@lru_cache(maxsize=None)
def healthy() -> dict[int, pd.DataFrame]:
    return {s: pd.DataFrame([features(s, None, c) for c in HEALTHY_SETS]) for s in VEHICLE_SEEDS}


@lru_cache(maxsize=None)
def healthy_spread() -> pd.Series:
    per_vehicle = pd.concat([h.max() - h.min() for h in healthy().values()], axis=1).max(axis=1)
    fleet = pd.concat(healthy().values())
    return np.maximum(per_vehicle, FLEET_SHARE * (fleet.max() - fleet.min()))


def per_wheel(family: str, pos: str) -> str:
    return {"ratio": f"wheel_ratio_{pos}_pct", "jitter": f"wheel_jitter_{pos}_pct",
            "dropouts": f"wheel_dropouts_{pos}", "accel": f"wheel_accel_disagree_{pos}_g",
            "onset": f"wheel_onset_{pos}_mps"}[family]


def expectation(case: str) -> tuple[list[str], list[str], tuple[str, str] | None]:
    """(features that must respond, features that may also move, (family, wheel) it is pinned to)."""
    kind, _, pos = case.rpartition("_")
    ratios = [per_wheel("ratio", p) for p in POSITIONS]
    # Features that use the rear axle as their yaw reference see a rear wheel's
    # fault too (Isermann's residual table): they may move, the wheel features pin it.
    rear_referenced = ["yaw_offset_dps", "yaw_gain", "lat_residual_g"] if pos in ("rl", "rr") else []
    if kind == "tone_ring":
        return [per_wheel("jitter", pos), per_wheel("accel", pos)], rear_referenced, ("jitter", pos)
    if kind == "air_gap":
        # dropout edges are false accelerations of that wheel too; the other wheels' onsets are taken
        # against the median of the other three, which the dead wheel lowers a little
        others = [per_wheel("onset", p) for p in POSITIONS if p != pos]
        return ([per_wheel("dropouts", pos), per_wheel("onset", pos)], [per_wheel("accel", pos), *others],
                ("onset", pos))
    if kind in ("tyre_deflation", "tyre_mismatch", "spare"):
        return [per_wheel("ratio", pos)], ratios, ("ratio", pos)
    if case == "tyre_change":
        # new tyres on a random axle: the ratio family moves, and the wheel yaw
        # reference's scale (calibrated to the median wheel) moves with two tyres
        return [], [*ratios, "yaw_gain"], None
    yaw_sensor = ["yaw_rest_dps", "yaw_offset_dps", "yaw_gain", "steer_yaw_residual_dps"]
    return {
        "yaw_offset": (["yaw_rest_dps", "yaw_offset_dps"], yaw_sensor, None),
        "yaw_gain": (["yaw_gain"], yaw_sensor, None),
        "steer_offset": (["steer_center_deg"], ["steer_yaw_residual_dps"], None),
        # a stop's grade is as large as the offset, so the rest value may move either way
        "accel_long_offset": (["accel_long_residual_g"], ["accel_long_rest_g"], None),
        "accel_lat_offset": (["lat_residual_g", "accel_lat_rest_g"], [], None),
    }[case]


CASES = (*synthetic_fleet.FAULTS, "tyre_change", "spare_fl", "spare_rr")


def bounded(case: str) -> dict[str, tuple[str, float]]:
    """Features a case may move a little: {feature: (fault it is measured against, largest share)}.

    These are physical side effects, far smaller than the fault that feature
    exists to catch, so they cannot be mistaken for it:
    - one tyre of another size shifts the wheel yaw reference's speed scale
      (calibrated to the median wheel) by a fraction of its radius change: the
      yaw gain moves by tenths of a per cent, against several per cent for a
      yaw-gain fault;
    - a damaged tone ring's erratic tooth steps do not cancel exactly over a
      trip's distance, so its own wheel's ratio moves a little, far less than a
      deflating tyre moves it;
    - a wheel rolling at another speed (a tyre) or with erratic tooth steps (a
      ring) can cross the module's cut-off a sample earlier or later than the
      others, which moves a signal onset by one sample's speed change, a few
      hundredths of a m/s against metres per second for a widening air gap.
    """
    kind, _, pos = case.rpartition("_")
    onsets = {per_wheel("onset", p): (f"air_gap_{p}", 0.05) for p in POSITIONS}
    if kind in ("tyre_deflation", "tyre_mismatch", "spare"):
        return {"yaw_gain": ("yaw_gain", 0.1), **onsets}
    if kind == "tone_ring":
        return {per_wheel("ratio", pos): (f"tyre_deflation_{pos}", 0.25), **onsets}
    return {}


def faulty_args(case: str, seed: int) -> tuple:
    return (seed, case, ON) if case in synthetic_fleet.FAULTS else (seed, None, (*ON, case))


def effect(case: str, seed: int) -> tuple[pd.Series, pd.Series]:
    """(faulty trip's features, healthy reference's) for one vehicle, confounders on."""
    return features(*faulty_args(case, seed)), features(seed, None, ON)


def outside_band(seed: int, feature: str, value: float) -> float:
    """How far ``value`` lies outside the vehicle's healthy values of ``feature`` (0 inside)."""
    h = healthy()[seed][feature]
    return float(max(h.min() - value, value - h.max(), 0.0))


def lost_data(case: str, seed: int, feature: str) -> bool:
    """The fault cost this feature its qualifying data (NaN with a too_little_* reason): not a movement."""
    reasons = parse_nan_reasons(trip_row(*faulty_args(case, seed))["nan_reasons"])
    return reasons.get(feature, "").startswith("too_little")


@pytest.mark.parametrize("case", CASES)
def test_fault_moves_its_own_features_pinned_to_its_wheel_and_nothing_else(case):
    spread = healthy_spread()
    respond, may_move, pinned = expectation(case)
    limits = bounded(case)
    problems = []
    for seed in VEHICLE_SEEDS:
        faulty, reference = effect(case, seed)
        delta = (faulty - reference).abs()
        for f, (against, share) in limits.items():
            target_fault, target_ref = effect(against, seed)
            allowed = share * abs(target_fault[f] - target_ref[f])
            if not (np.isnan(faulty[f]) or delta[f] <= allowed):
                problems.append(f"seed {seed}: {f} moved {delta[f]:.4g} > {share} × the {against} fault's move")
        for f in respond:
            if not delta[f] >= MARGIN * spread[f]:
                problems.append(f"seed {seed}: {f} moved {delta[f]:.4g}, needs {MARGIN}×{spread[f]:.4g}")
        if pinned:
            family, pos = pinned
            moves = {p: delta[per_wheel(family, p)] for p in POSITIONS}
            if max(moves, key=moves.get) != pos:
                problems.append(f"seed {seed}: {family} moved most on the wrong wheel {moves}")
        flaky = healthy()[seed].isna().any() & ~healthy()[seed].isna().all()
        for f in FEATURE_COLUMNS:
            if f in respond or f in may_move or f in limits:
                continue
            if np.isnan(faulty[f]) and not np.isnan(reference[f]) and lost_data(case, seed, f):
                continue
            if np.isnan(faulty[f]) != np.isnan(reference[f]) and not flaky[f]:
                problems.append(f"seed {seed}: {f} NaN changed ({reference[f]} -> {faulty[f]})")
            elif case in synthetic_fleet.FAULTS and delta[f] > spread[f]:
                problems.append(f"seed {seed}: {f} moved {delta[f]:.4g} > healthy spread {spread[f]:.4g}")
            elif case not in synthetic_fleet.FAULTS and not outside_band(seed, f, faulty[f]) <= spread[f]:
                problems.append(f"seed {seed}: {f} = {faulty[f]:.4g} is {outside_band(seed, f, faulty[f]):.4g} "
                                f"outside the vehicle's healthy values (spread {spread[f]:.4g})")
    assert not problems, "\n".join(problems)


@pytest.mark.parametrize("fault", ["yaw_offset", "yaw_gain"])
def test_a_yaw_sensor_fault_moves_no_wheel_feature(fault):
    spread = healthy_spread()
    wheel_features = [f for f in FEATURE_COLUMNS if f.startswith("wheel_")]
    for seed in VEHICLE_SEEDS:
        faulty, reference = effect(fault, seed)
        moved = (faulty - reference).abs()[wheel_features]
        assert (moved <= spread[wheel_features]).all(), moved[moved > spread[wheel_features]]


def test_healthy_features_are_finite_on_ordinary_mixed_trips():
    # The matrix means nothing if the features it compares are mostly NaN.
    rows = pd.concat(healthy().values())
    share_finite = rows.notna().mean()
    assert (share_finite >= 0.8).all(), share_finite[share_finite < 0.8]


@pytest.mark.parametrize("fault", [f"{kind}_{pos}" for kind in ("tyre_deflation", "tyre_mismatch")
                                   for pos in POSITIONS])
def test_a_tyre_radius_change_moves_yaw_gain_only_through_the_wheels_speed_scale(fault):
    # The wheel yaw reference divides each wheel by its relative radius, calibrated on this
    # trip's straight cruise, so the tyre's own error cancels (kinematic yaw of a non-steered
    # axle, CHECKS.md). What one trip cannot know is which wheel rolls true: the calibration
    # scales all four to their median (the mean of the middle two), which moves by at most half
    # of one wheel's change, and yaw_gain with it. Without the calibration a 1 % radius error on
    # one rear wheel would fake v·1 %/track of yaw, tens of per cent of gain at cruise speed.
    for seed in VEHICLE_SEEDS:
        faulty, reference = effect(fault, seed)
        pos = fault.rpartition("_")[2]
        wheel_change = abs(faulty[per_wheel("ratio", pos)] - reference[per_wheel("ratio", pos)]) / 100.0
        gain_change = abs(faulty["yaw_gain"] - reference["yaw_gain"]) / reference["yaw_gain"]
        assert wheel_change > 0.005  # the fault is there
        assert gain_change <= 0.5 * wheel_change + 1e-4, (seed, gain_change, wheel_change)


def test_a_steering_sensor_offset_moves_no_wheel_ratio():
    # The cornering correction of the ratios takes its curvature from the 2-of-3 consensus of yaw
    # sensor, rear-axle and front-axle wheel yaw, never from the steering angle, and straightness
    # votes are centred on the trip's own median: a steering sensor's offset cannot reach a wheel
    # ratio (DESIGN.md: each residual compares exactly two sources). Same vehicle and route, so
    # the ratios must agree to rounding, far inside their healthy spread.
    ratios = [per_wheel("ratio", p) for p in POSITIONS]
    for seed in VEHICLE_SEEDS:
        faulty, reference = effect("steer_offset", seed)
        assert faulty["steer_center_deg"] != pytest.approx(reference["steer_center_deg"], abs=3.0)
        moved = (faulty - reference).abs()[ratios]
        assert (moved <= 1e-3).all(), moved
