"""The trip_features table: its columns, their dtypes, and rows turned into that table.

One place, so the local engine, its process pool and the Dask engine's
declared ``meta`` all give exactly the same frame.
"""

from __future__ import annotations

from collections.abc import Sequence

import pandas as pd

from features.extract import ROW_COLUMNS
from features.gating import STEER_CENTER_JUDGE

ID_COLUMNS: tuple[str, ...] = ("trip_id", "vehicle_id", "start_time", "platform")
#: Partition key of trip_features: one file per month, not one per trip.
MONTH_COLUMN = "start_month"
TRIP_FEATURES_COLUMNS: tuple[str, ...] = (*ID_COLUMNS, *ROW_COLUMNS, MONTH_COLUMN)
_TEXT = ("trip_id", "vehicle_id", "platform", "signals", "logger_kind", STEER_CENTER_JUDGE, "dtc", "nan_reasons",
         MONTH_COLUMN)
_BOOL = ("lamp_abs_on", "lamp_esc_on")
#: Every column's dtype but start_time's, which keeps the unit of the trips table it comes from.
DTYPES: dict[str, object] = {
    c: (str if c in _TEXT else bool if c in _BOOL else float) for c in TRIP_FEATURES_COLUMNS if c != "start_time"
}
EMPTY_TIME_DTYPE = "datetime64[us, UTC]"


def rows_frame(rows: Sequence[dict], time_dtype: object = EMPTY_TIME_DTYPE) -> pd.DataFrame:
    """trip_features rows (ID_COLUMNS plus extract_trip_features' row) as the table, start_month added.

    ``time_dtype``: start_time's dtype, the trips table's (every engine gives the same frame).
    """
    if not rows:
        return pd.DataFrame({c: pd.Series(dtype=time_dtype if c == "start_time" else DTYPES[c])
                             for c in TRIP_FEATURES_COLUMNS})
    frame = pd.DataFrame(list(rows), columns=list(TRIP_FEATURES_COLUMNS[:-1]))
    frame["start_time"] = pd.to_datetime(frame["start_time"], utc=True).astype(time_dtype)
    frame[MONTH_COLUMN] = frame["start_time"].dt.strftime("%Y-%m")
    return frame.astype({c: t for c, t in DTYPES.items() if frame[c].dtype != t})


def empty_rows() -> pd.DataFrame:
    return rows_frame([])
