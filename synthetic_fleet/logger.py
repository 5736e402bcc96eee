"""What a data logger does to the signals: its rate, timestamp jitter, gaps, dropped,
duplicated and stale rows, missing cells.

Two logger kinds of our scenario (DESIGN.md, "Logger kinds"): a bus-capture
logger at the fleet's sample rate and a polled logger at half of it whose cells
are read up to 0.3 s apart, some stale.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from synthetic_fleet.draws import bernoulli_successes
from synthetic_fleet.segments import Segments
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


def apply_logger_trips(signals: dict[str, np.ndarray], t_s: np.ndarray, trips: Segments, rate_hz: float,
                       profile: LoggerProfile, rngs: list[np.random.Generator]
                       ) -> tuple[np.ndarray, dict[str, np.ndarray], np.ndarray]:
    """(row times in integer milliseconds from each trip's start, logged columns, rows per trip) of the
    ``trips`` whose samples follow one another in ``signals``, each logged with its own random stream.

    Each numeric cell is read up to ``max_read_lag_s`` before its row (one lag
    per signal and trip) and may repeat the previous row's reading (stale);
    rows drop, one gap may open, rows duplicate, cells go missing. Every
    column is gathered once, from the source sample its cell shows.
    """
    numeric = [name for name in signals if name in NUMERIC_SIGNALS]
    period = 1.0 / rate_hz
    lags, stale, rows, jitter, missing = [], [], [], [], []
    n_rows = np.zeros(len(trips.lengths), dtype=np.int64)
    for k, (rng, a, n) in enumerate(zip(rngs, trips.starts, trips.lengths)):
        lags.append(np.rint(rng.uniform(0.0, profile.max_read_lag_s, len(numeric)) * rate_hz).astype(np.int64)
                    if profile.max_read_lag_s > 0 else np.zeros(len(numeric), np.int64))
        signal, row = np.divmod(bernoulli_successes(rng, len(numeric) * n, profile.stale_prob), n)
        stale.append((signal, a + row))
        keep = np.ones(n, dtype=bool)
        keep[bernoulli_successes(rng, n, profile.drop_row_prob)] = False
        if rng.random() < profile.gap_prob and n > 100:
            t = t_s[a:a + n]
            g0 = rng.uniform(0.1, 0.9) * t[-1]
            keep &= ~((t >= g0) & (t < g0 + rng.uniform(*profile.gap_s)))
        keep[[0, -1]] = True
        kept = np.flatnonzero(keep)
        copies = np.ones(len(kept), dtype=np.int64)
        copies[bernoulli_successes(rng, len(kept), profile.dup_row_prob)] = 2
        rows.append(a + np.repeat(kept, copies))
        n_rows[k] = len(rows[-1])
        jitter.append(rng.standard_normal(n, dtype=np.float32))
        missing.append(np.divmod(bernoulli_successes(rng, len(numeric) * n_rows[k], profile.missing_cell_prob),
                                 n_rows[k]))
    rows = np.concatenate(rows)
    out_start = np.cumsum(n_rows) - n_rows
    jitter = np.clip(profile.jitter_s * np.concatenate(jitter), -0.4 * period, 0.4 * period)
    jitter[trips.starts] = np.abs(jitter[trips.starts])
    time_ms = np.round((t_s + jitter) * 1000.0).astype(np.int64)[rows]
    stale_signal, stale_sample = (np.concatenate(x) for x in zip(*stale))
    missing_signal, missing_row = (np.concatenate(x) for x in zip(*[(s, out_start[k] + r)
                                                                     for k, (s, r) in enumerate(missing)]))
    lags = np.array(lags).T  # (signals, trips)
    logged = {}
    for name, values in signals.items():
        if name not in NUMERIC_SIGNALS:
            logged[name] = values[rows]
            continue
        i = numeric.index(name)
        struck = stale_sample[stale_signal == i]
        if lags[i].any() or len(struck):
            first = trips.spread(trips.starts)
            source = np.maximum(np.arange(trips.total) - trips.spread(lags[i]), first)
            source[struck] = source[np.maximum(struck - 1, first[struck])]  # the previous row's reading, again
            column = values[source[rows]]
        else:
            column = values[rows]
        column[missing_row[missing_signal == i]] = np.nan
        logged[name] = column
    return time_ms, logged, n_rows
