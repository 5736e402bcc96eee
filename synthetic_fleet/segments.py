"""Several trips' samples one after the other, and the per-trip array operations on them.

A vehicle's trips are simulated in one pass: every signal is one array of all
the trips' samples, so a trip costs a few array calls (slices per trip where
smoothing and interpolation lay a trip out), never one per sample. Smoothing, derivatives and running sums must not reach across a
trip's ends; these helpers treat each trip (segment) as if it stood alone.
Sums run over the whole array, so a trip's values agree with its stand-alone
values to rounding (about 1e-16 of the running sum), and are the same
for the same trips whatever else runs.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True, eq=False)
class Segments:
    """Consecutive segments of ``lengths`` samples each."""

    lengths: np.ndarray

    @classmethod
    def of(cls, lengths) -> "Segments":
        return cls(np.asarray(lengths, dtype=np.int64))

    @functools.cached_property
    def starts(self) -> np.ndarray:
        return np.cumsum(self.lengths) - self.lengths

    @functools.cached_property
    def ends(self) -> np.ndarray:
        return np.cumsum(self.lengths)

    @property
    def total(self) -> int:
        return int(self.lengths.sum())

    @functools.cached_property
    def owner(self) -> np.ndarray:
        """The segment of each sample."""
        return np.repeat(np.arange(len(self.lengths)), self.lengths)

    @functools.cached_property
    def local(self) -> np.ndarray:
        """Each sample's index within its segment."""
        return np.arange(self.total) - self.starts[self.owner]

    def spread(self, per_segment) -> np.ndarray:
        """A value per segment, repeated over its samples."""
        return np.repeat(np.asarray(per_segment), self.lengths, axis=-1)

    def sums(self, x: np.ndarray) -> np.ndarray:
        """The sum of ``x`` over each segment (0 for an empty one)."""
        c = np.cumsum(x)

        def before(i: np.ndarray) -> np.ndarray:  # the running sum before sample i
            return np.where(i > 0, c[np.maximum(i - 1, 0)], 0.0) if len(c) else np.zeros(len(i))

        return before(self.ends) - before(self.starts)

    def cumsum(self, x: np.ndarray) -> np.ndarray:
        """Running sum of ``x`` restarting at each segment."""
        c = np.cumsum(x)
        before = np.concatenate([[0.0], c])[self.starts]
        for a, b, offset in zip(self.starts.tolist(), self.ends.tolist(), before.tolist()):
            c[a:b] -= offset  # per segment, in place
        return c

    def gradient(self, x: np.ndarray, dt: float) -> np.ndarray:
        """np.gradient within each segment (central inside, one-sided at its ends; 0 for one sample)."""
        g = np.empty_like(x)
        g[1:-1] = (x[2:] - x[:-2]) / (2.0 * dt)
        long = self.lengths > 1
        first, last = self.starts[long], self.ends[long] - 1
        g[first] = (x[first + 1] - x[first]) / dt
        g[last] = (x[last] - x[last - 1]) / dt
        g[self.starts[~long]] = 0.0
        return g

    def boxcar(self, x: np.ndarray, width: int) -> np.ndarray:
        """Centred moving average over ``width`` samples within each segment, its edge values held.

        Each segment is laid out with its edge values held for ``width`` samples around it (slices, no
        per-sample indices); one running sum over all of them (x is floating point: summed in place)."""
        if width <= 1 or self.total == 0:
            return x
        left = width // 2 + 1  # samples held before a segment (and width - left after it)
        padded = Segments.of(self.lengths + width)
        values = np.empty(padded.total, x.dtype)
        bounds = zip(self.starts.tolist(), self.lengths.tolist(), padded.starts.tolist())
        for a, n, p in bounds:
            values[p:p + left] = x[a if n else a - 1]
            values[p + left:p + left + n] = x[a:a + n]
            values[p + left + n:p + n + width] = x[a + n - 1]
            values[p] = 0.0  # so that each window's sum is a difference of running sums
        c = np.cumsum(values, out=values)
        out = np.empty_like(x, dtype=c.dtype)
        for a, n, p in zip(self.starts.tolist(), self.lengths.tolist(), padded.starts.tolist()):
            np.subtract(c[p + width:p + width + n], c[p:p + n], out=out[a:a + n])
        out /= width
        return out

    def coarse(self, step: int) -> "Segments":
        """Every ``step``-th sample of each segment (its first, then every step after)."""
        return Segments.of(-(-self.lengths // step))

    def upsample(self, coarse_values: np.ndarray, coarse: "Segments", step: int) -> np.ndarray:
        """Linear interpolation of values given at every ``step``-th sample of each segment (``coarse``
        segments, at least as many values as coarse points) onto all samples; the last value is held.

        Per segment, a (coarse points, step) table of the weighted neighbours (no per-sample indices)."""
        frac = np.arange(step) / step
        rest = 1.0 - frac
        out = np.empty(self.total, np.result_type(coarse_values, frac))
        for a, n, first, end in zip(self.starts.tolist(), self.lengths.tolist(), coarse.starts.tolist(),
                                    coarse.ends.tolist()):
            m = -(-n // step)  # the coarse points at or before this segment's samples
            following = coarse_values[np.minimum(np.arange(first + 1, first + m + 1), end - 1)]
            table = coarse_values[first:first + m, None] * rest
            table += following[:, None] * frac
            out[a:a + n] = table.ravel()[:n]
        return out
