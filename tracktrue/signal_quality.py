"""How often a logged signal brings a fresh value, and how much of it is stale repeats.

One measure shared by ingest (the published ``trip_signals`` table, from the
values as logged) and features (the gates of features/gating.py, from the
samples as stored), so both stages mean the same thing by "rate" and
"stale". Pure numpy, no stage logic.

* ``rate_hz``: fresh values per second while the vehicle moves. A value is
  fresh when it differs from the signal's previous known value. Counted only
  while moving (``moving`` mask), because a standing vehicle's wheel speeds
  repeat 0 without being stale. A quantised signal that stays within one step
  repeats too: for every average the features take, such a repeat carries no
  new information either, so it rightly lowers the fresh rate.
* ``stale_frac``: share of the known values while moving that repeat the
  previous known value exactly.

The logger's resolution (smallest non-zero step) is measured by
``ingest.trips.smallest_step`` and features.signals (TripArrays.resolution)
as before: ingest's is exact, because ingest/skew.py snaps aligned values to
the logged grid with it (a step rounded to 1e-9 would drift off that grid by
up to 5e-10 per step and leave false sub-step changes); the features' is
rounded to 1e-9 so unit-conversion noise is not read as a finer step.
"""

from __future__ import annotations

import numpy as np

#: DESIGN.md's "moving" window: speed at least 3 m/s.
MOVING_MPS = 3.0
#: A step between rows longer than this many median steps is a logging gap: its time is not counted.
GAP_PERIODS = 2.5


def moving_seconds(t_s: np.ndarray, moving: np.ndarray, capped_steps: np.ndarray | None = None) -> float:
    """Seconds between consecutive rows that both move, a logging gap counted as one median step.

    ``capped_steps``: those n − 1 steps, gaps already counted as one median step, where the
    caller holds them (features' TripArrays.dt[:-1]), which saves a second median of the trace.
    """
    both = moving[1:] & moving[:-1]
    if capped_steps is not None:
        return float(np.sum(capped_steps[both]))
    if t_s.size < 2:
        return 0.0
    steps = np.diff(t_s)
    positive = steps[steps > 0]
    if positive.size == 0:
        return 0.0
    period = float(np.median(positive))
    steps = steps[both]
    return float(np.sum(np.where(steps > GAP_PERIODS * period, period, steps)))


def fresh_rate(values: np.ndarray, moving: np.ndarray, seconds: float,
               known: np.ndarray | None = None) -> tuple[float, float]:
    """(rate_hz, stale_frac) of one signal over one trip (module docstring); NaN where nothing moves.

    ``values`` the signal (NaN = missing cell), ``moving`` a boolean mask of
    the rows where the vehicle moves, ``seconds`` their moving_seconds,
    ``known`` np.isfinite(values) when the caller has it already. Each
    known value is compared with the previous known one: neighbours where both
    are known, and across each run of missing cells the values either side of
    it (found from the few edges of the runs, so the trace is never compacted).
    """
    known = np.isfinite(values) if known is None else known
    if seconds <= 0 or np.count_nonzero(known) < 2:
        return float("nan"), float("nan")
    complete = bool(known.all())
    counted = moving[1:] if complete else known[1:] & known[:-1] & moving[1:]
    repeat = values[1:] == values[:-1]
    repeat &= counted
    n_counted, n_repeat = int(np.count_nonzero(counted)), int(np.count_nonzero(repeat))
    if not complete:
        edges = np.flatnonzero(known[1:] != known[:-1])
        before = edges[known[edges]]  # the last known value ahead of a missing run
        after = edges[~known[edges]] + 1  # the first known value after one
        if not known[0]:
            after = after[1:]  # the run at the start has nothing before it
        before = before[: after.size]  # nor the run at the end anything after it
        bridged = moving[after]
        n_counted += int(np.count_nonzero(bridged))
        n_repeat += int(np.count_nonzero(bridged & (values[before] == values[after])))
    if not n_counted:
        return float("nan"), float("nan")
    return (n_counted - n_repeat) / seconds, n_repeat / n_counted
