"""Qualifying windows of a trip: standstill, straight cruise, moving.

Every window is chosen by agreement of at least two independent sources and
never by one sensor alone, because the sensor a feature checks may be the
faulty one (DESIGN.md, "Features must not lean on the sensor they check"):

* speed is the per-sample median of the four wheel speeds (one wheel reading
  zero or jittering cannot move it);
* standstill needs every wheel below 0.1 m/s *and* a quiet yaw-rate or
  accelerometer trace (passive wheel sensors read 0 while the vehicle still
  creeps), and the brake pressed wherever the brake is logged;
* straight needs two of the three straightness votes (yaw sensor, rear-axle
  wheel-speed difference, steering) when all three are available, both when
  two are; each vote is centred on the trip's own median at speed, so a
  sensor offset does not veto straight road.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from features.signals import (
    SMOOTH_S,
    TripArrays,
    keep_runs,
    median,
    moving_mean,
    moving_std_at,
    second_smallest_of_four,
    smooth_derivative,
    widen,
    window_samples,
)
from features.spec import VehicleSpec
from tracktrue.signal_quality import MOVING_MPS
from tracktrue.units import DEG_RAD

STANDSTILL_SPEED_MPS = 0.1
STANDSTILL_MIN_S = 3.0
#: The body still pitches and rocks just after stopping.
STANDSTILL_SETTLE_S = 1.0
#: Quiet traces at standstill (a creeping or rocking vehicle is louder). The
#: accelerometer limit is loose: an idling engine on a rough-road vehicle
#: already shakes it by a few tenths of m/s².
STANDSTILL_YAW_STD_RADPS = 0.6 * DEG_RAD
STANDSTILL_ACCEL_STD_MPS2 = 0.6
MOVING_SPEED_MPS = MOVING_MPS  # DESIGN.md's "moving" (tracktrue.signal_quality, shared with the gates)
#: A wheel below this while others roll is read as zero (a dropout), not as slow.
DROPOUT_ZERO_MPS = 0.3
CRUISE_SPEED_MPS = 8.0
#: Straight: every vote's equivalent yaw rate within this of its straight-road value.
STRAIGHT_YAW_RADPS = 1.5 * DEG_RAD
#: Small longitudinal acceleration (wheel-derived) for cruise and calibration.
CALM_ACCEL_MPS2 = 0.5
CRUISE_MIN_S = 3.0


@dataclass(frozen=True)
class Windows:
    speed: np.ndarray  #: median of four wheels, m/s
    accel: np.ndarray  #: its Savitzky–Golay derivative, m/s²
    moving: np.ndarray
    standstill: np.ndarray
    cruise: np.ndarray  #: straight cruise, by two-of-three vote
    straight_by_yaw_and_wheels: np.ndarray  #: cruise judged without the steering sensor
    straight_by_yaw: np.ndarray  #: cruise judged by the yaw sensor alone (for wheels too coarse to vote)
    calm: np.ndarray  #: moving without brake or hard longitudinal acceleration
    rolling: np.ndarray  #: no wheel reads (near) zero within 1 s: wheels can be compared
    standstill_reason: str | None  #: why standstill cannot be judged, if so
    straight_reason: str | None  #: why straightness cannot be judged, if so


def find_windows(trip: TripArrays, spec: VehicleSpec) -> Windows:
    """The qualifying windows of one trip (DESIGN.md feature table).

    Reversing, where the logs carry signed wheel speeds, is in none: not moving (three wheels at
    MOVING_SPEED_MPS or more) and not standing still (|speed| below STANDSTILL_SPEED_MPS).
    """
    speed = trip.speed
    accel = smooth_derivative(speed, trip)
    brake_on = trip.brake == 1.0
    with np.errstate(invalid="ignore"):
        moving = second_smallest_of_four(trip.wheels) >= MOVING_SPEED_MPS  # at least three wheels agree
        calm = moving & ~brake_on & (np.abs(accel) < CALM_ACCEL_MPS2)
    standstill, standstill_reason = _standstill(trip, brake_on)
    votes, straight_reason = _straight_votes(trip, spec, speed, calm)
    with np.errstate(invalid="ignore"):
        fast_calm = calm & (speed >= CRUISE_SPEED_MPS)
    if straight_reason is None:
        cruise = keep_runs(fast_calm & _two_or_more(votes.values(), trip.n), trip, CRUISE_MIN_S)
    else:
        cruise = np.zeros(trip.n, dtype=bool)
    if "yaw" in votes and "wheels" in votes:
        both = keep_runs(fast_calm & votes["yaw"] & votes["wheels"], trip, CRUISE_MIN_S)
    else:
        both = np.zeros(trip.n, dtype=bool)
    by_yaw = keep_runs(fast_calm & votes["yaw"], trip, CRUISE_MIN_S) if "yaw" in votes else np.zeros(trip.n, bool)
    return Windows(speed=speed, accel=accel, moving=moving, standstill=standstill, cruise=cruise,
                   straight_by_yaw_and_wheels=both, straight_by_yaw=by_yaw, calm=calm,
                   rolling=_rolling_everywhere(trip),
                   standstill_reason=standstill_reason, straight_reason=straight_reason)


def _two_or_more(votes, n: int) -> np.ndarray:
    """True where at least two of the boolean ``votes`` (each of ``n`` samples) are: a count by ORs, no integer stack."""
    seen, two = np.zeros(n, dtype=bool), np.zeros(n, dtype=bool)
    for vote in votes:
        two |= seen & vote
        seen |= vote
    return two


def _rolling_everywhere(trip: TripArrays) -> np.ndarray:
    """No wheel reads (near) zero within 1 s: samples usable for wheel-to-wheel comparison.

    The margin keeps a dropout's edges, where a smoothed derivative or
    moving mean still sees the zero, out of the comparisons as well.
    """
    with np.errstate(invalid="ignore"):
        any_zero = ~np.all(trip.wheels > DROPOUT_ZERO_MPS, axis=0)
    if not any_zero.any():
        return ~any_zero
    return ~widen(any_zero, window_samples(2 * SMOOTH_S, trip.rate_hz) // 2)


def _standstill(trip: TripArrays, brake_on: np.ndarray) -> tuple[np.ndarray, str | None]:
    logged = np.isfinite(trip.wheels).any(axis=1)
    if logged.sum() < 2:
        return np.zeros(trip.n, dtype=bool), "too_few_wheel_signals"
    w = trip.wheels if logged.all() else trip.wheels[logged]  # a row pick copies all four traces
    with np.errstate(invalid="ignore"):
        still = np.all(np.abs(w) < STANDSTILL_SPEED_MPS, axis=0)  # NaN is not still; reversing (< 0) moves
    width = window_samples(SMOOTH_S, trip.rate_hz, minimum=3)
    confirmations = 0
    for name, limit in (("yaw_rate", STANDSTILL_YAW_STD_RADPS), ("accel_long", STANDSTILL_ACCEL_STD_MPS2)):
        if trip.has(name):
            confirmations += 1
            x = trip.signals[name]
            with np.errstate(invalid="ignore"):
                still &= np.isfinite(x) & (moving_std_at(x, still, width) < limit)
    if confirmations == 0:
        return np.zeros(trip.n, dtype=bool), "standstill_unconfirmed"
    if trip.has("brake"):
        still &= brake_on | ~np.isfinite(trip.brake)
    return keep_runs(still, trip, STANDSTILL_MIN_S, STANDSTILL_SETTLE_S), None


def _straight_votes(trip, spec, speed, calm) -> tuple[dict[str, np.ndarray], str | None]:
    """Each source's opinion that the vehicle goes straight, as an equivalent yaw rate test."""
    width = window_samples(SMOOTH_S, trip.rate_hz)
    with np.errstate(invalid="ignore"):
        fast = calm & (speed >= CRUISE_SPEED_MPS)
    if not fast.any():
        return {}, None  # no cruise at all: the windows are empty, not unjudgeable
    equivalent: dict[str, np.ndarray] = {}
    if trip.has("yaw_rate"):
        equivalent["yaw"] = (trip.smoothed("yaw_rate"), 1.0)
    rl, rr = trip.wheel("rl"), trip.wheel("rr")
    if np.isfinite(spec.track_rear_m) and np.isfinite(rl).any() and np.isfinite(rr).any():
        with np.errstate(invalid="ignore", divide="ignore"):
            relative = (rr - rl) / (0.5 * (rl + rr))
        # relative difference, so a radius mismatch is a constant to centre away
        equivalent["wheels"] = (moving_mean(relative, width), speed / spec.track_rear_m)
    if trip.has("steering_angle") and spec.missing("steering_ratio", "wheelbase_m") is None:
        scale = speed / (spec.steering_ratio * spec.wheelbase_m)
        equivalent["steering"] = (trip.smoothed("steering_angle"), scale)
    votes = {}
    for name, (value, scale) in equivalent.items():
        ref = value[fast & np.isfinite(value)]
        if ref.size == 0:
            continue
        with np.errstate(invalid="ignore"):
            votes[name] = np.abs((value - median(ref)) * scale) < STRAIGHT_YAW_RADPS
    if len(votes) < 2:
        return votes, "straight_unconfirmed"
    return votes, None
