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


def test_each_alarm_run_reaches_back_to_its_own_series_change():
    # Two series (vehicles) stacked as trips: the first shifts by 1.5σ at trip 20 of 40, the
    # second never does. Every alarming trip of the first dates its change to about trip 20
    # (a step: the likelihood estimate, like Page's last zero of the CUSUM, finds it within a
    # trip or two); the second series never alarms and never reaches back into the first.
    from models.scorer import _change_rows

    rng = np.random.default_rng(4)
    u = rng.normal(0.0, 0.3, (2, 40))
    u[0, 20:] += 1.5
    hi, lo = tabular_cusum(u, k=0.5)
    alarm = (np.maximum(hi, lo) > 4.0).reshape(-1, 1)
    rows = _change_rows(u.reshape(-1, 1), (hi >= lo).reshape(-1, 1), alarm, np.repeat(["A", "B"], 40),
                        np.arange(80, dtype=float))[:, 0]
    assert alarm[:40, 0].any() and not alarm[40:, 0].any()
    assert (np.abs(rows[:40][alarm[:40, 0]] - 20) <= 1).all()
    assert (rows[~alarm[:, 0]] == 80).all()


def _least_squares_change(x, days):
    """Brute force: for Gaussian errors of known unit variance the likelihood is the least-squares
    fit, so the change point is the (model, τ) whose one-parameter fit by numpy.linalg.lstsq
    leaves the smallest residual sum of squares (Hinkley 1971, two-phase regression, from memory)."""
    best = (np.sum(x ** 2), 0)
    for j in range(len(x)):
        columns = [(np.arange(len(x)) >= j).astype(float)]  # step from value j on
        if j >= 1:
            columns.append(np.clip(days - days[j - 1], 0.0, None))  # trend after value j − 1
        for col in columns:
            coef, *_ = np.linalg.lstsq(col[:, None], x, rcond=None)
            if coef[0] <= 0:
                continue
            rss = float(np.sum((x - col * coef[0]) ** 2))
            first = int(np.argmax(col > 0))
            if rss < best[0] - 1e-9:
                best = (rss, first)
    return best[1]


def test_change_point_is_the_least_squares_step_or_trend():
    from models.drift import change_point

    rng = np.random.default_rng(11)
    for case in range(40):
        days = np.sort(rng.uniform(0.0, 20.0, 30))
        x = rng.standard_normal(30)
        if case % 2:
            x += np.where(days > 10.0, 0.3 * (days - 10.0), 0.0)
        else:
            x += np.where(days > 12.0, 1.5, 0.0)
        assert change_point(x, days) == _least_squares_change(x, days)


def test_change_point_finds_a_fault_growing_from_nothing_sooner_than_page():
    # A mean growing linearly from day 10 stays below k = 0.75 for three days, so the CUSUM's
    # last zero comes late; the likelihood estimate at the first alarm comes sooner and, over
    # many series, is not biased early. NaN trips are skipped.
    from models.drift import change_point

    rng = np.random.default_rng(5)
    page_err, ml_err = [], []
    for _ in range(200):
        days = np.sort(rng.uniform(0.0, 20.0, 60))
        x = rng.standard_normal(60) + np.where(days > 10.0, 0.25 * (days - 10.0), 0.0)
        x[::7] = np.nan
        hi, _ = tabular_cusum(x[None, :], k=0.75)
        alarm = np.flatnonzero(hi[0] > 6.0)
        if not len(alarm):
            continue
        r = int(alarm[0])
        page = int(np.flatnonzero(hi[0, :r] <= 0.0)[-1]) + 1  # the trip after the CUSUM was last zero
        page_err.append(days[page] - 10.0)
        ml_err.append(days[change_point(x[:r + 1], days[:r + 1])] - 10.0)
    assert len(ml_err) > 150
    # measured: Page's median error 3.2 days late, the likelihood estimate's 1.9 days late
    assert np.median(page_err) > 2.0
    assert 0.0 < np.median(ml_err) < np.median(page_err) - 1.0


def test_flagged_since_reaches_back_to_the_change_point_but_never_after_the_first_alert():
    import pandas as pd

    from models.scorer import run_start

    times = pd.Series(pd.date_range("2026-03-02", periods=6, freq="D", tz="UTC"))
    alert = np.array([False, False, False, True, True, True])
    since = pd.Series([pd.NaT, pd.NaT, pd.NaT, times[1], times[1], pd.NaT])
    assert run_start(times, alert, since) == times[1]
    later = pd.Series([pd.NaT] * 3 + [times[5]] * 3)
    assert run_start(times, alert, later) == times[3]
    assert run_start(times, np.array([True] * 5 + [False]), since) is None


def test_median_baseline_error_matches_simulation():
    # the sample median's asymptotic standard error σ·√(π/(2n)) (Kendall & Stuart, from memory),
    # checked against simulated medians of 10 and 30 unit-variance values; at small even n the
    # median of the two central values is a little tighter, so the formula errs on the safe side
    from models.drift import baseline_error
    rng = np.random.default_rng(3)
    for n in (10, 30):
        sim = np.median(rng.standard_normal((20000, n)), axis=1).std()
        assert sim <= baseline_error(n) <= 1.08 * sim


def test_uncorroborated_threshold_holds_the_budget_for_a_baseline_one_standard_error_off():
    from models.drift import baseline_error
    arl0 = required_arl0(17, 2.25, 1500.0)
    h, e = threshold_for_arl(0.75, arl0), baseline_error(10)
    h_sole = threshold_for_arl(0.75, arl0, shift=e)
    assert siegmund_arl_two_sided(0.75, h_sole, shift=e) >= arl0 > siegmund_arl_two_sided(0.75, h_sole - 0.05, shift=e)
    assert siegmund_arl_two_sided(0.75, h, shift=e) < arl0 / 5  # h alone would spend the budget many times over
    # by simulation: with the baseline one standard error off, nearly every series alarms at h within
    # 3,000 trips; at h_sole about as many as a run length of ARL0 implies (1 − e^(−3000/ARL0) ≈ 5 %)
    rng = np.random.default_rng(5)
    u = rng.standard_normal((400, 3000)) + e
    hi, lo = tabular_cusum(u, 0.75)
    peak = np.maximum(hi, lo).max(axis=1)
    expected = 1.0 - np.exp(-3000 / arl0)
    assert (peak > h).mean() > 0.8 and (peak > h_sole).mean() < 2.0 * expected
    assert siegmund_arl_two_sided(0.75, h_sole, shift=2.5) < 10  # a 2.5σ change is still found within days


def test_threshold_for_a_small_reference_value_does_not_overflow():
    # k = 0.25 needs h ≈ 20 for the fleet's ARL0: the downward side's exp(2|Δ|b) exceeds a float
    h = threshold_for_arl(0.25, 57_000.0)
    assert np.isfinite(h) and siegmund_arl_two_sided(0.25, h) == pytest.approx(57_000.0, rel=1e-3)
