"""What a data logger does to the signals: its rate, timestamp jitter, gaps, dropped,
duplicated and stale rows, missing cells.

Two logger kinds of our scenario (DESIGN.md, "Logger kinds"): a bus-capture
logger at the fleet's sample rate and a polled logger at half of it whose cells
are read up to 0.3 s apart, some stale.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from tracktrue.schema import NUMERIC_SIGNALS


@dataclass(frozen=True)
class LoggerProfile:
    name: str
    rate_factor: float  # of the fleet's sample rate
    jitter_s: float  # timestamp jitter (1-sigma), clipped at 40 % of a period
    gap_prob: float  # chance per trip of one logging gap
    gap_s: tuple[float, float]
    drop_row_prob: float
    dup_row_prob: float
    missing_cell_prob: float
    max_read_lag_s: float  # polled: a cell holds the value read this much before the row's time
    stale_prob: float  # polled: a cell repeats the previous row's value


LOGGERS: dict[str, LoggerProfile] = {
    "bus": LoggerProfile("bus", 1.0, 0.002, 0.10, (2.0, 20.0), 0.0005, 0.0003, 0.0005, 0.0, 0.0),
    "polled": LoggerProfile("polled", 0.5, 0.008, 0.20, (3.0, 40.0), 0.002, 0.001, 0.001, 0.3, 0.02),
}


def logger_rate_hz(profile: LoggerProfile, fleet_rate_hz: float) -> float:
    return max(fleet_rate_hz * profile.rate_factor, 1.0)


def apply_logger(signals: dict[str, np.ndarray], t_s: np.ndarray, rate_hz: float, profile: LoggerProfile,
                 rng: np.random.Generator) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """(row times in integer milliseconds from the trip start, logged columns)."""
    n = len(t_s)
    idx = np.arange(n)
    out = {}
    for name, values in signals.items():
        if profile.max_read_lag_s > 0 and name in NUMERIC_SIGNALS:
            lag = int(round(rng.uniform(0.0, profile.max_read_lag_s) * rate_hz))
            values = values[np.maximum(idx - lag, 0)]
        if profile.stale_prob > 0 and name in NUMERIC_SIGNALS:
            values = values[np.maximum(idx - (rng.random(n) < profile.stale_prob), 0)]
        out[name] = values
    keep = rng.random(n) >= profile.drop_row_prob
    if rng.random() < profile.gap_prob and n > 100:
        g0 = rng.uniform(0.1, 0.9) * t_s[-1]
        keep &= ~((t_s >= g0) & (t_s < g0 + rng.uniform(*profile.gap_s)))
    keep[[0, -1]] = True
    rows = np.repeat(idx[keep], 1 + (rng.random(int(keep.sum())) < profile.dup_row_prob))
    period = 1.0 / rate_hz
    jitter = np.clip(rng.normal(0.0, profile.jitter_s, n), -0.4 * period, 0.4 * period)
    jitter[0] = abs(jitter[0])
    time_ms = np.round((t_s + jitter) * 1000.0).astype(np.int64)[rows]
    logged = {}
    for name, values in out.items():
        values = values[rows]
        if name in NUMERIC_SIGNALS:
            values = np.where(rng.random(len(rows)) < profile.missing_cell_prob, np.nan, values)
        logged[name] = values
    return time_ms, logged
