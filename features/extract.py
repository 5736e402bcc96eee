"""The per-trip feature row: a pure function of (trip samples, vehicle spec).

No file access and no state, so it runs unchanged on one core, in a pool or on
Dask partitions (DESIGN.md).
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
import pandas as pd

from features.accel import (
    accel_long_residual_feature,
    accel_rest_features,
    lat_residual_feature,
    lat_scale_witness,
    wheel_accel_features,
)
from features.columns import SampleColumns, n_rows, sample_columns
from features.gating import GATING_COLUMNS, gate_features
from features.row import FeatureRow
from features.signals import TripArrays, seconds, trip_arrays
from features.spec import VehicleSpec
from features.wheels import (
    calibrate,
    trip_distance_km,
    wheel_dropout_features,
    wheel_jitter_features,
    wheel_onset_features,
    wheel_ratio_features,
)
from features.windows import find_windows
from features.yaw import (
    steer_center_feature,
    steer_yaw_residual_feature,
    steering_fit_sums,
    yaw_regression_features,
    yaw_rest_feature,
)
from tracktrue.units import DEG_RAD
from tracktrue.schema import CORE_FEATURES, NUMERIC_SIGNALS, POSITIONS, QUALITY_COLUMNS

#: Features beyond DESIGN.md's table.
EXTRA_FEATURES: tuple[str, ...] = (*(f"wheel_accel_disagree_{p}_g" for p in POSITIONS),
                                   *(f"wheel_onset_{p}_mps" for p in POSITIONS))
FEATURE_COLUMNS: tuple[str, ...] = (*CORE_FEATURES, *EXTRA_FEATURES)
RESOLUTION_COLUMNS: tuple[str, ...] = tuple(f"resolution_{s}" for s in NUMERIC_SIGNALS)
#: Per-trip sums for estimating a platform's steering ratio and understeer (features.platform_params).
STEERFIT_COLUMNS: tuple[str, ...] = (
    "steerfit_rr", "steerfit_rrv2", "steerfit_rrv4", "steerfit_rvs", "steerfit_rv3s", "steerfit_s",
)
#: Witnesses for models/ that are not model features: the wheels' common speed scale (features.accel).
SCALE_COLUMNS: tuple[str, ...] = ("scale_ay_per_vr",)
#: What the on-board monitor said during the trip (models/ tells lamp events from interventions).
LAMP_COLUMNS: tuple[str, ...] = ("lamp_abs_on", "lamp_esc_on", "dtc")
#: Every column extract_trip_features returns, in order.
ROW_COLUMNS: tuple[str, ...] = (
    *FEATURE_COLUMNS, *QUALITY_COLUMNS, "signals", *GATING_COLUMNS, *RESOLUTION_COLUMNS, *LAMP_COLUMNS,
    *STEERFIT_COLUMNS, *SCALE_COLUMNS, "nan_reasons",
)
#: Signals whose missing samples count towards missing_fraction (when logged at all).
CORE_SIGNALS: tuple[str, ...] = tuple(s for s in NUMERIC_SIGNALS if s != "vehicle_speed")


def extract_trip_features(samples: pd.DataFrame | SampleColumns, spec: Mapping) -> dict[str, object]:
    """One trip's feature row (ROW_COLUMNS) from its canonical samples and its vehicle's spec.

    ``samples``: one trip, columns of tracktrue.schema.SAMPLE_COLUMNS, SI units, as a
    DataFrame or as features.columns arrays (what the batch engines slice from Parquet).
    ``spec``: registry columns (wheelbase_m, track_front_m, track_rear_m,
    steering_ratio, understeer_gradient_deg_per_g); missing values make the
    features that need them NaN with ``spec_missing:<column>``.
    """
    vehicle = VehicleSpec.from_mapping(spec)
    columns = sample_columns(samples)
    row = FeatureRow()
    if n_rows(columns) < 2:
        row.nan_all(FEATURE_COLUMNS, "too_few_samples")
        out = row.as_dict()
        out.update(_empty_quality())
        out.update(_lamps(columns))
        out.update(gate_features(row, trip_arrays(columns), vehicle))
        return {c: out.get(c, np.nan) for c in ROW_COLUMNS}
    trip = trip_arrays(columns)
    windows = find_windows(trip, vehicle)
    # a speed-only (telematics) log has no wheel speeds: its distance comes from the vehicle speed
    speed = windows.speed if np.isfinite(windows.speed).any() else trip.signals["vehicle_speed"]
    distance_km = trip_distance_km(trip, speed)
    ref = calibrate(trip, vehicle, windows)

    wheel_ratio_features(row, trip, vehicle, windows, ref)
    wheel_jitter_features(row, trip, windows)
    wheel_dropout_features(row, trip, distance_km)
    wheel_onset_features(row, trip)
    yaw_rest_feature(row, trip, windows)
    yaw_regression_features(row, trip, vehicle, windows, ref)
    steer_center_feature(row, trip, windows)
    steer_yaw_residual_feature(row, trip, vehicle, windows, ref, row.values["steer_center_deg"] * DEG_RAD)
    accel_rest_features(row, trip, windows)
    accel_long_residual_feature(row, trip, windows)
    lat_residual_feature(row, trip, vehicle, windows, ref)
    wheel_accel_features(row, trip, windows, ref)
    gating = gate_features(row, trip, vehicle)

    out = row.as_dict()
    out.update(gating)
    out.update(_quality(trip, windows, distance_km))
    out.update(_lamps(columns))
    out.update(steering_fit_sums(trip, vehicle, windows))
    out.update(lat_scale_witness(trip, vehicle, windows, ref))
    return {c: out[c] for c in ROW_COLUMNS}


def _quality(trip: TripArrays, windows, distance_km: float) -> dict[str, object]:
    """Quality columns: how much to trust the row (DESIGN.md feature table, last line)."""
    present = [trip.missing[s] for s in CORE_SIGNALS if trip.has(s)]
    missing = float(np.mean(present)) if present else 1.0
    out: dict[str, object] = {
        "duration_s": float(trip.t[-1] - trip.t[0]),
        "distance_km": distance_km,
        "sample_rate_hz": float(trip.rate_hz),
        "missing_fraction": missing,
        "standstill_s": seconds(windows.standstill, trip),
        "cruise_s": seconds(windows.cruise, trip),
        "moving_s": seconds(windows.moving, trip),
        "signals": ",".join(s for s in (*NUMERIC_SIGNALS, "brake") if trip.has(s)),
    }
    out.update({f"resolution_{s}": trip.resolution[s] for s in NUMERIC_SIGNALS})
    return out


def _lamps(columns: SampleColumns) -> dict[str, object]:
    """Whether each lamp was lit at any sample, and the distinct trouble codes ("" when none)."""
    out: dict[str, object] = {}
    for name in ("lamp_abs", "lamp_esc"):
        out[f"{name}_on"] = bool(columns[name].any()) if name in columns else False
    codes = columns.get("dtc")
    codes = pd.unique(codes[pd.notna(codes)]) if codes is not None else []
    out["dtc"] = ",".join(sorted(str(c) for c in codes if str(c).strip()))
    return out


def _empty_quality() -> dict[str, object]:
    unknown = (*QUALITY_COLUMNS, *RESOLUTION_COLUMNS, *STEERFIT_COLUMNS, *SCALE_COLUMNS)
    out: dict[str, object] = dict.fromkeys(unknown, np.nan)
    out.update({"duration_s": 0.0, "distance_km": 0.0, "missing_fraction": 1.0,
                "standstill_s": 0.0, "cruise_s": 0.0, "moving_s": 0.0, "signals": ""})
    return out
