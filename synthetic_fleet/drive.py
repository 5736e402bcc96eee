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

from synthetic_fleet.segments import Segments

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
    """Driven motion on a uniform time grid (SI units): one trip, or several one after the other."""

    t_s: np.ndarray
    speed_mps: np.ndarray
    accel_mps2: np.ndarray  # dv/dt along the path
    curvature_1pm: np.ndarray  # 1/R, positive to the left
    grade_rad: np.ndarray  # nose-up road slope
    bank_rad: np.ndarray  # left side up (road crown on right-hand traffic)
    brake: np.ndarray
    parked: np.ndarray  # parking standstill at trip start and end
    #: The trips whose samples follow one another here (None: one trip); ``t_s`` restarts at each.
    segments: Segments | None = None

    @property
    def trips(self) -> Segments:
        return self.segments if self.segments is not None else Segments.of([len(self.t_s)])

    @property
    def rate_hz(self) -> float:
        """The grid's rate (each trip's time starts at 0 in steps of 1/rate)."""
        steps = self.t_s[1:][self.trips.local[1:] == 1]
        return float(1.0 / steps[0]) if len(steps) else 1.0


@functools.lru_cache(maxsize=None)
def _fields(style: RoadStyle) -> dict[str, np.ndarray]:
    return {f: np.asarray(getattr(style, f), dtype=float) for f in style.__dataclass_fields__}


@functools.lru_cache(maxsize=None)
def _mean_leg_s(style: RoadStyle) -> float:
    """A leg's mean duration on this kind of road, about (seconds)."""
    return np.mean(style.cruise_s) + style.stop_prob * np.mean(style.stop_s) + 15.0


def _per_leg(styles: list[RoadStyle], counts: np.ndarray, name: str) -> np.ndarray:
    """A RoadStyle field repeated over each section's legs; ranges give shape (2, n_legs)."""
    values = np.array([_fields(st)[name] for st in styles])
    return np.repeat(values, counts, axis=0).T


def _legs(sections: list[list[RoadStyle]], budgets_s: list[np.ndarray], v0: np.ndarray,
          rngs: list[np.random.Generator]):
    """Phases (duration_s, end_speed_mps, curvature_1pm) of all road sections of several trips, drawn at once.

    Each section's legs are drawn generously and cut at the count whose end
    lies closest to the section's time budget; each section is entered at the
    speed the previous one left at, a trip's first at ``v0``. Returns the kept
    phases of all trips one after the other, the number of phases per trip,
    and each trip's speed leaving its last section.
    """
    styles = [st for trip in sections for st in trip]
    section_trip = np.repeat(np.arange(len(sections)), [len(trip) for trip in sections])
    budgets = np.concatenate(budgets_s)
    mean_leg = np.array([_mean_leg_s(st) for st in styles])
    counts = (3 * budgets / mean_leg).astype(int) + 5
    legs = Segments.of(np.bincount(section_trip, weights=counts, minlength=len(sections)).astype(np.int64))
    n = legs.total
    first = np.cumsum(counts) - counts  # index of each section's first leg
    u = iter(np.concatenate([rng.random((21, m)) for rng, m in zip(rngs, legs.lengths)], axis=1))
    previous = np.arange(n) - 1  # the leg before, within a trip (its last before its first)
    previous[legs.starts] = legs.ends - 1
    following = np.arange(n) + 1
    following[legs.ends - 1] = legs.starts

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
    v_slow = between((0.6, 0.95)) * vc[previous]
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
    # Leg durations as drawn (a section's first leg is re-entered on the move below).
    drawn_s = (hold_s + entry_s + cruise_s + curve_s + np.abs(vc - np.where(turn, v_turn, v_entry)) / accel
               + np.abs(vc - v_entry[following]) / decel)
    opens_trip = np.r_[True, section_trip[1:] != section_trip[:-1]]
    v_in = 0.0
    for i, (start, count, budget) in enumerate(zip(first, counts, budgets)):
        v_entry[start] = v0[section_trip[i]] if opens_trip[i] else v_in
        k = int(np.argmin(np.abs(np.cumsum(drawn_s[start:start + count]) - budget))) + 1
        keep[start:start + k] = True
        last[i] = start + k - 1
        v_in = vc[last[i]]
    v_after_entry = np.where(turn, v_turn, v_entry)
    accel_s = np.abs(vc - v_after_entry) / accel
    v_next = v_entry[following]
    v_next[legs.ends - 1] = vc[legs.ends - 1]
    v_next[last] = vc[last]  # the last kept leg leaves its section at cruise speed
    decel_s = np.abs(vc - v_next) / decel

    zeros = np.zeros(n)
    durations = np.stack([hold_s, entry_s, accel_s, 0.5 * cruise_s, curve_s, 0.5 * cruise_s, decel_s], axis=1)
    speeds = np.stack([v_entry, v_after_entry, vc, vc, vc, vc, v_next], axis=1)
    kappas = np.stack([zeros, kappa_entry, zeros, zeros, kappa_curve, zeros, zeros], axis=1)
    kept_per_trip = 7 * np.bincount(legs.owner[keep], minlength=len(sections))
    exit_mps = vc[last[np.r_[opens_trip[1:], True]]]
    return durations[keep].ravel(), speeds[keep].ravel(), kappas[keep].ravel(), kept_per_trip, exit_mps


def _trip_phases(drives: list[str], durations_s: list[float], rngs: list[np.random.Generator]):
    """All phases of each trip: parked start, leaving the parking space, sections, parking, parked end.

    Returns the phases (duration, end speed, curvature) of all trips one after
    the other with their Segments, and per trip the parked start and end
    holds and the seconds of brake pedal at each (parking brake otherwise).
    """
    for drive in drives:
        if drive not in DRIVES:
            raise ValueError(f"unknown drive {drive!r}; known: {', '.join(DRIVES)}")
    sections = [MIXED_SECTIONS if drive == "mixed" else ((drive, 1.0),) for drive in drives]
    (start_hold, end_hold, crawl, park_r0, park_r1, exit_s, park_s, slow_a, brake_start,
     brake_end) = np.array([rng.random(10) for rng in rngs]).T
    start_hold = 5.0 + 15.0 * start_hold
    end_hold = 10.0 + 20.0 * end_hold
    crawl = 1.2 + 0.8 * crawl
    park_r = (6.0 + 2.0 * park_r0) * np.where(park_r1 < 0.5, 1.0, -1.0)
    driving_s = np.maximum(np.asarray(durations_s, dtype=float) - start_hold - end_hold - 30.0, 30.0)
    d, s, k, n_legs, v = _legs([[ROAD_STYLES[name] for name, _ in secs] for secs in sections],
                               [np.array([share for _, share in secs]) * ds for secs, ds in zip(sections, driving_s)],
                               crawl, rngs)
    # Leave the parking space with a tight turn ... drive ... slow down, park with a tight turn, stop, stand.
    legs = Segments.of(n_legs)
    zero = np.zeros(len(drives))
    head_dur = np.stack([start_hold, 4.0 + 4.0 * exit_s], axis=1)
    tail_dur = np.stack([np.maximum(v - crawl, 0.0) / (0.8 + 1.2 * slow_a), 5.0 + 5.0 * park_s, zero + 1.5,
                         end_hold], axis=1)
    head_spd, tail_spd = np.stack([zero, crawl], axis=1), np.stack([crawl, crawl, zero, zero], axis=1)
    head_kap, tail_kap = np.stack([zero, 1.0 / park_r], axis=1), np.stack([zero, -1.0 / park_r, zero, zero], axis=1)

    def framed(head: np.ndarray, middle: np.ndarray, tail: np.ndarray) -> np.ndarray:
        return np.concatenate([piece for i, (a, b) in enumerate(zip(legs.starts, legs.ends))
                               for piece in (head[i], middle[a:b], tail[i])])

    phases = Segments.of(n_legs + 6)
    brake_s = (3.5 + 4.5 * brake_start, 3.5 + 4.5 * brake_end)
    return (framed(head_dur, d, tail_dur), framed(head_spd, s, tail_spd), framed(head_kap, k, tail_kap), phases,
            start_hold, end_hold, brake_s)


def drive_traces(drives: list[str], durations_s: list[float], rate_hz: float, rngs: list[np.random.Generator],
                 park_grades_start: list[float], park_grades_end: list[float],
                 grade_amplitude: float = 0.025) -> DriveTrace:
    """Several trips' motion on a uniform grid of ``rate_hz``, one after the other (``DriveTrace.segments``).

    Each trip draws on its own random stream only. Road grade (rise over run)
    is made zero-mean over distance, as on a round trip from and back to the
    depot; the parking standstills take the given parking grades instead.
    """
    dt = 1.0 / rate_hz
    dur, spd, kap, phases, start_hold, end_hold, brake_s = _trip_phases(drives, durations_s, rngs)
    ends = np.concatenate([np.cumsum(dur[a:b]) for a, b in zip(phases.starts, phases.ends)])
    trip_end_s = ends[phases.ends - 1]
    trips = Segments.of((trip_end_s * rate_hz).astype(np.int64))
    t = trips.local * dt
    # The phase each sample of the uniform grid falls in (counted, not searched).
    edges = np.minimum(np.ceil(ends * rate_hz).astype(np.int64), phases.spread(trips.lengths))
    per_phase = np.diff(edges, prepend=0)
    per_phase[phases.starts] = edges[phases.starts]
    phase = np.repeat(np.arange(len(ends)), per_phase)

    step = max(int(round(rate_hz)), 1)
    noise_points = Segments.of(trips.lengths // step + 2)
    white, grade_waves, bank_waves = [], [], []
    for rng, n in zip(rngs, trips.lengths):
        white.append(rng.standard_normal(n // step + 2))
        grade_waves.append(_road_waves(rng, grade_amplitude))
        bank_waves.append(_road_waves(rng, 0.004))

    v_from = np.concatenate([[0.0], spd[:-1]])
    v_from[phases.starts] = 0.0
    frac = (t - (ends - dur)[phase]) / np.maximum(dur, 1e-9)[phase]
    v = v_from[phase] + (spd - v_from)[phase] * frac
    cruising = v > 3.0
    # Low-pass noise of unit variance, time constant 8 s (moving average of white noise drawn once a
    # second: only its slow part matters).
    width = max(int(round(8.0)), 1)
    slow = noise_points.boxcar(np.concatenate(white), width) * np.sqrt(width)
    wander = trips.upsample(slow, noise_points, step)  # the speed's slow wander about the drawn profile
    wander *= 0.012
    wander *= cruising
    wander += 1.0
    v *= wander
    v_width = max(int(round(SPEED_SMOOTHING_S / dt)), 1)
    v = np.maximum(trips.boxcar(trips.boxcar(v, v_width), v_width), 0.0)
    v[v < 0.02] = 0.0
    kappa = trips.boxcar(kap[phase], max(int(round(CURVATURE_SMOOTHING_S / dt)), 1))
    limit = np.minimum(1.0 / MIN_TURN_RADIUS_M, MAX_LAT_ACCEL_MPS2 / np.maximum(v * v, 1e-6))
    kappa = np.clip(kappa, -limit, limit)
    accel = trips.gradient(v, dt)

    dist = trips.cumsum(v)
    dist *= dt
    points = trips.coarse(step)
    at = trips.starts[points.owner] + points.local * step
    coarse_grade = _road_profile(dist[at], points.owner, np.array(grade_waves), 0.0)
    weighted = trips.upsample(coarse_grade, points, step)
    weighted *= v
    mean_grade = trips.sums(weighted) / np.maximum(trips.sums(v), 1e-9)
    coarse_grade -= points.spread(mean_grade)
    coarse_bank = _road_profile(dist[at], points.owner, np.array(bank_waves), 0.008)
    # Angles from slopes on the coarse grid: over one step the profile is nearly straight, so the
    # interpolated angle and the angle of the interpolated slope differ by < 1e-6 rad (< 1e-6 g of a_x).
    grade_rad = trips.upsample(np.arctan(coarse_grade), points, step)
    bank_rad = trips.upsample(np.arctan(coarse_bank), points, step)
    parked_start = t < trips.spread(start_hold)
    parked_end = t >= trips.spread(trip_end_s - end_hold)
    grade_rad = np.where(parked_start, trips.spread(np.arctan(park_grades_start)),
                         np.where(parked_end, trips.spread(np.arctan(park_grades_end)), grade_rad))
    bank_rad = np.where(parked_start | parked_end, 0.0, bank_rad)
    parked = parked_start | parked_end
    # The driver holds the brake while decelerating and at stops; a parked vehicle
    # stands on its parking brake, the pedal pressed only for the seconds of
    # starting off (engine start, selecting a gear) and of coming to rest.
    settled = (t < trips.spread(start_hold - brake_s[0])) | (t >= trips.spread(trip_end_s - end_hold + brake_s[1]))
    brake = ((accel < -0.3) | (v == 0.0)) & ~settled
    return DriveTrace(t, v, accel, kappa, grade_rad, bank_rad, brake, parked, trips)


def _road_waves(rng: np.random.Generator, amplitude: float) -> np.ndarray:
    """A smooth road property's sinusoids of 250-2500 m wavelength: (wavelength, amplitude, phase) x 3."""
    lam = rng.uniform(250.0, 2500.0, 3)
    amp = amplitude * rng.uniform(0.3, 1.0, 3)
    phase = rng.uniform(0.0, 2 * np.pi, 3)
    return np.stack([lam, amp, phase])


def _road_profile(dist_m: np.ndarray, owner: np.ndarray, waves: np.ndarray, mean: float) -> np.ndarray:
    """The road property at distances ``dist_m`` of trips ``owner`` with each trip's ``waves`` (trips, 3, 3)."""
    lam, amp, phase = waves[owner, 0], waves[owner, 1], waves[owner, 2]
    return mean + (amp * np.sin(2 * np.pi * dist_m[:, None] / lam + phase)).sum(axis=1)

