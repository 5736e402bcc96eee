"""DuckDB-to-pandas conversion: quiet, and with the dtypes the dashboard relies on."""

import warnings

import duckdb
import pandas as pd

from tracktrue.duckframes import to_frame


def test_a_time_zone_aware_result_converts_without_warnings_and_keeps_nullable_dtypes():
    con = duckdb.connect()
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error")  # any warning, ours or a library's, fails the test
            df = to_frame(con.execute(
                "SELECT TIMESTAMPTZ '2026-03-01 08:00:00+00' AS time, NULL::INTEGER AS n, NULL::BOOLEAN AS b"))
    finally:
        con.close()
    assert df["time"].iloc[0] == pd.Timestamp("2026-03-01 08:00:00", tz="UTC")
    assert str(df["n"].dtype) == "Int32" and df["n"].isna().all()
    assert str(df["b"].dtype) == "boolean" and df["b"].isna().all()
