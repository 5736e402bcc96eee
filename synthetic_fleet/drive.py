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

import functools
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
    "town": RoadStyle((7.0, 14.0), (4.0, 30.0), 0.55, (3.0, 45.0), 0.55, 0.15, 0.5,
                      (0.5, 2.5), (0.8, 2.2), (0.8, 2.8)),
    "suburban": RoadStyle((13.0, 22.0), (15.0, 90.0), 0.25, (3.0, 30.0), 0.4, 0.2, 0.7,
                          (0.5, 2.5), (0.7, 1.8), (0.7, 2.5)),
    "highway": RoadStyle((23.0, 33.0), (60.0, 360.0), 0.0, (0.0, 0.0), 0.0, 0.0, 0.7,
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


@functools.lru_cache(maxsize=None)
def _fields(style: RoadStyle) -> dict[str, np.ndarray]:
    return {f: np.asarray(getattr(style, f), dtype=float) for f in style.__dataclass_fields__}


def _per_leg(styles: list[RoadStyle], counts: np.ndarray, name: str) -> np.ndarray:
    """A RoadStyle field repeated over each section's legs; ranges give shape (2, n_legs)."""
    values = np.array([_fields(st)[name] for st in styles])
    return np.repeat(values, counts, axis=0).T


def _legs(styles: list[RoadStyle], budgets_s: np.ndarray, v0: float, rng: np.random.Generator):
    """Phases (duration_s, end_speed_mps, curvature_1pm) of all road sections of a trip, drawn at once.

    Each section's legs are drawn generously and cut at the count whose end
    lies closest to the section's time budget; each section is entered at the
    speed the previous one left at.
    """
    mean_leg = np.array([np.mean(st.cruise_s) + st.stop_prob * np.mean(st.stop_s) + 15.0 for st in styles])
    counts = (3 * budgets_s / mean_leg).astype(int) + 5
    n = int(counts.sum())
    first = np.concatenate([[0], np.cumsum(counts)[:-1]])  # index of each section's first leg
    u = iter(rng.random((21, n)))  # one draw for all the legs' random choices

    def between(lo_hi) -> np.ndarray:
        lo_hi = np.asarray(lo_hi, dtype=float).reshape(2, -1)
        return lo_hi[0] + (lo_hi[1] - lo_hi[0]) * next(u)

    def sign() -> np.ndarray:
        return np.where(next(u) < 0.5, -1.0, 1.0)

    def param(name: str) -> np.ndarray:
        return _per_leg(styles, counts, name)

    vc = between(param("cruise_mps"))
    entry = next(u)
    stop_p, round_p = param("stop_prob"), param("roundabout_prob")
    stop = entry < stop_p
    roundabout = ~stop & (entry < stop_p + round_p)
    stop[first], roundabout[first] = False, False  # a section is entered on the move
    # Speed at each leg's entry: 0 at a stop, the roundabout speed, or a slow-down.
    r_turn = between((7.0, 18.0))
    r_round = between((12.0, 26.0))
    v_round = np.sqrt(between((1.4, 2.4)) * r_round)
    v_slow = between((0.6, 0.95)) * np.roll(vc, 1)
    v_entry = np.where(stop, 0.0, np.where(roundabout, v_round, v_slow))
    turn = stop & (next(u) < param("turn_prob"))
    v_turn = np.minimum(np.sqrt(between((1.5, 2.8)) * r_turn), 6.0)
    # Phase 1: hold at a stop. Phase 2: intersection turn or roundabout.
    hold_s = np.where(stop, between(param("stop_s")), 0.0)
    entry_s = np.where(turn, between((4.0, 8.0)), np.where(roundabout, between((5.0, 14.0)), 0.0))
    kappa_entry = np.where(turn, sign() / r_turn, np.where(roundabout, 1.0 / r_round, 0.0))
    # Phase 3: accelerate; 4-6: cruise with an optional curve; 7: slow into the next entry.
    accel = between(param("accel_mps2"))
    cruise_s = between(param("cruise_s"))
    curve_s = np.where(next(u) < param("curve_prob"), between((6.0, 25.0)), 0.0)
    kappa_curve = sign() * between(param("curve_lat_accel_mps2")) / vc**2
    decel = np.where(next(u) < HARD_BRAKE_SHARE, between((3.5, 5.0)), between(param("decel_mps2")))

    # Cut each section at its budget and chain the sections' speeds.
    keep = np.zeros(n, dtype=bool)
    last = np.empty(len(styles), dtype=int)
    v_in = v0
    # Leg durations as drawn (a section's first leg is re-entered on the move below).
    drawn_s = (hold_s + entry_s + cruise_s + curve_s + np.abs(vc - np.where(turn, v_turn, v_entry)) / accel
               + np.abs(vc - np.roll(v_entry, -1)) / decel)
    for i, (start, count, budget) in enumerate(zip(first, counts, budgets_s)):
        v_entry[start] = v_in
        k = int(np.argmin(np.abs(np.cumsum(drawn_s[start:start + count]) - budget))) + 1
        keep[start:start + k] = True
        last[i] = start + k - 1
        v_in = vc[last[i]]
    v_after_entry = np.where(turn, v_turn, v_entry)
    accel_s = np.abs(vc - v_after_entry) / accel
    v_next = np.append(v_entry[1:], vc[-1])
    v_next[last] = vc[last]  # the last kept leg leaves its section at cruise speed
    decel_s = np.abs(vc - v_next) / decel

    zeros = np.zeros(n)
    durations = np.stack([hold_s, entry_s, accel_s, 0.5 * cruise_s, curve_s, 0.5 * cruise_s, decel_s], axis=1)
    speeds = np.stack([v_entry, v_after_entry, vc, vc, vc, vc, v_next], axis=1)
    kappas = np.stack([zeros, kappa_entry, zeros, zeros, kappa_curve, zeros, zeros], axis=1)
    return durations[keep].ravel(), speeds[keep].ravel(), kappas[keep].ravel(), float(vc[last[-1]])


def _trip_phases(drive: str, duration_s: float, rng: np.random.Generator):
    """All phases of a trip: parked start, leaving the parking space, sections, parking, parked end."""
    if drive not in DRIVES:
        raise ValueError(f"unknown drive {drive!r}; known: {', '.join(DRIVES)}")
    sections = MIXED_SECTIONS if drive == "mixed" else ((drive, 1.0),)
    start_hold, end_hold, crawl, park_r0, park_r1, exit_s, park_s, slow_a, brake_start, brake_end = rng.random(10)
    start_hold = 5.0 + 15.0 * start_hold
    end_hold = 10.0 + 20.0 * end_hold
    crawl = 1.2 + 0.8 * crawl
    park_r = (6.0 + 2.0 * park_r0) * (1.0 if park_r1 < 0.5 else -1.0)
    driving_s = max(duration_s - start_hold - end_hold - 30.0, 30.0)
    d, s, k, v = _legs([ROAD_STYLES[name] for name, _ in sections],
                       np.array([share for _, share in sections]) * driving_s, crawl, rng)
    # Leave the parking space with a tight turn ... drive ... slow down, park with a tight turn, stop, stand.
    dur = np.concatenate([[start_hold, 4.0 + 4.0 * exit_s], d,
                          [max(v - crawl, 0.0) / (0.8 + 1.2 * slow_a), 5.0 + 5.0 * park_s, 1.5, end_hold]])
    spd = np.concatenate([[0.0, crawl], s, [crawl, crawl, 0.0, 0.0]])
    kap = np.concatenate([[0.0, 1.0 / park_r], k, [0.0, -1.0 / park_r, 0.0, 0.0]])
    brake_s = (3.5 + 4.5 * brake_start, 3.5 + 4.5 * brake_end)
    return dur, spd, kap, start_hold, end_hold, brake_s


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
    """Linear interpolation of values given at every ``step``-th sample onto all ``n`` samples
    (one row of ``step`` samples per coarse interval; the last value is held)."""
    frac = np.arange(step) / step
    rows = -(-n // step)
    following = np.append(coarse[1:], coarse[-1])[:rows]
    return (coarse[:rows, None] * (1.0 - frac) + following[:, None] * frac).ravel()[:n]


def _smooth_noise(rng: np.random.Generator, n: int, rate_hz: float, tau_s: float) -> np.ndarray:
    """Unit-variance low-pass noise with time constant ``tau_s`` (moving average of white noise,
    drawn once a second: only its slow part matters)."""
    step = max(int(round(rate_hz)), 1)
    white = rng.standard_normal(n // step + 2)
    width = max(int(round(tau_s)), 1)
    return _upsample(_boxcar(white, tau_s, 1.0) * np.sqrt(width), step, n)


def _road_profile(dist_m: np.ndarray, step: int, rng: np.random.Generator, amplitude: float,
                  mean: float) -> np.ndarray:
    """A smooth road property along distance: a few sinusoids of 250-2500 m wavelength,
    evaluated every ``step``-th sample (the caller interpolates between)."""
    lam = rng.uniform(250.0, 2500.0, 3)
    amp = amplitude * rng.uniform(0.3, 1.0, 3)
    phase = rng.uniform(0.0, 2 * np.pi, 3)
    coarse = dist_m[::step]
    return mean + (amp * np.sin(2 * np.pi * coarse[:, None] / lam + phase)).sum(axis=1)


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
    dur, spd, kap, start_hold, end_hold, brake_s = _trip_phases(drive, duration_s, rng)
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
    coarse_grade = _road_profile(dist, step, rng, grade_amplitude, 0.0)
    coarse_grade -= np.sum(_upsample(coarse_grade, step, n) * v) / max(np.sum(v), 1e-9)
    coarse_bank = _road_profile(dist, step, rng, 0.004, 0.008)
    # Angles from slopes on the coarse grid (the profile is smooth over a step: the
    # interpolated angle and the angle of the interpolated slope agree to ~1e-10 rad).
    grade_rad = _upsample(np.arctan(coarse_grade), step, n)
    bank_rad = _upsample(np.arctan(coarse_bank), step, n)
    parked_start = t < start_hold
    parked_end = t >= ends[-1] - end_hold
    grade_rad = np.where(parked_start, np.arctan(park_grade_start),
                         np.where(parked_end, np.arctan(park_grade_end), grade_rad))
    bank_rad = np.where(parked_start | parked_end, 0.0, bank_rad)
    parked = parked_start | parked_end
    # The driver holds the brake while decelerating and at stops; a parked vehicle
    # stands on its parking brake, the pedal pressed only for the seconds of
    # starting off (engine start, selecting a gear) and of coming to rest.
    settled = (t < start_hold - brake_s[0]) | (t >= ends[-1] - end_hold + brake_s[1])
    brake = ((accel < -0.3) | (v == 0.0)) & ~settled
    return DriveTrace(t, v, accel, kappa, grade_rad, bank_rad, brake, parked)
