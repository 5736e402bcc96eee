"""Mapping profiles: how to read an export whose headers the grammar does not know.

A profile is a TOML file (read with the standard library's ``tomllib``)
passed as ``tracktrue ingest --profile FILE.toml``. It applies to every file
of the run. Columns it names are mapped as it says; all other columns are
still recognised by the built-in header grammar (ingest/grammar.py).

Format (see ingest/profile_example.toml)::

    [time]                    # optional
    format = "auto"           # auto | iso | epoch_s | epoch_ms | relative_s | relative_ms
    timezone = "+01:00"       # for ISO timestamps written without offset:
                              # a fixed offset or an IANA zone name ("Europe/Vienna")

    [columns."Header as written"]
    signal = "accel_long"     # a canonical signal (wheel_speed_fl|fr|rl|rr, vehicle_speed,
                              # yaw_rate, steering_angle, accel_long, accel_lat, brake,
                              # lamp_abs, lamp_esc, dtc, odometer, time, vehicle_id, vin)
                              # or "ignore"
    unit = "V"                # optional when the header carries its unit; overrides it
    scale = 1.0               # optional: value = raw * scale + offset, in `unit`,
    offset = 0.0              #   before conversion to SI
    invert = false            # optional: flip the sign after conversion (e.g. yaw
                              #   positive to the right, ISO 8855 wants left)
    zero_v = 2.5              # analog accelerometers (unit "V") only: output at 0 g
    v_per_g = 0.8             #   and sensitivity; a_g = (volts - zero_v) / v_per_g

A header key matches a column when it equals the header as written, or the
header's name without its bracketed unit, ignoring case and surrounding
spaces. A voltage column needs both ``zero_v`` and ``v_per_g`` (there is no
default: a 5 V-referenced sensor resting near 2.5 V is common practice, not a
rule, and guessing would bias every trip). Anything the profile gets wrong is
an error naming the file, the key and the problem, before any data is read.
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

from ingest import grammar
from ingest.reader import FileUnusable
from ingest.timebase import zone
from tracktrue.errors import UserError

TIME_FORMATS = ("auto", "iso", "epoch_s", "epoch_ms", "relative_s", "relative_ms")
_COLUMN_KEYS = {"signal", "unit", "scale", "offset", "invert", "zero_v", "v_per_g"}
_SIGNALS = set(grammar.QUANTITY) | {"ignore"}


@dataclass(frozen=True)
class ColumnRule:
    """How one column is read: its signal, unit and linear/analog conversion."""

    signal: str
    unit: str | None = None
    scale: float = 1.0
    offset: float = 0.0
    invert: bool = False
    zero_v: float | None = None
    v_per_g: float | None = None


@dataclass(frozen=True)
class Profile:
    """A parsed mapping profile; the empty profile maps nothing."""

    columns: dict[str, ColumnRule] = field(default_factory=dict)
    time_format: str = "auto"
    timezone: str | None = None
    source: str = "(none)"

    def rule_for(self, header: str, name_without_unit: str) -> ColumnRule | None:
        for key in (header.strip().lower(), name_without_unit.strip().lower()):
            if key in self.columns:
                return self.columns[key]
        return None


def load_profile(path: str | Path | None) -> Profile:
    """Read and check a profile; raise UserError naming the key and the problem."""
    if path is None:
        return Profile()
    path = Path(path)
    try:
        doc = tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise UserError(f"profile {path} does not exist") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise UserError(f"profile {path} cannot be read: {exc}") from None
    except tomllib.TOMLDecodeError as exc:
        raise UserError(f"profile {path} is not valid TOML: {exc}") from None
    unknown = set(doc) - {"time", "columns"}
    if unknown:
        raise UserError(f"profile {path}: unknown section(s) {sorted(unknown)}; expected [time] and [columns.\"...\"]")
    time = doc.get("time", {})
    _expect_table(path, "time", time)
    bad_time = set(time) - {"format", "timezone"}
    if bad_time:
        raise UserError(f"profile {path}: unknown key(s) {sorted(bad_time)} in [time]")
    fmt = time.get("format", "auto")
    if fmt not in TIME_FORMATS:
        raise UserError(f"profile {path}: [time] format = {fmt!r}; expected one of {', '.join(TIME_FORMATS)}")
    tz = time.get("timezone")
    if tz is not None and not isinstance(tz, str):
        raise UserError(f"profile {path}: [time] timezone must be text such as \"+01:00\" or \"Europe/Vienna\"")
    if tz is not None:
        try:
            zone(tz)
        except FileUnusable as exc:  # the same check a file's '# timezone:' line gets, but once, for every file
            raise UserError(f"profile {path}: [time] timezone: {exc}") from None
    columns_doc = doc.get("columns", {})
    _expect_table(path, "columns", columns_doc)
    columns = {}
    for header, spec in columns_doc.items():
        columns[header.strip().lower()] = _column_rule(path, header, spec)
    return Profile(columns=columns, time_format=fmt, timezone=tz, source=str(path))


def _expect_table(path: Path, key: str, value) -> None:
    if not isinstance(value, dict):
        raise UserError(f"profile {path}: {key} must be a table ([{key}])")


def _column_rule(path: Path, header: str, spec) -> ColumnRule:
    where = f"profile {path}: [columns.{header!r}]"
    if not isinstance(spec, dict):
        raise UserError(f"{where} must be a table with at least signal = \"...\"")
    unknown = set(spec) - _COLUMN_KEYS
    if unknown:
        raise UserError(f"{where}: unknown key(s) {sorted(unknown)}; allowed: {', '.join(sorted(_COLUMN_KEYS))}")
    signal = spec.get("signal")
    if signal not in _SIGNALS:
        raise UserError(f"{where}: signal = {signal!r} is not a canonical signal ({', '.join(sorted(_SIGNALS))})")
    numbers = {}
    for key in ("scale", "offset", "zero_v", "v_per_g"):
        if key in spec:
            value = spec[key]
            if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
                raise UserError(f"{where}: {key} = {value!r} must be a finite number")
            numbers[key] = float(value)
    if "scale" in numbers and numbers["scale"] == 0:
        raise UserError(f"{where}: scale = 0 would erase the signal")
    invert = spec.get("invert", False)
    if not isinstance(invert, bool):
        raise UserError(f"{where}: invert = {invert!r} must be true or false")
    unit = spec.get("unit")
    if unit is not None and not isinstance(unit, str):
        raise UserError(f"{where}: unit must be text")
    if signal != "ignore" and unit is not None and grammar.QUANTITY[signal] in grammar.NUMERIC_QUANTITIES:
        factor, problem = grammar.unit_factor(signal, unit)
        if problem:
            raise UserError(f"{where}: {problem}")
    is_voltage = unit is not None and grammar.normalise_unit(unit) == "v"
    if is_voltage:
        if "zero_v" not in numbers or "v_per_g" not in numbers:
            raise UserError(f"{where}: a voltage column needs both zero_v and v_per_g")
        if numbers["v_per_g"] <= 0:
            raise UserError(f"{where}: v_per_g = {numbers['v_per_g']} must be positive")
    elif "zero_v" in numbers or "v_per_g" in numbers:
        raise UserError(f"{where}: zero_v / v_per_g only apply to unit = \"V\"")
    return ColumnRule(signal=signal, unit=unit, scale=numbers.get("scale", 1.0), offset=numbers.get("offset", 0.0),
                      invert=invert, zero_v=numbers.get("zero_v"), v_per_g=numbers.get("v_per_g"))
