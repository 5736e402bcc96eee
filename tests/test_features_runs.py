"""Run and dilation helpers of features.signals against direct definitions."""

from __future__ import annotations

import numpy as np

from features.signals import TripArrays, _smallest_known_step, keep_runs, widen


def _trip(step_s: np.ndarray) -> TripArrays:
    """A trip whose sample spacing is ``step_s`` (a step over 2.5 nominal 0.1 s periods is a gap)."""
    n = step_s.size + 1
    t = np.concatenate(([0.0], np.cumsum(step_s)))
    gap = np.zeros(n, dtype=bool)
    gap[:-1] = step_s > 0.25
    dt = np.append(np.where(gap[:-1], 0.1, step_s), 0.1)
    return TripArrays(t=t, dt=dt, rate_hz=10.0, wheels=np.zeros((4, n)), signals={}, brake=np.zeros(n),
                      gap_after=gap)


def test_a_gap_splits_a_run_and_each_part_is_judged_on_its_own_length():
    steps = np.full(59, 0.1)
    steps[[19, 39]] = 5.0  # gaps after samples 19 and 39: three runs of 20 samples, 2 s each
    trip = _trip(steps)
    mask = np.ones(60, dtype=bool)
    mask[45:] = False  # the third run keeps only 5 samples: 0.5 s
    kept = keep_runs(mask, trip, min_s=1.5)
    assert kept[:40].all()  # both long runs, the second starting right where the first one ends
    assert not kept[40:].any()
    trimmed = keep_runs(mask, trip, min_s=1.5, trim_start_s=0.45)
    expected = np.zeros(60, dtype=bool)
    expected[5:20] = expected[25:40] = True  # each long run minus its first 0.45 s (5 samples)
    np.testing.assert_array_equal(trimmed, expected)


def test_widen_is_the_or_of_every_shift_up_to_half():
    rng = np.random.default_rng(0)
    for _ in range(200):
        mask = rng.random(int(rng.integers(1, 300))) < rng.choice([0.01, 0.1, 0.6])
        half = int(rng.integers(0, 40))
        padded = np.pad(mask, half)
        direct = np.zeros(mask.size, dtype=bool)
        for shift in range(2 * half + 1):  # the definition: any True within half samples
            direct |= padded[shift:shift + mask.size]
        np.testing.assert_array_equal(widen(mask, half), direct)


def test_the_smallest_known_step_is_the_smallest_nonzero_rounded_step():
    """The logger's resolution against its definition: the smallest |Δx| that is non-zero after
    rounding to 1e-9, NaN if none; traces with and without repeats, converted from km/h (float
    noise in the steps), with steps rounding to zero, and constant."""
    rng = np.random.default_rng(1)
    traces = [np.full(50, 3.2), np.array([1.0]), np.array([0.0, 4e-10, 8e-10, 1.3e-9])]
    for _ in range(300):
        n = int(rng.integers(2, 400))
        step = rng.choice([1e-10, 5e-10, 0.01, 0.1, 1.0]) / 3.6  # km/h steps in m/s
        walk = np.cumsum(rng.choice([-1, 0, 0, 1], n) if rng.random() < 0.5 else rng.normal(0, 1, n))
        traces.append(np.round(walk) * step if rng.random() < 0.7 else walk * step)
    for x in traces:
        steps = np.round(np.abs(np.diff(x)), 9)
        steps = steps[steps > 0]
        direct = float(steps.min()) if steps.size else np.nan
        np.testing.assert_equal(_smallest_known_step(x), direct)
