"""One log file: from its bytes to canonical trips and rejected rows.

A pure function of (bytes, file name, folder name, profile, trip gap), so it
is testable alone and runs the same on any engine. Nothing is dropped
silently: every data line ends up either in a trip or in ``rejects`` with
its line number and reason, or the whole file is unusable with a reason.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from ingest.columns import Column, plan_columns, with_units_row
from ingest.identity import resolve_identity
from ingest.profile import Profile
from ingest.reader import FileUnusable, clean_text, line_text, parse_rows, split_lines, to_float
from ingest.samples import SAMPLE_SCHEMA, SWITCH_SIGNALS
from ingest.signs import sign_warnings
from ingest.skew import MAX_LAG_MS, align
from ingest.timebase import parse_time, times_of_day
from ingest.trips import signal_records, smallest_step, trip_bounds, trip_quality, trip_speed
from tracktrue.ids import trip_id
from tracktrue.schema import NUMERIC_SIGNALS, SAMPLE_UNITS, WHEEL_SPEED_COLUMNS

#: Physical plausibility bounds in SI units; a value outside is a rejected row.
#: Wheel/vehicle speed 0..90 m/s (324 km/h, beyond any road vehicle's top speed);
#: yaw |r| <= 3 rad/s (172 deg/s; a car spinning at speed stays below ~1.5);
#: steering-wheel angle |delta| <= 15 rad (~2.4 turns each way, more than any
#: lock-to-lock); |a| <= 30 m/s^2 (~3 g, beyond tyre grip). Common practice, not a standard.
#: The fastest a vehicle reverses, m/s (about 54 km/h: well above any manoeuvre, common practice).
REVERSE_MAX_MPS = 15.0
BOUNDS_SI: dict[str, tuple[float, float]] = {
    # negative while reversing where the sensors know the direction (active sensors); features
    # leave reversing out of every window (features/windows.py)
    **{c: (-REVERSE_MAX_MPS, 90.0) for c in WHEEL_SPEED_COLUMNS},
    "vehicle_speed": (-REVERSE_MAX_MPS, 90.0),
    "yaw_rate": (-3.0, 3.0),
    "steering_angle": (-15.0, 15.0),
    "accel_long": (-30.0, 30.0),
    "accel_lat": (-30.0, 30.0),
    "odometer": (0.0, 5e6),  # km
}
_SI_UNIT = {**SAMPLE_UNITS, "odometer": "km"}
SWITCH_ON = ["1", "1.0", "true", "t", "on", "yes", "y", "active", "lit", "flashing", "blinking"]
SWITCH_OFF = ["0", "0.0", "false", "f", "off", "no", "n", "inactive"]
#: Read as unknown: the "error" and "not available" states of a two-bit status (SAE J1939-71's
#: discrete parameters: 00 off, 01 on, 10 error, 11 not available), as bus loggers of heavy
#: vehicles write them, and their words (the state table from memory).
SWITCH_UNKNOWN = ["2", "3", "2.0", "3.0", "error", "err", "not available", "n/a", "na", "unknown", "snv"]


@dataclass
class LogTrip:
    """One trip of one vehicle: its rows (SAMPLE_SCHEMA) and catalog fields."""

    vehicle_id: str
    trip_id: str
    samples: pa.Table
    info: dict  # trips-table fields except sample_file/source_*
    lines: np.ndarray  # 1-based line of each row (to reject the whole trip if it is stored already)
    signal_rows: list[dict] = field(default_factory=list)  # trip_signals rows (ingest/trips.py signal_records)


@dataclass
class LogResult:
    n_rows: int = 0
    trips: list[LogTrip] = field(default_factory=list)
    rejects: list[tuple[int, str]] = field(default_factory=list)  # (line, reason)
    reject_kinds: Counter = field(default_factory=Counter)
    warnings: list[str] = field(default_factory=list)
    column_errors: list[str] = field(default_factory=list)
    vins: dict[str, str] = field(default_factory=dict)
    unusable: str | None = None
    time_basis: str = ""

    @property
    def n_rejected(self) -> int:
        return self.n_rows if self.unusable else len(self.rejects)


def read_log(raw: bytes, file_name: str, folder_name: str, profile: Profile, trip_gap_s: float,
             registry_vins: dict[str, str] | None = None) -> LogResult:
    """Recognise, convert, validate and split one log (see the module docstring).

    ``registry_vins`` maps upper-case VINs to the registry's vehicle ids (ingest/identity.py).
    """
    result = LogResult()
    try:
        _read(raw, file_name, folder_name, profile, trip_gap_s, registry_vins or {}, result)
    except FileUnusable as exc:
        problems = "; ".join([str(exc), *result.column_errors])
        return LogResult(n_rows=result.n_rows, unusable=problems, warnings=result.warnings,
                         column_errors=result.column_errors)
    return result


class _Flags:
    """First reason per row, vectorised: each check flags the rows not yet flagged."""

    def __init__(self, lines: np.ndarray):
        self.lines = lines
        self.flagged = np.zeros(len(lines), bool)
        self.rejects: list[tuple[int, str]] = []
        self.kinds: Counter = Counter()

    def flag(self, mask: np.ndarray, kind: str, message) -> None:
        idx = np.flatnonzero(mask & ~self.flagged)
        if len(idx) == 0:
            return
        self.flagged[idx] = True
        self.rejects.extend(zip(self.lines[idx].tolist(), message(idx)))
        self.kinds[kind] += len(idx)


def _read(raw, file_name, folder_name, profile, gap_s, registry_vins, result: LogResult) -> None:
    log = with_units_row(split_lines(raw))
    result.n_rows = len(log.data_lines)
    plan = plan_columns(log.header, profile)
    result.column_errors = plan.errors
    if log.preamble_lines:
        first = log.preamble_lines[0]
        text = line_text(log.data, log.line_starts, log.line_stops, first - 1).strip()
        result.warnings.append(f"{len(log.preamble_lines)} line(s) before the header on line {log.header_line} "
                               f"read as a preamble, not data (line {first}: {text[:60]!r})")
    if plan.ignored:
        result.warnings.append("columns not used: " + ", ".join(repr(h) for h in plan.ignored))
    cols = plan.columns
    if "time" not in cols:
        raise FileUnusable(f"no time column (header: {', '.join(log.header)[:200]})")
    if not any(c in cols for c in (*WHEEL_SPEED_COLUMNS, "vehicle_speed")):
        raise FileUnusable("no usable wheel speed or vehicle speed column")
    if result.n_rows == 0:
        raise FileUnusable("no data rows")
    numeric = [c.index for c in cols.values() if c.signal in BOUNDS_SI] + list(plan.lags.values())
    text = [c.index for c in cols.values() if c.signal not in BOUNDS_SI]
    parsed = parse_rows(log, numeric, text)
    if parsed.structural_rejects:
        result.reject_kinds["field count"] += len(parsed.structural_rejects)
    result.rejects = parsed.structural_rejects
    if len(parsed.lines) == 0:
        return
    flags = _Flags(parsed.lines)
    decimal_comma = log.delimiter != ","
    n = len(parsed.lines)

    tcol = cols["time"]
    time_text = _with_date(parsed, cols, result)
    tr = parse_time(time_text, tcol.unit, profile.time_format, profile.timezone or log.metadata.get("timezone"),
                    log.metadata.get("start"), file_name, decimal_comma)
    result.time_basis = tr.basis
    for reason, mask in tr.reasons.items():
        flags.flag(mask, "bad time", _quoting(tcol.header, time_text, reason))
    flags.flag(tr.bad, "bad time", _quoting(tcol.header, time_text, "is not a readable time"))

    values: dict[str, np.ndarray] = {}
    for sig, col in cols.items():
        if sig not in BOUNDS_SI:
            continue
        raw_arr = parsed.columns[col.index]
        raw_values, not_number = to_float(raw_arr, decimal_comma)
        flags.flag(not_number, "not a number", _quoting(col.header, raw_arr, "is not a number"))
        si = col.to_si(raw_values)
        lo, hi = BOUNDS_SI[sig]
        with np.errstate(invalid="ignore"):
            out = ~np.isnan(si) & ~((si >= lo) & (si <= hi))
        flags.flag(out, "out of range", _range_message(col, raw_values, si, lo, hi))
        values[sig] = si
    lags = {sig: _lag_values(parsed, log.header[index], index, decimal_comma, flags)
            for sig, index in plan.lags.items() if sig in values}

    switches: dict[str, tuple[np.ndarray, np.ndarray]] = {}
    for sig in SWITCH_SIGNALS:
        if sig in cols:
            arr = parsed.columns[cols[sig].index]
            on, missing, bad = _switch(arr)
            flags.flag(bad, "bad switch state",
                       _quoting(cols[sig].header, arr, "is not an on/off state (1/0, true/false, on/off, yes/no)"))
            switches[sig] = (on, missing)
    dtc = clean_text(parsed.columns[cols["dtc"].index]) if "dtc" in cols else None

    ident = resolve_identity(n, _opt(parsed, cols, "vehicle_id"), _opt(parsed, cols, "vin"), log.metadata, folder_name,
                             registry_vins)
    result.vins = ident.vins
    result.warnings.extend(ident.warnings)

    kept = _time_order(flags, ident.codes, tr.us)
    result.rejects = sorted(parsed.structural_rejects + flags.rejects)
    result.reject_kinds.update(flags.kinds)
    if len(kept) == 0:
        return
    codes, us = ident.codes[kept], tr.us[kept]
    bounds = trip_bounds(codes, us, gap_s)
    ids = [trip_id(ident.ids[codes[a]], pd.Timestamp(int(us[a]), unit="us", tz="UTC")) for a, _ in bounds]
    lengths = np.array([b - a for a, b in bounds])
    logged = {s: v[kept] for s, v in values.items()}  # as logged, in (vehicle, time) order
    stored = _aligned(logged, {s: lag[kept] for s, lag in lags.items()}, us, bounds)
    result.warnings.extend(sign_warnings(stored, us / 1e6))
    table = _sample_table(ident, np.repeat(np.arange(len(bounds)), lengths), ids, us,
                          stored, {s: (on[kept], m[kept]) for s, (on, m) in switches.items()},
                          dtc.take(pa.array(kept)) if dtc is not None else None, codes)
    present = [s for s in (*values, *switches) if s != "odometer"] + (["dtc"] if dtc is not None else [])
    for (a, b), tid in zip(bounds, ids):
        rows = kept[a:b]
        result.trips.append(_trip(table.slice(a, b - a), tid, ident.ids[codes[a]], us[a:b],
                                  {s: v[a:b] for s, v in logged.items()},
                                  {s: m[rows] for s, (_, m) in switches.items()}, present, parsed.lines[rows],
                                  {s: lag[rows] for s, lag in lags.items()}))


def _with_date(parsed, cols: dict[str, Column], result: LogResult) -> pa.Array:
    """The time column's text, preceded by the date column's where the times are times of day.

    Loggers that write a ``Date`` and a ``Time`` column give the time of day in
    the second; joined, the two read as ISO 8601 (or fail with the date's own
    problem, a slash date say). A date column beside full date-times is not
    needed, and said so.
    """
    text = parsed.columns[cols["time"].index]
    if "date" not in cols:
        return text
    date = parsed.columns[cols["date"].index]
    if not times_of_day(text.cast(pa.string())):
        result.warnings.append(f"columns not used: {cols['date'].header!r} (the time column carries the date)")
        return text
    time_of_day = pc.replace_substring_regex(pc.utf8_trim_whitespace(text.cast(pa.string())), r"^(\d):", r"0\1:")
    return pc.binary_join_element_wise(pc.utf8_trim_whitespace(date.cast(pa.string())), time_of_day, " ")


def _opt(parsed, cols: dict[str, Column], sig: str):
    return parsed.columns[cols[sig].index] if sig in cols else None


def _quoting(header: str, arr: pa.Array, what: str):
    def message(idx: np.ndarray) -> list[str]:
        cells = arr.take(pa.array(idx)).to_pylist()
        return [f"{header}: {c!r} {what}" if c is not None else f"{header}: {what}" for c in cells]
    return message


def _range_message(col: Column, raw: np.ndarray, si: np.ndarray, lo: float, hi: float):
    unit = _SI_UNIT[col.signal]

    def message(idx: np.ndarray) -> list[str]:
        return [f"{col.header}: {raw[i]:g} is {si[i]:.6g} {unit}, outside the physical range {lo:g}..{hi:g} {unit}"
                for i in idx]
    return message


def _switch(arr: pa.Array) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    s = pc.utf8_lower(clean_text(arr))
    unknown = pc.fill_null(pc.is_in(s, pa.array(SWITCH_UNKNOWN)), False)
    s = pc.if_else(unknown, pa.scalar(None, pa.string()), s)
    missing = s.is_null().to_numpy(zero_copy_only=False)
    on = pc.fill_null(pc.is_in(s, pa.array(SWITCH_ON)), False).to_numpy(zero_copy_only=False)
    off = pc.fill_null(pc.is_in(s, pa.array(SWITCH_OFF)), False).to_numpy(zero_copy_only=False)
    return on, missing, ~(on | off | missing)


def _time_order(flags: _Flags, codes: np.ndarray, us: np.ndarray) -> np.ndarray:
    """Reject duplicate/backwards times per vehicle; return kept rows sorted by (vehicle, time)."""
    acc = np.flatnonzero(~flags.flagged)
    order = acc[np.argsort(codes[acc], kind="stable")]
    c, t = codes[order], us[order]
    prev = pd.Series(t).groupby(c).cummax().groupby(c).shift(1).to_numpy(dtype=float, na_value=np.nan)
    with np.errstate(invalid="ignore"):
        dup, back = t == prev, t < prev
    bad = np.zeros(len(flags.lines), bool)

    def stamp(i):
        return pd.Timestamp(int(us[i]), unit="us", tz="UTC").isoformat()

    for mask, kind, what in ((dup, "duplicate time", "repeats an earlier row's time"),
                             (back, "backwards time", "is earlier than a previous row's time")):
        bad[:] = False
        bad[order[mask]] = True
        flags.flag(bad, kind, lambda idx, what=what: [f"time {stamp(i)} {what}" for i in idx])
    return order[~(dup | back)]


def _lag_values(parsed, header: str, index: int, decimal_comma: bool, flags: _Flags) -> np.ndarray:
    """A read-lag companion column in ms; a non-number or a lag outside 0..MAX_LAG_MS rejects its row."""
    arr = parsed.columns[index]
    lag, not_number = to_float(arr, decimal_comma)
    flags.flag(not_number, "not a number", _quoting(header, arr, "is not a number"))
    with np.errstate(invalid="ignore"):
        out = np.isfinite(lag) & ~((lag >= 0) & (lag <= MAX_LAG_MS))
    flags.flag(out, "out of range", lambda idx: [f"{header}: a read lag of {lag[i]:g} ms is outside "
                                                 f"0..{MAX_LAG_MS:g} ms" for i in idx])
    return lag


def _aligned(logged: dict[str, np.ndarray], lags: dict[str, np.ndarray], us: np.ndarray,
             bounds: list[tuple[int, int]]) -> dict[str, np.ndarray]:
    """The values to store: each lagged signal moved to its read times, trip by trip (ingest/skew.py)."""
    out = dict(logged)
    for sig, lag in lags.items():
        aligned = logged[sig].copy()
        for a, b in bounds:
            aligned[a:b] = align(us[a:b], logged[sig][a:b], lag[a:b], smallest_step(logged[sig][a:b]))
        out[sig] = aligned
    return out


def _sample_table(ident, trip_index, ids, us, values, switches, dtc, codes) -> pa.Table:
    """SAMPLE_SCHEMA rows from value arrays already in (vehicle, time) order."""
    n = len(us)
    cols: dict[str, pa.Array] = {
        "vehicle_id": pa.array(ident.ids, pa.string()).take(pa.array(codes)),
        "trip_id": pa.array(ids, pa.string()).take(pa.array(trip_index)),
        "time": pa.array(us, pa.timestamp("us", tz="UTC")),
    }
    for sig in NUMERIC_SIGNALS:
        cols[sig] = pa.array(values[sig], pa.float64()) if sig in values else pa.nulls(n, pa.float64())
    for sig in SWITCH_SIGNALS:
        if sig in switches:
            on, missing = switches[sig]
            cols[sig] = pa.array(on, pa.bool_(), mask=missing)
        else:
            cols[sig] = pa.nulls(n, pa.bool_())
    cols["dtc"] = dtc if dtc is not None else pa.nulls(n, pa.string())
    return pa.Table.from_arrays([cols[f.name] for f in SAMPLE_SCHEMA], schema=SAMPLE_SCHEMA)


def _trip(samples: pa.Table, tid: str, vehicle: str, us: np.ndarray, values: dict, missing: dict,
          present: list[str], lines: np.ndarray, lags: dict) -> LogTrip:
    """One trip's catalog fields and trip_signals rows, from its values as logged (before alignment)."""
    masks = [np.isnan(values[s]) for s in present if s in values] + [missing[s] for s in present if s in missing]
    if "dtc" in present:
        masks.append(samples.column("dtc").is_null().to_numpy(zero_copy_only=False))
    measured = {s: v for s, v in values.items() if s != "odometer"}
    speed = trip_speed(measured)
    quality = trip_quality(us, measured, masks, speed)
    odo = values.get("odometer")
    known = odo[np.isfinite(odo)] if odo is not None else np.array([])
    signals = [s for s in present if not (np.isnan(values[s]).all() if s in values else samples.column(s).null_count
                                          == samples.num_rows)]
    info = {
        "trip_id": tid,
        "vehicle_id": vehicle,
        "start_time": pd.Timestamp(int(us[0]), unit="us", tz="UTC"),
        "end_time": pd.Timestamp(int(us[-1]), unit="us", tz="UTC"),
        "n_samples": int(len(us)),
        **quality,
        "signals": ",".join(signals),
        "odometer_start_km": float(known[0]) if len(known) else float("nan"),
        "odometer_end_km": float(known[-1]) if len(known) else float("nan"),
    }
    signal_rows = [{"trip_id": tid, **r} for r in signal_records(us, measured, lags, speed, quality)]
    return LogTrip(vehicle, tid, samples, info, lines, signal_rows)
