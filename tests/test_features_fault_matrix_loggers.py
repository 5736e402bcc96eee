"""The fault × feature matrix per logger kind: where the kind carries a fault's signals, the fault
moves its own features, pinned to the right wheel, and nothing else.

tests/test_features_fault_matrix.py holds the matrix for bus capture (its
expectations, side-effect bounds, confounders and margins are imported here,
not restated). A polled logger reads far fewer, coarser and sometimes stale
values, so some features cannot be computed from its log at all: the gates
(features.gating) make them NaN with a reason. The matrix then reads, per kind:

* a feature a fault must move, and that the kind computes on the healthy
  reference trip, moves by the bus matrix's MARGIN healthy spreads of *this*
  kind (its own healthy trips' spread: quantisation widens it), and a
  pinned family moves most on the fault's wheel;
* a feature the kind cannot compute is NaN on both trips, with a gate reason
  or for lack of qualifying data (a coarse log may find no straight cruise);
* every other feature stays within the kind's healthy spread, or is NaN with a
  gate reason, or loses its qualifying data (too_little_*, no_*), as in the bus
  matrix; a physical side effect the bus matrix bounds stays within that bound
  or this kind's healthy spread, whichever is larger.

A telematics unit logs no chassis sensor: every sensor feature is NaN with
``signal_missing``, faulty or not.

The loggers are the tuning configuration's polled ones (synthetic_fleet.config
DEFAULT): 5 Hz in 0.1 km/h steps, and 2 Hz in 1 km/h steps (slow: a second
full matrix). The vehicles, trips and confounders are the bus matrix's, logged
by another kind: a polled trip of ≤ 10 rows/s costs a fraction of a bus one.
Its healthy spread is this kind's own, never below bus capture's.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np
import pandas as pd
import pytest

import synthetic_fleet
from features.extract import FEATURE_COLUMNS, extract_trip_features
from features.row import parse_nan_reasons
import test_features_fault_matrix as bus
from test_features_fault_matrix import (CASES, DURATION_S, FLEET_SHARE, HEALTHY_SETS, MARGIN, ON, VEHICLE_SEEDS, bounded,
                                        expectation, faulty_args, per_wheel)
from tracktrue.schema import POSITIONS

#: (logger kind, rows per second, wheel-speed step km/h or None for the kind's default)
POLLED_FINE = ("polled", 5.0, 0.1)
POLLED_COARSE = ("polled", 2.0, 1.0)
TELEMATICS = ("telematics", 1.0, None)
#: The reasons a gate gives when a log cannot carry a feature (features.gating module docstring).
GATE_REASONS = frozenset({"signal_missing", "resolution_too_coarse", "rate_too_low", "stale_values"})
WHEEL_FEATURES = tuple(f for f in FEATURE_COLUMNS if f.startswith("wheel_"))


@lru_cache(maxsize=None)
def trip_row(logger: tuple, seed: int, fault: str | None, confounders: tuple[str, ...]) -> dict:
    kind, rate_hz, step_kph = logger
    samples, spec = synthetic_fleet.trip_samples(seed=seed, fault=fault, confounders=confounders,
                                                 duration_s=DURATION_S, logger_kind=kind, rate_hz=rate_hz,
                                                 wheel_step_kph=step_kph)
    row = extract_trip_features(samples, spec)
    assert row["logger_kind"] == kind  # the gates infer the kind from the log alone
    return row


def features(logger: tuple, *args) -> pd.Series:
    return pd.Series(trip_row(logger, *args))[list(FEATURE_COLUMNS)].astype(float)


def reasons(logger: tuple, *args) -> dict[str, str]:
    return parse_nan_reasons(trip_row(logger, *args)["nan_reasons"])


@lru_cache(maxsize=None)
def healthy(logger: tuple) -> dict[int, pd.DataFrame]:
    return {s: pd.DataFrame([features(logger, s, None, c) for c in HEALTHY_SETS]) for s in VEHICLE_SEEDS}


@lru_cache(maxsize=None)
def healthy_spread(logger: tuple) -> pd.Series:
    """The bus matrix's healthy spread measured on this logger's trips, but never below bus capture's.

    A coarser log of the same trips cannot make the confounders move a feature
    less; where a feature is computed on only a few of the healthy trips (a
    stale gate that a rough road's changing speeds open), its own spread
    would miss the confounders that closed the gate.
    """
    rows = healthy(logger)
    per_vehicle = pd.concat([h.max() - h.min() for h in rows.values()], axis=1).max(axis=1)
    fleet = pd.concat(rows.values())
    own = np.maximum(per_vehicle, FLEET_SHARE * (fleet.max() - fleet.min()))
    return np.fmax(own, bus.healthy_spread())


def lost_data(reason: str) -> bool:
    """A reason that says the trip had too little qualifying data (too_little_*, no_standstill,
    no_straight_cruise): a fault may cost a feature its data, as in the bus matrix, never move it."""
    return reason.startswith(("too_little", "no_"))


def matrix_problems(logger: tuple, case: str) -> list[str]:
    """Everything in ``case``'s row of the matrix that does not hold for ``logger`` (module docstring)."""
    spread = healthy_spread(logger)
    respond, may_move, pinned = expectation(case)
    limits = bounded(case)
    problems = []
    for seed in VEHICLE_SEEDS:
        fault_args, ref_args = faulty_args(case, seed), (seed, None, ON)
        faulty, reference = features(logger, *fault_args), features(logger, *ref_args)
        ref_reasons, fault_reasons = reasons(logger, *ref_args), reasons(logger, *fault_args)
        delta = (faulty - reference).abs()
        for f in respond:
            if np.isnan(reference[f]):
                if not all(why in GATE_REASONS or lost_data(why)
                           for why in (ref_reasons.get(f, ""), fault_reasons.get(f, ""))):
                    problems.append(f"seed {seed}: {f} cannot respond but has no gate reason "
                                    f"({ref_reasons.get(f)} -> {fault_reasons.get(f)})")
            elif not delta[f] >= MARGIN * spread[f]:
                problems.append(f"seed {seed}: {f} moved {delta[f]:.4g}, needs {MARGIN}×{spread[f]:.4g}"
                                f" ({fault_reasons.get(f, 'finite')})")
        if pinned and np.isfinite(reference[per_wheel(*pinned)]):
            family, pos = pinned
            moves = {p: delta[per_wheel(family, p)] for p in POSITIONS}
            if max(moves, key=lambda p: np.nan_to_num(moves[p], nan=-1.0)) != pos:
                problems.append(f"seed {seed}: {family} moved most on the wrong wheel {moves}")
        for f, (against, share) in limits.items():
            target_fault, target_ref = features(logger, *faulty_args(against, seed)), reference
            # the bus matrix's physical bound, or this log's healthy spread where that is coarser
            # (the smallest movement the kind resolves: the "stay within healthy spread" rule)
            allowed = max(share * abs(target_fault[f] - target_ref[f]), spread[f])
            if not (np.isnan(faulty[f]) or delta[f] <= allowed):
                problems.append(f"seed {seed}: {f} moved {delta[f]:.4g} > {share} × the {against} fault's move")
        h = healthy(logger)[seed]
        flaky = h.isna().any() & ~h.isna().all()
        for f in FEATURE_COLUMNS:
            if f in respond or f in may_move or f in limits:
                continue
            if np.isnan(faulty[f]):
                why = fault_reasons.get(f, "")
                if not (why in GATE_REASONS or lost_data(why) or ref_reasons.get(f) == why
                        or flaky[f]):
                    problems.append(f"seed {seed}: {f} became NaN ({why}) where the reference "
                                    f"is {reference[f]} ({ref_reasons.get(f, 'finite')})")
            elif np.isnan(reference[f]):
                if not flaky[f]:
                    problems.append(f"seed {seed}: {f} = {faulty[f]:.4g} where the healthy reference is NaN "
                                    f"({ref_reasons.get(f)})")
            elif case in synthetic_fleet.FAULTS and delta[f] > spread[f]:
                problems.append(f"seed {seed}: {f} moved {delta[f]:.4g} > healthy spread {spread[f]:.4g}")
            elif case not in synthetic_fleet.FAULTS and max(h[f].min() - faulty[f], faulty[f] - h[f].max()) > spread[f]:
                problems.append(f"seed {seed}: {f} = {faulty[f]:.4g} is outside the vehicle's healthy values "
                                f"[{h[f].min():.4g}, {h[f].max():.4g}] by more than the spread {spread[f]:.4g}")
    return problems


@pytest.mark.parametrize("case", CASES)
def test_polled_fault_moves_what_the_log_carries_pinned_to_its_wheel_and_nothing_else(case):
    problems = matrix_problems(POLLED_FINE, case)
    assert not problems, "\n".join(problems)


@pytest.mark.slow
@pytest.mark.parametrize("case", CASES)
def test_coarse_polled_fault_moves_what_the_log_carries_pinned_to_its_wheel_and_nothing_else(case):
    problems = matrix_problems(POLLED_COARSE, case)
    assert not problems, "\n".join(problems)


@pytest.mark.parametrize("logger", [POLLED_FINE, POLLED_COARSE], ids=["polled_5hz_0.1kph", "polled_2hz_1kph"])
@pytest.mark.parametrize("fault", ["yaw_offset", "yaw_gain"])
def test_a_yaw_sensor_fault_moves_no_wheel_feature_in_a_polled_log(logger, fault):
    spread = healthy_spread(logger)[list(WHEEL_FEATURES)]
    for seed in VEHICLE_SEEDS:
        faulty = features(logger, seed, fault, ON)[list(WHEEL_FEATURES)]
        reference = features(logger, seed, None, ON)[list(WHEEL_FEATURES)]
        # the same wheel features are computed, and the computed ones do not move
        assert (faulty.isna() == reference.isna()).all(), (seed, faulty[faulty.isna() != reference.isna()])
        moved = (faulty - reference).abs().dropna()
        assert (moved <= spread[moved.index]).all(), (seed, moved[moved > spread[moved.index]])


@pytest.mark.parametrize("logger", [POLLED_FINE, POLLED_COARSE], ids=["polled_5hz_0.1kph", "polled_2hz_1kph"])
def test_a_polled_log_still_carries_the_wheel_ratios_and_dropouts_and_says_why_the_rest_is_missing(logger):
    # The matrix would hold vacuously if a polled log computed nothing. Averaged over a trip's
    # distance, a wheel's ratio beats a 1 km/h step by √n (Widrow & Kollár, Quantization Noise,
    # 2008: the error of a quantiser crossing steps is uniform, q/√12, independent per value),
    # and a wheel reading zero stays distinguishable at any step up to 0.3 m/s (features.gating's
    # design choice: half a step within half of DROPOUT_ZERO_MPS): both must stay computed.
    carried = [per_wheel(family, p) for family in ("ratio", "dropouts") for p in POSITIONS]
    for seed in VEHICLE_SEEDS:
        for confounders in HEALTHY_SETS:
            row = features(logger, seed, None, confounders)
            assert row[carried].notna().all(), (seed, confounders, row[carried])
            why = reasons(logger, seed, None, confounders)
            assert set(row.index[row.isna()]) <= set(why), (seed, confounders, why)


@pytest.mark.parametrize("case", ["tone_ring_fl", "air_gap_rr", "yaw_offset", "tyre_deflation_rl", None])
def test_a_telematics_log_has_every_sensor_feature_nan_for_a_missing_signal(case):
    for seed in VEHICLE_SEEDS:
        args = faulty_args(case, seed) if case else (seed, None, ON)
        row = features(TELEMATICS, *args)
        assert row.isna().all(), row[row.notna()]
        why = reasons(TELEMATICS, *args)
        assert {f: why.get(f) for f in FEATURE_COLUMNS} == dict.fromkeys(FEATURE_COLUMNS, "signal_missing")
