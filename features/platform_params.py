"""Platform steering parameters: from the registry where given, else estimated from the trips.

The single-track model r = v·δ_sw/(n·L·(1 + K·v²)) needs a platform's
steering ratio n and understeer gradient. Rearranged, r·(n·L) + r·v²·(n·L·K)
= v·δ_sw is linear in a = n·L and b = n·L·K, so each trip contributes least
squares sums (features.yaw.steering_fit_sums). The sums are pooled per
vehicle and the platform value is the median over its vehicles, so one
vehicle with a faulty yaw or steering sensor cannot set the platform's value.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from features.extract import STEERFIT_COLUMNS
from tracktrue.units import DEG_RAD, G0_MPS2

PARAMETERS: tuple[str, ...] = ("steering_ratio", "understeer_gradient_deg_per_g")
PLATFORM_SPECS_COLUMNS: tuple[str, ...] = ("platform", "parameter", "value", "estimated", "n_trips")
#: Turning seconds a vehicle needs before its pooled estimate counts.
MIN_TURNING_S_PER_VEHICLE = 30.0
#: 1 − (correlation of r and r·v²)² below this: the turns' speeds are too alike.
MIN_RELATIVE_DETERMINANT = 0.01


def registry_values(vehicles: pd.DataFrame) -> dict[tuple[str, str], float]:
    """(platform, parameter) → median registry value over the platform's vehicles (absent if none)."""
    out = {}
    if vehicles.empty or "platform" not in vehicles:
        return out
    for platform, group in vehicles.dropna(subset=["platform"]).groupby("platform"):
        for parameter in PARAMETERS:
            values = pd.to_numeric(group.get(parameter), errors="coerce").dropna() if parameter in group else []
            if len(values):
                out[(platform, parameter)] = float(np.median(values))
    return out


def platforms_needing_estimates(vehicles: pd.DataFrame) -> set[str]:
    known = registry_values(vehicles)
    platforms = set(vehicles["platform"].dropna()) if "platform" in vehicles else set()
    return {p for p in platforms if any((p, q) not in known for q in PARAMETERS)}


def _solve(sums: pd.Series, wheelbase_m: float, known: dict[str, float]) -> dict[str, float]:
    """Least-squares n and K_us (deg/g) from one vehicle's pooled sums, holding known values fixed."""
    rr, rrv2, rrv4, rvs, rv3s = (sums[c] for c in STEERFIT_COLUMNS[:5])
    n_known = known.get("steering_ratio")
    k_known = known.get("understeer_gradient_deg_per_g")
    if n_known is not None:
        a = n_known * wheelbase_m
        b = (rv3s - a * rrv2) / rrv4
    elif k_known is not None:
        k = k_known * DEG_RAD / (G0_MPS2 * wheelbase_m)
        a = (rvs + k * rv3s) / (rr + 2 * k * rrv2 + k * k * rrv4)
        b = a * k
    else:
        det = rr * rrv4 - rrv2 * rrv2
        if not det > MIN_RELATIVE_DETERMINANT * rr * rrv4:
            return {}  # turns at one speed only: n and K cannot be told apart
        a = (rvs * rrv4 - rrv2 * rv3s) / det
        b = (rr * rv3s - rrv2 * rvs) / det
    if not (a > 0 and math.isfinite(b)):
        return {}
    k_s2pm2 = b / a
    return {"steering_ratio": a / wheelbase_m,
            "understeer_gradient_deg_per_g": k_s2pm2 * G0_MPS2 * wheelbase_m / DEG_RAD}


def platform_specs(vehicles: pd.DataFrame, trip_features: pd.DataFrame) -> pd.DataFrame:
    """Table platform_specs: registry values (estimated False) and estimates (estimated True).

    ``trip_features`` needs vehicle_id, platform and the steerfit_* columns.
    A parameter that cannot be estimated (too little turning) is absent, and
    the features that need it stay NaN with ``spec_missing:<parameter>``.
    """
    known = registry_values(vehicles)
    rows = [{"platform": p, "parameter": q, "value": v, "estimated": False, "n_trips": 0}
            for (p, q), v in sorted(known.items())]
    wheelbase = vehicles.set_index("vehicle_id")["wheelbase_m"] if "wheelbase_m" in vehicles else pd.Series()
    for platform in sorted(platforms_needing_estimates(vehicles)):
        fixed = {q: known[(platform, q)] for q in PARAMETERS if (platform, q) in known}
        trips = trip_features[(trip_features["platform"] == platform)].dropna(subset=list(STEERFIT_COLUMNS))
        per_vehicle = trips.groupby("vehicle_id")[list(STEERFIT_COLUMNS)].sum()
        counts = trips.groupby("vehicle_id").size()
        estimates, used = [], 0
        for vehicle_id, sums in per_vehicle.iterrows():
            base = pd.to_numeric(pd.Series([wheelbase.get(vehicle_id)]), errors="coerce").iloc[0]
            if sums["steerfit_s"] < MIN_TURNING_S_PER_VEHICLE or not base > 0:
                continue
            solved = _solve(sums, float(base), fixed)
            if solved:
                estimates.append(solved)
                used += int(counts[vehicle_id])
        for q in PARAMETERS:
            if q in fixed or not estimates:
                continue
            rows.append({"platform": platform, "parameter": q,
                         "value": float(np.median([e[q] for e in estimates])), "estimated": True, "n_trips": used})
    return pd.DataFrame(rows, columns=list(PLATFORM_SPECS_COLUMNS)).astype(
        {"value": float, "estimated": bool, "n_trips": "int64"})


def filled_spec(vehicle: dict, specs: pd.DataFrame) -> dict:
    """A vehicle's registry row with missing steering parameters taken from its platform's values."""
    out = dict(vehicle)
    platform = out.get("platform")
    for q in PARAMETERS:
        value = pd.to_numeric(pd.Series([out.get(q)]), errors="coerce").iloc[0]
        if pd.isna(value) and platform is not None and not pd.isna(platform):
            hit = specs[(specs["platform"] == platform) & (specs["parameter"] == q)]
            if len(hit):
                out[q] = float(hit["value"].iloc[0])
    return out
