"""CSV dialects: from a file's bytes to header, metadata and typed columns.

Handles what exports really look like: comma, semicolon or tab delimiters,
decimal comma, UTF-8 with or without BOM, Latin-1 (degree signs), UTF-16
with BOM, gzip-compressed files, CRLF, ``#`` comment/metadata lines anywhere,
a preamble of title or ``key: value`` lines before the header (a few export
tools write one without ``#``), blank or delimiter-only lines, trailing blank
lines. Every table row keeps the
1-based line number it came from, so a reject names the line a person sees
in an editor. Lines are classified with numpy over the raw bytes and parsed
by pyarrow's CSV reader: no per-line Python loop.
"""

from __future__ import annotations

import csv
import io
import re
import zlib
from collections import Counter
from dataclasses import dataclass

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv

#: Cells read as missing (a missing cell is null, never a reject).
NULL_TOKENS = ["", "NA", "N/A", "n/a", "NaN", "nan", "null", "NULL", "None", "-", "--"]
_NUMBER_RE = r"^[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$"
_META_RE = re.compile(r"^#+\s*([A-Za-z][\w ]*?)\s*[:=]\s*(.*?)\s*$")
_PREAMBLE_META_RE = re.compile(r"^\s*([A-Za-z][\w ]*?)\s*[:=]\s*(.*?)\s*$")
_BINARY_SNIFF = 8192
#: A header is looked for among this many first non-blank, non-comment lines (a preamble is short).
PREAMBLE_MAX_LINES = 30
#: Lines after a header candidate whose usual field count it must match.
PREAMBLE_BODY_LINES = 20
#: A gzip member may expand to at most this many bytes (a trip log is tens of MB; a bomb is not).
GZIP_MAX_BYTES = 2 << 30


class FileUnusable(Exception):
    """The file cannot be used at all; the message is the reason recorded."""


@dataclass(frozen=True)
class LogText:
    """A decoded log split into lines: metadata, header and data lines."""

    data: bytes  # UTF-8, line ends normalised to LF
    encoding: str
    delimiter: str
    header: list[str]
    metadata: dict[str, str]
    header_line: int  # 1-based
    preamble_lines: tuple[int, ...]  # 1-based lines before the header read as a preamble, not data
    data_lines: np.ndarray  # 1-based line numbers of data lines (blank/comment lines excluded)
    line_starts: np.ndarray
    line_stops: np.ndarray  # exclusive, including the newline

    @property
    def quoted(self) -> bool:
        return b'"' in self.data[self.line_stops[self.header_line - 1]:]

    def field_counts(self, lines: np.ndarray) -> np.ndarray:
        """Fields per given line by counting delimiters (valid only when nothing is quoted)."""
        buf = np.frombuffer(self.data, np.uint8)
        dsum = np.concatenate(([0], np.cumsum(buf == ord(self.delimiter), dtype=np.int64)))
        idx = lines - 1
        return dsum[self.line_stops[idx]] - dsum[self.line_starts[idx]] + 1


@dataclass(frozen=True)
class ParsedRows:
    """Columns as parsed plus the line number of every row."""

    columns: dict[int, pa.Array]  # header index -> array (float64 or string)
    lines: np.ndarray  # 1-based line number of each row
    structural_rejects: list[tuple[int, str]]  # (line, reason) for rows with a wrong field count


def decode(raw: bytes) -> tuple[bytes, str]:
    """Return UTF-8 bytes and the encoding they were read as (``gzip+…`` for a compressed file)."""
    if raw.startswith(b"\x1f\x8b"):
        inner = _gunzip(raw)
        try:
            text, encoding = decode(inner)
        except FileUnusable as exc:
            raise FileUnusable(f"gzip-compressed, and what it holds: {exc}") from None
        return text, f"gzip+{encoding}"
    if raw.startswith(b"\xef\xbb\xbf"):
        raw, bom = raw[3:], "utf-8-sig"
    else:
        bom = None
    if raw.startswith((b"\xff\xfe", b"\xfe\xff")):
        try:
            return raw.decode("utf-16").encode("utf-8"), "utf-16"
        except UnicodeDecodeError:
            raise FileUnusable("starts with a UTF-16 byte-order mark but is not valid UTF-16") from None
    head = raw[:_BINARY_SNIFF]
    if b"\x00" in head or _control_fraction(head) > 0.05:
        raise FileUnusable("binary content (not a text CSV)")
    try:
        raw.decode("utf-8")
        return raw, bom or "utf-8"
    except UnicodeDecodeError:
        return raw.decode("latin-1").encode("utf-8"), "latin-1"


def _gunzip(raw: bytes) -> bytes:
    """The decompressed bytes of a gzip file (its members one after another, as ``gzip -c a b``
    writes them), bounded by GZIP_MAX_BYTES in all."""
    out, rest, budget = [], raw, GZIP_MAX_BYTES
    while rest.startswith(b"\x1f\x8b"):
        inflater = zlib.decompressobj(16 + zlib.MAX_WBITS)  # gzip framing
        try:
            chunk = inflater.decompress(rest, budget)  # a max_length of 0 would be no bound: budget stays > 0
        except zlib.error as exc:
            raise FileUnusable(f"gzip-compressed but cannot be decompressed ({exc})") from None
        budget -= len(chunk)
        if inflater.unconsumed_tail or (budget <= 0 and inflater.unused_data):
            raise FileUnusable(f"gzip-compressed and larger than {GZIP_MAX_BYTES >> 30} GiB decompressed")
        if not inflater.eof:
            raise FileUnusable("gzip-compressed but truncated (the download or copy was cut short)")
        out.append(chunk)
        rest = inflater.unused_data
    return b"".join(out)


def _control_fraction(head: bytes) -> float:
    if not head:
        return 0.0
    b = np.frombuffer(head, np.uint8)
    control = (b < 32) & (b != 9) & (b != 10) & (b != 13)
    return float(control.mean())


def split_lines(raw: bytes) -> LogText:
    """Decode, find the header, metadata lines and data lines.

    Only short lines can be blank or delimiter-only, so only their bytes are
    inspected; a long line is a data line unless it starts with ``#``.
    """
    if not raw or raw.isspace():  # isspace stops at the first other byte: no copy of the file
        raise FileUnusable("empty file")
    data, encoding = decode(raw)
    if b"\r" in data:  # CRLF, or a lone CR (old Mac line ends): both end a line
        data = data.replace(b"\r\n", b"\n").replace(b"\r", b"\n")
    buf = np.frombuffer(data, np.uint8)
    newlines = np.flatnonzero(buf == 10)
    starts = np.concatenate(([0], newlines + 1))
    stops = np.concatenate((newlines + 1, [len(buf)]))
    if starts[-1] == len(buf):  # file ends with a newline: no last empty line
        starts, stops = starts[:-1], stops[:-1]
    is_comment = buf[starts] == ord("#")
    header_idx, preamble = _find_header(data, starts, stops, is_comment)
    header_text = line_text(data, starts, stops, header_idx)
    delimiter = _sniff_delimiter(header_text)
    try:
        header = next(csv.reader([header_text], delimiter=delimiter))
    except csv.Error as exc:
        raise FileUnusable(f"header line {header_idx + 1} cannot be split into columns: {exc}") from None
    header = [h.strip() for h in header]
    if len(header) < 2:
        raise FileUnusable(f"header line {header_idx + 1} has a single column ({header_text[:80]!r}); "
                           "expected comma-, semicolon- or tab-separated columns")
    after = np.arange(len(starts)) > header_idx
    is_data = after & ~is_comment & _has_content(buf, starts, stops, after & ~is_comment, delimiter, len(header))
    metadata = _metadata(data, starts, stops, np.flatnonzero(is_comment), preamble)
    return LogText(
        data=data, encoding=encoding, delimiter=delimiter, header=header, metadata=metadata,
        header_line=int(header_idx) + 1, preamble_lines=tuple(i + 1 for i in preamble),
        data_lines=np.flatnonzero(is_data) + 1,
        line_starts=starts, line_stops=stops,
    )


def _has_content(buf, starts, stops, candidates, delimiter: str, n_fields: int) -> np.ndarray:
    """False for lines holding only blanks and delimiters (checked on short lines only)."""
    out = np.ones(len(starts), bool)
    lengths = stops - starts
    short = np.flatnonzero(candidates & (lengths <= 2 * n_fields + 4))
    if len(short) == 0:
        return out
    lens = lengths[short]
    offsets = np.concatenate(([0], np.cumsum(lens)[:-1]))
    pos = np.repeat(starts[short] - offsets, lens) + np.arange(lens.sum())
    blank = np.frombuffer(f" \t\n{delimiter}".encode(), np.uint8)
    content = ~np.isin(buf[pos], blank)
    out[short] = np.add.reduceat(content, offsets) > 0
    return out


def line_text(data: bytes, starts, stops, i: int) -> str:
    """Line ``i`` (0-based) without its newline."""
    return data[starts[i]:stops[i]].decode("utf-8").rstrip("\n")


def _find_header(data: bytes, starts, stops, is_comment) -> tuple[int, list[int]]:
    """The header's line index and the preamble lines before it (indices).

    The header is the first non-blank, non-comment line that looks like one —
    two or more fields, more of them names (text) than numbers — with about as
    many fields (±1, for a trailing delimiter) as one of the most frequent
    counts among the data rows of the next PREAMBLE_BODY_LINES lines (rows of
    three or more fields, at least as many numbers as names), so one broken
    row does not disown its header and ``key,value`` or title lines, which are
    not data rows, do not vote. A later line is the header only after a
    preamble: lines of under half its fields (a title, ``key: value``,
    ``key,value``). Where no line within PREAMBLE_MAX_LINES has data rows to
    match, the first line that looks like a header after a preamble is taken
    (its rows' problems are then the rows' own), else the first line, so its
    problem (one column, say) is the one reported.
    """
    candidates = []
    for i in np.flatnonzero(~is_comment):
        if data[starts[i]:stops[i]].strip():
            candidates.append(int(i))
            if len(candidates) == PREAMBLE_MAX_LINES + PREAMBLE_BODY_LINES:
                break
    if not candidates:
        raise FileUnusable("no header line (only blank or comment lines)")
    lines = [line_text(data, starts, stops, i) for i in candidates]
    first_named = None  # the first line that looks like a header after a preamble (or none)
    for k, text in enumerate(lines[:PREAMBLE_MAX_LINES]):
        delimiter = _sniff_delimiter(text)
        fields = split_fields(text, delimiter)
        names, numbers = _names_and_numbers(fields)
        if len(fields) < 2 or names <= numbers:
            continue
        if k and any(2 * len(split_fields(t, delimiter)) >= len(fields) for t in lines[:k]):
            continue  # what came before is not a preamble to this line
        first_named = k if first_named is None else first_named
        rows = (split_fields(t, delimiter) for t in lines[k + 1:k + 1 + PREAMBLE_BODY_LINES])
        body = Counter(len(r) for r in rows if len(r) >= 3 and _is_data_row(r))
        top = max(body.values(), default=0)
        if any(abs(len(fields) - n) <= 1 for n, c in body.items() if c == top):
            return candidates[k], candidates[:k]
    k = first_named or 0
    return candidates[k], candidates[:k]


def _names_and_numbers(fields: list[str]) -> tuple[int, int]:
    """How many of a line's fields are names and how many values — numbers, or mostly digits like a
    time stamp or a date (empty ones are neither)."""
    numbers = sum(is_number(f) or _mostly_digits(f) for f in fields)
    return sum(bool(f.strip()) for f in fields) - numbers, numbers


def _is_data_row(fields: list[str]) -> bool:
    names, numbers = _names_and_numbers(fields)
    return numbers >= names


def _mostly_digits(field: str) -> bool:
    text = field.strip()
    return len(text) >= 4 and 2 * sum(c.isdigit() for c in text) >= len(text)


def split_fields(text: str, delimiter: str) -> list[str]:
    """One line's fields, quotes honoured (none if it cannot be split)."""
    try:
        return next(csv.reader([text], delimiter=delimiter), [])
    except csv.Error:
        return []


def is_number(field: str) -> bool:
    """A decimal number, with a point or a comma."""
    return re.match(_NUMBER_RE, field.strip().replace(",", ".")) is not None


def _sniff_delimiter(header: str) -> str:
    counts = {d: header.count(d) for d in (";", ",", "\t")}
    best = max(counts, key=lambda d: (counts[d], d == ","))
    return best if counts[best] else ","


def _metadata(data: bytes, starts, stops, comment_idx, preamble: list[int]) -> dict[str, str]:
    """``# key: value`` lines, then a preamble's ``key: value`` lines (keys lower-cased); the first
    occurrence of a key wins."""
    out: dict[str, str] = {}
    # metadata sits in a file's head: the comment scan is bounded, a preamble is short by construction
    for pattern, lines in ((_META_RE, comment_idx[:200]), (_PREAMBLE_META_RE, preamble)):
        for i in lines:
            m = pattern.match(data[starts[i]:stops[i]].decode("utf-8", "replace").rstrip("\n"))
            if m:
                out.setdefault(m.group(1).strip().lower(), m.group(2))
    return out


class _BadStructure(Exception):
    """Some line has the wrong number of fields (pyarrow's fast path cannot say which)."""


def parse_rows(log: LogText, numeric: list[int], text: list[int]) -> ParsedRows:
    """Parse the wanted columns; numeric ones as float64 where every cell allows it.

    Fast path: one multi-threaded pyarrow read. Only when a line has the wrong
    number of fields are lines counted (numpy over delimiters, or pyarrow's
    row handler single-threaded when quotes make counting unsafe) and the bad
    ones rejected. Numeric columns that hold a non-number anywhere come back as
    strings (the caller converts them cell by cell and rejects the rows that
    fail), so one bad cell costs one row, not the file.
    """
    lines = log.data_lines
    wanted = sorted(set(numeric) | set(text))
    if len(lines) == 0 or not wanted:
        return ParsedRows({i: pa.array([], pa.string()) for i in wanted}, lines[:0], [])
    rejects: list[tuple[int, str]] = []
    try:
        table = _typed(_select_lines(log, lines), log, wanted, numeric, None)
    except _BadStructure:
        table, lines, rejects = _with_bad_lines(log, lines, wanted, numeric)
    if table.num_rows != len(lines):
        raise FileUnusable(f"line accounting failed ({table.num_rows} rows parsed from {len(lines)} lines)")
    columns = {i: _nullify(table.column(f"c{i}").combine_chunks()) for i in wanted}
    return ParsedRows(columns, lines, rejects)


def _nullify(col: pa.Array) -> pa.Array:
    """Text cells that are blank or a missing-value token become null (numbers are parsed so already)."""
    if not pa.types.is_string(col.type):
        return col
    missing = pc.is_in(pc.utf8_trim_whitespace(col), pa.array(NULL_TOKENS))
    return pc.if_else(missing, pa.scalar(None, pa.string()), col)


def _with_bad_lines(log: LogText, lines: np.ndarray, wanted: list[int], numeric: list[int]):
    """Reject lines with the wrong number of fields, parse the rest."""
    rejects: list[tuple[int, str]] = []
    try:
        if not log.quoted:
            counts = log.field_counts(lines)
            ok = counts == len(log.header)
            rejects = [(int(line), f"{count} fields, the header has {len(log.header)}")
                       for line, count in zip(lines[~ok], counts[~ok])]
            lines = lines[ok]
            table = _typed(_select_lines(log, lines), log, wanted, numeric, None)
        else:
            skipped: list[tuple[int, str]] = []
            table = _typed(_select_lines(log, lines), log, wanted, numeric, skipped)
            keep = np.ones(len(lines), bool)
            for number, reason in skipped:
                keep[number - 1] = False
                rejects.append((int(lines[number - 1]), reason))
            lines = lines[keep]
    except _BadStructure:
        raise FileUnusable("rows cannot be split into fields (unbalanced quotes?)") from None
    return table, lines, rejects


def _typed(body: bytes, log: LogText, wanted: list[int], numeric: list[int], skipped: list | None) -> pa.Table:
    """Read with numeric columns as float64 (decimal point, then comma), else all as strings."""
    if not body:
        return pa.table({f"c{i}": pa.array([], pa.string()) for i in wanted})
    attempts = [(".", True)] if log.delimiter == "," else [(".", True), (",", True)]
    for dp, typed in attempts + [(".", False)]:
        types = {f"c{i}": (pa.float64() if typed and i in numeric else pa.string()) for i in wanted}
        if skipped is not None:
            skipped.clear()
        try:
            return _read(body, log, wanted, types, dp, skipped)
        except pa.ArrowInvalid as exc:
            if "CSV parse error" in str(exc):
                raise _BadStructure() from None
    raise AssertionError("a read with all columns as strings cannot fail to convert")


def _select_lines(log: LogText, lines: np.ndarray) -> bytes:
    """The bytes of the given lines only (a slice when they are contiguous)."""
    if len(lines) == 0:
        return b""
    idx = lines - 1
    if idx[-1] - idx[0] + 1 == len(idx):
        return log.data[log.line_starts[idx[0]]:log.line_stops[idx[-1]]]
    keep = np.zeros(len(log.line_starts), bool)
    keep[idx] = True
    byte_keep = np.repeat(keep, log.line_stops - log.line_starts)
    return np.frombuffer(log.data, np.uint8)[byte_keep].tobytes()


def _read(body: bytes, log: LogText, wanted: list[int], types: dict, decimal_point: str, skipped: list | None):
    def on_invalid(row) -> str:
        skipped.append((row.number, f"{row.actual_columns} fields, the header has {row.expected_columns}"))
        return "skip"

    if not body.endswith(b"\n"):
        body += b"\n"
    return pacsv.read_csv(
        io.BytesIO(body),
        read_options=pacsv.ReadOptions(column_names=[f"c{i}" for i in range(len(log.header))],
                                       use_threads=skipped is None, block_size=1 << 24),
        parse_options=pacsv.ParseOptions(delimiter=log.delimiter,
                                         invalid_row_handler=on_invalid if skipped is not None else None),
        convert_options=pacsv.ConvertOptions(include_columns=[f"c{i}" for i in wanted], column_types=types,
                                             null_values=NULL_TOKENS, decimal_point=decimal_point),
    )


#: Digit grouping with the other mark as the decimal separator, unambiguous only with both marks or
#: several groups: ``12.345,6`` / ``1.234.567`` (decimal comma), ``12,345.6`` / ``1,234,567`` (point).
_GROUPED_RE = {True: r"^[+-]?\d{1,3}(\.\d{3})+,\d+$|^[+-]?\d{1,3}(\.\d{3}){2,}$",
               False: r"^[+-]?\d{1,3}(,\d{3})+\.\d+$|^[+-]?\d{1,3}(,\d{3}){2,}$"}


def to_float(col: pa.Array, decimal_comma: bool) -> tuple[np.ndarray, np.ndarray]:
    """(values with NaN for missing or bad cells, mask of cells that are not numbers).

    Digit grouping (an odometer's ``12.345,6 km``) is read where it cannot be
    mistaken for a decimal mark (_GROUPED_RE); only the cells that are not
    plain numbers are tried, so a clean column pays nothing for it.
    """
    if pa.types.is_floating(col.type):
        return col.to_numpy(zero_copy_only=False).astype(np.float64, copy=False), np.zeros(len(col), bool)
    raw = pc.utf8_trim_whitespace(col)
    s = pc.replace_substring(raw, ",", ".") if decimal_comma else raw
    ok = pc.match_substring_regex(s, _NUMBER_RE)
    if not pc.all(pc.fill_null(ok, True)).as_py():
        grouped = pc.fill_null(pc.and_(pc.invert(ok), pc.match_substring_regex(raw, _GROUPED_RE[decimal_comma])), False)
        if pc.any(grouped).as_py():
            group_mark, point = (".", ",") if decimal_comma else (",", ".")
            plain = pc.replace_substring(pc.replace_substring(raw, group_mark, ""), point, ".")
            s = pc.if_else(grouped, plain, s)
            ok = pc.or_(ok, grouped)
    good = pc.if_else(ok, s, pa.scalar(None, pa.string()))
    values = pc.cast(good, pa.float64()).to_numpy(zero_copy_only=False)
    bad = pc.fill_null(pc.invert(ok), False).to_numpy(zero_copy_only=False)
    return values, bad


def clean_text(col: pa.Array) -> pa.Array:
    """Trimmed strings with empty cells as null."""
    s = pc.utf8_trim_whitespace(col.cast(pa.string()))
    return pc.if_else(pc.equal(s, ""), pa.scalar(None, pa.string()), s)


def read_keyed_csv(path, what: str, required, optional, canonical=None) -> tuple["LogText", dict[str, int]]:
    """A small side file (registry, service events): its lines and the column index of each known name.

    ``canonical`` maps a header as written to the name it stands for (default: trimmed, lower case).
    Errors name the file and what is wrong; they are ``UserError`` because such
    a file is an argument of the command, not one of many logs.
    """
    from tracktrue.errors import UserError

    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise UserError(f"{what} {path} cannot be read: {exc}") from None
    try:
        text = split_lines(raw)
    except FileUnusable as exc:
        raise UserError(f"{what} {path}: {exc}") from None
    header = [canonical(h) if canonical else h.strip().lower() for h in text.header]
    missing = [c for c in required if c not in header]
    if missing:
        raise UserError(f"{what} {path}: missing required column(s) {', '.join(missing)} "
                        f"(header: {', '.join(text.header)}; expected {', '.join((*required, *optional))})")
    return text, {c: header.index(c) for c in (*required, *optional) if c in header}
