"""Lamp events per trip: what the on-board monitor already says.

DESIGN.md, "What the lamp means": an ESC lamp flashes during a stability
intervention and stays lit while the driver has switched ESC off (until the
next key cycle); an intermittent fault can store a trouble code while the lamp
goes out. A lamp *event* is therefore a lamp (ABS or ESC) that survived a key
cycle — lit in a trip and lit again *from the first sample* of the next one
(a warning lamp relights at key-on; ESC-off resets at the key cycle, and an
intervention flashes mid-trip, so several slippery trips in a row never make
an event: common practice of ABS/ESC lamp logic, from memory) — or a trouble code in the trip, with the lamp lit or stored while
the lamp went out again (an intermittent fault: the on-board monitor has
already seen it). Interventions and ESC-off are recorded (``lamp_on``), never
events. Where the lamp state at a trip's start is unknown (no sample store),
a lamp lit in two consecutive trips counts, as the design's coarser rule.

The per-trip summary comes from trip_features when features/ provides it
(``lamp_abs_on``, ``lamp_esc_on``, ``dtc``); ``read_trip_lamps`` aggregates
the three lamp/code columns of the sample store (with the lamp state at each
trip's first sample) — the only sample columns models/ ever reads.
"""

from __future__ import annotations

import logging

import duckdb
import pandas as pd

from tracktrue.duckframes import to_frame
from tracktrue.store import Store

log = logging.getLogger(__name__)

LAMP_COLUMNS = ("lamp_abs_on", "lamp_esc_on", "dtc")


def has_lamp_summary(trip_features: pd.DataFrame) -> bool:
    return any(c in trip_features.columns for c in LAMP_COLUMNS)


def lamp_summary_from_features(trip_features: pd.DataFrame) -> pd.DataFrame:
    """trip_id, lamp_abs_on, lamp_esc_on (bool), dtc (text, '' when none)."""
    out = pd.DataFrame({"trip_id": trip_features["trip_id"].to_numpy()})
    for col in ("lamp_abs_on", "lamp_esc_on"):
        v = trip_features[col] if col in trip_features.columns else pd.Series(False, index=trip_features.index)
        out[col] = (pd.to_numeric(v, errors="coerce").fillna(0) > 0).to_numpy()
    dtc = trip_features["dtc"] if "dtc" in trip_features.columns else pd.Series("", index=trip_features.index)
    out["dtc"] = dtc.astype(object).where(dtc.notna(), "").astype(str).to_numpy()
    return out


def read_trip_lamps(store: Store, trip_ids: pd.Series) -> pd.DataFrame:
    """Aggregate lamp_abs, lamp_esc and dtc per trip from the sample Parquet (absent columns → off)."""
    files = sorted(store.samples_dir.rglob("*.parquet")) if store.samples_dir.is_dir() else []
    empty = pd.DataFrame({"trip_id": trip_ids.to_numpy(), "lamp_abs_on": False, "lamp_esc_on": False, "dtc": "",
                          "lamp_at_start": pd.NA})  # unknown: lamp_events falls back to the coarser rule
    if not files:
        log.warning("no sample files under %s: lamp events unknown, treated as none", store.samples_dir)
        return empty
    con = duckdb.connect()
    try:
        rel = con.read_parquet([str(f) for f in files], union_by_name=True)
        cols = set(rel.columns)
        abs_e = "bool_or(coalesce(lamp_abs, false))" if "lamp_abs" in cols else "false"
        esc_e = "bool_or(coalesce(lamp_esc, false))" if "lamp_esc" in cols else "false"
        dtc_e = ("coalesce(string_agg(DISTINCT nullif(trim(dtc), ''), ' '), '')" if "dtc" in cols else "''")
        lit = " OR ".join([f"coalesce({c}, false)" for c in ("lamp_abs", "lamp_esc") if c in cols]) or "false"
        df = to_frame(con.execute(
            f"SELECT trip_id, {abs_e} AS lamp_abs_on, {esc_e} AS lamp_esc_on, {dtc_e} AS dtc, "
            f"arg_min({lit}, time) AS lamp_at_start FROM rel GROUP BY trip_id"
        ))
    finally:
        con.close()
    got = empty[["trip_id"]].merge(df, on="trip_id", how="left")
    got["lamp_abs_on"] = got["lamp_abs_on"].fillna(False).astype(bool)
    got["lamp_esc_on"] = got["lamp_esc_on"].fillna(False).astype(bool)
    got["dtc"] = got["dtc"].fillna("").astype(str)
    got["lamp_at_start"] = got["lamp_at_start"].astype("boolean")  # NA: trip not in the sample store
    return got


def trip_lamps(store: Store, trip_features: pd.DataFrame) -> tuple[pd.DataFrame, str]:
    """The per-trip lamp summary and where it came from: trip_features' summary when it has
    one, with the lamp state at each trip's start from the sample store (features/ records
    only whether a lamp was lit at all); else the sample store alone."""
    samples = read_trip_lamps(store, trip_features["trip_id"])
    if not has_lamp_summary(trip_features):
        return samples, "sample store (trip_features has no lamp summary)"
    lamps = lamp_summary_from_features(trip_features)
    if store.samples_dir.is_dir() and any(store.samples_dir.rglob("*.parquet")):
        lamps = lamps.merge(samples[["trip_id", "lamp_at_start"]], on="trip_id", how="left")
        return lamps, "trip_features (lamp at trip start from the sample store)"
    return lamps, "trip_features"


def lamp_events(trips: pd.DataFrame, lamps: pd.DataFrame) -> pd.DataFrame:
    """Per trip (vehicle_id, trip_id, start_time): ``lamp_on`` and ``lamp_event`` (see module doc).

    ``lamp_event`` on a trip uses only that trip and the vehicle's previous
    one, so it never looks ahead of an as-of date: a lamp lit now counts once
    it is still lit at the next key cycle; a trouble code counts at once.
    """
    df = trips[["vehicle_id", "trip_id", "start_time"]].merge(lamps, on="trip_id", how="left")
    df = df.sort_values(["vehicle_id", "start_time"]).reset_index(drop=True)
    on = df["lamp_abs_on"].fillna(False).astype(bool) | df["lamp_esc_on"].fillna(False).astype(bool)
    coded = df["dtc"].fillna("").astype(str).str.strip() != ""
    prev_on = on.groupby(df["vehicle_id"]).shift(1, fill_value=False).astype(bool)
    # survived the key cycle: lit from this trip's first sample (where known) after a lit trip
    at_start = df["lamp_at_start"].fillna(True).astype(bool) if "lamp_at_start" in df.columns else True
    df["lamp_on"] = on
    df["lamp_event"] = coded | (on & prev_on & at_start)
    return df[["vehicle_id", "trip_id", "start_time", "lamp_on", "lamp_event", "dtc"]]
