"""Canonical samples as plain numpy columns, from a DataFrame or straight from a Parquet (Arrow) table.

The per-trip function works on arrays. Converting a whole sample part file
once and slicing it per trip costs a fraction of building one pandas frame
per trip, which is what the batch engines do; tests and notebooks can still
hand over a DataFrame. Both paths give the same arrays:

* ``time``: int64 nanoseconds since the epoch (UTC);
* numeric signals and ``brake``: float64, missing = NaN (brake 1.0 pressed, 0.0 released);
* ``lamp_abs``, ``lamp_esc``: bool, missing = False;
* ``dtc``: object array of codes, missing = None.

A column the samples lack is absent from the mapping.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from tracktrue.schema import NUMERIC_SIGNALS

FLOAT_COLUMNS: tuple[str, ...] = (*NUMERIC_SIGNALS, "brake")
LAMP_COLUMNS: tuple[str, ...] = ("lamp_abs", "lamp_esc")
#: Every column the features read, besides trip_id.
FEATURE_INPUTS: tuple[str, ...] = ("time", *FLOAT_COLUMNS, *LAMP_COLUMNS, "dtc")

SampleColumns = Mapping[str, np.ndarray]


def sample_columns(samples: pd.DataFrame | pa.Table | SampleColumns) -> dict[str, np.ndarray]:
    """The feature inputs of ``samples`` as numpy columns (module docstring)."""
    if isinstance(samples, pa.Table):
        return table_columns(samples)
    if isinstance(samples, pd.DataFrame):
        return frame_columns(samples)
    return dict(samples)


def frame_columns(samples: pd.DataFrame) -> dict[str, np.ndarray]:
    out: dict[str, np.ndarray] = {}
    if "time" in samples.columns:
        time = pd.to_datetime(samples["time"], utc=True)
        out["time"] = time.to_numpy(dtype="datetime64[ns]").astype(np.int64)
    for name in FLOAT_COLUMNS:
        if name in samples.columns:
            out[name] = samples[name].to_numpy(dtype=np.float64, na_value=np.nan)
    for name in LAMP_COLUMNS:
        if name in samples.columns:
            out[name] = samples[name].to_numpy(dtype=bool, na_value=False)
    if "dtc" in samples.columns:
        out["dtc"] = samples["dtc"].to_numpy(dtype=object, na_value=None)
    return out


def table_columns(table: pa.Table) -> dict[str, np.ndarray]:
    names = set(table.column_names)
    out: dict[str, np.ndarray] = {}
    if "time" in names:
        time = table.column("time")
        if pa.types.is_timestamp(time.type):  # naive stamps are UTC, as in ingest
            out["time"] = time.to_numpy().astype("datetime64[ns]").astype(np.int64)
        else:
            out["time"] = frame_columns(pd.DataFrame({"time": time.to_pandas()}))["time"]
    for name in FLOAT_COLUMNS:
        if name in names:
            out[name] = pc.cast(table.column(name), pa.float64()).to_numpy()
    for name in LAMP_COLUMNS:
        if name in names:
            out[name] = pc.fill_null(pc.cast(table.column(name), pa.bool_()), False).to_numpy()
    if "dtc" in names:
        out["dtc"] = table.column("dtc").to_numpy(zero_copy_only=False).astype(object)
    return out


def n_rows(columns: SampleColumns) -> int:
    return next((len(v) for v in columns.values()), 0)


def slice_rows(columns: SampleColumns, rows: slice | np.ndarray) -> dict[str, np.ndarray]:
    """The same columns restricted to ``rows`` (a slice keeps them as views)."""
    return {name: values[rows] for name, values in columns.items()}
