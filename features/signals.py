"""One trip's samples as plain numpy arrays, and the vectorised helpers the features share.

Feature code works on arrays, not DataFrames, so a trip is converted once and
every window and feature is a handful of whole-array operations (no per-sample
Python loops). Missing values are NaN throughout; a signal the log lacks is all
NaN and ``has(name)`` is False.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np
import pandas as pd
from scipy.ndimage import correlate1d, uniform_filter1d
from scipy.linalg import lstsq

from features.columns import SampleColumns, sample_columns
from tracktrue.schema import NUMERIC_SIGNALS, POSITIONS, WHEEL_SPEED_COLUMNS
from tracktrue.signal_quality import GAP_PERIODS

# GAP_PERIODS (tracktrue.signal_quality, shared with ingest): a step longer than that many
# nominal sample periods is a gap: integration does not bridge it and derivatives are not taken across it.
#: Comparisons of yaw, steering and lateral acceleration run on 1 s means, so
#: one sample's noise is not taken for a turn.
SMOOTH_S = 1.0


@dataclass(frozen=True)
class TripArrays:
    """A trip's signals, time-sorted, in SI units."""

    t: np.ndarray  #: seconds since the first sample
    dt: np.ndarray  #: seconds each sample stands for (gaps capped), for integrals
    rate_hz: float  #: nominal rate, 1 / median step
    wheels: np.ndarray  #: (4, n) wheel speeds fl, fr, rl, rr in m/s
    signals: Mapping[str, np.ndarray]  #: the other numeric signals by canonical name
    brake: np.ndarray  #: 1.0 pressed, 0.0 released, NaN unknown
    gap_after: np.ndarray  #: True where the step to the next sample is a gap
    resolution: Mapping[str, float] = field(default_factory=dict)  #: smallest step per signal
    logged: frozenset[str] = frozenset()  #: signals with at least one sample present
    missing: Mapping[str, float] = field(default_factory=dict)  #: share of missing samples per signal (and brake)
    present: Mapping[str, int] = field(default_factory=dict)  #: number of samples present per signal (and brake)
    finite: Mapping[str, np.ndarray] = field(default_factory=dict)  #: which samples are present, per signal (and brake)
    _memo: dict = field(default_factory=dict, repr=False, compare=False)

    def smoothed(self, name: str) -> np.ndarray:
        """A signal's centred 1 s moving mean (computed once per trip: several features compare on it)."""
        key = ("smoothed", name)
        if key not in self._memo:
            self._memo[key] = moving_mean(self.signal(name), window_samples(SMOOTH_S, self.rate_hz))
        return self._memo[key]

    def cached(self, key: str, compute: Callable[[], np.ndarray]) -> np.ndarray:
        """A derived trace several features share, computed once per trip (``key`` names it)."""
        if key not in self._memo:
            self._memo[key] = compute()
        return self._memo[key]

    @property
    def speed(self) -> np.ndarray:
        """Per-sample median of the four wheel speeds, m/s (computed once per trip: windows and gates share it)."""
        if "speed" not in self._memo:
            speed = median_of_four(self.wheels)
            speed.setflags(write=False)  # shared: nobody may change it in place
            self._memo["speed"] = speed
        return self._memo["speed"]

    @property
    def n(self) -> int:
        return self.t.size

    def signal(self, name: str) -> np.ndarray:
        """Any numeric signal (or ``brake``) by its canonical name."""
        if name == "brake":
            return self.brake
        if name in WHEEL_SPEED_COLUMNS:
            return self.wheels[WHEEL_SPEED_COLUMNS.index(name)]
        return self.signals[name]

    def has(self, name: str) -> bool:
        """A signal counts as logged if any of its samples is present."""
        return name in self.logged

    def wheel(self, pos: str) -> np.ndarray:
        return self.wheels[POSITIONS.index(pos)]


def trip_arrays(samples: pd.DataFrame | SampleColumns) -> TripArrays:
    """Convert one trip's canonical samples (a DataFrame or features.columns arrays) to arrays."""
    columns = sample_columns(samples)
    t_ns = columns["time"]
    sorted_ = bool(np.all(t_ns[1:] >= t_ns[:-1]))  # a stable sort of sorted stamps changes nothing
    order = np.arange(t_ns.size) if sorted_ else np.argsort(t_ns, kind="stable")
    t = (t_ns - t_ns[order[0]]).astype(np.float64) / 1e9 if t_ns.size else np.zeros(0)
    if not sorted_:
        t = t[order]

    def column(name: str) -> np.ndarray:
        if name not in columns:
            return np.full(t.size, np.nan)
        values = columns[name]
        return values if sorted_ else values[order]

    steps = np.diff(t)
    positive = steps[steps > 0]
    period = median(positive)
    rate = 1.0 / period if period > 0 else np.nan
    gap_after = np.zeros(t.size, dtype=bool)
    if steps.size:
        gap_after[:-1] = steps > GAP_PERIODS * period
    dt = np.empty(t.size)
    if t.size:
        dt[:-1] = np.where(gap_after[:-1], period, steps)
        dt[-1] = period if np.isfinite(period) else 0.0
    wheels = np.vstack([column(c) for c in WHEEL_SPEED_COLUMNS]) if t.size else np.zeros((4, 0))
    others = {c: column(c) for c in NUMERIC_SIGNALS if c not in WHEEL_SPEED_COLUMNS}
    brake = column("brake")
    every = {**dict(zip(WHEEL_SPEED_COLUMNS, wheels)), **others, "brake": brake}
    finite = {name: np.isfinite(x) for name, x in every.items()}
    present = {name: int(np.count_nonzero(ok)) for name, ok in finite.items()}
    logged = frozenset(name for name, k in present.items() if k)
    missing = {name: 1.0 - k / t.size if t.size else 1.0 for name, k in present.items()}
    resolution = {c: _smallest_known_step(every[c] if present[c] == t.size else every[c][finite[c]])
                  for c in NUMERIC_SIGNALS}
    return TripArrays(t=t, dt=dt, rate_hz=rate, wheels=wheels, signals=others, brake=brake,
                      gap_after=gap_after, resolution=resolution, logged=logged, missing=missing, present=present,
                      finite=finite)


def _smallest_known_step(known: np.ndarray) -> float:
    """Smallest non-zero change between consecutive values of a trace without missing values: the
    logger's resolution (TripArrays.resolution).

    A slowly varying quantised signal steps by one quantum somewhere in any
    trip, so this finds the quantum without sorting. Rounded to 1e-9 first so
    float noise from unit conversion is not taken for a finer step. NaN if the
    signal never changes.
    """
    steps = np.diff(known)
    if steps.size == 0:
        return np.nan
    np.abs(steps, out=steps)
    # rounding is monotonic, so the smallest step that survives rounding is the
    # rounded smallest step above half a unit: no need to round every step. A
    # trace that never repeats a value needs only the plain minimum; one that
    # does has its repeats overwritten in place (faster than a select or a min(where=...))
    smallest = steps.min()
    if smallest < 5e-10:
        np.copyto(steps, np.inf, where=steps < 5e-10)
        smallest = steps.min()
    if not np.isfinite(smallest):
        return np.nan
    smallest = float(smallest.round(9))
    if smallest > 0:
        return smallest
    # the smallest candidate rounded down to 0: the exact, slower way, from the trace
    # again (the repeats above were overwritten)
    steps = np.round(np.abs(np.diff(known)), 9)
    steps = steps[steps > 0]
    return float(steps.min()) if steps.size else np.nan


def window_samples(seconds: float, rate_hz: float, minimum: int = 1) -> int:
    """An odd window length in samples covering about ``seconds`` at ``rate_hz``."""
    w = int(round(seconds * rate_hz)) if np.isfinite(rate_hz) else minimum
    w = max(w, minimum)
    return w if w % 2 else w + 1


def moving_mean(x: np.ndarray, width: int) -> np.ndarray:
    """Centred moving mean over ``width`` samples that skips NaN (NaN if none valid), along the last axis.

    At the ends the window shrinks to the samples that exist. A (k, n) array
    filters its k rows in one call; rows missing the same samples (a stack
    masked by one window) share one count of valid samples.
    """
    valid = np.isfinite(x)
    if valid.all():
        out = uniform_filter1d(x, width, axis=-1, output=np.empty_like(x), mode="constant", cval=0.0)
        n, half = x.shape[-1], width // 2
        if n <= 2 * width:
            out /= _window_share(n, width)
            return out
        share = _window_share(n, width)  # 1 away from the ends: only they need dividing
        out[..., :half] /= share[:half]
        out[..., n - half:] /= share[n - half:]
        return out
    # one buffer throughout: the zero-filled trace is filtered in place (as scipy's own
    # multi-axis filters do) and divided in place, so a (k, n) stack makes no further
    # (k, n) temporaries, each of which would be fresh pages to fault in
    total = np.where(valid, x, 0.0)
    uniform_filter1d(total, width, axis=-1, output=total, mode="constant", cval=0.0)
    count = _valid_count(valid, width)
    empty = count <= 0.5 / width
    if not empty.any():
        total /= count  # a plain divide: faster than a masked one
        return total
    np.divide(total, count, out=total, where=~empty)
    np.copyto(total, np.nan, where=empty)  # an empty window stays NaN
    return total


def _valid_count(valid: np.ndarray, width: int) -> np.ndarray:
    """Moving share of valid samples; rows missing the same samples as the first row share its filter."""
    def share(mask: np.ndarray) -> np.ndarray:
        if mask.ndim == 1:
            return _sparse_gap_share(mask, width)
        share = mask.astype(np.float64)
        return uniform_filter1d(share, width, axis=-1, output=share, mode="constant", cval=0.0)

    if valid.ndim == 1:
        return share(valid)
    like_first = (valid == valid[0]).all(axis=1)
    if like_first.all():
        return share(valid[0])
    count = np.empty(valid.shape)
    count[like_first] = share(valid[0])
    count[~like_first] = share(valid[~like_first])
    return count


def _sparse_gap_share(valid: np.ndarray, width: int) -> np.ndarray:
    """Moving share of valid samples in one trace: the window's share inside the trace, less 1/width for
    every missing sample in the window. A log misses a cell here and there, so when the missing
    samples are few this touches only their windows instead of filtering the whole trace."""
    missing = np.flatnonzero(~valid)
    if missing.size * width > valid.size // 8:
        share = valid.astype(np.float64)
        return uniform_filter1d(share, width, output=share, mode="constant", cval=0.0)
    share = _window_share(valid.size, width).copy()
    half = width // 2
    touched = (missing[:, None] + np.arange(-half, half + 1)).ravel()
    np.subtract.at(share, touched[(touched >= 0) & (touched < valid.size)], 1.0 / width)
    return share


@lru_cache(maxsize=16)
def _window_share(n: int, width: int) -> np.ndarray:
    """Share of a centred ``width`` window inside an ``n``-sample trace (1 away from the ends).

    Read-only and computed once per trace length and width: a trip asks for a few widths many times.
    """
    share = np.ones(n)
    half = width // 2
    edges = np.arange(n) if n <= 2 * width else np.concatenate((np.arange(half), np.arange(n - half, n)))
    inside = np.minimum(edges + half, n - 1) - np.maximum(edges - half, 0) + 1
    share[edges] = inside / width
    share.setflags(write=False)
    return share


def widen(mask: np.ndarray, half: int) -> np.ndarray:
    """True within ``half`` samples of any True sample of a 1-D ``mask`` (a dilation).

    Shifted ORs whose reach doubles each time, forward then backward: about
    2·log2(half) passes over booleans, several times cheaper than a running
    count or a moving mean of the mask.
    """
    out = mask.copy()
    for forward in (True, False):
        reach = 1  # out[p] covers this many offsets (0 included) in this direction
        while reach < half + 1:
            step = min(reach, half + 1 - reach)
            if forward:
                out[step:] |= out[:-step]  # numpy buffers the overlap: as if from a copy
            else:
                out[:-step] |= out[step:]
            reach += step
    return out


def moving_std(x: np.ndarray, width: int) -> np.ndarray:
    """Centred moving standard deviation (population), NaN-skipping."""
    x = np.asarray(x)
    both = moving_mean(np.concatenate([x.reshape(-1, x.shape[-1]), (x * x).reshape(-1, x.shape[-1])]), width)
    mean, mean_sq = both[: both.shape[0] // 2], both[both.shape[0] // 2:]  # one call: x and x² miss the same samples
    return np.sqrt(np.clip(mean_sq - mean * mean, 0.0, None)).reshape(x.shape)


def moving_std_at(x: np.ndarray, mask: np.ndarray, width: int) -> np.ndarray:
    """``moving_std(x, width)`` at the samples of ``mask`` (NaN elsewhere), computed only around them.

    Every masked sample's window lies inside the masked runs widened by half
    a window, so filtering just those stretches, joined end to end, gives the
    masked samples the values the whole trace would (up to rounding), at a
    fraction of the cost when the mask is sparse (standstills of a drive).
    """
    out = np.full(x.shape, np.nan)
    if not mask.any():
        return out
    near = widen(mask, width)  # widened by a whole window: margin to spare
    out[near] = moving_std(x[near], width)
    out[~mask] = np.nan
    return out


def near_gap(trip: TripArrays, half_width: int) -> np.ndarray:
    """True within ``half_width`` samples of a time gap (derivatives are unreliable there)."""
    if not trip.gap_after.any():
        return np.zeros(trip.n, dtype=bool)
    marks = trip.gap_after.copy()
    marks[1:] |= trip.gap_after[:-1]  # a gap after sample i touches samples i and i+1
    return widen(marks, half_width)


def smooth_derivative(x: np.ndarray, trip: TripArrays, window_s: float = 1.5,
                      overwrite_input: bool = False) -> np.ndarray:
    """Savitzky–Golay first derivative (quadratic fit over ``window_s``), per second, of each row of ``x``.

    Savitzky & Golay (1964), the weights of scipy.signal.savgol_coeffs (_savgol_derivative_weights). The window is at least
    5 samples, so at low rates it is longer than ``window_s`` (a quadratic
    through fewer points follows the noise). NaN runs are bridged linearly
    before filtering and set back to NaN after; samples near a time gap or
    within half a window of the trip's ends are NaN. ``x`` is one trace or a
    (k, n) stack filtered in one call. ``overwrite_input`` (a float ``x`` the
    caller made for this): ``x`` may be bridged, filtered and returned in
    place, instead of a copy.
    """
    w = window_samples(window_s, trip.rate_hz, minimum=5)
    rows = np.atleast_2d(x)
    valid = np.isfinite(rows)
    enough = valid.sum(axis=-1) >= w
    if not enough.any():
        return np.full(np.shape(x), np.nan)
    complete = valid.all(axis=-1)
    in_place = enough.all() and (overwrite_input or complete.all())
    filled = rows if in_place else rows[enough]  # the copy a caller's rows are bridged in
    owned = overwrite_input or not in_place
    for row, ok, whole in zip(filled, valid[enough], complete[enough]):
        if not whole:
            _bridge(row, ok)
    weights = _savgol_derivative_weights(w, 1.0 / trip.rate_hz)
    # rows of our own are filtered in place (as in moving_mean): one (k, n) buffer fewer
    filtered = correlate1d(filled, weights, axis=-1, output=filled if owned else np.empty_like(filled),
                           mode="nearest")
    if enough.all():
        out = filtered
    else:
        out = np.full(rows.shape, np.nan)
        out[enough] = filtered
    if trip.gap_after.any():
        out[~valid | near_gap(trip, w // 2)] = np.nan
    elif not complete.all():
        out[~valid] = np.nan
    out[:, : w // 2] = np.nan  # the trip's ends have no full window
    out[:, rows.shape[-1] - w // 2:] = np.nan
    return out.reshape(np.shape(x))


def _bridge(row: np.ndarray, ok: np.ndarray) -> None:
    """Fill ``row``'s missing samples in place by linear interpolation between the known samples around them.

    np.interp over just the known samples next to a missing one: each missing
    run lies between the same two of them as among all known samples, so the
    values are the same as interpolating from the whole trace, without
    gathering it.
    """
    gap = ~ok
    if not gap.any():
        return
    beside = np.zeros(row.size, dtype=bool)  # known samples next to a missing one, in order (no sort)
    beside[:-1] |= gap[1:]
    beside[1:] |= gap[:-1]
    beside &= ok
    around = np.flatnonzero(beside)
    missing = np.flatnonzero(gap)
    row[missing] = np.interp(missing, around, row[around])


@lru_cache(maxsize=64)
def _savgol_derivative_weights(width: int, delta: float) -> np.ndarray:
    """Savitzky–Golay first-derivative weights (quadratic), ordered for correlation.

    scipy.signal.savgol_coeffs(width, 2, deriv=1, delta=delta, use="dot")
    to the last bit, solved here the way it solves them (the least-squares
    solve of the window's Vandermonde system, scipy.linalg.lstsq with
    cond = eps·width): importing scipy.signal costs every process, and every
    pool worker, about 0.6 s, and the closed form i/(Δ·Σi²) differs in the
    last bits, which moves samples lying exactly on a threshold (a polled
    logger's quantised speeds do). tests/test_features_physics.py checks the match.
    """
    half = width // 2
    x = np.arange(-half, width - half, dtype=np.float64)
    vandermonde = x ** np.arange(3, dtype=np.float64).reshape(-1, 1)
    target = np.zeros(3)
    target[1] = 1.0 / delta
    weights = lstsq(vandermonde, target, cond=np.finfo(np.float64).eps * width)[0]
    weights.setflags(write=False)
    return weights


def median_of_four(values: np.ndarray) -> np.ndarray:
    """Per-sample median of the (4, n) wheel array, ignoring NaN wheels.

    The median of four independent sensors is a vote: one wheel reading zero or
    jittering cannot move it far. All four present: the mean of the middle two,
    from a sorting network (the larger of the two pair minima and the smaller
    of the two pair maxima).
    """
    low_a, high_a = np.minimum(values[0], values[1]), np.maximum(values[0], values[1])
    low_b, high_b = np.minimum(values[2], values[3]), np.maximum(values[2], values[3])
    out = 0.5 * (np.maximum(low_a, low_b) + np.minimum(high_a, high_b))
    partial = np.isnan(out)
    if partial.any():
        out[partial] = _nan_median_of_four(np.compress(partial, values, axis=1))  # column picks: faster than [:, partial]
    return out


def second_smallest_of_four(values: np.ndarray) -> np.ndarray:
    """Per-sample second-smallest of the (4, n) wheel array, NaN counted as largest (as np.sort orders it).

    A sorting network in an order with NaN on top: the smaller of two is
    np.fmin (NaN only if both are), the larger np.maximum (NaN if either is).
    """
    v = values
    low_a, high_a = np.fmin(v[0], v[1]), np.maximum(v[0], v[1])
    low_b, high_b = np.fmin(v[2], v[3]), np.maximum(v[2], v[3])
    return np.fmin(np.maximum(low_a, low_b), np.fmin(high_a, high_b))


def _nan_median_of_four(values: np.ndarray) -> np.ndarray:
    s = np.sort(values, axis=0)  # NaN sort last
    k = np.isfinite(values).sum(axis=0)
    cols = np.arange(s.shape[1])
    lo, hi = s[np.maximum((k - 1) // 2, 0), cols], s[np.minimum(k // 2, 3), cols]
    return np.where(k > 0, 0.5 * (lo + hi), np.nan)


def median_of_three(a: np.ndarray, b: np.ndarray, c: np.ndarray) -> np.ndarray:
    """Per-sample median of three arrays (NaN if any is NaN)."""
    return a + b + c - np.maximum(np.maximum(a, b), c) - np.minimum(np.minimum(a, b), c)


def seconds(mask: np.ndarray, trip: TripArrays) -> float:
    """Time covered by the samples in ``mask``, in s."""
    return float(np.einsum("i,i->", trip.dt, mask))  # a dot product without a copy of the masked samples


def keep_runs(mask: np.ndarray, trip: TripArrays, min_s: float, trim_start_s: float = 0.0) -> np.ndarray:
    """Keep only runs of ``mask`` lasting at least ``min_s``, minus their first ``trim_start_s``.

    A run is broken by a time gap as well as by a False sample. Built from the
    runs' boundaries by np.repeat (one value per run and per stretch between
    runs), which is several times cheaper than a cumulative sum over the trace.
    """
    if not mask.any():
        return mask.copy()
    first = np.flatnonzero(mask & ~np.concatenate(([False], mask[:-1] & ~trip.gap_after[:-1])))
    last = np.flatnonzero(mask & ~np.concatenate((mask[1:] & ~trip.gap_after[:-1], [False])))
    long_enough = (trip.t[last] + trip.dt[last] - trip.t[first]) >= min_s
    # stretches: before run 0, run 0, between runs 0 and 1 (empty at a gap), run 1, ..., after the last run
    bounds = np.empty(2 * first.size + 2, dtype=np.intp)
    bounds[0], bounds[-1] = 0, mask.size
    bounds[1:-1:2], bounds[2:-1:2] = first, last + 1
    lengths = np.diff(bounds)
    if trim_start_s == 0.0:  # whole runs
        keep = np.zeros(lengths.size, dtype=bool)
        keep[1::2] = long_enough
        return np.repeat(keep, lengths)
    start_t = np.full(lengths.size, np.inf)  # outside the long runs t − ∞ never reaches the trim
    start_t[1::2] = np.where(long_enough, trip.t[first], np.inf)
    return trip.t - np.repeat(start_t, lengths) >= trim_start_s


def count_events(mask: np.ndarray) -> int:
    """Number of separate runs (rising edges) of ``mask``."""
    return int(np.count_nonzero(mask & ~np.concatenate(([False], mask[:-1]))))


def median(x: np.ndarray) -> float:
    """Median of finite values: np.median's result, from one single-index partition.

    Partitioning at the upper middle index alone, and taking the largest value
    below it for an even count, is several times faster than asking
    np.partition for both middle indices when the data has many ties (quantised
    signals), and selects the same two order statistics.
    """
    n = x.size
    if n == 0:
        return np.nan
    return float(_row_medians(x.reshape(1, n))[0])


def nan_median(x: np.ndarray) -> float:
    """Median ignoring NaN (np.nanmedian's value, NaN when nothing is left, without its warning)."""
    return median(x[np.isfinite(x)])


def dithered_mean(x: np.ndarray, step: float) -> float:
    """Mean of the finite samples within 4 robust σ plus one ``step`` of their median (NaN if none).

    For a quantised signal whose noise spans about half a step or more, the
    mean of many samples resolves a level between the steps, which the median
    cannot: it sits on a step (Widrow & Kollár, *Quantization Noise*, 2008:
    the mean is unbiased to within ~q·exp(−2π²σ²/q²)/π). The band keeps the
    median's robustness to a few stray samples; ``step`` (NaN for unknown)
    widens it so a noise-free quantised trace keeps its neighbouring steps.
    """
    x = x[np.isfinite(x)]
    if x.size == 0:
        return np.nan
    centre = median(x)
    half_width = 4.0 * robust_spread(x) + (step if np.isfinite(step) else 0.0)
    return float(np.mean(x[np.abs(x - centre) <= half_width]))


def _row_medians(x: np.ndarray, overwrite_input: bool = False) -> np.ndarray:
    """Median of each row of a finite (k, m) array, m > 0 (see ``median``), by one partition of each
    whole row; ``overwrite_input`` partitions ``x`` itself instead of a copy (np.partition is a copy
    partitioned in place)."""
    m = x.shape[1]
    if overwrite_input:
        x.partition(m // 2, axis=1)
        part = x
    else:
        part = np.partition(x, m // 2, axis=1)
    upper = part[:, m // 2]
    lower = part[:, : m // 2].max(axis=1) if m % 2 == 0 else upper
    return 0.5 * (lower + upper)


def robust_spread(x: np.ndarray, overwrite_input: bool = False) -> float | np.ndarray:
    """1.4826 · median absolute deviation: the standard deviation for Gaussian data, robust to outliers.

    ``x`` one trace (NaN ignored), or a (k, m) stack whose k rows get one
    spread each from two partitions of the whole stack. ``overwrite_input``
    (as np.median's): a finite stack may be reordered within its rows and
    overwritten with its deviations instead of copied; medians do not depend
    on the order, so neither does the result.
    """
    if x.ndim == 2:
        if x.shape[1] == 0 or not np.isfinite(x).all():
            return np.array([robust_spread(row) for row in x])
        medians = _row_medians(x, overwrite_input)[:, None]
        deviation = np.subtract(x, medians, out=x) if overwrite_input else x - medians
        return 1.4826 * _row_medians(np.abs(deviation, out=deviation), overwrite_input=True)
    x = x[np.isfinite(x)]
    if x.size == 0:
        return np.nan
    return float(1.4826 * median(np.abs(x - median(x))))


def white_noise_variance(x: np.ndarray, mask: np.ndarray) -> float:
    """Variance of a signal's sample-to-sample noise, var(Δx)/2 over consecutive masked samples.

    The difference of two neighbouring samples cancels a slowly varying
    signal and doubles white noise's variance (von Neumann's mean square
    successive difference, 1941).
    """
    pair = mask[1:] & mask[:-1]
    d = np.diff(x)[pair]
    d = d[np.isfinite(d)]
    return float(np.var(d) / 2.0) if d.size > 1 else np.nan


def deming_fit(x: np.ndarray, y: np.ndarray, noise_ratio: float) -> tuple[float, float]:
    """Slope and intercept of y = a + b·x when both x and y carry noise (Deming regression).

    ``noise_ratio`` δ = var(noise in y) / var(noise in x). Ordinary least
    squares would shrink the slope by var(x)/(var(x) + var(noise in x));
    Deming (1943): b = (s_yy − δ·s_xx + √((s_yy − δ·s_xx)² + 4·δ·s_xy²)) / (2·s_xy).
    δ → ∞ gives ordinary least squares of y on x.
    """
    mx, my = x.mean(), y.mean()
    sxx = np.mean((x - mx) ** 2)
    syy = np.mean((y - my) ** 2)
    sxy = np.mean((x - mx) * (y - my))
    if not np.isfinite(noise_ratio) or sxy == 0:
        b = sxy / sxx
    else:
        d = syy - noise_ratio * sxx
        b = (d + np.sqrt(d * d + 4.0 * noise_ratio * sxy * sxy)) / (2.0 * sxy)
    return float(b), float(my - b * mx)


def pair_differences(x: np.ndarray) -> np.ndarray:
    """Each row of a (k, m) stack minus each later row: rows (0, 1), (0, 2), …, (k − 2, k − 1).

    One broadcast subtraction per row, written in place: no gathered copies of the stack.
    """
    k = x.shape[0]
    out = np.empty((k * (k - 1) // 2, x.shape[1]))
    start = 0
    for i in range(k - 1):
        np.subtract(x[i], x[i + 1:], out=out[start:start + k - 1 - i])
        start += k - 1 - i
    return out


def three_cornered_hat(pair_variances: Mapping[tuple[int, int], float], n_sources: int) -> np.ndarray:
    """Each source's own noise variance from the variances of pairwise differences.

    var(x_i − x_j) = σ_i² + σ_j² for independent noises; with three or more
    sources the pairs determine every σ² (least squares, clipped at 0). The
    "three-cornered hat" of frequency-standard comparison (Gray & Allan,
    1974). Pairs with a NaN variance are left out.
    """
    pairs = [(p, v) for p, v in pair_variances.items() if np.isfinite(v)]
    if not pairs:
        return np.full(n_sources, np.nan)
    solve, determined = _pair_solver(tuple(p for p, _ in pairs), n_sources)
    solution = solve @ np.array([v for _, v in pairs])
    return np.where(determined, np.clip(solution, 0.0, None), np.nan)


@lru_cache(maxsize=64)
def _pair_solver(pairs: tuple[tuple[int, int], ...], n_sources: int) -> tuple[np.ndarray, np.ndarray]:
    """Least-squares solver (the pseudo-inverse) of the pair design, and which sources it determines.

    The same few designs recur trip after trip, so the pseudo-inverse is
    computed once rather than a least-squares solve per trip.
    """
    design = np.zeros((len(pairs), n_sources))
    for row, (i, j) in enumerate(pairs):
        design[row, i] = design[row, j] = 1.0
    solve = np.linalg.pinv(design)
    solve.setflags(write=False)
    return solve, design.sum(axis=0) >= 2
