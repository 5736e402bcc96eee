"""Sparse Bernoulli draws: the same law as one uniform number per trial."""

import numpy as np
from scipy import stats

from synthetic_fleet.draws import bernoulli_successes


def test_success_counts_follow_the_binomial_law():
    # Reference: scipy.stats.binom (count of successes among n independent Bernoulli(p) trials).
    rng = np.random.default_rng(1)
    n, p = 4000, 0.02
    counts = np.array([len(bernoulli_successes(rng, n, p)) for _ in range(2000)])
    observed = np.bincount(counts, minlength=n + 1)
    edges = [0, *range(66, 97, 5), n + 1]  # mean 80, sd 8.9: bins of a hundred or more expected counts
    expected = np.diff(stats.binom.cdf(np.array(edges) - 1, n, p)) * len(counts)
    got = np.add.reduceat(observed, edges[:-1])
    assert stats.chisquare(got, expected * got.sum() / expected.sum()).pvalue > 1e-3


def test_successes_are_sorted_distinct_and_uniform_over_the_trials():
    rng = np.random.default_rng(2)
    runs = [bernoulli_successes(rng, 5000, 0.01) for _ in range(200)]
    assert all(np.all(np.diff(r) > 0) and (len(r) == 0 or (r[0] >= 0 and r[-1] < 5000)) for r in runs)
    # Reference: scipy.stats.kstest against the uniform distribution.
    assert stats.kstest(np.concatenate(runs) / 5000, "uniform").pvalue > 1e-3


def test_edge_probabilities():
    rng = np.random.default_rng(3)
    assert len(bernoulli_successes(rng, 100, 0.0)) == 0 and len(bernoulli_successes(rng, 0, 0.5)) == 0
    assert np.array_equal(bernoulli_successes(rng, 7, 1.0), np.arange(7))
