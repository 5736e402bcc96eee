"""Column plan: which header feeds which canonical signal, and how to convert it to SI.

Profile rules win over the built-in grammar. A problem with one column
(missing or unknown unit, a voltage without calibration) is a column error:
that column is not used, the others are. A second column for a signal
already read (e.g. an analog copy of an accelerometer) is only a warning.

Read-lag companions: a polled logger reads the cells of one row one after
another, so a cell may hold a value read some time before the row's time
stamp. A column whose header is a signal column's header (as written, or its
name without the bracketed unit) followed by ``@ms``, e.g. ``Wheel speed FL
[km/h]`` with ``Wheel speed FL @ms``, holds that lag in integer milliseconds
for each cell; ingest/skew.py moves each numeric value to its own read time.
A companion of a column that is not used is a warning.

Units row: data-acquisition exports often put the units on a line of their
own under the names (``Time,Speed FL`` then ``s,km/h``). Such a line — no
numbers, most of its cells known units — is not data: each known unit joins
its column's name (``Speed FL [km/h]``) unless the name carries one already.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from ingest import grammar
from ingest.profile import ColumnRule, Profile
from ingest.reader import LogText, is_number, line_text, split_fields
from tracktrue.units import G0_MPS2


@dataclass(frozen=True)
class Column:
    """One used column: where it is, what it is, how to bring it to SI."""

    index: int
    header: str
    signal: str
    unit: str | None
    factor: float | None = None  # to SI; None for voltages (see rule) and non-numeric signals
    rule: ColumnRule | None = None

    @property
    def quantity(self) -> str:
        return grammar.QUANTITY[self.signal]

    def to_si(self, raw: np.ndarray) -> np.ndarray:
        """Profile scale/offset, then unit (or voltage calibration), then optional sign flip."""
        rule = self.rule
        value = raw if rule is None else raw * rule.scale + rule.offset
        if self.factor is None:  # analog accelerometer: volts -> g -> m/s^2
            value = (value - rule.zero_v) / rule.v_per_g * G0_MPS2
        else:
            value = value * self.factor
        return -value if rule is not None and rule.invert else value


@dataclass(frozen=True)
class ColumnPlan:
    columns: dict[str, Column]  # canonical signal -> column
    lags: dict[str, int]  # canonical signal -> index of its read-lag companion column (ms)
    ignored: list[str]  # headers not used: not recognised, or a second column for a signal (warnings)
    errors: list[str]  # column-level errors


def with_units_row(log: LogText) -> LogText:
    """``log`` with a units row under its header joined to the names (module docstring), else as it is."""
    if not len(log.data_lines):
        return log
    first = int(log.data_lines[0])
    cells = [c.strip().strip("[]()").strip() for c in
             split_fields(line_text(log.data, log.line_starts, log.line_stops, first - 1), log.delimiter)]
    written = [c for c in cells if c]
    if abs(len(cells) - len(log.header)) > 1 or not written or any(is_number(c) for c in written):
        return log
    known = [c if grammar.normalise_unit(c) in grammar.UNITS else "" for c in cells]
    if sum(map(bool, known)) * 2 <= len(written):
        return log
    header = [f"{name} [{unit}]" if unit and grammar.split_unit(name)[1] is None else name
              for name, unit in zip(log.header, known + [""] * (len(log.header) - len(known)))]
    return replace(log, header=header, data_lines=log.data_lines[1:])


def plan_columns(header: list[str], profile: Profile) -> ColumnPlan:
    """Map each header to a canonical signal, or say why it is not used."""
    columns: dict[str, Column] = {}
    ignored: list[str] = []
    errors: list[str] = []
    companions: list[tuple[int, str]] = []
    for index, text in enumerate(header):
        if text.strip().lower().endswith(LAG_SUFFIX):
            companions.append((index, text))
            continue
        rec = grammar.recognise(text)
        name_only = grammar.split_unit(text)[0]
        rule = profile.rule_for(text, name_only)
        signal = rule.signal if rule else rec.signal
        unit = (rule.unit if rule and rule.unit else None) or rec.unit
        if signal == "ignore":
            continue
        if signal is None:
            if text:
                ignored.append(text)
            continue
        if signal in columns:  # the signal is recorded already: a warning, not a column error
            ignored.append(f"{text} (also {signal}, already read from {columns[signal].header!r})")
            continue
        factor = None
        if grammar.QUANTITY[signal] in grammar.NUMERIC_QUANTITIES:
            factor, problem = grammar.unit_factor(signal, unit)
            if problem is None and factor is None and (rule is None or rule.v_per_g is None):
                problem = (f"a voltage ({unit}) needs the sensor's zero point and sensitivity "
                           "(profile keys zero_v and v_per_g)")
            if problem:
                errors.append(f"column {text!r}: {problem}; not used")
                continue
        columns[signal] = Column(index, text, signal, unit, factor, rule)
    return ColumnPlan(columns, _lag_columns(companions, columns, ignored), ignored, errors)


#: Ends the header of a read-lag companion column (module docstring).
LAG_SUFFIX = "@ms"


def _lag_columns(companions: list[tuple[int, str]], columns: dict[str, Column], ignored: list[str]) -> dict[str, int]:
    """Numeric signal -> its companion's column index.

    A companion of a switch or text column (brake, lamps, trouble codes) is
    recognised and not applied: a lamp read a few hundred ms late changes no
    per-trip lamp figure. A companion of no column read goes to ``ignored``.
    """
    by_name: dict[str, str] = {}
    for signal, col in columns.items():
        by_name[col.header.strip().lower()] = signal
        by_name.setdefault(grammar.split_unit(col.header)[0].strip().lower(), signal)
    lags: dict[str, int] = {}
    for index, text in companions:
        signal = by_name.get(text.strip()[: -len(LAG_SUFFIX)].strip().lower())
        if signal is None:
            ignored.append(f"{text} (a read-lag column of no column read)")
        elif signal in lags:
            ignored.append(f"{text} (a second read-lag column for {columns[signal].header})")
        elif grammar.QUANTITY[signal] in grammar.NUMERIC_QUANTITIES:
            lags[signal] = index
    return lags
