"""Vehicle registry import (``--vehicles vehicles.csv``).

Required columns: vehicle_id, platform, wheelbase_m, track_front_m,
track_rear_m, steering_ratio (blank or absent: estimated per platform), tyre_radius_m; optional:
understeer_gradient_deg_per_g, depot, vin, next_service_date (YYYY-MM-DD,
which the inspection plan uses to combine an inspection with a service). A row with a problem is not
loaded and is reported (file, 1-based line, problem) in ``rejects``; the
other rows load or update the registry. A file that lacks a required column
or cannot be read at all is a usage error.

Headers are read as a spreadsheet may write them (``registry_column``): any
case, spaces or hyphens for underscores, ``tire`` for ``tyre``, and a length in
m, cm, mm, inches or feet, either as the name's last word (``wheelbase_mm``) or in
brackets (``Wheelbase (mm)``); lengths are stored in metres.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from ingest.grammar import split_unit, vocabulary_key
from ingest.reader import clean_text, parse_rows, read_keyed_csv, to_float
from tracktrue.errors import UserError
from tracktrue.schema import REGISTRY_OPTIONAL, REGISTRY_REQUIRED
from tracktrue.vin import vin_problem

#: Registry columns that may be left blank or out: the features stage estimates a platform's
#: steering ratio from its trips (features.platform_params) and marks it estimated.
ESTIMATED_WHEN_BLANK: frozenset[str] = frozenset({"steering_ratio"})

#: Plausible ranges for road vehicles from a small car to a long coach or
#: tractor unit (common practice; outside them a value is a typo or a wrong unit).
PLAUSIBLE: dict[str, tuple[float, float]] = {
    "wheelbase_m": (1.5, 8.0),
    "track_front_m": (0.9, 2.7),
    "track_rear_m": (0.9, 2.7),
    "steering_ratio": (8.0, 35.0),
    "tyre_radius_m": (0.2, 0.7),
    "understeer_gradient_deg_per_g": (-2.0, 12.0),
}
_TEXT_COLUMNS = ("vehicle_id", "platform", "depot", "vin", "next_service_date")
#: Length units a registry header may give, in metres (1 in = 0.0254 m, 1 ft = 0.3048 m exactly:
#: NIST SP 811, appendix B).
LENGTH_UNITS: dict[str, float] = {"m": 1.0, "cm": 0.01, "mm": 0.001, "in": 0.0254, "inch": 0.0254, "inches": 0.0254,
                                "ft": 0.3048}


def registry_column(header: str) -> tuple[str, float]:
    """(the registry column a header names, factor from its unit to the column's), module docstring."""
    name, unit = split_unit(header)
    key = vocabulary_key(name)
    if unit is None and (m := re.match(r"^(.*)_(m|cm|mm|in|inch|inches|ft)$", key)) and f"{m[1]}_m" in PLAUSIBLE:
        key, unit = m[1], m[2]
    unit = unit.strip().lower() if unit else None
    if unit in LENGTH_UNITS and f"{key}_m" in PLAUSIBLE:
        return f"{key}_m", LENGTH_UNITS[unit]
    return key, 1.0


@dataclass
class RegistryResult:
    path: str
    loaded: int = 0
    rejects: list[tuple[int, str]] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)


def read_registry(path: Path) -> tuple[pd.DataFrame, RegistryResult]:
    """Validated registry rows (one per vehicle_id) and what was rejected."""
    result = RegistryResult(str(path))
    needed = tuple(c for c in REGISTRY_REQUIRED if c not in ESTIMATED_WHEN_BLANK)
    log, index = read_keyed_csv(path, "vehicle registry", needed, (*sorted(ESTIMATED_WHEN_BLANK), *REGISTRY_OPTIONAL),
                                canonical=lambda h: registry_column(h)[0])
    factor = {c: registry_column(log.header[i])[1] for c, i in index.items()}
    numeric = [index[c] for c in PLAUSIBLE if c in index]
    text = [index[c] for c in _TEXT_COLUMNS if c in index]
    parsed = parse_rows(log, numeric, text)
    result.rejects.extend(parsed.structural_rejects)
    n = len(parsed.lines)
    problems: list[list[str]] = [[] for _ in range(n)]
    data: dict[str, object] = {}
    for c in _TEXT_COLUMNS:
        data[c] = clean_text(parsed.columns[index[c]]).to_pylist() if c in index else [None] * n
    for i in np.flatnonzero(pd.isna(pd.Series(data["vehicle_id"], dtype=object)).to_numpy()):
        problems[i].append("vehicle_id is empty")
    for i in np.flatnonzero(pd.isna(pd.Series(data["platform"], dtype=object)).to_numpy()):
        problems[i].append("platform is empty")
    for c, (lo, hi) in PLAUSIBLE.items():
        if c not in index:
            data[c] = np.full(n, np.nan)
            continue
        values, bad = to_float(parsed.columns[index[c]], log.delimiter != ",")
        values = values * factor[c]
        data[c] = values
        required = c in REGISTRY_REQUIRED and c not in ESTIMATED_WHEN_BLANK
        for i in np.flatnonzero(bad):
            problems[i].append(f"{c} is not a number")
        for i in np.flatnonzero(~bad & np.isnan(values) & required):
            problems[i].append(f"{c} is empty")
        with np.errstate(invalid="ignore"):
            out = np.flatnonzero(~np.isnan(values) & ~((values >= lo) & (values <= hi)))
        for i in out:
            in_mm = c.endswith("_m") and lo <= values[i] / 1000 <= hi
            unit = " (millimetres? the column is in metres)" if in_mm else ""
            problems[i].append(f"{c} = {values[i]:g} is outside the plausible range {lo:g}..{hi:g}{unit}")
    service = pd.Series(data["next_service_date"], dtype=object)
    dates = pd.to_datetime(service, format="%Y-%m-%d", errors="coerce")
    for i in np.flatnonzero((service.notna() & dates.isna()).to_numpy()):
        problems[i].append(f"next_service_date {service[i]!r} is not a date (YYYY-MM-DD)")
    data["next_service_date"] = dates.dt.date.where(dates.notna(), None).to_numpy(dtype=object)
    ids = data["vehicle_id"]
    first_line: dict[str, int] = {}
    for i, vid in enumerate(ids):
        if vid is None:
            continue
        if vid in first_line:
            problems[i].append(f"vehicle_id {vid!r} already given on line {first_line[vid]}")
        else:
            first_line[vid] = int(parsed.lines[i])
    for i, vin in enumerate(data["vin"]):
        if vin is not None and (p := vin_problem(vin)):
            result.warnings.append(f"{path} line {parsed.lines[i]}: {p}")
    ok = np.array([not p for p in problems], bool)
    result.rejects.extend((int(parsed.lines[i]), "; ".join(problems[i])) for i in np.flatnonzero(~ok))
    result.rejects.sort()
    df = pd.DataFrame({c: np.asarray(data[c], dtype=object if c in _TEXT_COLUMNS else float)[ok]
                       for c in (*REGISTRY_REQUIRED, *REGISTRY_OPTIONAL)})
    df["spec_source"] = "registry"
    result.loaded = len(df)
    return df, result


def upsert_registry(con, df: pd.DataFrame) -> None:
    """Insert or update registry rows; a VIN seen in logs stays when the registry gives none."""
    if df.empty:
        return
    cols = [*REGISTRY_REQUIRED, *REGISTRY_OPTIONAL, "spec_source"]
    con.register("_registry", df[cols])
    sets = ", ".join(f'"{c}" = excluded."{c}"' for c in cols if c not in ("vehicle_id", "vin"))
    con.execute(
        f"INSERT INTO vehicles ({', '.join(cols)}) SELECT {', '.join(cols)} FROM _registry "
        f"ON CONFLICT (vehicle_id) DO UPDATE SET {sets}, vin = COALESCE(excluded.vin, vehicles.vin)"
    )
    con.unregister("_registry")
