"""features.signals' medians give numpy's values to the last bit, on every path.

Reference implementation: numpy.median (the mean of the two middle order statistics for an even
count). The long-row path selects from a bracket a strided sample chooses; these rows exercise
it, its tie shortcut and its fallback to a whole partition.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import features.signals as signals
from features.signals import BRACKET_MIN_SAMPLES, BRACKET_STRIDE, median, robust_spread


def rows() -> dict[str, np.ndarray]:
    rng = np.random.default_rng(11)
    n = BRACKET_MIN_SAMPLES + 901
    striped = np.zeros(n)
    striped[::BRACKET_STRIDE] = 1.0  # the stride sees only the ones: the bracket misses the middle
    return {
        "gaussian, odd": rng.normal(size=n),
        "gaussian, even": rng.normal(size=n + 1),
        "quantised": np.round(rng.normal(size=n) * 3.0) / 100.0,
        "constant": np.full(n, 0.1),
        "sorted": np.sort(rng.normal(size=n)),
        "striped": striped,
        "short": rng.normal(size=BRACKET_MIN_SAMPLES - 1),
    }


@pytest.mark.parametrize("name", list(rows()))
def test_median_is_numpys_to_the_last_bit(name):
    x = rows()[name]
    assert median(x) == np.median(x)


def test_the_striped_row_takes_the_whole_partition(monkeypatch):
    calls = []
    whole = signals._partitioned_medians
    monkeypatch.setattr(signals, "_partitioned_medians", lambda x, o=False: calls.append(x.shape) or whole(x, o))
    x = rows()["striped"]
    assert median(x) == np.median(x)
    assert calls == [(1, x.size)]


def test_robust_spread_of_a_stack_is_each_rows_own():
    stack = np.vstack([rows()["gaussian, odd"], rows()["quantised"]])
    expected = [1.4826 * np.median(np.abs(r - np.median(r))) for r in stack]
    assert list(robust_spread(stack.copy(), overwrite_input=True)) == expected


@settings(max_examples=40, deadline=None)
@given(st.integers(BRACKET_MIN_SAMPLES, BRACKET_MIN_SAMPLES + 3000), st.integers(1, 50), st.integers(0, 2**32 - 1))
def test_median_of_random_tied_rows_is_numpys(n, levels, seed):
    x = np.random.default_rng(seed).integers(0, levels, n) * 0.37
    assert median(x) == np.median(x)
