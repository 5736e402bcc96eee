"""Read-skew alignment: each value back to the time it was read, then onto the row's time.

A polled logger asks the modules for one value after another, so the cells of
one row are read up to a few hundred ms apart, and a cell's read-lag
companion column (ingest/columns.py, ``<header> @ms``) says by how much its
read lags the row's time stamp. Comparing two signals read 200 ms apart while
the vehicle accelerates at 2 m/s² is a 0.4 m/s disagreement that no sensor
has; wheel-versus-wheel and yaw-versus-wheel features would take it for a fault.

For one trip and one signal: each known value belongs to (row time − lag);
the values, ordered by that read time (a stale repeat carries the read time
of the value it repeats, so repeats of one read are kept once), are
linearly interpolated back onto the row times (``np.interp``). A row keeps
its logged value, unaligned, where the two reads around its time are further
apart than ``GAP_PERIODS`` typical read spacings (a logging gap: nothing to
interpolate between) or where it lies after the last read. A row whose cell
is missing stays missing; a missing lag cell is taken as lag 0.

The interpolated value is rounded back to the signal's logged step (its
smallest change as logged, on the grid of its first value): a finer-looking
value would claim a resolution the logger never had and hide it from the
features' resolution gates (features/gating.py), and rounding to the nearest
step adds only zero-mean error.
"""

from __future__ import annotations

import numpy as np

# Reads further apart than GAP_PERIODS median read spacings are not interpolated between
# (the one gap rule of tracktrue.signal_quality, which features/ also uses).
from tracktrue.signal_quality import GAP_PERIODS

#: A lag outside 0..MAX_LAG_MS is a rejected row (a read cannot follow its row, nor lag it by a minute).
MAX_LAG_MS = 60_000.0


def align(us: np.ndarray, values: np.ndarray, lag_ms: np.ndarray, step: float) -> np.ndarray:
    """One trip's signal on its row times (module docstring). ``us`` row times in µs, sorted."""
    known = np.isfinite(values)
    if known.sum() < 2:
        return values
    lag_us = np.where(np.isfinite(lag_ms), lag_ms, 0.0) * 1000.0
    read = us[known] - lag_us[known]
    order = np.argsort(read, kind="stable")
    read, value = read[order], values[known][order]
    first = np.concatenate(([True], np.diff(read) > 0))  # repeats of one read, once
    read, value = read[first], value[first]
    if read.size < 2:
        return values
    spacing = np.diff(read)
    limit = GAP_PERIODS * float(np.median(spacing))
    t = us[known].astype(np.float64)
    after = np.searchsorted(read, t, side="right")  # first read later than the row time
    inside = (after > 0) & (after < read.size)
    bracket = np.full(t.size, np.inf)
    bracket[inside] = spacing[after[inside] - 1]
    shifted = np.interp(t, read, value)
    if np.isfinite(step) and step > 0:
        base = value[0]
        shifted = base + np.round((shifted - base) / step) * step
    out = values.copy()
    out[known] = np.where(bracket <= limit, shifted, values[known])
    return out
