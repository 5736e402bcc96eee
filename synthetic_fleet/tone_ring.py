"""Wheel speed as an ABS module computes it: tooth edges of a tone ring, counted or timed.

A tone ring of N teeth turns with the wheel; the sensor sees an edge each
time a tooth passes, at the wheel angle m·2π/N (m = 0, 1, 2, …) plus that
tooth's position error. Every ``tick_s`` the module takes the edges of the
last ``window_s`` and publishes a speed, assuming every tooth is where it
should be:

- "count": v = n·(2π/N)·r / T for n edges in the window T — textbook
  kinematics (arc length per tooth 2πr/N), so the published speed moves in
  steps of Δv = 2πr/(N·T);
- "period": v = (n−1)·(2π/N)·r / (t_last − t_first), the angle between the
  first and last edge over the time between them (fine resolution); with
  fewer than two edges in the window, the last two edges; with no edge for
  ``timeout_s``, 0.

A damaged tooth's edge comes early or late and a missing tooth gives no
edge, so the speed jumps whenever such a tooth is at the window's end (or
inside a counted window): false spikes on that wheel only, as often as the
tooth passes a window's end — and a logger reading at a few Hz aliases them.

The wheel angle is the running sum of the angular speed on the simulation
grid (linear between grid points); edge times are found by interpolating
time against angle. Each trip's angle starts at a whole number of turns
plus its own phase, so which tooth passes when depends on the trip alone.
"""

from __future__ import annotations

import numpy as np

from synthetic_fleet.config import WheelModule
from synthetic_fleet.segments import Segments


def speed_quantum_mps(radius_m: float, n_teeth: int, window_s: float) -> float:
    """Δv = 2πr/(N·T): one tooth more or less in a counted window of T seconds (textbook kinematics)."""
    return 2.0 * np.pi * radius_m / (n_teeth * window_s)


def wheel_angles(omega_rps: np.ndarray, trips: Segments, rate_hz: float, phase_rad: np.ndarray) -> np.ndarray:
    """Wheel angle (rad) at each grid sample, non-decreasing over all segments: the angle turned before
    the sample (speed held over each grid step) on top of a whole number of turns plus ``phase_rad``
    (per segment)."""
    angle = np.cumsum(omega_rps)
    angle -= omega_rps  # the angle turned before each sample, from the first segment's start (in place: large)
    angle *= 1.0 / rate_hz
    at_start = angle[trips.starts]
    per_trip = angle[trips.ends - 1] + omega_rps[trips.ends - 1] / rate_hz - at_start
    turns = np.ceil(per_trip / (2 * np.pi)) + 1.0  # room for each segment's phase
    base = 2 * np.pi * (np.cumsum(turns) - turns) + phase_rad
    for a, b, shift in zip(trips.starts.tolist(), trips.ends.tolist(), (base - at_start).tolist()):
        angle[a:b] += shift  # per segment, in place (no array of the shifts as large as the angles)
    return angle


def module_speeds(omega_rps: np.ndarray, trips: Segments, rate_hz: float, radius_m: float, n_teeth: int,
                  module: WheelModule, phase_rad: np.ndarray, tooth_error: np.ndarray, missing: np.ndarray,
                  at: np.ndarray | None = None) -> np.ndarray:
    """The speeds (m/s) the module last published at each grid sample, shape (wheels, n), from the
    wheels' angular speeds ``omega_rps`` (wheels, n) on the grid of ``trips``; or only at the flat
    indices ``at`` of that (wheels, n) grid (a polled logger reads few of its samples), shape (len(at),).

    Per wheel and trip: ``phase_rad`` (wheels, trips) the ring's angle at the trip's start,
    ``tooth_error`` (wheels, trips, N) each tooth's edge position error in pitches (|e| < 0.5),
    ``missing`` (wheels, trips, N) teeth without an edge (never two side by side). Edges are
    assigned to a window by their nominal angle (a tooth's error is a fraction of a pitch).
    """
    wheels, n = omega_rps.shape
    # The wheels one after the other: one time line and one non-decreasing angle for all.
    runs = Segments.of(np.tile(trips.lengths, wheels))
    omega = omega_rps.ravel()
    angle = wheel_angles(omega, runs, rate_hz, phase_rad.ravel())
    total = len(angle)
    t_grid = np.arange(total, dtype=float)
    t_grid *= 1.0 / rate_hz
    run_start_s = runs.starts / rate_hz
    owner = runs.owner
    run_starts = np.zeros(total, dtype=bool)
    run_starts[runs.starts] = True
    shape = (wheels, n) if at is None else (len(at),)
    out = np.empty(total if at is None else len(at))
    # In blocks that stay in the processor's cache with their dozen temporaries.
    for lo in range(0, len(out), _BLOCK):
        block = slice(lo, min(lo + _BLOCK, len(out)))
        where = block if at is None else at[block]
        # the speed over the grid step before each sample (none before a trip)
        if at is None:
            held = np.empty(block.stop - lo)
            held[1:] = omega[lo:block.stop - 1]
            held[0] = omega[lo - 1]  # (lo = 0 begins a run: zeroed below)
        else:
            held = omega[where - 1]
        held[run_starts[where]] = 0.0
        out[block] = _published(t_grid[where], owner[where], held, angle[where], angle, t_grid, run_start_s,
                                rate_hz, radius_m, n_teeth, module, tooth_error, missing)
    return out.reshape(shape)


#: Samples per block of module_speeds.
_BLOCK = 16384


def _edge_and_tooth(edge: np.ndarray, n_teeth: int) -> tuple[np.ndarray, np.ndarray]:
    """Edge numbers (whole numbers as floats) and their teeth (edge mod N) as integers: the remainder
    in floating point (exact for whole numbers below 2**52 / N), which numpy vectorises and an int64
    remainder it does not."""
    return edge.astype(np.int64), (edge - n_teeth * np.floor(edge / n_teeth)).astype(np.int64)


def _published(t: np.ndarray, owner: np.ndarray, held: np.ndarray, b: np.ndarray, angle: np.ndarray,
               t_grid: np.ndarray, run_start_s: np.ndarray, rate_hz: float, radius_m: float, n_teeth: int,
               module: WheelModule, tooth_error: np.ndarray, missing: np.ndarray) -> np.ndarray:
    """module_speeds at samples of times ``t`` in runs ``owner``, turning at ``held`` into angle ``b``
    (the grid's ``angle`` over ``t_grid``; runs start at ``run_start_s``)."""
    total = len(angle)
    step_s = 1.0 / rate_hz
    aligned = abs(step_s / module.tick_s - round(step_s / module.tick_s)) < 1e-9 and module.window_s <= step_s
    if aligned:
        # Every grid instant is a tick, and the window reaches back into the grid step before it,
        # over which the wheel turned at ``held``.
        tick, a = t, b - held * module.window_s
        window_s = np.where(held > 0, module.window_s, np.inf) if module.method == "count" else None
    else:
        def angle_at(time: np.ndarray) -> np.ndarray:
            x = np.minimum(time * rate_hz, total - 1.0)
            i = np.minimum(x.astype(np.int64), total - 2)
            return angle[i] + (angle[i + 1] - angle[i]) * (x - i)

        run_start = run_start_s[owner]
        tick = np.floor((t - run_start) / module.tick_s + 1e-9) * module.tick_s + run_start
        start = np.maximum(tick - module.window_s, run_start)  # the window stays within the trip
        b, a = angle_at(tick), angle_at(start)
        window_s = np.where(tick > start, tick - start, np.inf) if module.method == "count" else None
    pitch = 2 * np.pi / n_teeth
    row = owner * n_teeth
    error = tooth_error.reshape(-1)

    last, k_last = _edge_and_tooth(np.floor(b / pitch), n_teeth)  # the last edge at or before the tick
    first, k_first = _edge_and_tooth(np.ceil(a / pitch), n_teeth)  # the first at or after the window's start
    counted = last - first + 1
    if missing.any():
        gone = missing.reshape(-1)
        before = np.concatenate([np.zeros((gone.size // n_teeth, 1), np.int64),
                                 np.cumsum(missing.reshape(-1, n_teeth), axis=1)], axis=1).ravel()
        per_turn = missing.reshape(-1, n_teeth).sum(axis=1)[owner]
        rows1 = owner * (n_teeth + 1)
        # teeth with an edge among first .. last: missing ones are not counted
        counted -= ((last + 1) // n_teeth - first // n_teeth) * per_turn + (
            before[rows1 + (k_last + 1)] - before[rows1 + k_first])
        drop_last, drop_first = gone[row + k_last], gone[row + k_first]
        last -= drop_last
        k_last = np.where(drop_last, (k_last - 1) % n_teeth, k_last)
        first += drop_first
        k_first = np.where(drop_first, (k_first + 1) % n_teeth, k_first)
    if module.method == "count":
        return np.maximum(counted, 0) * pitch * radius_m / window_s
    # The module divides the angle it counts, (counted − 1) pitches, by the time between the first
    # and the last edge, which lie (last − first + e_last − e_first) pitches apart.
    if aligned:  # both edges lie in the grid step before the tick, crossed at the speed ``held``
        apart = (last - first) + (error[row + k_last] - error[row + k_first])
        speed = held * radius_m * (counted - 1) / np.where(counted >= 2, apart, np.inf)
        few = np.flatnonzero(counted < 2)
    else:
        speed = np.zeros(len(b))
        few = slice(None)  # every sample (views, not copies: ``first`` and ``k_first`` are not read again)
    # Otherwise (and with fewer than two edges in the window, the last edge and the one before it)
    # the edges are timed by interpolation; no edge for timeout_s, or none since the trip began, reads 0.
    last, counted = last[few], np.maximum(counted[few], 2)
    first, k_first = first[few], k_first[few]
    slow = counted == 2
    prev = last[slow] - 1
    k_prev = prev % n_teeth
    if missing.any():
        skip = gone[row[few][slow] + k_prev]
        prev -= skip
        k_prev = np.where(skip, (k_prev - 1) % n_teeth, k_prev)
    first[slow], k_first[slow] = prev, k_prev
    few_row = row[few]
    t_last = np.interp((last + error[few_row + k_last[few]]) * pitch, angle, t_grid)
    t_first = np.interp((first + error[few_row + k_first]) * pitch, angle, t_grid)
    span = t_last - t_first
    slow_speed = (counted - 1) * pitch * radius_m / np.where(span > 0, span, np.inf)
    stale = (tick[few] - t_last > module.timeout_s) | (t_first < run_start_s[owner[few]]) | (span <= 0)
    speed[few] = np.where(stale, 0.0, slow_speed)
    return speed
