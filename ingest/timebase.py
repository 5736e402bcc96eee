"""Time bases: every accepted row gets an absolute UTC time in microseconds.

What a time column may hold, and how it is read (``[time] format = "auto"``):

* ISO 8601 text with an offset or ``Z`` (``2026-03-02T07:14:00.250Z``,
  ``2026-03-02 08:14:00+01:00``); offsets may change within a file (DST).
  ISO text without an offset is used only with a profile ``[time] timezone``
  or a ``# timezone:`` metadata line (fixed ``+01:00`` or an IANA name);
  otherwise those rows are rejected, never assumed to be UTC.
* Numbers. The header's unit says seconds (``[s]``, default) or
  milliseconds (``[ms]``); a header without a unit whose values exceed 1e11 is
  epoch milliseconds. Seconds above 1e8 (after 1973-03-03) are epoch
  seconds; smaller values are seconds relative to the start of the log,
  which then comes from a ``# start: <ISO time with offset>`` metadata line,
  else from a UTC timestamp in the file name (``20260302T071400Z`` or
  ``2026-03-02T07-14-00Z``); without either the file is unusable.
"""

from __future__ import annotations

import datetime as dt
import re
import zoneinfo
from dataclasses import dataclass

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from ingest.reader import FileUnusable, to_float

EPOCH_S_MIN = 1e8
EPOCH_MS_MIN = 1e11
_ISO_RE = r"^\d{4}-\d{2}-\d{2}[T ]\d{2}:\d{2}(:\d{2}([.,]\d+)?)?\s*(Z|z|[+-]\d{2}(:?\d{2})?)?$"
_OFFSET_RE = r"(Z|z|[+-]\d{2}(:?\d{2})?)$"
_NAME_STAMP = re.compile(r"(\d{4})-?(\d{2})-?(\d{2})T(\d{2})[-:]?(\d{2})[-:]?(\d{2})Z")
_FIXED_OFFSET = re.compile(r"^(?:UTC)?([+-])(\d{2}):?(\d{2})$")


@dataclass(frozen=True)
class TimeResult:
    """Microseconds since the epoch (UTC) per row; ``bad`` rows carry a reason."""

    us: np.ndarray  # int64, meaningful where ~bad
    bad: np.ndarray  # bool
    reasons: dict[str, np.ndarray]  # reason -> mask (subset of bad)
    basis: str  # e.g. "iso", "epoch_s", "relative_s from # start"


def parse_time(col: pa.Array, unit: str | None, fmt: str, timezone: str | None,
               start_meta: str | None, file_name: str, decimal_comma: bool) -> TimeResult:
    """Read a time column into UTC microseconds (see the module docstring)."""
    missing = col.is_null().to_numpy(zero_copy_only=False)
    text = col if pa.types.is_string(col.type) else col.cast(pa.string())
    if fmt == "iso" or (fmt == "auto" and _mostly_iso(text)):
        return _iso(text, missing, timezone)
    values, not_number = to_float(col, decimal_comma)
    unit_key = (unit or "").strip().lower()
    if unit_key in ("ms", "msec", "milliseconds") or fmt in ("epoch_ms", "relative_ms"):
        seconds = values / 1000.0
    elif unit_key in ("", "s", "sec", "seconds", "utc"):
        seconds = values
        finite = values[np.isfinite(values)]
        if fmt == "auto" and not unit_key and len(finite) and np.median(finite) > EPOCH_MS_MIN:
            seconds = values / 1000.0
    else:
        raise FileUnusable(f"time column unit {unit!r} is not s or ms")
    finite = seconds[np.isfinite(seconds)]
    if len(finite) == 0:  # nothing to tell the time base by: every row is rejected on its own
        unreadable = ~missing
        return TimeResult(np.zeros(len(col), np.int64), np.ones(len(col), bool),
                          {"is missing": missing, _unreadable_reason(text): unreadable}, "none")
    epoch = fmt in ("epoch_s", "epoch_ms") or (fmt == "auto" and np.median(finite) > EPOCH_S_MIN)
    if epoch:
        offset_us, basis = 0, "epoch"
    else:
        offset_us, basis = _relative_start(start_meta, file_name)
    us = np.round(np.nan_to_num(seconds) * 1e6).astype(np.int64) + offset_us
    reasons = {"is not a number": not_number}
    if epoch:
        reasons["is outside the years 2000..2100"] = np.isfinite(seconds) & ((seconds < 946684800) | (seconds > 4102444800))
    else:
        reasons["is a negative relative time"] = np.isfinite(seconds) & (seconds < 0)
    reasons = {"is missing": missing, **reasons}
    bad = np.logical_or.reduce(list(reasons.values())) | ~np.isfinite(seconds)
    return TimeResult(us, bad, reasons, basis)


_TIME_OF_DAY_RE = r"^\s*\d{1,2}:\d{2}(:\d{2}([.,]\d+)?)?\s*(Z|z|[+-]\d{2}(:?\d{2})?)?\s*$"

#: Time texts that are neither ISO 8601 nor numbers but common in exports, and what to do instead.
_UNREADABLE_HINTS: tuple[tuple[str, str], ...] = (
    (_TIME_OF_DAY_RE,
     "is a time of day without a date (add a Date column in ISO 8601, e.g. 2026-03-02, or export ISO 8601 "
     "date-times with an offset, e.g. 2026-03-02T07:14:00Z, or seconds since a '# start:' line)"),
    (r"^\s*\d{1,2}[./]\d{1,2}[./]\d{2,4}",
     "is a slash- or dot-separated date, whose day/month order is ambiguous (export ISO 8601 date-times "
     "with an offset, e.g. 2026-03-02T07:14:00Z)"),
)


def times_of_day(text: pa.Array) -> bool:
    """Whether most of a time column's values are times of day (``07:14:00.250``)."""
    return _mostly_matching(text, _TIME_OF_DAY_RE)


def _unreadable_reason(text: pa.Array) -> str:
    """Why a time column none of whose values is ISO 8601 or a number cannot be read, with a hint
    where most values take a form exports commonly use."""
    for pattern, reason in _UNREADABLE_HINTS:
        if _mostly_matching(text, pattern):
            return reason
    return "is neither an ISO 8601 time nor a number"


def _mostly_matching(text: pa.Array, pattern: str) -> bool:
    """Whether more than half of the first 1000 known texts match ``pattern``."""
    sample = text.drop_null().slice(0, 1000)
    return len(sample) > 0 and _count_matching(sample, pattern) * 2 > len(sample)


def _mostly_iso(text: pa.Array) -> bool:
    valid = text.drop_null()
    if len(valid) == 0:
        return False
    sample = valid.slice(0, 1000)
    iso = _count_matching(sample, r"^\s*\d{4}-\d{2}-\d{2}[T ]")
    number = _count_matching(sample, r"^\s*[+-]?(\d+[.,]?\d*|[.,]\d+)([eE][+-]?\d+)?\s*$")
    return iso > 0 and iso >= number


def _count_matching(sample: pa.Array, pattern: str) -> int:
    """How many texts of ``sample`` match the regular expression ``pattern``."""
    return pc.sum(pc.match_substring_regex(sample, pattern)).as_py() or 0


def _iso(text: pa.Array, missing: np.ndarray, timezone: str | None) -> TimeResult:
    try:  # fast path: every cell has an offset and parses (Arrow's ISO 8601 parser)
        ts = pc.cast(text, pa.timestamp("us", tz="UTC")).to_numpy(zero_copy_only=False)
        us = np.where(missing, 0, ts.astype("datetime64[us]").astype(np.int64))
        return TimeResult(us, missing.copy(), {"is missing": missing}, "iso")
    except pa.ArrowInvalid:
        pass
    s = pc.utf8_trim_whitespace(text)
    s = pc.replace_substring_regex(s, r"(\d{2}:\d{2}:\d{2}),(\d)", r"\1.\2")
    looks = pc.fill_null(pc.match_substring_regex(s, _ISO_RE), False).to_numpy(zero_copy_only=False)
    has_offset = pc.fill_null(pc.match_substring_regex(s, _OFFSET_RE), False).to_numpy(zero_copy_only=False)
    us = np.zeros(len(s), np.int64)
    unparsed = ~looks & ~missing
    with_off = looks & has_offset
    us, failed = _cast_utc(s, with_off, us)
    naive = looks & ~has_offset
    no_zone = np.zeros(len(s), bool)
    if naive.any():
        if timezone is None:
            no_zone = naive
        else:
            us, failed_naive = _localise(s, naive, us, timezone)
            failed |= failed_naive
    reasons = {
        "is missing": missing,
        "is not an ISO 8601 timestamp": unparsed | failed,
        "has no UTC offset (add Z or +hh:mm, or give a profile [time] timezone or a # timezone: line)": no_zone,
    }
    bad = np.logical_or.reduce(list(reasons.values()))
    return TimeResult(us, bad, reasons, "iso")


def _cast_utc(s: pa.Array, rows: np.ndarray, us: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    failed = np.zeros(len(s), bool)
    if not rows.any():
        return us, failed
    idx = np.flatnonzero(rows)
    part = s.take(pa.array(idx))
    try:
        ts = pc.cast(part, pa.timestamp("us", tz="UTC"))
        values = ts.to_numpy(zero_copy_only=False).astype("datetime64[us]").astype(np.int64)
        ok = np.ones(len(idx), bool)
    except pa.ArrowInvalid:  # e.g. month 13 in one row: fall back to element-wise coercion
        parsed = pd.to_datetime(part.to_pandas(), utc=True, format="ISO8601", errors="coerce").dt.as_unit("us")
        ok = parsed.notna().to_numpy()
        values = np.where(ok, parsed.array.asi8, 0)
    us = us.copy()
    us[idx] = values
    failed[idx] = ~ok
    return us, failed


def _localise(s: pa.Array, rows: np.ndarray, us: np.ndarray, timezone: str) -> tuple[np.ndarray, np.ndarray]:
    tz = zone(timezone)
    idx = np.flatnonzero(rows)
    part = pd.to_datetime(s.take(pa.array(idx)).to_pandas(), format="ISO8601", errors="coerce")
    local = part.dt.tz_localize(tz, ambiguous="NaT", nonexistent="NaT").dt.tz_convert("UTC").dt.as_unit("us")
    ok = local.notna().to_numpy()
    us = us.copy()
    us[idx] = np.where(ok, local.array.asi8, 0)
    failed = np.zeros(len(s), bool)
    failed[idx] = ~ok
    return us, failed


def zone(name: str) -> dt.tzinfo:
    """A fixed offset (``+01:00``, ``UTC-05:00``) or an IANA zone name."""
    m = _FIXED_OFFSET.match(name.strip())
    if m:
        sign = 1 if m.group(1) == "+" else -1
        return dt.timezone(sign * dt.timedelta(hours=int(m.group(2)), minutes=int(m.group(3))))
    if name.strip().upper() in ("UTC", "Z"):
        return dt.timezone.utc
    try:
        return zoneinfo.ZoneInfo(name.strip())
    except (zoneinfo.ZoneInfoNotFoundError, ValueError):
        raise FileUnusable(f"unknown time zone {name!r} (use +hh:mm or an IANA name)") from None


def parse_instant(text: str) -> pd.Timestamp | None:
    """An ISO 8601 instant with offset or Z, as UTC; None if it has no offset or is unreadable."""
    text = text.strip()
    if not re.search(_OFFSET_RE, text):
        return None
    try:
        ts = pd.Timestamp(text)
    except ValueError:
        return None
    return ts.tz_convert("UTC") if ts.tzinfo is not None else None


def _relative_start(start_meta: str | None, file_name: str) -> tuple[int, str]:
    if start_meta is not None:
        ts = parse_instant(start_meta)
        if ts is None:
            raise FileUnusable(f"'# start: {start_meta}' is not an ISO 8601 time with offset or Z")
        return int(ts.value // 1000), "relative to # start"
    m = _NAME_STAMP.search(file_name)
    if m:
        y, mo, d, h, mi, s = (int(g) for g in m.groups())
        try:
            ts = pd.Timestamp(dt.datetime(y, mo, d, h, mi, s, tzinfo=dt.timezone.utc))
        except ValueError:
            raise FileUnusable(f"file name timestamp {m.group(0)!r} is not a valid time") from None
        return int(ts.value // 1000), "relative to the file name's timestamp"
    raise FileUnusable("relative time with no start: add a '# start: 2026-03-02T07:14:00Z' line "
                       "or a UTC timestamp such as 20260302T071400Z to the file name")
