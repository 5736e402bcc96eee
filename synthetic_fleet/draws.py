"""Random draws that the simulation's stages share.

Rare events (a dropped row, a duplicated row, a stale or missing cell) strike
each sample independently with a small probability; drawing one uniform
number per sample to find the few that are struck costs far more than the
events themselves. The gaps between successes of independent Bernoulli(p)
trials are geometric, so drawing the gaps gives the same law at a cost that
grows with n·p rather than n.
"""

from __future__ import annotations

import numpy as np


def bernoulli_successes(rng: np.random.Generator, n: int, p: float) -> np.ndarray:
    """Sorted indices of the successes among ``n`` independent Bernoulli(``p``) trials."""
    if n <= 0 or p <= 0.0:
        return np.empty(0, dtype=np.int64)
    if p >= 1.0:
        return np.arange(n, dtype=np.int64)
    expected = n * p
    positions = np.cumsum(rng.geometric(p, int(expected + 6.0 * np.sqrt(expected) + 10))) - 1
    while positions[-1] < n:  # rare: the drawn gaps did not reach past the last trial
        more = positions[-1] + np.cumsum(rng.geometric(p, int(expected) + 10))
        positions = np.concatenate([positions, more])
    return positions[:np.searchsorted(positions, n)]
