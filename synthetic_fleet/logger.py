"""What a data logger does to the signals: its rate, resolution, timestamp jitter, gaps, dropped,
duplicated and stale rows, missing cells, and which signals it records at all.

Three logger kinds (DESIGN.md, "Logger kinds"), the ground truth's vocabulary:

- ``bus_capture`` records the broadcast bus at the fleet's sample rate (times the
  configuration's factor) with fine resolution.
- ``polled`` asks the ABS/ESC module for manufacturer PIDs one after another, a
  row every 1/rate s: each cell was read 50–300 ms before the row's time stamp
  (the read lags are logged beside the values in export style A), some cells
  repeat the previous reading (stale), wheel speeds come in 0.1–1 km/h steps.
  The simulation runs on a ``POLL_GRID_HZ`` grid so that read times are real.
- ``telematics`` records vehicle speed, the lamps and trouble codes only.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from synthetic_fleet.draws import bernoulli_successes
from synthetic_fleet.segments import Segments
from tracktrue.schema import NUMERIC_SIGNALS, WHEEL_SPEED_COLUMNS
from tracktrue.units import KPH_MPS

LOGGER_KINDS: tuple[str, ...] = ("bus_capture", "polled", "telematics")
#: Simulation grid of a polled logger: read lags are whole steps of it (50 ms).
POLL_GRID_HZ = 20.0
#: A polled row's time stamp follows its grid instant by at most this (the row is written after the reads).
POLL_STAMP_DELAY_S = 0.04


@dataclass(frozen=True)
class LoggerProfile:
    name: str  # one of LOGGER_KINDS
    rate_factor: float  # of the fleet's sample rate (when rate_hz is None)
    jitter_s: float  # timestamp jitter (1-sigma), clipped at 40 % of a period
    gap_prob: float  # chance per trip of one logging gap
    gap_s: tuple[float, float]
    drop_row_prob: float
    dup_row_prob: float
    missing_cell_prob: float
    read_lag_s: tuple[float, float] | None = None  # polled: a cell's read precedes its row's stamp by this much
    stale_prob: float = 0.0  # polled: a cell repeats the previous row's value
    rate_hz: float | None = None  # an absolute row rate (polled, telematics)
    wheel_step_kph: float = 0.01  # the wheel speeds' logged step
    signals: frozenset[str] | None = None  # the signals recorded (None: all)

    @property
    def grid_hz(self) -> float | None:
        """The simulation grid this logger needs (None: its own row rate)."""
        return POLL_GRID_HZ if self.read_lag_s is not None else None


LOGGERS: dict[str, LoggerProfile] = {
    "bus_capture": LoggerProfile("bus_capture", 1.0, 0.002, 0.10, (2.0, 20.0), 0.0005, 0.0003, 0.0005),
    "polled": LoggerProfile("polled", 0.5, 0.008, 0.20, (3.0, 40.0), 0.002, 0.001, 0.001, (0.05, 0.30), 0.02,
                            rate_hz=5.0, wheel_step_kph=0.1),
    "telematics": LoggerProfile("telematics", 1.0, 0.02, 0.05, (5.0, 60.0), 0.003, 0.0, 0.0, rate_hz=1.0,
                                wheel_step_kph=1.0,
                                signals=frozenset({"vehicle_speed", "lamp_abs", "lamp_esc", "dtc"})),
}


def logger_rate_hz(profile: LoggerProfile, fleet_rate_hz: float) -> float:
    """The logger's row rate."""
    return profile.rate_hz if profile.rate_hz is not None else max(fleet_rate_hz * profile.rate_factor, 1.0)


def grid_rate_hz(profile: LoggerProfile, fleet_rate_hz: float) -> float:
    """The rate of the simulation grid the logger's rows are taken from."""
    return profile.grid_hz or logger_rate_hz(profile, fleet_rate_hz)


def _row_step(profile: LoggerProfile, grid_hz: float, row_hz: float) -> int:
    return max(int(round(grid_hz / row_hz)), 1)


@dataclass(frozen=True)
class LoggedRows:
    """Which grid sample each logged cell shows: a logger's rows, decided before any signal is known
    (a logger's timing does not depend on the values it reads)."""

    time_ms: np.ndarray  # each row's stamp, ms from its trip's start
    n_rows: np.ndarray  # rows per trip
    sources: dict[str, np.ndarray]  # per recorded signal: the grid sample each row's cell shows
    missing: dict[str, np.ndarray]  # per numeric signal: rows whose cell is empty
    read_lag_ms: dict[str, np.ndarray] | None  # polled: each cell's read lag behind its row's stamp
    wheel_step_kph: float

    def needed(self, names, n_samples: int) -> np.ndarray:
        """The grid samples (of ``n_samples``) that the cells of ``names`` show, sorted."""
        read = np.zeros(n_samples, dtype=bool)
        for name in names:
            read[self.sources[name]] = True
        return np.flatnonzero(read)

    def gather(self, signals: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
        """The logged columns: each recorded signal at its cells' samples, wheel speeds in the logger's
        step, empty cells NaN."""
        logged = {}
        for name, source in self.sources.items():
            column = signals[name][source]
            if name in WHEEL_SPEED_COLUMNS:
                unit = self.wheel_step_kph * KPH_MPS
                column = np.round(column / unit) * unit
            if name in self.missing:
                column[self.missing[name]] = np.nan
            logged[name] = column
        return logged


def _struck_cells(per_trip: list[tuple[np.ndarray, np.ndarray]], starts: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(signal index, row of all trips' rows) of the cells given per trip as (signal index, row in the trip)."""
    return (np.concatenate([signal for signal, _ in per_trip]),
            np.concatenate([row + start for (_, row), start in zip(per_trip, starts)]))


def plan_rows(t_s: np.ndarray, trips: Segments, grid_hz: float, profile: LoggerProfile,
              rngs: list[np.random.Generator], names: list[str], row_hz: float | None = None) -> LoggedRows:
    """The rows of the ``trips`` whose samples (on a ``grid_hz`` grid, times ``t_s`` from each trip's
    start) follow one another, for the signals ``names`` (those the logger records are kept), each trip
    with its own random stream.

    A row every ``grid_hz / row_hz`` grid samples; rows drop, one gap may
    open, rows duplicate, cells go missing. A polled logger's cells are read
    ``read_lag_s`` before the row's stamp (one lag per signal and trip, ±1 grid
    step per row) and may repeat the previous row's reading (stale); the read
    lag it logs is that of its read, stale or not.
    """
    names = [name for name in names if profile.signals is None or name in profile.signals]
    numeric = [name for name in names if name in NUMERIC_SIGNALS]
    step = _row_step(profile, grid_hz, row_hz or grid_hz)
    polled = profile.read_lag_s is not None
    if polled:
        lag_lo = max(int(np.ceil(profile.read_lag_s[0] * grid_hz - 1e-9)), 1)
        lag_hi = max(int(np.floor((profile.read_lag_s[1] - POLL_STAMP_DELAY_S) * grid_hz + 1e-9)), lag_lo)
    period = step / grid_hz
    lags, stale, rows, jitter, missing = [], [], [], [], []
    n_rows = np.zeros(len(trips.lengths), dtype=np.int64)
    for k, (rng, a, n) in enumerate(zip(rngs, trips.starts, trips.lengths)):
        first_row = min(lag_hi + 1, n - 1) if polled else 0  # a polled logger writes after its first reads
        candidates = np.arange(first_row, n, step)
        m = len(candidates)
        keep = np.ones(m, dtype=bool)
        keep[bernoulli_successes(rng, m, profile.drop_row_prob)] = False
        if rng.random() < profile.gap_prob and m > 100:
            t = t_s[a + candidates]
            g0 = rng.uniform(0.1, 0.9) * t[-1]
            keep &= ~((t >= g0) & (t < g0 + rng.uniform(*profile.gap_s)))
        keep[[0, -1]] = True
        kept = candidates[keep]
        copies = np.ones(len(kept), dtype=np.int64)
        copies[bernoulli_successes(rng, len(kept), profile.dup_row_prob)] = 2
        rows.append(a + np.repeat(kept, copies))
        n_rows[k] = len(rows[-1])
        jitter.append(np.repeat(rng.standard_normal(len(kept), dtype=np.float32), copies))  # a copy, stamp and all
        if polled:
            base = rng.integers(lag_lo, lag_hi + 1, len(names))
            lag = np.clip(base[:, None] + rng.integers(-1, 2, (len(names), len(kept))), lag_lo, lag_hi)
            lags.append(np.repeat(lag, copies, axis=1))
        signal, row = np.divmod(bernoulli_successes(rng, len(numeric) * n_rows[k], profile.stale_prob), n_rows[k])
        stale.append((signal, row))
        missing.append(np.divmod(bernoulli_successes(rng, len(numeric) * n_rows[k], profile.missing_cell_prob),
                                 n_rows[k]))
    rows = np.concatenate(rows)
    out = Segments.of(n_rows)
    jitter = np.concatenate(jitter)
    if polled:
        jitter = np.minimum(np.abs(jitter) * profile.jitter_s, POLL_STAMP_DELAY_S)
    else:
        jitter = np.clip(profile.jitter_s * jitter, -0.4 * period, 0.4 * period)
        jitter[out.starts] = np.abs(jitter[out.starts])
    time_ms = np.round((t_s[rows] + jitter) * 1000.0).astype(np.int64)
    stale_signal, stale_row = _struck_cells(stale, out.starts)
    missing_signal, missing_row = _struck_cells(missing, out.starts)
    lags = np.concatenate(lags, axis=1) if polled else None  # (signals, rows)
    sources, empty, read_lag_ms = {}, {}, {} if polled else None
    opens_trip = np.zeros(len(rows), dtype=bool)  # a trip's first row has no previous reading to repeat
    opens_trip[out.starts] = True
    for i, name in enumerate(names):
        source = rows - lags[i] if polled else rows
        if polled:
            read_lag_ms[name] = time_ms - np.round(t_s[source] * 1000.0).astype(np.int64)
        if name in NUMERIC_SIGNALS:
            j = numeric.index(name)
            struck = stale_row[stale_signal == j]
            struck = struck[~opens_trip[struck]]
            if len(struck):
                source = source.copy()
                source[struck] = source[struck - 1]  # the previous row's reading, again
            empty[name] = missing_row[missing_signal == j]
        sources[name] = source
    return LoggedRows(time_ms, n_rows, sources, empty, read_lag_ms, profile.wheel_step_kph)
