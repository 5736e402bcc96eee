"""DuckDB results as pandas frames, without DuckDB's own pandas deprecation noise.

DuckDB 1.5's ``.df()`` calls ``DataFrame.drop(inplace=True)`` internally when a
result has a time-zone-aware timestamp column, which pandas 3.1 answers with a
``Pandas4Warning`` on every dashboard query. The warning is about DuckDB's code,
not ours, and the Arrow route instead changes dtypes the callers rely on
(nullable integers become floats, nullable booleans objects), so the warning is
silenced here, narrowly, for that one conversion.
"""

from __future__ import annotations

import warnings

import duckdb
import pandas as pd


def to_frame(result: duckdb.DuckDBPyConnection | duckdb.DuckDBPyRelation) -> pd.DataFrame:
    """``result.df()`` with DuckDB's internal pandas deprecation warning silenced."""
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message="The inplace keyword in DataFrame.drop is deprecated",
                                category=getattr(pd.errors, "Pandas4Warning", DeprecationWarning))
        return result.df()
