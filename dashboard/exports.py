"""The inspection plan as a spreadsheet-safe CSV and as an iCalendar file.

CSV: a cell beginning with ``=``, ``+``, ``-``, ``@``, tab or carriage return
is run as a formula by common spreadsheet programs ("CSV injection", OWASP),
so such cells are prefixed with a single quote.

iCalendar follows RFC 5545: CRLF line ends (3.1), content lines folded so that
no line exceeds 75 octets, continuation lines starting with one space (3.1),
TEXT values escaping backslash, semicolon, comma and newline (3.3.11), every
VEVENT with UID and DTSTAMP (3.6.1), all-day events as DTSTART;VALUE=DATE with
DTEND the next day (3.6.1, 3.8.2.2).
"""

from __future__ import annotations

import csv
import datetime as dt
import hashlib
import io

import pandas as pd

FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
ICS_MAX_OCTETS = 75
CRLF = "\r\n"


def neutralise_cell(value) -> str:
    """The cell's text, quoted with ``'`` if a spreadsheet would run it."""
    text = "" if value is None or (not isinstance(value, str) and pd.isna(value)) else str(value)
    return "'" + text if text.startswith(FORMULA_START) else text


def plan_csv(plan: pd.DataFrame) -> str:
    """The plan as CSV text (header row, then one row per entry)."""
    buf = io.StringIO()
    writer = csv.writer(buf)  # RFC 4180: CRLF rows, fields with CR, LF, comma or quote quoted
    writer.writerow([neutralise_cell(c) for c in plan.columns])
    for row in plan.itertuples(index=False):
        writer.writerow([neutralise_cell(v) for v in row])
    return buf.getvalue()


def escape_text(value: str) -> str:
    """RFC 5545 3.3.11 TEXT escaping."""
    return (value.replace("\\", "\\\\").replace(";", "\\;").replace(",", "\\,")
            .replace("\r\n", "\\n").replace("\n", "\\n").replace("\r", "\\n"))


def fold_line(line: str) -> str:
    """RFC 5545 3.1: split after at most 75 octets, never inside a UTF-8 character."""
    data = line.encode("utf-8")
    if len(data) <= ICS_MAX_OCTETS:
        return line + CRLF
    parts, start, limit = [], 0, ICS_MAX_OCTETS
    while start < len(data):
        end = min(start + limit, len(data))
        while end < len(data) and (data[end] & 0xC0) == 0x80:  # continuation byte
            end -= 1
        parts.append(data[start:end].decode("utf-8"))
        start, limit = end, ICS_MAX_OCTETS - 1  # the leading space takes one octet
    return CRLF.join([parts[0], *(" " + p for p in parts[1:])]) + CRLF


def _uid(vehicle_id: str, day: dt.date) -> str:
    digest = hashlib.sha1(f"{vehicle_id}\x1f{day.isoformat()}".encode("utf-8")).hexdigest()[:16]
    return f"{digest}@tracktrue.inspection-plan"


def plan_ics(plan: pd.DataFrame, stamp: dt.datetime, footer: str) -> str:
    """One all-day VEVENT per entry (vehicle_id, depot, planned_date, summary, description).

    ``stamp`` (UTC) becomes every event's DTSTAMP; ``footer`` is appended to
    each description (the safety caution).
    """
    stamp_text = stamp.astimezone(dt.timezone.utc).strftime("%Y%m%dT%H%M%SZ")
    lines = ["BEGIN:VCALENDAR", "VERSION:2.0", "PRODID:-//tracktrue//inspection plan//EN",
             "CALSCALE:GREGORIAN", "METHOD:PUBLISH"]
    for row in plan.itertuples(index=False):
        day: dt.date = row.planned_date
        description = f"{row.description}\n\n{footer}" if footer else str(row.description)
        lines += [
            "BEGIN:VEVENT",
            f"UID:{_uid(row.vehicle_id, day)}",
            f"DTSTAMP:{stamp_text}",
            f"DTSTART;VALUE=DATE:{day:%Y%m%d}",
            f"DTEND;VALUE=DATE:{day + dt.timedelta(days=1):%Y%m%d}",
            f"SUMMARY:{escape_text(str(row.summary))}",
            f"LOCATION:{escape_text(str(row.depot))}",
            f"DESCRIPTION:{escape_text(description)}",
            "TRANSP:TRANSPARENT",
            "END:VEVENT",
        ]
    lines.append("END:VCALENDAR")
    return "".join(fold_line(line) for line in lines)
