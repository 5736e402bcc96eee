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
``ingest.trips`` and ``features.signals.smallest_step`` as before.
"""

from __future__ import annotations

import numpy as np

#: DESIGN.md's "moving" window: speed at least 3 m/s.
MOVING_MPS = 3.0
#: A step between rows longer than this many median steps is a logging gap: its time is not counted.
GAP_PERIODS = 2.5


def fresh_rate(t_s: np.ndarray, values: np.ndarray, moving: np.ndarray) -> tuple[float, float]:
    """(rate_hz, stale_frac) of one signal over one trip (module docstring); NaN where nothing moves.

    ``t_s`` seconds (sorted), ``values`` the signal (NaN = missing cell),
    ``moving`` a boolean mask of the rows where the vehicle moves.
    """
    if t_s.size < 2:
        return float("nan"), float("nan")
    steps = np.diff(t_s)
    positive = steps[steps > 0]
    if positive.size == 0:
        return float("nan"), float("nan")
    # np.median's value; one single-index partition is several times faster on tied steps
    half = positive.size // 2
    part = np.partition(positive, half)
    period = float(part[half] if positive.size % 2 else 0.5 * (part[:half].max() + part[half]))
    both_moving = moving[1:] & moving[:-1]
    seconds = float(np.sum(np.where(steps > GAP_PERIODS * period, period, steps)[both_moving]))
    known = np.isfinite(values)
    idx = np.flatnonzero(known)
    if seconds <= 0 or idx.size < 2:
        return float("nan"), float("nan")
    x = values[idx]
    counted = moving[idx[1:]]  # each known value compared with the previous known one
    if not counted.any():
        return float("nan"), float("nan")
    repeat = (x[1:] == x[:-1])[counted]
    fresh = int(np.count_nonzero(~repeat))
    return fresh / seconds, float(repeat.mean())
