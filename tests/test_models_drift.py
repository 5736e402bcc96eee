"""Drift detector: tabular CUSUM run lengths against the published table, threshold from the budget."""

from __future__ import annotations

import numpy as np
import pytest

from models.drift import (required_arl0, siegmund_arl_two_sided, simulate_arl, tabular_cusum,
                          threshold_for_arl)

# Two-sided tabular CUSUM, k = 0.5 (CHECKS.md: Lucas & Crosier 1982 Table 1 / Montgomery,
# *Introduction to Statistical Quality Control* — from memory; the table's number varies by edition):
# h = 4 → ARL 168 in control, 8.38 at a 1σ shift; h = 5 → 465 and 10.4.
PUBLISHED = [(4.0, 0.0, 168.0), (4.0, 1.0, 8.38), (5.0, 0.0, 465.0), (5.0, 1.0, 10.4)]


@pytest.mark.parametrize("h,shift,arl", PUBLISHED)
def test_simulated_cusum_run_length_matches_published_table(h, shift, arl):
    rng = np.random.default_rng(int(10 * h + shift))
    max_len = 40 if shift else int(7 * arl)  # far above the ARL: P(censored) ≈ e^-7, negligible
    got = simulate_arl(0.5, h, shift, n_runs=2500, max_len=max_len, rng=rng)
    # Monte-Carlo standard error ≈ ARL/√2500 ≈ 2 %; allow 7 % (table rounding and simulation)
    assert got == pytest.approx(arl, rel=0.07)


@pytest.mark.parametrize("h,shift,arl", PUBLISHED)
def test_siegmund_approximation_reproduces_published_table(h, shift, arl):
    assert siegmund_arl_two_sided(0.5, h, shift) == pytest.approx(arl, rel=0.03)


def test_threshold_from_false_alarm_budget_reaches_required_run_length():
    # ≤ 1 false alert per 1,500 healthy vehicle-days, 16 statistics, 4 trips a day (DESIGN.md budget)
    arl0 = required_arl0(16, 4.0, 1500.0)
    assert arl0 == 96_000
    h = threshold_for_arl(0.75, arl0)
    assert siegmund_arl_two_sided(0.75, h) >= arl0
    assert siegmund_arl_two_sided(0.75, h - 0.05) < arl0
    assert siegmund_arl_two_sided(0.75, h, shift=2.0) < 10  # a 2σ change is still found within days


def test_missing_trip_leaves_both_sums_unchanged():
    u = np.array([[2.0, np.nan, 2.0, -3.0]])
    hi, lo = tabular_cusum(u, k=0.5)
    np.testing.assert_allclose(hi[0], [1.5, 1.5, 3.0, 0.0])
    np.testing.assert_allclose(lo[0], [0.0, 0.0, 0.0, 2.5])
