"""Our two CSV export styles and a fast writer for them.

Style A ("workshop tool"): comma-delimited, ISO-8601 UTC timestamps ending in
Z, a VIN column, km/h, deg/s, deg, g. Style B ("field logger"): semicolon-
delimited with decimal comma, ``# key: value`` metadata lines (vehicle, start),
a relative time in seconds, mph, °/s, °, m/s². Both are generic CSV of our own
design. Values are rounded to each signal's logged resolution
(``ExportStyle.resolution_si``), coarser on a polled logger.

Formatting is array arithmetic: each cell is looked up or spelled out as NUL-padded
bytes, a row is its cells side by side, and dropping the NULs closes them up
(no per-row Python step; DataFrame.to_csv and Arrow's CSV writer are several times slower).
"""

from __future__ import annotations

import functools
import itertools
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pyarrow as pa

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
    read_lag: bool = False  # the companion column: the signal's read lag behind the row's stamp, integer ms

    def decimals_for(self, polled: bool, wheel_step_kph: float | None = None) -> int:
        """Decimals printed: the polled ones on a polled logger; a km/h wheel speed with as many as its
        logger's step needs to be printed exactly (a 1/32 km/h bus step: 5)."""
        decimals = self.polled_decimals if polled and self.polled_decimals is not None else self.decimals
        if wheel_step_kph and self.signal.startswith("wheel_speed_") and self.si_per_unit == KPH_MPS:
            decimals = max(decimals, _exact_decimals(wheel_step_kph))
        return decimals


def _exact_decimals(step: float, most: int = 6) -> int:
    """The fewest decimals that print every multiple of ``step`` exactly (at most ``most``)."""
    return next((d for d in range(most) if abs(step * 10**d - round(step * 10**d)) < 1e-9), most)


@dataclass(frozen=True)
class ExportStyle:
    name: str
    delimiter: str
    decimal_comma: bool
    relative_time: bool  # seconds since the "# start:" line, else ISO-8601 UTC
    metadata: bool
    columns: tuple[Column, ...]
    analog_columns: tuple[Column, ...]
    #: A polled log carries each signal's read lag in a companion column (READ_LAG_SUFFIX).
    read_lag_columns: bool = False

    def column(self, signal: str) -> Column:
        return next(c for c in self.columns if c.signal == signal)

    def resolution_si(self, signal: str, polled: bool = False, wheel_step_kph: float | None = None) -> float:
        """The logged step of ``signal`` in SI units (m/s, rad/s, rad, m/s², s)."""
        col = self.column(signal)
        return 10.0**-col.decimals_for(polled, wheel_step_kph) * col.si_per_unit


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
        read_lag_columns=True,
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


#: A read-lag companion's header: its signal's header without the unit, then this.
READ_LAG_SUFFIX = " @ms"


def read_lag_header(header: str) -> str:
    """``Wheel Speed FL [km/h]`` → ``Wheel Speed FL @ms`` (the header of the signal's read-lag column)."""
    name, bracket, _ = header.partition(" [")
    return (name if bracket else header) + READ_LAG_SUFFIX


def logged_columns(style: ExportStyle, signals, analog: bool, read_lags: bool) -> tuple[Column, ...]:
    """The columns of a file in ``style`` holding ``signals`` (time and VIN always), each followed by its
    read-lag companion when ``read_lags`` and the style carries them."""
    chosen = []
    for col in style.columns + (style.analog_columns if analog else ()):
        if col.signal in ("time", "vin") or col.signal in signals:
            chosen.append(col)
            if read_lags and style.read_lag_columns and col in style.columns and col.signal not in ("time", "vin"):
                chosen.append(Column(col.signal, read_lag_header(col.header), read_lag=True))
    return tuple(chosen)


#: Numbers within this many resolution steps of zero are formatted by table look-up.
_TABLE_STEPS = 30_000
#: Rows formatted at a time: one batch's bytes stay in the processor's cache.
_BATCH_ROWS = 8192
_NUL = b"\0"


def _digits(values: np.ndarray, width: int) -> np.ndarray:
    """Zero-padded decimal digits of non-negative integers as ASCII codes, shape (n, width)."""
    powers = 10 ** np.arange(width - 1, -1, -1)
    return (48 + (values[:, None] // powers) % 10).astype(np.uint8)


def _fixed_chars(steps: np.ndarray, decimals: int, point: str, valid: np.ndarray | None = None) -> np.ndarray:
    """Text of integer multiples of 10**-decimals with fixed decimals ("-12.30") as ASCII codes, shape (n, width).

    Cells are NUL-padded where a shorter number needs fewer characters (no sign,
    fewer whole digits); the writer drops every NUL, so a row's cells close up.
    An invalid value becomes an all-NUL (empty) cell.
    """
    magnitude = np.abs(steps).astype(np.int64)
    whole, frac = np.divmod(magnitude, 10**decimals)
    width = len(str(int(whole.max(initial=0))))
    digits = _digits(whole, width)
    digits[:, :-1][whole[:, None] < 10 ** np.arange(width - 1, 0, -1)] = 0  # leading zeros
    parts = [np.where(steps < 0, ord("-"), 0).astype(np.uint8)[:, None], digits]
    if decimals:
        parts += [np.full((len(steps), 1), ord(point), np.uint8), _digits(frac, decimals)]
    chars = np.hstack(parts)
    if valid is not None:
        chars[~valid] = 0
    return chars


def _words(texts: list[bytes]) -> np.ndarray:
    """Texts as rows of NUL-padded 8-byte words, shape (len(texts), words per text)."""
    width = -(-max(len(t) for t in texts) // 8) * 8
    return np.frombuffer(b"".join(t.ljust(width, _NUL) for t in texts), np.uint64).reshape(len(texts), -1)


@functools.lru_cache(maxsize=None)
def _number_words(decimals: int, point: str, sep: bytes) -> np.ndarray:
    """Every multiple of 10**-decimals in ±_TABLE_STEPS and then ``sep`` as one 8-byte NUL-padded word;
    the last entry is the empty cell (``sep`` alone)."""
    chars = _fixed_chars(np.arange(-_TABLE_STEPS, _TABLE_STEPS + 1), decimals, point)
    cells = np.zeros((len(chars) + 1, 8), np.uint8)
    cells[:-1, :chars.shape[1]] = chars
    cells[:-1, chars.shape[1]:chars.shape[1] + len(sep)] = np.frombuffer(sep, np.uint8)
    cells[-1, :len(sep)] = np.frombuffer(sep, np.uint8)
    assert chars.shape[1] + len(sep) <= 8, "a table cell must fit one word"
    return cells.view(np.uint64)[:, 0]


def _table_fits(decimals: int, point: str, sep: bytes) -> bool:
    """Whether the longest table entry ("-" whole digits, point, decimals, ``sep``) fits one 8-byte word;
    a fine step (e.g. 1/32 km/h printed with 5 decimals) is spelled out instead."""
    whole = len(str(_TABLE_STEPS // 10**decimals))
    return 1 + whole + (len(point) + decimals if decimals else 0) + len(sep) <= 8


def _number_cells(values: np.ndarray, units_per_step: float, decimals: int, point: str, sep: bytes) -> np.ndarray:
    """Cells of ``values`` (SI) in steps of ``units_per_step`` with ``decimals``, each followed by ``sep``;
    NaN → an empty cell. Words (n,) from the table, or characters (n, width) beyond it.

    Formatting each float costs ~100 ns in Python or Arrow; a look-up of the
    step's text in a table costs a few, and a column reaching beyond the
    table is spelled out digit by digit instead.
    """
    steps = np.rint(values / units_per_step)
    if _table_fits(decimals, point, sep) and not (np.fmin.reduce(steps) < -_TABLE_STEPS
                                                 or np.fmax.reduce(steps) > _TABLE_STEPS):
        index = steps + _TABLE_STEPS
        np.fmin(index, 2 * _TABLE_STEPS + 1, out=index)  # fmin of NaN and x is x: NaN → the empty cell
        return _number_words(decimals, point, sep).take(index.astype(np.intp))
    valid = np.isfinite(steps)
    chars = _fixed_chars(np.where(valid, steps, 0.0), decimals, point, valid)
    return np.hstack([chars, np.broadcast_to(np.frombuffer(sep, np.uint8), (len(chars), len(sep)))])


def _choice_cells(choices: list[tuple[bytes, ...]], codes: list[np.ndarray], seps: list[bytes]) -> np.ndarray:
    """Neighbouring cells with few possible texts (switches, one trouble code), looked up together:
    column i shows ``choices[i][codes[i]]`` and then ``seps[i]``. Words (n, k)."""
    table = _words([b"".join(t + s for t, s in zip(combo, seps)) for combo in itertools.product(*choices)])
    code = np.zeros(len(codes[0]), np.intp)
    for c, options in zip(codes, choices):
        code = code * len(options) + c
    return table[code]
def _text_words(texts: list[str]) -> np.ndarray:
    """One NUL-padded 8-byte word per text (each at most 8 ASCII characters)."""
    return _words([t.encode("ascii") for t in texts])[:, 0]


@functools.lru_cache(maxsize=None)
def _clock_words() -> np.ndarray:
    """"HH:MM:SS" for every second of a day."""
    s = np.arange(86400)
    colon = np.full((86400, 1), ord(":"), np.uint8)
    chars = np.hstack([_digits(s // 3600, 2), colon, _digits(s // 60 % 60, 2), colon, _digits(s % 60, 2)])
    return chars.view(np.uint64)[:, 0]


@functools.lru_cache(maxsize=None)
def _milli_words(point: str, suffix: str, sep: bytes) -> np.ndarray:
    """The millisecond part ".123" of a time, then ``suffix`` and ``sep``, for every millisecond."""
    return _text_words([f"{point}{m:03d}{suffix}{sep.decode()}" for m in range(1000)])


def _iso_utc_words(epoch_ms: np.ndarray, sep: bytes, prefix: bytes = b"") -> np.ndarray:
    """``prefix``, then ISO-8601 UTC timestamps with milliseconds and Z (2026-03-02T07:14:00.123Z), then
    ``sep``; words (n, k). The prefix (the cells before, the same on every row) shares the date's words."""
    day, rem = np.divmod(epoch_ms, 86_400_000)
    second, milli = np.divmod(rem, 1000)
    first = int(day.min())
    dates = np.datetime_as_string(np.arange(first, int(day.max()) + 1).astype("datetime64[D]"))
    date_words = _words([prefix + f"{d}T".encode("ascii") for d in dates])
    out = np.empty((len(epoch_ms), date_words.shape[1] + 2), np.uint64)
    out[:, :-2] = date_words[day - first]
    out[:, -2] = _clock_words().take(second)
    out[:, -1] = _milli_words(".", "Z", sep).take(milli)
    return out


def _seconds_cells(time_ms: np.ndarray, point: str, sep: bytes) -> np.ndarray:
    """Seconds with three decimals from integer milliseconds (within a day: two table look-ups), then ``sep``."""
    if time_ms.min(initial=0) < 0 or time_ms.max(initial=0) >= 86_400_000:
        return np.hstack([_fixed_chars(time_ms, 3, point),
                          np.broadcast_to(np.frombuffer(sep, np.uint8), (len(time_ms), len(sep)))])
    seconds, milli = np.divmod(time_ms, 1000)
    return np.stack([_whole_seconds_words().take(seconds), _milli_words(point, "", sep).take(milli)], axis=1)


@functools.lru_cache(maxsize=None)
def _whole_seconds_words() -> np.ndarray:
    """"0" to "86399", one NUL-padded word each."""
    cells = np.zeros((86400, 8), np.uint8)
    chars = _fixed_chars(np.arange(86400), 0, ".")
    cells[:, :chars.shape[1]] = chars
    return cells.view(np.uint64)[:, 0]


def _cell_text(cells: np.ndarray) -> pa.Array:
    """The text that cells (words (n,) or characters (n, width)) put in the file, an empty cell as null."""
    chars = cells.view(np.uint8).reshape(len(cells), -1)
    offsets = np.zeros(len(chars) + 1, np.int32)
    np.cumsum(np.count_nonzero(chars, axis=1), out=offsets[1:])
    valid = np.packbits(np.diff(offsets) > 0, bitorder="little")
    return pa.StringArray.from_buffers(len(chars), pa.py_buffer(offsets),
                                       pa.py_buffer(chars.tobytes().translate(None, _NUL)), pa.py_buffer(valid))


def iso_utc_ms(epoch_ms: np.ndarray) -> pa.Array:
    """ISO-8601 UTC timestamps with milliseconds and Z, as text."""
    return _cell_text(_iso_utc_words(epoch_ms, b""))


def _numbers(values: np.ndarray, decimals: np.ndarray, decimal_comma: bool) -> list[pa.Array]:
    """Rows of ``values`` (k, n) as the text the writer prints with ``decimals[i]`` fixed decimals."""
    point = "," if decimal_comma else "."
    return [_cell_text(_number_cells(v, 10.0**-int(d), int(d), point, b"")) for v, d in zip(values, decimals)]


def _analog_v(values_mps2: np.ndarray) -> np.ndarray:
    volts = ANALOG_ZERO_V + ANALOG_V_PER_G * values_mps2 / G0_MPS2
    return np.clip(np.round(volts / ANALOG_STEP_V) * ANALOG_STEP_V, 0.0, 5.0)


#: Cells with few possible texts: the 0/1 switches and the trouble code.
_CHOICE_SIGNALS = frozenset({"dtc", "brake", "lamp_abs", "lamp_esc"})


def _row_pieces(style: ExportStyle, chosen: tuple[Column, ...], *, vin: str, start_ms: np.ndarray,
                time_ms: np.ndarray, columns: dict[str, np.ndarray], polled: bool,
                read_lag_ms: dict[str, np.ndarray] | None = None,
                wheel_step_kph: float | None = None) -> list[np.ndarray | bytes]:
    """A row's text in file order, each cell with its delimiter (or the line end): words (n,) or (n, k)
    of uint64, characters (n, width) of uint8, or bytes the same on every row."""
    point = "," if style.decimal_comma else "."
    seps = [style.delimiter.encode("ascii")] * (len(chosen) - 1) + [b"\n"]
    pieces: list[np.ndarray | bytes] = []
    k = 0
    while k < len(chosen):
        col, sep = chosen[k], seps[k]
        if col.read_lag:
            pieces.append(_number_cells(read_lag_ms[col.signal], 1.0, 0, point, sep))
        elif col.signal in _CHOICE_SIGNALS:
            run = k
            while run < len(chosen) and chosen[run].signal in _CHOICE_SIGNALS and not chosen[run].read_lag:
                run += 1
            choices, codes = [], []
            for c in chosen[k:run]:
                values = columns[c.signal]
                if c.signal == "dtc":
                    lit = values != None  # noqa: E711 (element-wise on an object array)
                    choices.append((b"", str(values[lit][0]).encode("ascii") if lit.any() else b""))
                    codes.append(lit.astype(np.intp))
                else:
                    choices.append((b"0", b"1"))
                    codes.append(values.astype(np.intp))
            pieces.append(_choice_cells(choices, codes, seps[k:run]))
            k = run
            continue
        elif col.signal == "time":
            if style.relative_time:
                pieces.append(_seconds_cells(time_ms, point, sep))
            else:
                prefix = pieces.pop() if pieces and isinstance(pieces[-1], bytes) else b""
                pieces.append(_iso_utc_words(start_ms + time_ms, sep, prefix))
        elif col.signal == "vin":
            pieces.append(vin.encode("ascii") + sep)
        else:
            decimals = col.decimals_for(polled, wheel_step_kph)
            if col in style.analog_columns:
                pieces.append(_number_cells(_analog_v(columns[col.signal]), 10.0**-decimals, decimals, point, sep))
            else:
                pieces.append(_number_cells(columns[col.signal], 10.0**-decimals * col.si_per_unit, decimals,
                                            point, sep))
        k += 1
    return pieces


def _rows(pieces: list[np.ndarray | bytes], n: int) -> np.ndarray:
    """The pieces side by side as words, shape (n, words per row); a row's text is its bytes without NULs.

    Neighbouring characters and constants are joined into one block first, so
    only each block's end is padded to a whole word.
    """
    blocks: list[np.ndarray] = []
    chars: list[np.ndarray | bytes] = []
    for p in pieces + [np.empty((n, 0), np.uint64)]:
        if isinstance(p, np.ndarray) and p.dtype == np.uint64:
            if all(isinstance(c, bytes) for c in chars) and chars:  # the same words on every row
                blocks.append(_words([b"".join(chars)]))
            elif chars:
                chars = [c if isinstance(c, np.ndarray) else np.broadcast_to(np.frombuffer(c, np.uint8), (n, len(c)))
                         for c in chars]
                width = sum(c.shape[1] for c in chars)
                block = np.zeros((n, -(-width // 8) * 8), np.uint8)
                block[:, :width] = np.hstack(chars)
                blocks.append(block.view(np.uint64))
            chars = []
            blocks.append(p.reshape(n, -1))
        else:
            chars.append(p)
    rows = np.empty((n, sum(b.shape[1] for b in blocks)), np.uint64)
    at = 0
    for b in blocks:
        rows[:, at:at + b.shape[1]] = b
        at += b.shape[1]
    return rows


def _metadata(style: ExportStyle, chosen: tuple[Column, ...], vehicle_id: str, start_ms: int, n: int) -> bytes:
    lines = []
    if style.metadata:
        start = np.datetime_as_string(np.datetime64(int(start_ms), "ms"), unit="s", timezone="UTC")
        lines += [f"# vehicle: {vehicle_id}", f"# start: {start}", f"# rows: {n}"]
    lines.append(style.delimiter.join(c.header for c in chosen))
    return ("\n".join(lines) + "\n").encode("utf-8")


def write_trips_csv(paths: list[Path], style: ExportStyle, *, vehicle_id: str, vin: str, starts_ms: list[int],
                    lengths: list[int], time_ms: np.ndarray, columns: dict[str, np.ndarray], polled: bool,
                    analog: bool, read_lag_ms: dict[str, np.ndarray] | None = None,
                    wheel_step_kph: float | None = None) -> list[int]:
    """Write several trips of one vehicle, one file each; returns the bytes written per file.

    ``time_ms`` (from each trip's start) and the canonical SI ``columns`` hold
    the trips' rows one after the other, ``lengths`` rows each; a signal not
    in ``columns`` has no column (a telematics unit records few). ``polled``
    writes the coarser polled resolutions; ``read_lag_ms`` (a polled logger's
    per-cell read lags) adds companion columns where the style carries them;
    km/h wheel speeds get the decimals their logger's ``wheel_step_kph`` needs.
    Rows are formatted in fixed batches that may span trips, so a short trip
    costs no extra array calls; each file gets its slices of the batches' records.
    """
    chosen = logged_columns(style, columns, analog, read_lag_ms is not None)
    ends = np.cumsum(lengths)
    row_start_ms = np.repeat(np.asarray(starts_ms, dtype=np.int64), lengths)

    @functools.lru_cache(maxsize=1)
    def batch(k: int) -> np.ndarray:
        rows = slice(k * _BATCH_ROWS, min((k + 1) * _BATCH_ROWS, int(ends[-1])))
        pieces = _row_pieces(style, chosen, vin=vin, start_ms=row_start_ms[rows], time_ms=time_ms[rows],
                             columns={name: v[rows] for name, v in columns.items()}, polled=polled,
                             read_lag_ms=None if read_lag_ms is None else {n: v[rows] for n, v in read_lag_ms.items()},
                             wheel_step_kph=wheel_step_kph)
        return _rows(pieces, rows.stop - rows.start)

    for folder in dict.fromkeys(path.parent for path in paths):  # a vehicle's trips share one
        folder.mkdir(parents=True, exist_ok=True)
    sizes = []
    for path, start_ms, n, end in zip(paths, starts_ms, lengths, ends):
        with open(path, "wb") as fh:
            fh.write(_metadata(style, chosen, vehicle_id, start_ms, n))
            r = int(end - n)
            while r < end:
                k = r // _BATCH_ROWS
                stop = min(int(end), (k + 1) * _BATCH_ROWS)
                fh.write(batch(k)[r - k * _BATCH_ROWS:stop - k * _BATCH_ROWS].tobytes().translate(None, _NUL))
                r = stop
            sizes.append(fh.tell())
    return sizes


def write_trip_csv(path: Path, style: ExportStyle, *, vehicle_id: str, vin: str, start_ms: int, time_ms: np.ndarray,
                   columns: dict[str, np.ndarray], polled: bool, analog: bool,
                   read_lag_ms: dict[str, np.ndarray] | None = None, wheel_step_kph: float | None = None) -> int:
    """Write one trip's rows in ``style``; returns the bytes written. ``columns`` are canonical SI."""
    return write_trips_csv([path], style, vehicle_id=vehicle_id, vin=vin, starts_ms=[start_ms],
                           lengths=[len(time_ms)], time_ms=time_ms, columns=columns, polled=polled, analog=analog,
                           read_lag_ms=read_lag_ms, wheel_step_kph=wheel_step_kph)[0]
