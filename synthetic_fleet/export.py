"""Our two CSV export styles and a fast writer for them.

Style A ("workshop tool"): comma-delimited, ISO-8601 UTC timestamps ending in
Z, a VIN column, km/h, deg/s, deg, g. Style B ("field logger"): semicolon-
delimited with decimal comma, ``# key: value`` metadata lines (vehicle, start),
a relative time in seconds, mph, °/s, °, m/s². Both are generic CSV of our own
design. Values are rounded to each signal's logged resolution
(``ExportStyle.resolution_si``), coarser on a polled logger.

Formatting goes through Arrow's C++ CSV writer (number → text without a
per-row Python step); DataFrame.to_csv is several times slower here.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv

from tracktrue.units import DEG_RAD, G0_MPS2, KPH_MPS, MPH_MPS

#: Analog accelerometer on a 5 V reference: rests at 2.5 V, 1 V per g, so ±2 g
#: spans 0.5–4.5 V (common practice), read by a 10-bit converter.
ANALOG_ZERO_V, ANALOG_V_PER_G, ANALOG_STEP_V = 2.5, 1.0, 5.0 / 1024


@dataclass(frozen=True)
class Column:
    signal: str  # canonical signal, or "time", "vin", "vehicle_id"
    header: str
    si_per_unit: float = 1.0  # one export unit in SI
    decimals: int = 0  # logged resolution 10**-decimals in the export unit
    polled_decimals: int | None = None  # coarser resolution on a polled logger


@dataclass(frozen=True)
class ExportStyle:
    name: str
    delimiter: str
    decimal_comma: bool
    relative_time: bool  # seconds since the "# start:" line, else ISO-8601 UTC
    metadata: bool
    columns: tuple[Column, ...]
    analog_columns: tuple[Column, ...]

    def column(self, signal: str) -> Column:
        return next(c for c in self.columns if c.signal == signal)

    def resolution_si(self, signal: str, polled: bool = False) -> float:
        """The logged step of ``signal`` in SI units (m/s, rad/s, rad, m/s², s)."""
        col = self.column(signal)
        decimals = col.polled_decimals if polled and col.polled_decimals is not None else col.decimals
        return 10.0**-decimals * col.si_per_unit


def _wheels(fmt: str, unit: str, si: float) -> tuple[Column, ...]:
    names = {"fl": ("FL", "LF"), "fr": ("FR", "RF"), "rl": ("RL", "LR"), "rr": ("RR", "RR")}
    which = 0 if fmt.startswith("Wheel") else 1
    return tuple(Column(f"wheel_speed_{p}", fmt.format(pos=n[which], unit=unit), si, 2, 1) for p, n in names.items())


STYLES: dict[str, ExportStyle] = {
    "A": ExportStyle(
        "A", ",", False, False, False,
        (Column("vin", "VIN"), Column("time", "Timestamp"),
         Column("vehicle_speed", "Vehicle Speed [km/h]", KPH_MPS, 1, 0),
         *_wheels("Wheel Speed {pos} [{unit}]", "km/h", KPH_MPS),
         Column("yaw_rate", "Yaw Rate [deg/s]", DEG_RAD, 2, 1),
         Column("steering_angle", "Steering Wheel Angle [deg]", DEG_RAD, 1),
         Column("accel_long", "Long Accel [g]", G0_MPS2, 3),
         Column("accel_lat", "Lat Accel [g]", G0_MPS2, 3),
         Column("brake", "Brake Switch"), Column("lamp_abs", "ABS Lamp"), Column("lamp_esc", "ESC Lamp"),
         Column("dtc", "DTC")),
        (Column("accel_long", "Long Accel Raw [V]", 1.0, 3), Column("accel_lat", "Lat Accel Raw [V]", 1.0, 3)),
    ),
    "B": ExportStyle(
        "B", ";", True, True, True,
        (Column("time", "Time (s)", 1.0, 3),
         Column("vehicle_speed", "Vehicle speed (mph)", MPH_MPS, 1, 0),
         *_wheels("{pos} wheel spd ({unit})", "mph", MPH_MPS),
         Column("yaw_rate", "Yaw rate (°/s)", DEG_RAD, 2, 1),
         Column("steering_angle", "Steering angle (°)", DEG_RAD, 1),
         Column("accel_long", "Longitudinal acceleration (m/s²)", 1.0, 2),
         Column("accel_lat", "Lateral acceleration (m/s²)", 1.0, 2),
         Column("brake", "Brake switch"), Column("lamp_abs", "ABS lamp"), Column("lamp_esc", "ESC lamp"),
         Column("dtc", "DTC")),
        (Column("accel_long", "Longitudinal acceleration raw (V)", 1.0, 3),
         Column("accel_lat", "Lateral acceleration raw (V)", 1.0, 3)),
    ),
}


#: Numbers within this many resolution steps of zero are formatted by table look-up.
_TABLE_STEPS = 30_000


def _fixed_text(steps: np.ndarray, decimals: int, point: str, valid: np.ndarray | None = None) -> pa.Array:
    """Text of integer multiples of 10**-decimals with fixed decimals ("-12.30"); invalid → empty cell."""
    whole, frac = np.divmod(np.abs(steps).astype(np.int64), 10**decimals)
    sign = pa.DictionaryArray.from_arrays(pa.array((steps < 0).astype(np.int8)), pa.array(["", "-"]))
    parts = [sign.cast(pa.string()), pc.cast(pa.array(whole, mask=None if valid is None else ~valid), pa.string())]
    if decimals:
        parts += [pa.array(np.full(len(steps), point)), _fraction_digits(decimals).take(pa.array(frac))]
    return pc.binary_join_element_wise(*parts, "")


@functools.lru_cache(maxsize=None)
def _fraction_digits(decimals: int) -> pa.Array:
    return pa.array([f"{i:0{decimals}d}" for i in range(10**decimals)])


@functools.lru_cache(maxsize=None)
def _number_table(decimals: int, point: str) -> pa.Array:
    """Text of every multiple of 10**-decimals in ±_TABLE_STEPS."""
    return _fixed_text(np.arange(-_TABLE_STEPS, _TABLE_STEPS + 1), decimals, point)


def _numbers(values: np.ndarray, decimals: np.ndarray, decimal_comma: bool) -> list[pa.Array]:
    """Rows of ``values`` (k, n) as text with ``decimals[i]`` fixed decimals; NaN becomes an empty cell.

    Formatting each float costs ~100 ns here; a look-up in a table of the
    logged resolution's steps costs a quarter of that, and the arithmetic is
    done for all columns in one pass.
    """
    finite = np.isfinite(values)
    steps = np.rint(np.where(finite, values, 0.0) * 10.0 ** decimals[:, None])
    inside = np.abs(steps).max(axis=1, initial=0.0) <= _TABLE_STEPS
    index = (np.clip(steps, -_TABLE_STEPS, _TABLE_STEPS) + _TABLE_STEPS).astype(np.int32)
    point = "," if decimal_comma else "."
    out = []
    for i, d in enumerate(decimals):
        if inside[i]:
            out.append(_number_table(int(d), point).take(pa.array(index[i], mask=~finite[i])))
        else:  # a column reaching beyond the table: the same text, built for its own values
            out.append(_fixed_text(steps[i], int(d), point, finite[i]))
    return out


def _relative_seconds(time_ms: np.ndarray, decimal_comma: bool) -> pa.Array:
    """Seconds with three decimals from integer milliseconds."""
    seconds, milli = np.divmod(time_ms, 1000)
    whole = pc.cast(pa.array(seconds), pa.string())
    return pc.binary_join_element_wise(whole, _fraction_digits(3).take(pa.array(milli)), "," if decimal_comma else ".")


def _fixed_width_text(chars: np.ndarray) -> pa.Array:
    """An Arrow string array over the rows of a (n, width) uint8 array, without copying per row."""
    n, width = chars.shape
    offsets = np.arange(n + 1, dtype=np.int32) * width
    return pa.StringArray.from_buffers(n, pa.py_buffer(offsets), pa.py_buffer(np.ascontiguousarray(chars)))


def _digits(values: np.ndarray, width: int) -> np.ndarray:
    """Zero-padded decimal digits of non-negative integers as ASCII codes, shape (n, width)."""
    powers = 10 ** np.arange(width - 1, -1, -1)
    return (48 + (values[:, None] // powers) % 10).astype(np.uint8)


def _clock_table() -> np.ndarray:
    """"HH:MM:SS." for every second of a day, shape (86400, 9)."""
    s = np.arange(86400)
    colon = np.full((86400, 1), ord(":"), np.uint8)
    return np.hstack([_digits(s // 3600, 2), colon, _digits(s // 60 % 60, 2), colon, _digits(s % 60, 2),
                      np.full((86400, 1), ord("."), np.uint8)])


_CLOCK = _clock_table()


def iso_utc_ms(epoch_ms: np.ndarray) -> pa.Array:
    """ISO-8601 UTC timestamps with milliseconds and Z (2026-03-02T07:14:00.123Z)."""
    day, rem = np.divmod(epoch_ms, 86_400_000)
    second, milli = np.divmod(rem, 1000)
    first = int(day.min())
    days = np.arange(first, int(day.max()) + 1).astype("datetime64[D]")
    date_text = np.char.add(np.datetime_as_string(days), "T").astype("S11")
    out = np.empty((len(epoch_ms), 24), np.uint8)
    out[:, :11] = np.frombuffer(date_text.tobytes(), np.uint8).reshape(-1, 11)[day - first]
    out[:, 11:20] = _CLOCK[second]
    out[:, 20:23] = _digits(milli, 3)
    out[:, 23] = ord("Z")
    return _fixed_width_text(out)


def _constant_text(value: str | None, lit: np.ndarray) -> pa.Array:
    """``value`` where ``lit``, an empty cell elsewhere (dictionary-encoded: one string, many rows)."""
    indices = pa.array(np.zeros(len(lit), np.int8), mask=~lit)
    return pa.DictionaryArray.from_arrays(indices, pa.array([value or ""]))


_SWITCH = pa.array(["0", "1"])
#: Columns written as text rather than numbers (the switches are 0/1).
_TEXT_SIGNALS = frozenset({"time", "vin", "dtc", "brake", "lamp_abs", "lamp_esc"})


def _analog_v(values_mps2: np.ndarray) -> np.ndarray:
    volts = ANALOG_ZERO_V + ANALOG_V_PER_G * values_mps2 / G0_MPS2
    return np.clip(np.round(volts / ANALOG_STEP_V) * ANALOG_STEP_V, 0.0, 5.0)


def _cells(style: ExportStyle, *, vin: str, start_ms: np.ndarray, time_ms: np.ndarray,
           columns: dict[str, np.ndarray], polled: bool, analog: bool) -> pa.Table:
    """The text of every cell, one column per export column; ``start_ms`` and ``time_ms`` per row."""
    n = len(time_ms)
    chosen = style.columns + (style.analog_columns if analog else ())
    numeric = [c for c in chosen if c.signal not in _TEXT_SIGNALS]
    values = np.empty((len(numeric), n))
    for i, col in enumerate(numeric):
        raw = columns[col.signal]
        values[i] = _analog_v(raw) if col in style.analog_columns else raw / col.si_per_unit
    decimals = np.array([c.polled_decimals if polled and c.polled_decimals is not None else c.decimals
                         for c in numeric])
    number_cells = dict(zip(numeric, _numbers(values, decimals, style.decimal_comma)))
    cells: list[pa.Array] = []
    for col in chosen:
        if col in number_cells:
            cells.append(number_cells[col])
        elif col.signal == "time":
            cells.append(_relative_seconds(time_ms, style.decimal_comma) if style.relative_time
                         else iso_utc_ms(start_ms + time_ms))
        elif col.signal == "vin":
            cells.append(_constant_text(vin, np.ones(n, dtype=bool)))
        elif col.signal == "dtc":
            codes = columns["dtc"]
            lit = codes != None  # noqa: E711 (element-wise on an object array)
            cells.append(_constant_text(codes[lit][0] if lit.any() else None, lit))
        else:
            cells.append(_SWITCH.take(pa.array(columns[col.signal].astype(np.int8))))
    return pa.Table.from_arrays(cells, names=[c.header for c in chosen])


def write_trips_csv(paths: list[Path], style: ExportStyle, *, vehicle_id: str, vin: str, starts_ms: list[int],
                    times_ms: list[np.ndarray], columns: list[dict[str, np.ndarray]], polled: bool,
                    analog: bool) -> list[int]:
    """Write several trips of one vehicle, one file each; returns the bytes written per file.

    The cells of all the trips are formatted in one pass (a trip's fixed cost
    of some hundred array calls is paid once per vehicle), then each file
    gets its slice of the rows. ``columns`` are canonical SI, one dict per trip.
    """
    lengths = np.array([len(t) for t in times_ms])
    merged = {k: np.concatenate([c[k] for c in columns]) for k in columns[0]}
    table = _cells(style, vin=vin, start_ms=np.repeat(np.asarray(starts_ms, dtype=np.int64), lengths),
                   time_ms=np.concatenate(times_ms), columns=merged, polled=polled, analog=analog)
    options = pacsv.WriteOptions(include_header=False, delimiter=style.delimiter, quoting_style="none",
                                 batch_size=8192)
    header = style.delimiter.join(table.column_names)
    sizes = []
    for path, start_ms, first, n in zip(paths, starts_ms, np.cumsum(lengths) - lengths, lengths):
        lines = []
        if style.metadata:
            start = np.datetime_as_string(np.datetime64(int(start_ms), "ms"), unit="s", timezone="UTC")
            lines += [f"# vehicle: {vehicle_id}", f"# start: {start}", f"# rows: {n}"]
        lines.append(header)
        path.parent.mkdir(parents=True, exist_ok=True)
        with open(path, "wb") as fh:
            fh.write(("\n".join(lines) + "\n").encode("utf-8"))
            pacsv.write_csv(table.slice(int(first), int(n)), fh, options)
            sizes.append(fh.tell())
    return sizes


def write_trip_csv(path: Path, style: ExportStyle, *, vehicle_id: str, vin: str, start_ms: int, time_ms: np.ndarray,
                   columns: dict[str, np.ndarray], polled: bool, analog: bool) -> int:
    """Write one trip's rows in ``style``; returns the bytes written. ``columns`` are canonical SI."""
    return write_trips_csv([path], style, vehicle_id=vehicle_id, vin=vin, starts_ms=[start_ms], times_ms=[time_ms],
                           columns=[columns], polled=polled, analog=analog)[0]
