"""Drive cycles: speed, path curvature, road grade and bank over one trip.

A trip is a chain of *legs* (entry, acceleration, cruise with an optional
curve, deceleration into the next leg's entry). Legs are drawn all at once
per road section as arrays and turned into a table of *phases* (duration,
speed at the phase end, curvature); the speed is linear between phase ends
and then smoothed, so accelerations stay within the drawn comfort limits and
lateral acceleration is capped well inside tyre friction (|a_y| <= 4 m/s²,
|a_x| <= 5 m/s², against about 8 m/s² on dry asphalt — common practice).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

DRIVES: tuple[str, ...] = ("town", "suburban", "highway", "mixed")

#: Lateral acceleration cap and tightest turn radius (full steering lock).
MAX_LAT_ACCEL_MPS2 = 4.0
MIN_TURN_RADIUS_M = 5.8
#: Low-pass window of the speed profile (jerk limit) and of curvature (steering rate).
SPEED_SMOOTHING_S = 1.0
CURVATURE_SMOOTHING_S = 1.2


@dataclass(frozen=True)
class RoadStyle:
    """How one kind of road is driven (ranges are uniform draws)."""

    cruise_mps: tuple[float, float]
    cruise_s: tuple[float, float]
    stop_prob: float
    stop_s: tuple[float, float]
    turn_prob: float  # turn at an intersection after a stop
    roundabout_prob: float
    curve_prob: float
    curve_lat_accel_mps2: tuple[float, float]
    accel_mps2: tuple[float, float]
    decel_mps2: tuple[float, float]


ROAD_STYLES: dict[str, RoadStyle] = {
    "town": RoadStyle((7.0, 14.0), (4.0, 30.0), 0.55, (3.0, 45.0), 0.55, 0.15, 0.3,
                      (0.5, 2.5), (0.8, 2.2), (0.8, 2.8)),
    "suburban": RoadStyle((13.0, 22.0), (15.0, 90.0), 0.25, (3.0, 30.0), 0.4, 0.2, 0.5,
                          (0.5, 2.5), (0.7, 1.8), (0.7, 2.5)),
    "highway": RoadStyle((23.0, 33.0), (60.0, 360.0), 0.0, (0.0, 0.0), 0.0, 0.0, 0.6,
                         (0.3, 1.5), (0.4, 1.2), (0.4, 1.5)),
}
#: Share of a mixed trip per section, in driving order.
MIXED_SECTIONS: tuple[tuple[str, float], ...] = (
    ("town", 0.2), ("suburban", 0.2), ("highway", 0.25), ("suburban", 0.15), ("town", 0.2))
#: Share of hard stops (still within friction) among decelerations.
HARD_BRAKE_SHARE = 0.04


@dataclass(frozen=True)
class DriveTrace:
    """One trip's driven motion on a uniform time grid (SI units)."""

    t_s: np.ndarray
    speed_mps: np.ndarray
    accel_mps2: np.ndarray  # dv/dt along the path
    curvature_1pm: np.ndarray  # 1/R, positive to the left
    grade_rad: np.ndarray  # nose-up road slope
    bank_rad: np.ndarray  # left side up (road crown on right-hand traffic)
    brake: np.ndarray
    parked: np.ndarray  # parking standstill at trip start and end


def _section_phases(style: RoadStyle, budget_s: float, v0: float, rng: np.random.Generator):
    """Phases (duration_s, end_speed_mps, curvature_1pm) of one road section, and its exit speed."""
    mean_leg = np.mean(style.cruise_s) + style.stop_prob * np.mean(style.stop_s) + 15.0
    n = int(3 * budget_s / mean_leg) + 5
    u = iter(rng.random((21, n)))  # one draw for all the legs' random choices

    def between(lo_hi: tuple[float, float]) -> np.ndarray:
        return lo_hi[0] + (lo_hi[1] - lo_hi[0]) * next(u)

    def sign() -> np.ndarray:
        return np.where(next(u) < 0.5, -1.0, 1.0)

    vc = between(style.cruise_mps)
    entry = next(u)
    stop = entry < style.stop_prob
    roundabout = ~stop & (entry < style.stop_prob + style.roundabout_prob)
    stop[0], roundabout[0] = v0 <= 0.0, False
    # Speed at each leg's entry: 0 at a stop, the roundabout speed, or a slow-down.
    r_turn = between((7.0, 18.0))
    r_round = between((12.0, 26.0))
    v_round = np.sqrt(between((1.4, 2.4)) * r_round)
    v_slow = between((0.6, 0.95)) * np.roll(vc, 1)
    v_entry = np.where(stop, 0.0, np.where(roundabout, v_round, v_slow))
    v_entry[0] = max(v0, 0.0)
    turn = stop & (next(u) < style.turn_prob)
    v_turn = np.minimum(np.sqrt(between((1.5, 2.8)) * r_turn), 6.0)
    # Phase 1: hold at a stop. Phase 2: intersection turn or roundabout.
    hold_s = np.where(stop, between(style.stop_s), 0.0)
    entry_s = np.where(turn, between((4.0, 8.0)), np.where(roundabout, between((5.0, 14.0)), 0.0))
    v_after_entry = np.where(turn, v_turn, v_entry)
    kappa_entry = np.where(turn, sign() / r_turn, np.where(roundabout, 1.0 / r_round, 0.0))
    # Phase 3: accelerate; 4-6: cruise with an optional curve; 7: slow into the next entry.
    accel_s = np.abs(vc - v_after_entry) / between(style.accel_mps2)
    cruise_s = between(style.cruise_s)
    curve_s = np.where(next(u) < style.curve_prob, between((4.0, 20.0)), 0.0)
    kappa_curve = sign() * between(style.curve_lat_accel_mps2) / vc**2
    v_next = np.append(v_entry[1:], vc[-1])
    decel = np.where(next(u) < HARD_BRAKE_SHARE, between((3.5, 5.0)), between(style.decel_mps2))
    decel_s = np.abs(vc - v_next) / decel

    durations = np.stack([hold_s, entry_s, accel_s, 0.5 * cruise_s, curve_s, 0.5 * cruise_s, decel_s], axis=1)
    speeds = np.stack([v_entry, v_after_entry, vc, vc, vc, vc, v_next], axis=1)
    zeros = np.zeros(n)
    kappas = np.stack([zeros, kappa_entry, zeros, zeros, kappa_curve, zeros, zeros], axis=1)
    leg_end = np.cumsum(durations.sum(axis=1))
    keep = int(np.argmin(np.abs(leg_end - budget_s))) + 1  # the leg count closest to the budget
    # The last kept leg leaves the section at its cruise speed.
    durations[keep - 1, 6] = 0.0
    speeds[keep - 1, 6] = vc[keep - 1]
    return (durations[:keep].ravel(), speeds[:keep].ravel(), kappas[:keep].ravel(), float(vc[keep - 1]))


def _trip_phases(drive: str, duration_s: float, rng: np.random.Generator):
    """All phases of a trip: parked start, leaving the parking space, sections, parking, parked end."""
    if drive not in DRIVES:
        raise ValueError(f"unknown drive {drive!r}; known: {', '.join(DRIVES)}")
    sections = MIXED_SECTIONS if drive == "mixed" else ((drive, 1.0),)
    start_hold = rng.uniform(5.0, 20.0)
    end_hold = rng.uniform(10.0, 30.0)
    crawl = rng.uniform(1.2, 2.0)
    park_r = rng.uniform(6.0, 8.0) * rng.choice([-1.0, 1.0], 2)
    driving_s = max(duration_s - start_hold - end_hold - 30.0, 30.0)
    dur = [np.array([start_hold, rng.uniform(4.0, 8.0)])]
    spd = [np.array([0.0, crawl])]
    kap = [np.array([0.0, 1.0 / park_r[0]])]
    v = crawl
    for name, share in sections:
        d, s, k, v = _section_phases(ROAD_STYLES[name], share * driving_s, v, rng)
        dur.append(d), spd.append(s), kap.append(k)
    # Slow down, park with a tight turn, stop and stand.
    dur.append(np.array([max(v - crawl, 0.0) / rng.uniform(0.8, 2.0), rng.uniform(5.0, 10.0), 1.5, end_hold]))
    spd.append(np.array([crawl, crawl, 0.0, 0.0]))
    kap.append(np.array([0.0, 1.0 / park_r[1], 0.0, 0.0]))
    return np.concatenate(dur), np.concatenate(spd), np.concatenate(kap), start_hold, end_hold


def _boxcar(x: np.ndarray, width_s: float, dt: float) -> np.ndarray:
    """Centred moving average over ``width_s``, edges held (a running sum, not a search)."""
    n = max(int(round(width_s / dt)), 1)
    if n == 1 or len(x) == 0:
        return x
    padded = np.concatenate((np.full(n // 2 + 1, x[0]), x, np.full(n - 1 - n // 2, x[-1])))
    padded[0] = 0.0
    c = np.cumsum(padded)
    return (c[n:] - c[:-n]) / n


def _upsample(coarse: np.ndarray, step: int, n: int) -> np.ndarray:
    """Linear interpolation of values given at every ``step``-th sample onto all ``n`` samples."""
    k = np.arange(n)
    i, frac = np.divmod(k, step)
    frac = frac / step
    return coarse[i] * (1.0 - frac) + coarse[np.minimum(i + 1, len(coarse) - 1)] * frac


def _smooth_noise(rng: np.random.Generator, n: int, rate_hz: float, tau_s: float) -> np.ndarray:
    """Unit-variance low-pass noise with time constant ``tau_s`` (moving average of white noise,
    drawn once a second: only its slow part matters)."""
    step = max(int(round(rate_hz)), 1)
    white = rng.standard_normal(n // step + 2)
    width = max(int(round(tau_s)), 1)
    return _upsample(_boxcar(white, tau_s, 1.0) * np.sqrt(width), step, n)


def _road_profile(dist_m: np.ndarray, step: int, rng: np.random.Generator, amplitude: float,
                  mean: float) -> np.ndarray:
    """A smooth road property along distance: a few sinusoids of 250-2500 m wavelength
    (evaluated every ``step``-th sample and interpolated between)."""
    lam = rng.uniform(250.0, 2500.0, 3)
    amp = amplitude * rng.uniform(0.3, 1.0, 3)
    phase = rng.uniform(0.0, 2 * np.pi, 3)
    coarse = dist_m[::step]
    values = mean + (amp * np.sin(2 * np.pi * coarse[:, None] / lam + phase)).sum(axis=1)
    return _upsample(values, step, len(dist_m))


def _phase_index(ends_s: np.ndarray, n: int, rate_hz: float) -> np.ndarray:
    """The phase each sample of the uniform grid falls in (counted, not searched)."""
    edges = np.minimum(np.ceil(ends_s * rate_hz).astype(np.int64), n)
    return np.repeat(np.arange(len(ends_s)), np.diff(edges, prepend=0))


def drive_trace(drive: str, duration_s: float, rate_hz: float, rng: np.random.Generator,
                park_grade_start: float = 0.0, park_grade_end: float = 0.0,
                grade_amplitude: float = 0.025) -> DriveTrace:
    """A trip's motion on a uniform grid of ``rate_hz``.

    Road grade (rise over run) is made zero-mean over distance, as on a round
    trip from and back to the depot; the parking standstills take the given
    parking grades instead.
    """
    dt = 1.0 / rate_hz
    dur, spd, kap, start_hold, end_hold = _trip_phases(drive, duration_s, rng)
    ends = np.cumsum(dur)
    n = int(ends[-1] * rate_hz)
    t = np.arange(n) * dt
    phase = _phase_index(ends, n, rate_hz)
    v_from = np.concatenate([[0.0], spd[:-1]])
    frac = (t - (ends - dur)[phase]) / np.maximum(dur, 1e-9)[phase]
    v = v_from[phase] + (spd - v_from)[phase] * frac
    cruising = v > 3.0
    v = v * (1.0 + 0.012 * _smooth_noise(rng, n, rate_hz, 8.0) * cruising)
    v = np.maximum(_boxcar(_boxcar(v, SPEED_SMOOTHING_S, dt), SPEED_SMOOTHING_S, dt), 0.0)
    v[v < 0.02] = 0.0
    kappa = _boxcar(kap[phase], CURVATURE_SMOOTHING_S, dt)
    limit = np.minimum(1.0 / MIN_TURN_RADIUS_M, MAX_LAT_ACCEL_MPS2 / np.maximum(v * v, 1e-6))
    kappa = np.clip(kappa, -limit, limit)
    accel = np.gradient(v, dt) if n > 1 else np.zeros(n)

    dist = np.cumsum(v) * dt
    step = max(int(round(rate_hz)), 1)
    grade = _road_profile(dist, step, rng, grade_amplitude, 0.0)
    grade -= np.sum(grade * v) / max(np.sum(v), 1e-9)
    bank = _road_profile(dist, step, rng, 0.004, 0.008)
    parked_start = t < start_hold
    parked_end = t >= ends[-1] - end_hold
    grade = np.where(parked_start, park_grade_start, np.where(parked_end, park_grade_end, grade))
    bank = np.where(parked_start | parked_end, 0.0, bank)
    parked = parked_start | parked_end
    # The driver holds the brake while decelerating and at stops; a parked
    # vehicle stands on its parking brake a few seconds after stopping.
    settled = (t < start_hold - 2.0) | (t >= ends[-1] - end_hold + 3.0)
    brake = ((accel < -0.3) | (v == 0.0)) & ~settled
    return DriveTrace(t, v, accel, kappa, np.arctan(grade), np.arctan(bank), brake, parked)
