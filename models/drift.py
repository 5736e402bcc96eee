"""Per-vehicle drift detection: two-sided tabular CUSUM on a few per-component statistics.

Why few statistics: a healthy vehicle carries every detector it runs, so
false alarms add up (DESIGN.md, "False-alarm budget"). The threshold ``h`` is
therefore derived from the fleet budget — at most one false alert per
``budget_vehicle_days`` healthy vehicle-days — through the in-control average
run length (ARL) each statistic must reach:

    ARL0 ≥ n_statistics × trips_per_day × budget_vehicle_days        (union bound)

and Siegmund's approximation of the one-sided CUSUM run length (Siegmund 1985;
as quoted in Montgomery, *Introduction to Statistical Quality Control*, from
memory), for a unit-variance statistic with mean shift δ and Δ = δ − k,
b = h + 1.166:

    ARL(δ) = (exp(−2Δb) + 2Δb − 1) / (2Δ²)        (b² when Δ = 0)

with the two-sided ARL from 1/ARL = 1/ARL⁺ + 1/ARL⁻. The approximation
reproduces the published table closely (k = 0.5, h = 4: 169 against 168; h = 5:
469 against 465), and tests check the CUSUM itself by simulation.

Uncorroborated statistics. The derivation above assumes each statistic is
centred on its true in-control mean. It is not: it is referred to the
vehicle's own baseline, a median of ``n`` trips, whose error
e ~ N(0, π/(2n)) in units of the within-vehicle spread (the sample median's
asymptotic variance πσ²/(2n); Kendall & Stuart, from memory) stays with the
series as a persistent shift. An alarm that needs a second, independent
residual to agree (models.attribution) is protected against it: two baselines
are not wrong together. An alarm raised by one residual alone is not, so its
threshold must hold the budget for a baseline off by one standard error:

    h_sole: two-sided ARL(δ = √(π/(2n))) ≥ ARL0

(``threshold_for_arl`` with ``shift``). With n = 10, k = 0.75 and
ARL0 ≈ 57,000 trips this is h ≈ 12.4 against 6.7 (the expected rate over the
whole error distribution is dominated by its tails and gives no usable
threshold: run lengths with estimated parameters are a known weakness of the
CUSUM, Jones, Champ & Rigdon 2004, from memory).
"""

from __future__ import annotations

import math

import numpy as np

#: Siegmund's correction to the threshold for the overshoot of a Gaussian walk.
SIEGMUND_OVERSHOOT = 1.166


def siegmund_arl_one_sided(k: float, h: float, shift: float) -> float:
    """Run length of a one-sided upper CUSUM for a unit-variance mean shift (see module doc)."""
    delta = shift - k
    b = h + SIEGMUND_OVERSHOOT
    if abs(delta) < 1e-12:
        return b * b
    if -2.0 * delta * b > 700.0:  # exp would overflow: a run length beyond any horizon
        return math.inf
    return (math.exp(-2.0 * delta * b) + 2.0 * delta * b - 1.0) / (2.0 * delta * delta)


def siegmund_arl_two_sided(k: float, h: float, shift: float = 0.0) -> float:
    """Two-sided tabular CUSUM run length: 1/ARL = 1/ARL⁺(δ) + 1/ARL⁻(δ) = 1/ARL⁺(δ) + 1/ARL⁺(−δ)."""
    return 1.0 / (1.0 / siegmund_arl_one_sided(k, h, shift) + 1.0 / siegmund_arl_one_sided(k, h, -shift))


def threshold_for_arl(k: float, arl0: float, shift: float = 0.0) -> float:
    """Smallest h whose two-sided ARL at a mean ``shift`` (0: in control) reaches ``arl0``
    (bisection; ARL rises with h). ``shift`` < k, else no h holds the ARL for long."""
    lo, hi = 0.0, 1.0
    while siegmund_arl_two_sided(k, hi, shift) < arl0:
        hi *= 2.0
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        if siegmund_arl_two_sided(k, mid, shift) < arl0:
            lo = mid
        else:
            hi = mid
    return hi


def baseline_error(n_baseline: int) -> float:
    """Standard error of a median of ``n_baseline`` unit-variance values: √(π/(2n)) (see module doc)."""
    return math.sqrt(math.pi / (2.0 * n_baseline))


def required_arl0(n_statistics: int, trips_per_day: float, budget_vehicle_days: float) -> float:
    """In-control ARL (in trips) each statistic needs for ≤ 1 false alert per budget (union bound)."""
    return float(n_statistics) * float(trips_per_day) * float(budget_vehicle_days)


def tabular_cusum(u: np.ndarray, k: float) -> tuple[np.ndarray, np.ndarray]:
    """Two-sided tabular CUSUM over the last axis of ``u`` (many series at once).

    C⁺_t = max(0, C⁺_{t−1} + u_t − k), C⁻_t = max(0, C⁻_{t−1} − u_t − k), alarm
    when either exceeds h (Page 1954; Montgomery's tabular form; the caller
    compares with h, so one pass serves any threshold). NaN inputs
    leave the sums unchanged (a trip that could not measure the statistic is
    no evidence either way). The loop runs over time steps only; every series
    advances together, so the cost is vectorised across vehicles.
    """
    u = np.asarray(u, dtype=float)
    hi = np.zeros_like(u)
    lo = np.zeros_like(u)
    c_hi = np.zeros(u.shape[:-1])
    c_lo = np.zeros(u.shape[:-1])
    for t in range(u.shape[-1]):
        x = u[..., t]
        ok = ~np.isnan(x)
        xs = np.where(ok, x, 0.0)
        c_hi = np.where(ok, np.maximum(0.0, c_hi + xs - k), c_hi)
        c_lo = np.where(ok, np.maximum(0.0, c_lo - xs - k), c_lo)
        hi[..., t] = c_hi
        lo[..., t] = c_lo
    return hi, lo


def simulate_arl(k: float, h: float, shift: float, n_runs: int = 4000, max_len: int = 4000,
                 rng: np.random.Generator | None = None) -> float:
    """Mean run length to the first alarm of the two-sided CUSUM on N(shift, 1), by simulation.

    Runs that never alarm within ``max_len`` are counted at ``max_len`` (choose
    it well above the expected ARL).
    """
    rng = rng or np.random.default_rng(0)
    u = rng.standard_normal((n_runs, max_len)) + shift
    hi, lo = tabular_cusum(u, k)
    fired = (hi > h) | (lo > h)
    first = np.where(fired.any(axis=1), fired.argmax(axis=1) + 1, max_len)
    return float(first.mean())


def change_point(x: np.ndarray, days: np.ndarray) -> int:
    """Index of the first changed value of a unit-variance series whose in-control mean is
    0 and whose mean has risen, by maximum likelihood over two change models.

    Why: Page's estimate (the trip after the CUSUM was last zero) suits a step;
    a fault that grows from nothing keeps its CUSUM at zero until the shift
    exceeds the reference value k, so for it Page's estimate comes late. Two
    models, each with one change point τ and one amplitude, so their likelihoods
    compare directly:

    - step (Samuel, Pignatiello & Calvin 1998, from memory): mean μ from τ on;
      log-likelihood gain (Σ_{t≥τ} x_t)² / (2 n_τ);
    - linear trend in calendar time (Perry & Pignatiello 2006, from memory):
      mean β·(d_t − d_τ′) after the last unchanged value τ′; gain
      (Σ w_t x_t)² / (2 Σ w_t²), w_t = max(0, d_t − d_τ′).

    Only rising changes count (amplitude > 0): orient ``x`` to the alarming
    side first. NaN values are no evidence and are skipped.
    """
    x = np.asarray(x, dtype=float)
    days = np.asarray(days, dtype=float)
    ok = np.flatnonzero(~np.isnan(x))
    if len(ok) == 0:
        return 0
    xs, ds = x[ok], days[ok]
    n = len(xs)
    tail = np.cumsum(xs[::-1])[::-1]  # Σ_{t≥j} x_t
    step = np.where(tail > 0, tail ** 2 / np.arange(n, 0, -1), 0.0)
    best_gain, best = float(step.max()), int(step.argmax())
    if n > 1:
        w = np.clip(ds[None, :] - ds[:-1, None], 0.0, None)  # row j−1: the ramp after value j−1
        num, den = w @ xs, (w * w).sum(axis=1)
        ramp = np.where((num > 0) & (den > 0), num ** 2 / np.where(den > 0, den, 1.0), 0.0)
        j = int(ramp.argmax())
        if ramp[j] > best_gain:
            best = int(np.argmax(w[j] > 0))  # the first value the ramp reaches
    return int(ok[best])
