"""Per-trip array operations on several trips' samples one after the other: each trip as if alone."""

import numpy as np
import pytest

from synthetic_fleet.segments import Segments

LENGTHS = [1, 2, 5, 37, 100, 1203]


@pytest.fixture
def trips():
    seg = Segments.of(LENGTHS)
    x = np.random.default_rng(0).normal(size=seg.total)
    return seg, x, [x[a:b] for a, b in zip(seg.starts, seg.ends)]


def test_running_sums_gradients_and_sums_restart_at_each_trip(trips):
    # Reference: numpy's cumsum, gradient and sum on each trip alone.
    seg, x, parts = trips
    np.testing.assert_allclose(seg.cumsum(x), np.concatenate([np.cumsum(p) for p in parts]), atol=1e-12)
    np.testing.assert_allclose(seg.sums(x), [p.sum() for p in parts], atol=1e-12)
    expected = np.concatenate([np.gradient(p, 0.1) if len(p) > 1 else np.zeros(1) for p in parts])
    np.testing.assert_array_equal(seg.gradient(x, 0.1), expected)


@pytest.mark.parametrize("width", [1, 2, 3, 10, 12])
def test_moving_average_holds_each_trips_edge_values(trips, width):
    # Reference: numpy.convolve over each trip padded with its own edge values (numpy.pad mode="edge").
    seg, x, parts = trips
    expected = np.concatenate([np.convolve(np.pad(p, (width // 2, width - 1 - width // 2), mode="edge"),
                                           np.ones(width) / width, mode="valid") for p in parts])
    np.testing.assert_allclose(seg.boxcar(x, width), expected, atol=1e-12)


@pytest.mark.parametrize("step", [1, 5, 10])
def test_upsampling_interpolates_linearly_within_each_trip(trips, step):
    # Reference: numpy.interp between every step-th sample of each trip, the last value held.
    seg, _, _ = trips
    coarse = seg.coarse(step)
    values = np.random.default_rng(step).normal(size=coarse.total)
    expected = np.concatenate([np.interp(np.arange(n), np.arange(0, n, step), values[a:b])
                               for n, a, b in zip(LENGTHS, coarse.starts, coarse.ends)])
    np.testing.assert_allclose(seg.upsample(values, coarse, step), expected, atol=1e-12)
