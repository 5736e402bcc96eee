"""Wheel-speed features (ratio, jitter, dropouts, signal onset) and the calibrated wheel references.

Each wheel is compared with the other wheels only, never with the yaw sensor,
so a yaw-sensor fault cannot move a wheel feature. The relative rolling radius
of each wheel is calibrated on straight cruise (as indirect tyre-pressure
monitors do) and that calibration feeds only the wheel *references* for yaw
and acceleration; the ratio features themselves are uncalibrated, or they
would hide the tyre they exist to find.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from features.kinematics import front_axle_yaw_rate, rear_axle_yaw_rate, wheel_path_factors
from features.row import FeatureRow
from features.signals import (
    TripArrays,
    count_events,
    keep_runs,
    median,
    median_of_four,
    median_of_three,
    moving_mean,
    pair_differences,
    robust_spread,
    SMOOTH_S,
    seconds,
    three_cornered_hat,
    widen,
    window_samples,
)
from features.spec import VehicleSpec
from features.windows import DROPOUT_ZERO_MPS, Windows
from tracktrue.schema import POSITIONS
from tracktrue.units import DEG_RAD

#: Straight cruise needed to calibrate relative radii.
CALIBRATION_MIN_S = 20.0
RATIO_MIN_SPEED_MPS = 5.0
#: Cornering correction is kinematic; above this lateral acceleration tyre slip spoils it.
RATIO_MAX_LAT_MPS2 = 2.0
RATIO_MIN_S = 30.0
JITTER_HIGHPASS_S = 2.0
JITTER_MIN_RATE_HZ = 2.0
#: Quantisation alone (step/√12 over speed) above this drowns the jitter a tone ring makes.
JITTER_MAX_QUANT_PCT = 0.25
JITTER_MIN_S = 30.0
#: A wheel "reads zero" below DROPOUT_ZERO_MPS (features.windows) while the other three roll above this.
ROLLING_MPS = 2.0
DROPOUT_MIN_KM = 1.0
#: Dropped samples closer than this belong to one dropout episode, s.
DROPOUT_MERGE_S = 1.0
#: Signal onsets above this speed are dropouts while driving (wheel_dropouts), not a low-speed onset.
ONSET_MAX_MPS = 10.0
#: Two stops: an arrival and a departure each.
ONSET_MIN_EDGES = 4
#: A module without a usable signal reports zero; anything above this is a wheel crawling.
ONSET_ZERO_MPS = 0.05
#: The lower decile of a trip's edges: a widening gap raises every edge, while a stale or
#: staggered read (a polled logger reads the wheels one after another) raises one now and then.
ONSET_QUANTILE = 0.1
#: The six wheel pairs (indices into POSITIONS).
WHEEL_PAIRS: tuple[tuple[int, int], ...] = tuple((i, j) for i in range(4) for j in range(i + 1, 4))
#: A wheel this far from the median of four is a glitch, not a tyre.
GLITCH_FRAC = 0.1
#: Front- and rear-axle yaw must agree within this (plus a share of the turn)
#: before the rear axle serves as a reference: a tone-ring glitch on one wheel
#: breaks the agreement, a healthy turn does not.
AXLE_AGREE_RADPS = 1.0 * DEG_RAD
AXLE_AGREE_FRAC = 0.1


@dataclass(frozen=True)
class WheelReference:
    """Calibrated rear-axle speed and yaw rate; NaN when no calibration was possible."""

    radius_offset: np.ndarray  #: (4,) relative radius of each wheel − 1 (fraction)
    speed: np.ndarray  #: rear-axle-centre speed from calibrated rear wheels, m/s
    yaw_rate: np.ndarray  #: (v_rr − v_rl)/track_rear from calibrated wheels, rad/s
    axles_agree: np.ndarray  #: front- and rear-axle yaw agree (one wheel's glitch breaks it)
    consensus_yaw_rate: np.ndarray  #: 1 s median of yaw sensor, rear axle, front axle, rad/s
    yaw_rate_smoothed: np.ndarray  #: 1 s mean of ``yaw_rate``
    reason: str | None  #: why there is no calibration

    def calibrated(self, wheels: np.ndarray) -> np.ndarray:
        """The trip's (4, n) ``wheels`` divided by their relative radius.

        Made when a feature asks, not kept for the whole trip: one (4, n)
        stack less of memory a trip holds (fresh pages each trip).
        """
        return wheels / (1.0 + self.radius_offset)[:, None]


def distance_ratios(speeds: np.ndarray, against: str = "mean", median: np.ndarray | None = None) -> np.ndarray:
    """Each wheel's distance over the reference wheel's: Σ v_pos / Σ ref(v), for (4, n) speeds.

    ``against`` "mean" is DESIGN.md's v_pos/mean(v) (the ratio features);
    "median" (the median of four per sample) is the calibration's reference,
    which keeps the true ground-speed scale when one wheel is off (a compact
    spare reads ~3 % fast and would pull the mean, and with it every
    calibrated speed and the wheel yaw, by ~0.8 %).
    A sum, not a median over time: a wheel-speed sensor counts teeth, so
    tooth-spacing errors of a damaged ring cancel over each revolution and the
    distance stays right, while the median of its lopsided once-per-revolution
    error is not zero. Samples where any wheel strays more than 10 % from the
    median of four (spin, lock, a glitch) are left out for all wheels alike.
    ``median``: the median of four of ``speeds`` when the caller has it already.
    """
    median = median_of_four(speeds) if median is None else median
    with np.errstate(invalid="ignore", divide="ignore"):
        deviation = np.divide(speeds, median)  # |v / median − 1|, in place
    deviation -= 1.0
    sane = np.all(np.abs(deviation, out=deviation) < GLITCH_FRAC, axis=0)
    every = sane.all()
    kept = speeds if every else np.compress(sane, speeds, axis=1)  # column picks: faster than [:, sane]
    reference = kept.mean(axis=0) if against == "mean" else median if every else median[sane]
    with np.errstate(invalid="ignore"):  # no sample where all four agree: NaN, the callers say why
        return kept.sum(axis=1) / reference.sum()


def wheel_comparison_window(row: FeatureRow, names, trip: TripArrays, windows: Windows,
                            min_rate_hz: float, min_s: float) -> np.ndarray | None:
    """Calm rolling above 5 m/s with no wheel near zero; None (and ``names`` NaN) if too little or too slow."""
    if not trip.rate_hz >= min_rate_hz:
        row.nan_all(names, "rate_too_low")
        return None
    with np.errstate(invalid="ignore"):
        usable = windows.calm & (windows.speed >= RATIO_MIN_SPEED_MPS) & windows.rolling
    if seconds(usable, trip) < min_s:
        row.nan_all(names, "too_little_rolling")
        return None
    return usable


def steady_reference_window(trip: TripArrays, windows: Windows, ref: WheelReference) -> np.ndarray:
    """Calm rolling above 5 m/s where front- and rear-axle yaw agree: the calibrated wheels can serve as a reference."""
    with np.errstate(invalid="ignore"):
        return windows.calm & windows.rolling & ref.axles_agree & (ref.speed >= RATIO_MIN_SPEED_MPS)


def calibrate(trip: TripArrays, spec: VehicleSpec, windows: Windows) -> WheelReference:
    """Relative radius c_pos = distance ratio to the median wheel over straight cruise − 1, and the references built on it."""
    nan = np.full(trip.n, np.nan)
    if seconds(windows.cruise, trip) < CALIBRATION_MIN_S:
        reason = windows.straight_reason or "no_straight_cruise"
        return WheelReference(np.full(4, np.nan), nan, nan, np.zeros(trip.n, bool), nan, nan, reason)
    cruise = np.compress(windows.cruise, trip.wheels, axis=1)
    offset = distance_ratios(cruise, "median", windows.speed[windows.cruise]) - 1.0
    if not np.isfinite(offset).all():
        return WheelReference(np.full(4, np.nan), nan, nan, np.zeros(trip.n, bool), nan, nan, "wheels_disagree")
    radius = 1.0 + offset
    rl, rr = trip.wheels[2] / radius[2], trip.wheels[3] / radius[3]  # rows of WheelReference.calibrated
    reason = spec.missing("track_rear_m", "track_front_m")
    if reason:
        return WheelReference(offset, 0.5 * (rl + rr), nan, np.zeros(trip.n, bool), nan, nan, reason)
    width = window_samples(SMOOTH_S, trip.rate_hz)
    rear_yaw = rear_axle_yaw_rate(rl, rr, spec.track_rear_m)
    rear = moving_mean(rear_yaw, width)
    front = moving_mean(front_axle_yaw_rate(trip.wheels[0] / radius[0], trip.wheels[1] / radius[1],
                                            spec.track_front_m), width)
    with np.errstate(invalid="ignore"):
        agree = np.abs(rear - front) < AXLE_AGREE_RADPS + AXLE_AGREE_FRAC * np.abs(rear)
    if trip.has("yaw_rate"):
        sensor = trip.smoothed("yaw_rate")
        consensus = np.where(np.isfinite(sensor), median_of_three(sensor, rear, front), 0.5 * (rear + front))
    else:
        consensus = 0.5 * (rear + front)
    return WheelReference(offset, 0.5 * (rl + rr), rear_yaw, agree, consensus, rear, None)


def wheel_ratio_features(row: FeatureRow, trip: TripArrays, spec: VehicleSpec,
                         windows: Windows, ref: WheelReference) -> None:
    """wheel_ratio_<pos>_pct = 100 · (Σ u_pos / Σ mean(u) − 1), u_pos = v_pos / f_pos, in %.

    f_pos is the kinematic wheel-path factor of the turn (CHECKS.md wheel paths,
    features.kinematics.wheel_path_factors) at curvature k = r/v, r the 1 s
    median of three yaw estimates (yaw sensor, calibrated rear axle,
    calibrated front axle: a 2-of-3 vote, so one faulty source cannot bend it)
    and v the median wheel speed; turns up to 2 m/s² lateral count as well as
    straight road. On straight road f = 1 and this is DESIGN.md's v_pos/mean(v)
    − 1, taken as a distance ratio (see distance_ratios for why not the
    median). Without the geometry it falls back to straight cruise.
    Source: wheel speeds only.
    """
    names = [f"wheel_ratio_{p}_pct" for p in POSITIONS]
    if ref.reason and ref.reason.startswith(("no_", "straight")):
        row.nan_all(names, ref.reason)
        return
    if spec.missing("track_front_m", "track_rear_m", "wheelbase_m") is None:
        # the turn comes from the 2-of-3 consensus (yaw sensor, rear axle, front
        # axle), so neither one wheel's noise nor a yaw-sensor fault enters the
        # correction or picks the samples
        yaw, speed = ref.consensus_yaw_rate, windows.speed
        with np.errstate(invalid="ignore", divide="ignore"):
            curvature = yaw / speed
            usable = (windows.calm & (windows.speed >= RATIO_MIN_SPEED_MPS) & windows.rolling
                      & (np.abs(yaw * speed) < RATIO_MAX_LAT_MPS2))
        factors = wheel_path_factors(curvature[usable], spec.track_front_m, spec.track_rear_m, spec.wheelbase_m)
        u = np.compress(usable, trip.wheels, axis=1)
        u /= factors
    else:
        usable = windows.cruise
        u = np.compress(usable, trip.wheels, axis=1)
    if seconds(usable, trip) < RATIO_MIN_S:
        row.nan_all(names, "too_little_rolling")
        return
    ratio = distance_ratios(u) - 1.0
    for name, value in zip(names, ratio):
        row.set(name, 100.0 * value, "wheels_disagree")


def wheel_jitter_features(row: FeatureRow, trip: TripArrays, windows: Windows) -> None:
    """wheel_jitter_<pos>_pct = 100 · σ_pos, the pos wheel's own fast relative speed noise, in %.

    For each pair of wheels, hp(v_i / v_j − 1) is the difference of their
    fast noises (hp: minus a 2 s centred moving mean, which removes turns and
    tyre radius and keeps the wobble a damaged tone ring or loose sensor
    makes; computed on log speeds, which is the same to first order); its
    robust variance (1.4826·MAD)² estimates σ_i² + σ_j². The six
    pairs are solved for the four σ² by least squares: the "three-cornered
    hat" of clock comparison (Gray & Allan, 1974), so one jittery wheel does
    not raise its neighbours' values. Source: wheel speeds only. NaN below
    2 Hz or when the speed resolution alone exceeds 0.25 %.
    """
    names = [f"wheel_jitter_{p}_pct" for p in POSITIONS]
    usable = wheel_comparison_window(row, names, trip, windows, JITTER_MIN_RATE_HZ, JITTER_MIN_S)
    if usable is None:
        return
    typical_speed = median(windows.speed[usable])
    width = window_samples(JITTER_HIGHPASS_S, trip.rate_hz, minimum=5)
    fast = _high_passed_log_speeds(trip, usable, width)
    # rows in WHEEL_PAIRS' order; the differences are ours to reorder
    pair_var = dict(zip(WHEEL_PAIRS, robust_spread(pair_differences(fast), overwrite_input=True) ** 2))
    own_var = three_cornered_hat(pair_var, 4)
    for pos, name, var in zip(POSITIONS, names, own_var):
        step = trip.resolution.get(f"wheel_speed_{pos}", np.nan)
        if np.isfinite(step) and 100.0 * step / (np.sqrt(12.0) * typical_speed) > JITTER_MAX_QUANT_PCT:
            row.nan(name, "resolution_too_coarse")
        else:
            row.set(name, 100.0 * np.sqrt(var))


def _high_passed_log_speeds(trip: TripArrays, usable: np.ndarray, width: int) -> np.ndarray:
    """hp(log v) of the four wheels at the ``usable`` samples: log v minus its centred ``width`` moving mean.

    Only the usable samples' filter windows are filtered (usable runs widened
    by half a window, joined: each window stays inside its run). The logs are
    written over the picked speeds and the mean's buffer takes the
    difference, and the (4, n) stacks die with this call, before the pair
    differences are made: less fresh memory per trip.
    """
    near = widen(usable, width // 2)
    kept = usable[near]
    log_speed = np.compress(near, trip.wheels, axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        np.log(log_speed, out=log_speed, where=kept)
    np.copyto(log_speed, np.nan, where=~kept)
    # hp(log v_i − log v_j) = hp(log v_i) − hp(log v_j) ≈ hp(v_i/v_j − 1): four filters, not six
    high_passed = moving_mean(log_speed, width)
    np.subtract(log_speed, high_passed, out=high_passed)
    return np.compress(kept, high_passed, axis=1)


def wheel_dropout_features(row: FeatureRow, trip: TripArrays, distance_km: float) -> None:
    """wheel_dropouts_<pos> = 100 · (events with v_pos < 0.3 m/s while the other three exceed 2 m/s) / km.

    Events per 100 km. One wheel at zero while three roll is a sensor or
    tone-ring fault, not a stopped vehicle (CHECKS.md, common practice).
    An event is one episode: dropped samples less than DROPOUT_MERGE_S apart
    belong to it, so a signal flickering at the edge of a dropout counts once
    whatever the logger's rate (unmerged, the count grew with the rate: 160,
    560 and 1,290 per 100 km for one simulated air gap logged at 10, 50 and
    100 Hz). Source: wheel speeds only.
    """
    with np.errstate(invalid="ignore"):
        rolling = trip.wheels >= ROLLING_MPS
    n_rolling = rolling.sum(axis=0)
    for i, pos in enumerate(POSITIONS):
        name = f"wheel_dropouts_{pos}"
        if not trip.has(f"wheel_speed_{pos}"):
            row.nan(name, "signal_missing")
            continue
        if not distance_km >= DROPOUT_MIN_KM:
            row.nan(name, "too_little_distance")
            continue
        with np.errstate(invalid="ignore"):  # the other three all roll
            dropped = (trip.wheels[i] < DROPOUT_ZERO_MPS) & (n_rolling - rolling[i] == 3)
        if dropped.any():  # fill the short gaps between dropped samples: one episode
            dropped = ~keep_runs(~dropped, trip, DROPOUT_MERGE_S)
        row.set(name, 100.0 * count_events(dropped) / distance_km)


def wheel_onset_features(row: FeatureRow, trip: TripArrays) -> None:
    """wheel_onset_<pos>_mps = lower decile, over the trip's low-speed edges of that wheel's signal
    (reading zero ↔ reading any speed), of the other three wheels' median speed at the edge's
    zero sample: how fast the vehicle was still going while this wheel read nothing.

    A passive (inductive) wheel-speed sensor's output amplitude grows with
    wheel speed and falls as the air gap to the tone ring widens, so the
    speed below which the module can no longer count teeth rises with the gap
    (common practice). A healthy wheel's signal appears and vanishes with the
    other wheels', at the module's cut-off, so the others read zero too and
    the feature sits near 0 m/s whatever the cut-off, the logger's rate and
    its step; a widening gap shows here long before the wheel reads zero at the
    2 m/s wheel_dropouts needs. Edges above ONSET_MAX_MPS are dropouts while
    driving, counted by wheel_dropouts. Source: wheel speeds only.
    """
    names = [f"wheel_onset_{pos}_mps" for pos in POSITIONS]
    w = trip.wheels
    with np.errstate(invalid="ignore"):
        zero = w < ONSET_ZERO_MPS
    wheel, k = np.nonzero(zero[:, 1:] != zero[:, :-1])  # an edge between samples k and k + 1: a few per stop
    side = np.where(zero[wheel, k], k, k + 1)  # the edge's zero sample
    around = w[:, side]
    complete = np.isfinite(w[:, k]).all(axis=0) & np.isfinite(w[:, k + 1]).all(axis=0) & ~trip.gap_after[k]
    s = np.sort(around, axis=0)
    # the median of the other three: the third-smallest of four where the wheel is among the two smallest
    others = np.where(around[wheel, np.arange(side.size)] <= s[1], s[2], s[1])
    keep = complete & (others <= ONSET_MAX_MPS)
    for i, (pos, name) in enumerate(zip(POSITIONS, names)):
        if not trip.has(f"wheel_speed_{pos}"):
            row.nan(name, "signal_missing")
            continue
        at = others[keep & (wheel == i)]
        if at.size < ONSET_MIN_EDGES:
            row.nan(name, "too_few_stops")
            continue
        row.set(name, linear_quantile(at, ONSET_QUANTILE))


def linear_quantile(x: np.ndarray, q: float) -> float:
    """np.quantile's default (linear) rule for a short array, without its ~30 µs of call overhead."""
    s = np.sort(x)
    at = q * (s.size - 1)
    i = int(at)
    return float(s[i] + (at - i) * (s[min(i + 1, s.size - 1)] - s[i]))


def trip_distance_km(trip: TripArrays, speed: np.ndarray) -> float:
    """Distance = ∫ |speed| dt, in km; ``speed`` the median of the four wheel speeds (Windows.speed),
    negative while reversing where the sensors know the direction."""
    return float(np.nansum(np.abs(speed) * trip.dt) / 1000.0)
