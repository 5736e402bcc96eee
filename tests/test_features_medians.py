"""features.signals' medians give numpy's values to the last bit, on every path.

Reference implementation: numpy.median (the mean of the two middle order statistics for an even
count). The median partitions at the upper middle index alone and takes the largest value below it
for an even count; these rows, ties among them, check that it selects the same two order statistics.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from features.signals import median, robust_spread

#: About a 10 Hz trip's straight-cruise samples: the row length the features take medians of.
LONG = 5000


def rows() -> dict[str, np.ndarray]:
    rng = np.random.default_rng(11)
    n = LONG + 901
    striped = np.zeros(n)
    striped[::8] = 1.0
    return {
        "gaussian, odd": rng.normal(size=n),
        "gaussian, even": rng.normal(size=n + 1),
        "quantised": np.round(rng.normal(size=n) * 3.0) / 100.0,
        "constant": np.full(n, 0.1),
        "sorted": np.sort(rng.normal(size=n)),
        "striped": striped,
        "short": rng.normal(size=7),
        "two": np.array([0.3, -1.0]),
    }


@pytest.mark.parametrize("name", list(rows()))
def test_median_is_numpys_to_the_last_bit(name):
    x = rows()[name]
    assert median(x) == np.median(x)


def test_robust_spread_of_a_stack_is_each_rows_own():
    stack = np.vstack([rows()["gaussian, odd"], rows()["quantised"]])
    expected = [1.4826 * np.median(np.abs(r - np.median(r))) for r in stack]
    assert list(robust_spread(stack.copy(), overwrite_input=True)) == expected


@settings(max_examples=40, deadline=None)
@given(st.integers(1, LONG + 3000), st.integers(1, 50), st.integers(0, 2**32 - 1))
def test_median_of_random_tied_rows_is_numpys(n, levels, seed):
    x = np.random.default_rng(seed).integers(0, levels, n) * 0.37
    assert median(x) == np.median(x)
