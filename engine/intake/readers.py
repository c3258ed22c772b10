"""Readers: bytes of a CSV, JSON Lines or .xlsx export into a table of cells, row numbers beside it.

Row numbering, defined once: row N is the N-th line after the header of a CSV file (its
file line N + 1), the N-th line of a JSON Lines file, the sheet row N + 1 of a workbook.
Blank lines are counted and skipped, so a row's number is where an editor shows it.
A CSV row with more or fewer fields than the header is rejected, both alike: its values
cannot be matched to columns with certainty (a shifted row graded is a wrong grade).
"""

from __future__ import annotations

import codecs
import csv
import io
import json
import re
import warnings
from dataclasses import dataclass, field
from datetime import date, datetime, time
from itertools import chain, repeat
from operator import attrgetter, methodcaller
from typing import Any

import msgspec
import numpy as np
import pandas as pd

from sumpwise.intake.column_map import DELIMITERS, engine_name
from sumpwise.vocabulary.problems import InputError

ENCODING_HINT = ("declare the file's encoding in the column map (file: {encoding: cp1252}); common ones are "
                 "utf-8, cp1252 (Windows Western), latin-1, utf-16")


@dataclass
class RawTable:
    """Cells as read (`frame`), the row number of each (`rows`), rows set aside as
    (row, reason, code), notes about what was detected, and the header as written."""

    frame: pd.DataFrame
    rows: np.ndarray
    skipped: list = field(default_factory=list)
    notes: list = field(default_factory=list)
    header: list = field(default_factory=list)


# Byte-order marks of the encodings a spreadsheet's "Unicode text" export writes (UTF-32's first:
# UTF-16 LE's mark begins it). The codec named consumes the mark.
_MARKS = ((b"\xff\xfe\x00\x00", "utf-32"), (b"\x00\x00\xfe\xff", "utf-32"), (b"\xff\xfe", "utf-16"),
          (b"\xfe\xff", "utf-16"))


def marked_encoding(head: bytes) -> str | None:
    """The encoding a file's first bytes name by their byte-order mark (None: no such mark). A mark
    is the file saying how it is written, so it is followed, not guessed; UTF-8's own is read as UTF-8."""
    return next((name for mark, name in _MARKS if head.startswith(mark)), None)


def marked_note(encoding: str) -> str:
    return f"read as {encoding.upper()}: the file begins with that encoding's byte-order mark"


def is_utf8(encoding: str | None) -> bool:
    """Whether a declared encoding (None: none declared) is UTF-8, however it is spelled."""
    return (encoding or "utf-8").replace("_", "-").lower() in ("utf-8", "utf8")


def decode(data: bytes, encoding: str | None) -> str:
    """The file's text; a byte the encoding cannot read is an error naming the options."""
    name = encoding or "utf-8"
    try:
        text = data.decode("utf-8-sig" if is_utf8(encoding) else name)
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        raise InputError(f"line {line}: byte 0x{data[exc.start]:02x} is not {name} text; {ENCODING_HINT}") from None
    return text.removeprefix("\ufeff")


def check_header(names: list) -> None:
    """Duplicate column names (exact, or alike once surrounding spaces go) are refused, named."""
    seen: dict = {}
    for raw in names:
        seen.setdefault(str(raw).strip(), []).append(str(raw))
    twice = {name: spelled for name, spelled in seen.items() if len(spelled) > 1}
    if twice:
        listed = "; ".join(" and ".join(repr(s) for s in spelled) for spelled in twice.values())
        raise InputError(f"duplicate column names in the header: {listed}; each column must be named once")
    if "" in seen:
        raise InputError("the header has a column without a name")


def numeric_flags(names: list, numeric: set) -> list[bool]:
    """Whether each column is read as numbers: its name is one of `numeric` as column_map.header_key
    compares names, or it is one followed by its unit (column_map.engine_name: an `AN` or an
    `AN (mg KOH/g)` column is the acid number, and parsed as numbers like `an`)."""
    return [engine_name(name, numeric) is not None for name in names]


def _first_line(text: str) -> str:
    ends = [at for at in (text.find("\n"), text.find("\r")) if at >= 0]  # \n, \r\n or a lone \r
    return text[: min(ends, default=len(text))]


def detect_delimiter(header: str) -> str:
    """The common delimiter that splits the header into the most fields (a comma on a tie)."""
    counts = {d: len(next(csv.reader([header], delimiter=d), [])) for d in DELIMITERS}
    return max(DELIMITERS, key=lambda d: (counts[d], d == ","))


# Excel's first line naming the file's delimiter (`sep=;`), which it writes and reads itself.
_SEP_LINE = re.compile(r'^\s*"?sep=(.)"?\s*$', re.IGNORECASE)
PREAMBLE_LINES = 12  # the first lines looked at for a header below a title (a title, a date, blank lines)


def line_ends(text: str, count: int) -> list[int]:
    """Where each of the first `count` lines of `text` ends, its line end included."""
    ends = []
    for found in re.finditer(r"\r\n|\n|\r", text):
        ends.append(found.end())
        if len(ends) == count:
            break
    return ends if len(ends) == count or (ends and ends[-1] == len(text)) else ends + [len(text)]


@dataclass(frozen=True)
class Preamble:
    """Lines above a CSV file's header: how many (`skip`), the delimiter a `sep=` line gave, and
    the note that says so (None when the file starts with its header)."""

    skip: int
    delimiter: str | None
    note: str | None


def preamble(text: str, delimiter: str | None, names: set, id_name: str) -> Preamble:
    """Lines above the header: Excel's `sep=;` line, and a title (`Brackwater Point, used oil results,
    week 48`) with blank lines around it, as a spreadsheet or LIMS report writes them (common practice,
    no source). The header is unmistakable when it names the sample id column (`id_name`, as
    column_map.engine_name reads names) and another known column (`names`), and every line above it
    fills fewer than half as many fields as it has, none a known name; then the lines above are not
    read, with a note. A first line that is not the header where no such header follows is refused,
    saying what was found: read as a header, the file's columns would be the title's words."""
    head = text[: 1 << 16]
    ends = line_ends(head, PREAMBLE_LINES)
    lines = [head[start:end].rstrip("\r\n") for start, end in zip([0] + ends[:-1], ends)]
    skip, declared = 0, None
    found = _SEP_LINE.match(lines[0]) if lines else None
    if found and found.group(1) in DELIMITERS:
        declared, skip = found.group(1), 1
        if delimiter is not None and delimiter != declared:
            raise InputError(f"line 1 declares the delimiter {declared!r} (sep=), but the column map declares "
                             f"{delimiter!r}; remove one")
    delimiter = delimiter or declared

    def fields(line: str) -> list[str]:
        return [f.strip() for f in next(csv.reader([line], delimiter=delimiter or detect_delimiter(line)), [])]

    def known(cell: str) -> str | None:
        found = engine_name(cell, names) if cell else None
        return None if found is None else found[0]

    def is_header(line: str) -> bool:
        read = [known(f) for f in fields(line)]
        return id_name in read and any(k is not None and k != id_name for k in read)

    def said(k: int) -> str:
        return f"line {k + 1} ({lines[k].strip()[:80]!r})"

    if skip < len(lines) and (is_header(lines[skip]) or not lines[skip].strip() and skip == len(lines) - 1):
        return Preamble(skip, declared, "read the delimiter from line 1 (sep=), not a header" if declared else None)
    for at in range(skip + 1, len(lines)):
        if not is_header(lines[at]):
            continue
        width = len(fields(lines[at]))
        above = [k for k in range(skip, at) if lines[k].strip()]
        if all(2 * sum(bool(f) for f in fields(lines[k])) < width and
               not any(known(f) for f in fields(lines[k])) for k in above):
            listed = ", ".join(said(k) for k in above) or "blank lines"
            sep = "line 1 declares the delimiter (sep=); " if declared else ""
            return Preamble(at, declared, f"{sep}read the header from line {at + 1}; {listed} above it "
                                          f"{'is' if len(above) == 1 else 'are'} a title, not read; rows are "
                                          f"numbered from the header (row 1 is line {at + 2})")
        raise InputError(f"line {at + 1} reads as the header, but {', '.join(said(k) for k in above)} above it "
                         f"fill(s) half as many fields as it has or more ({width}), or name a column: whether they "
                         f"are a title or data is not guessed; delete the lines above the header")
    first = [f for f in fields(lines[skip]) if f] if skip < len(lines) else []
    below = next((fields(line) for line in lines[skip + 1:] if line.strip()), [])
    if first and len(first) <= 2 and len(below) > max(2, len(first)) and not any(map(known, first)):
        raise InputError(f"{said(skip)} is a title (one or two texts, where the next line has {len(below)} fields), "
                         f"not a header, and no line below it (up to line {len(lines)}) names the sample id column "
                         f"and another known column; delete the lines above the header, or name its columns in a "
                         f"column map")
    return Preamble(skip, declared, "read the delimiter from line 1 (sep=), not a header" if declared else None)


_DECIMAL = re.compile(r"\s*[<>]?\s*-?\d+([,.])\d+\s*")  # a number with one mark in it: 46,1 or 46.1
_GROUPED = re.compile(r"\s*[<>]?\s*[1-9]\d{0,2}[,.]\d{3}\s*")  # 1,250 or 1.250: a thousands group, or not


def detect_decimal(lines: list, delimiter: str, numeric: set | None = None) -> str:
    """The decimal mark the data show: ',' when the delimiter is not one and a field reads like
    `46,1`, '.' when one reads like `46.1` (or none does). Only the columns named in `numeric`
    are looked at (all, when None): a sample id `26.041` is no evidence.

    A field like `1,250` or `1.250` (one mark, then three digits) is read either way (1.25, or
    1250 with a thousands separator) and decides nothing. When the only marks are such fields,
    or the data show both `46,1` and `46.1`, the mark is not guessed: InputError, naming the
    field, asks for it to be declared (a semicolon export with `1,250` ppm water read as 1.25
    ppm would be a silent wrong grade)."""
    if delimiter == ",":
        return "."
    rows = list(csv.reader(lines, delimiter=delimiter))
    if not rows:
        return "."
    header = [name.strip() for name in rows[0]]
    looked = range(len(header)) if numeric is None else [
        k for k, number in enumerate(numeric_flags(header, numeric)) if number]
    first: dict = {}  # mark (',' '.' or 'grouped') -> (row, column, cell) where first seen
    for number, fields in enumerate(rows[1:200], start=1):
        for k in looked:
            cell = fields[k] if k < len(fields) else ""
            found = _DECIMAL.fullmatch(cell)
            if found:
                kind = "grouped" if _GROUPED.fullmatch(cell) else found.group(1)
                first.setdefault(kind, (number, header[k], cell.strip()))
    if "," in first and "." in first:
        (r1, c1, v1), (r2, c2, v2) = first[","], first["."]
        raise InputError(f"the data show both a decimal comma ({v1!r}, row {r1}, column {c1!r}) and a decimal point "
                         f"({v2!r}, row {r2}, column {c2!r}); declare the decimal mark in the column map "
                         f"(file: {{decimal: ','}} or {{decimal: '.'}})")
    if "," in first or "." in first:
        return "," if "," in first else "."
    if "grouped" in first:
        row, column, cell = first["grouped"]
        raise InputError(f"row {row}, column {column!r}: {cell!r} reads as a decimal number or as a thousands "
                         f"group, and no other number shows the decimal mark; declare it in the column map "
                         f"(file: {{decimal: ','}} or {{decimal: '.'}})")
    return "."


def _records(text: str, delimiter: str) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(first file line, field count, file lines it runs over, whether a cell holds a line that
    looks like a whole row) of every record after the header; 0 fields for a blank line. A quote
    left open reads the lines after it into one cell, to its closing quote or the end of the
    file: the rows there would be lost inside a rejected row, or inside a cell, without a word."""
    if '"' not in text:  # no quoting: a record is a line; count in numpy over the bytes
        if "\n" not in text:
            text = text.replace("\r", "\n")  # lone CR line ends
        data = np.frombuffer(text.encode("utf-8"), dtype=np.uint8)
        ends = np.flatnonzero(data == 10)
        if not len(ends) or ends[-1] != len(data) - 1:
            ends = np.append(ends, len(data))
        starts = np.concatenate([[0], ends[:-1] + 1])
        before = np.searchsorted(np.flatnonzero(data == ord(delimiter)), ends)  # delimiters before each line end
        counts = np.diff(before, prepend=0) + 1
        for k in np.flatnonzero(counts == 1):  # no delimiter: blank (or spaces only) or one field
            if not data[starts[k]:ends[k]].tobytes().strip():
                counts[k] = 0
        one = np.ones(len(ends) - 1, dtype=np.int64)
        return np.arange(2, len(ends) + 1, dtype=np.int64), counts[1:].astype(np.int64), one, one == 0
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter)
    starts, counts, held = [], [], []
    width = len(next(reader, None) or ())
    line = reader.line_num
    for record in reader:
        starts.append(line + 1)
        counts.append(len(record) if any(cell.strip() for cell in record) or len(record) > 1 else 0)
        if reader.line_num - line > 1 and width > 2 and any(  # over several lines: rare, looked into
                piece.count(delimiter) >= width - 1
                for cell in record if "\n" in cell or "\r" in cell for piece in cell.splitlines()[1:]):
            held.append(len(starts) - 1)
        line = reader.line_num
    starts = np.asarray(starts, dtype=np.int64)
    rowlike = np.zeros(len(starts), dtype=bool)
    rowlike[held] = True
    return starts, np.asarray(counts, dtype=np.int64), np.diff(np.append(starts, line + 1)), rowlike


_SKIPPED = re.compile(r"Skipping line (\d+): (.*)")


def _runs_over(line: int, span: int) -> str:
    """What a record over several file lines took: a quote left open reads the rows after it."""
    if span <= 1:
        return ""
    return (f"; it runs over file lines {line} to {line + span - 1}: a quote opened in it closes only there (or at "
            f"the end of the file), so the {span - 1} line(s) after its first, rows of their own if the quote was "
            f"left open, were read into it and are rejected with it (close or remove the stray quote)")


def read_csv(text: str, numeric: set, delimiter: str | None, decimal: str | None, data: bytes | None = None) -> RawTable:
    """CSV parsed in C by pandas; numeric columns left to its number parser, the rest kept as text.

    Given the file's UTF-8 bytes too, pandas parses those (a third faster than re-encoding text)."""
    header_line = _first_line(text)
    if not header_line.strip():
        raise InputError("the file is empty: expected a header row and data rows")
    notes = []
    if delimiter is None:
        delimiter = detect_delimiter(header_line)
        if delimiter != ",":
            notes.append(f"detected the delimiter {delimiter!r} from the header")
    header = next(csv.reader([header_line], delimiter=delimiter), [])
    check_header(header)
    starts, counts, spans, rowlike = _records(text, delimiter)
    if decimal is None:
        decimal = detect_decimal(text[: 1 << 16].splitlines(), delimiter, numeric)
        if decimal != ".":
            notes.append(f"detected the decimal mark {decimal!r} from the data")
    blank = counts == 0
    wrong = ~blank & (counts != len(header))
    skipped = [(int(line) - 1, f"has {count} field(s), the header has {len(header)}: a row too long or too short "
                               f"is rejected, its values cannot be matched to columns" + _runs_over(line, span),
                "D013")
               for line, count, span in zip(starts[wrong], counts[wrong], spans[wrong])]
    swallowed = ~blank & ~wrong & rowlike
    skipped += [(int(line) - 1, "a quoted cell holds a line with as many delimiters as a whole row"
                 + _runs_over(line, span), "D026") for line, span in zip(starts[swallowed], spans[swallowed])]
    wrong |= swallowed
    rows = starts[~blank & ~wrong] - 1
    names = [h.strip() for h in header]
    numbers = numeric_flags(names, numeric)
    text_columns = {raw: object for raw, number in zip(header, numbers) if not number}
    blanks = {raw: [""] for raw, number in zip(header, numbers) if number}
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            source = io.StringIO(text) if data is None else io.BytesIO(data)
            frame = pd.read_csv(source, encoding="utf-8-sig", sep=delimiter, decimal=decimal, dtype=text_columns,
                                keep_default_na=False, na_values=blanks, on_bad_lines="warn",
                                skipinitialspace=True, index_col=False,
                                skiprows=set((starts[wrong] - 1).tolist()) or None)
        except pd.errors.EmptyDataError:
            raise InputError("the file is empty: expected a header row and data rows") from None
        except pd.errors.ParserError as exc:
            raise InputError(f"cannot read it as CSV: {exc}") from None
    for warning in caught:
        for line, why in _SKIPPED.findall(str(warning.message)):
            skipped.append((int(line) - 1, f"cannot be read: {why.strip()}", "D001"))
            rows = rows[rows != int(line) - 1]
    if len(rows) != len(frame):
        if _LONE_CR.search(text) and ("\n" in text):
            raise InputError(f"cannot number its rows ({len(frame)} parsed, {len(rows)} counted): its lines end in "
                             f"two ways, some with a carriage return alone (CR, as old Mac files do) and some with "
                             f"a line feed; save it with one kind of line ending")
        raise InputError(f"cannot number its rows ({len(frame)} parsed, {len(rows)} counted); "
                         f"a quoted field spanning lines may be unbalanced")
    return RawTable(frame, rows, skipped, notes, names)


_LONE_CR = re.compile(r"\r(?!\n)")


def read_jsonl(data: bytes, numeric: set = frozenset(), encoding: str | None = None) -> RawTable:
    """One JSON object a line, parsed by msgspec when the whole file is valid (the usual case).

    msgspec parses a valid file in C into one small record a line when every line has the
    first line's keys (or some of them), about five times as fast as the json module: from
    the file's bytes, a part at a time, when it is UTF-8 with one object a line (no text is
    decoded at all when, as well, every line gives every key: see _without_twice_given_keys),
    else over its lines joined into one array; otherwise into dicts, nearly three times as
    fast. Columns are built from the records once each. What msgspec refuses (NaN and Infinity, lone surrogates, bytes that are
    not UTF-8) is parsed again by the json module, line by line when needed to name each bad
    line. Columns named in `numeric` whose cells are all numbers (or null) become floats.
    """
    if is_utf8(encoding):
        plain = data.removeprefix(codecs.BOM_UTF8)
        table, every_key, colons = _plain_lines_table(plain, numeric)
        if table is not None:
            return _without_twice_given_keys(table, plain, every_key, colons)
    text = decode(data, encoding)
    lines = text.split("\n")
    if lines[-1] == "":  # the file's last line end
        lines.pop()
    blank = np.fromiter(map(str.isspace, lines), dtype=bool, count=len(lines))  # C loops, no strip a line
    blank |= np.fromiter(map(len, lines), dtype=np.int64, count=len(lines)) == 0
    numbers = np.flatnonzero(~blank) + 1
    if not len(numbers):
        raise InputError("the file is empty: expected one JSON object a line")
    kept = lines if len(numbers) == len(lines) else [lines[k - 1] for k in numbers]
    return _without_twice_given_keys(_parsed_lines("[" + ",".join(kept) + "]", kept, numbers, numeric), text)


# Where a line end is not between two objects, read in the file and backwards in it (so
# that both patterns start with a line end, which the search finds fast): a line that is
# blank or does not start with '{', and a line that does not end with '}'.
_LINE_STARTS = re.compile(rb"\n[ \t\r]*(?:\n|[^{ \t\r\n])")
_LINE_ENDS_BACKWARDS = re.compile(rb"\n[ \t\r]*[^} \t\r\n]")
_BLOCK = 1 << 20  # bytes _line_facts reads at a time: its masks stay in the cache
_PART = 1 << 19  # bytes of lines msgspec parses at a time (see _plain_lines_table)


def _line_facts(data: bytes) -> tuple[int, int, bool]:
    """(line ends, colons, whether every line end has '}' before it, or '}\\r', and '{' or
    the file's end after it) of the bytes, in one pass of numpy over them a block at a time:
    a third of the time of two bytes.count and a search for a blank line."""
    view = np.frombuffer(data, dtype=np.uint8)
    ends = colons = 0
    tidy = True
    for at in range(0, len(view), _BLOCK):
        block = view[at:at + _BLOCK]
        found = np.flatnonzero(block == ord("\n")) + at
        ends += len(found)
        colons += int(np.count_nonzero(block == ord(":")))
        tidy = tidy and (not len(found) or _between_braces(view, found))
    return ends, colons, tidy


def _between_braces(view: np.ndarray, found: np.ndarray) -> bool:
    """Whether '}' (or '}\\r') is before each of these line ends and '{' (or the end) after it."""
    before = found - 1
    before[view[before] == ord("\r")] -= 1  # at the file's start: its last byte read, below 0 anyway
    after = found[found + 1 < len(view)] + 1
    return bool(before.min() >= 0 and (view[before] == ord("}")).all() and (view[after] == ord("{")).all())


def _between_objects(data: bytes, tidy: bool) -> bool:
    """Whether every line end of the file lies between two objects: then no line is blank and
    no value runs from one line onto the next, for '}' and then '{' (spaces between) never
    follow each other inside a JSON value."""
    return tidy or not (_LINE_STARTS.search(data) or _LINE_ENDS_BACKWARDS.search(data[::-1]))


def _plain_lines_table(data: bytes, numeric: set) -> tuple[RawTable | None, bool, int]:
    """The table of a file whose every line holds one object of the first line's keys (or
    some of them), parsed by msgspec from the bytes, whether every line gave every one of
    them, and the colons of the file; (None, False, 0) otherwise.

    When every line end lies between two objects, every line holds whole values, at least
    one; as many objects as lines then means one object a line, row N on line N (msgspec's
    line reader alone would skip a blank line or take two objects from one line, or one
    object from two, without a word). The lines are parsed a part of about _PART bytes at a
    time, each part's records made into column pieces and freed before the next part is
    parsed: the pieces are taken while the records are in the cache, and the next part's
    records reuse their memory (parsed whole, 1,000,000 rows took a sixth longer to read,
    over a third of that in page faults).
    """
    ends, colons, tidy = _line_facts(data)
    lines = ends + (not data.endswith(b"\n"))
    if not _between_objects(data, tidy):
        return None, False, 0
    names = _first_keys(data[:data.find(b"\n")] if lines > 1 else data)
    if names is None:
        return None, False, 0
    # Tried in turn, the first that holds wins: the usual export (every key on every line, a
    # number or null in each numeric column, text or null elsewhere), then any values, then
    # keys left out. A line that breaks a kind's promise stops that parse where it stands.
    view = memoryview(data)
    for every_key, typed in ((True, True), (True, False), (False, False)):
        decoder = msgspec.json.Decoder(_row_type(names, every_key, numeric if typed else None))
        columns = _Columns(names, lines, numeric, typed)
        at = 0
        try:
            while at < len(data) and columns.filled <= lines:
                end = data.find(b"\n", at + _PART) + 1 or len(data)
                records = decoder.decode_lines(view[at:end])
                columns.add(records)
                records.reverse()  # freed in the order they were made: faster than backwards
                del records
                at = end
            break
        except msgspec.ValidationError:
            continue
        except msgspec.MsgspecError:  # not valid JSON, or not UTF-8
            return None, False, 0
    else:
        return None, False, 0
    if columns.filled != lines:
        return None, False, 0
    check_header(names)
    return RawTable(columns.frame(), np.arange(1, lines + 1), [], [], names), every_key, colons


def _parsed_lines(joined: str, kept: list, numbers: np.ndarray, numeric: set) -> RawTable:
    table = _same_keys_table(joined, kept, numbers, numeric)
    if table is not None:
        return table
    try:
        records = msgspec.json.decode(joined)
        if len(records) == len(kept):  # not: a line of two values joined by a comma
            return _objects_table(records, numbers, [], numeric)
    except msgspec.MsgspecError:
        pass
    skipped = []
    try:
        records = json.loads(joined, parse_constant=str)  # NaN, Infinity: kept as text
        if len(records) != len(kept):
            raise ValueError
        good = np.ones(len(kept), dtype=bool)
    except ValueError:
        records, good = [], np.zeros(len(kept), dtype=bool)
        for k, line in enumerate(kept):
            try:
                records.append(json.loads(line, parse_constant=str))
                good[k] = True
            except json.JSONDecodeError as exc:
                skipped.append((int(numbers[k]), f"not valid JSON: {exc.msg} at column {exc.colno}", "D001"))
    return _objects_table(records, numbers[good], skipped, numeric)


def _without_twice_given_keys(table: RawTable, whole: str | bytes, every_key: bool = False,
                              colons: int = 0) -> RawTable:
    """Rows whose object gives a key twice with different values are set aside (D017).

    Parsers keep the last value without a word, so `"water": 120, "water": 9000` would be
    graded on 9000 when the lab may have meant 120. Each key takes a colon. When every line
    gave every one of the file's keys (`every_key`, the usual export), a line with more
    colons than keys holds a repeated key (or a colon in a text) and is parsed again pair
    by pair: every repeat is found, a null then a value too. Otherwise the keys a line gave
    are counted as its cells with a value plus its `null` literals (as writers space them):
    every key given twice with two values is found, but a key given null and then a value
    (or twice null) is read as its value (or missing). The whole file is counted first, a
    few passes in C over the text, so a clean file costs no work a line. `whole` is the
    file's text, or its UTF-8 bytes, decoded only when more than its colons (`colons`,
    counted already when `every_key`) must be read.
    """
    if not len(table.frame):
        return table
    keys = len(table.frame.columns)
    if every_key and colons <= keys * len(table.frame):  # every_key: known of bytes parsed whole
        return table
    if isinstance(whole, bytes):
        whole = whole.decode("utf-8")  # valid UTF-8: the parse read it
    if not every_key and whole.count(":") <= table.frame.count().sum() + _null_literals(whole):
        return table
    lines = whole.split("\n")
    text = [lines[k - 1] for k in table.rows]
    colons = np.fromiter(map(methodcaller("count", ":"), text), dtype=np.int64, count=len(text))
    if every_key:
        given = keys
    else:
        nulls = np.fromiter(map(_null_literals, text), dtype=np.int64, count=len(text))
        given = table.frame.notna().sum(axis=1).to_numpy() + nulls
    twice = np.zeros(len(text), dtype=bool)
    skipped = list(table.skipped)
    for k in np.flatnonzero(colons > given):
        found = _key_given_twice(text[k])
        if found is not None:
            twice[k] = True
            key, values = found
            skipped.append((int(table.rows[k]), f"key '{key}' given twice in one object "
                                                f"({' and '.join(values)}): which one the lab meant cannot be known",
                            "D017", key))
    if not twice.any():
        return table
    return RawTable(table.frame[~twice].reset_index(drop=True), table.rows[~twice], skipped, table.notes,
                    table.header)


def _null_literals(text: str) -> int:
    """`null` values as writers space them (`"k":null`, `"k": null`); another spacing counts
    none, which only makes the check above look closer."""
    return text.count(":null") + text.count(": null")


def _key_given_twice(line: str) -> tuple[str, list] | None:
    """The first top-level key a line gives twice with different values, and those values."""
    pairs = json.loads(line, object_pairs_hook=list, parse_constant=str)
    seen: dict = {}
    for key, value in pairs:
        seen.setdefault(key, []).append(value)
    for key, values in seen.items():
        if len(values) > 1 and any(v != values[0] for v in values[1:]):
            return key, [json.dumps(v) for v in values]
    return None


def _same_keys_table(joined: str, kept: list, numbers: np.ndarray, numeric: set) -> RawTable | None:
    """The table when every line is an object of the first line's keys (a key left out is a
    missing cell); None otherwise."""
    names = _first_keys(kept[0])
    if names is None:
        return None
    try:
        records = msgspec.json.decode(joined, type=list[_row_type(names)])
    except msgspec.MsgspecError:
        return None
    if len(records) != len(kept):
        return None
    return _struct_table(records, names, numbers, numeric)


def _first_keys(first: str) -> list | None:
    """The keys of the first line's object; None when that line is not an object with keys."""
    try:
        first = json.loads(first)
    except ValueError:
        return None
    return list(first) if type(first) is dict and first else None


def _slots(names: list) -> list[str]:
    return [f"c{k}" for k in range(len(names))]  # any key is allowed, not only Python names


def _row_type(names: list, every_key: bool = False, numeric: set | None = None):
    """A slotted record type of these keys that refuses any other key (and, `every_key`, an
    object that leaves one out): each line becomes one, not a dict. Given `numeric`, its
    columns take only a number or null and the others only text or null."""
    slots = _slots(names)
    kinds = [Any] * len(names) if numeric is None else [
        float | None if number else str | None for number in numeric_flags(names, numeric)]
    fields = [(slot, kind) if every_key else (slot, kind, None) for slot, kind in zip(slots, kinds)]
    return msgspec.defstruct("Row", fields, rename=dict(zip(slots, names)), forbid_unknown_fields=True, gc=False)


def _struct_table(records: list, names: list, numbers: np.ndarray, numeric: set) -> RawTable:
    """Columns of the slotted records, each built once."""
    columns = _Columns(names, len(records), numeric, typed=False)
    columns.add(records)
    check_header(names)
    return RawTable(columns.frame(), numbers, [], [], names)


class _Columns:
    """Columns filled from slotted records, a part of the rows at a time.

    Given `typed` (by _row_type's promise), each column takes its final form as it is
    filled: numeric columns floats; a text column whose first cells repeat one object per
    distinct text (see _repeats); any other text column (ids) its parts' texts joined by
    NUL, split into new texts once all parts are in, so that they lie side by side in
    memory rather than scattered among the freed records (validating 1,000,000 rows then
    takes two thirds of the time). A part with a null, or a NUL in a text, turns that
    column into cells from then on. Otherwise _column finishes each column once it is full.
    """

    def __init__(self, names: list, rows: int, numeric: set, typed: bool):
        self.names, self.getters, self.rows, self.typed = names, list(map(attrgetter, _slots(names))), rows, typed
        self.numeric = numeric_flags(names, numeric)
        self.cells = [np.empty(rows, dtype=float if typed and number else object) for number in self.numeric]
        self.texts: list[dict | None] = [None] * len(names)  # a repeated text column's objects, by text
        self.joined: list[list | None] = [None] * len(names)  # a text column's parts, each joined by NUL
        self.filled = 0

    def add(self, records: list) -> None:
        """The next records' cells (nothing when there are more rows than the columns hold)."""
        at, n = self.filled, len(records)
        self.filled += n
        if not n or self.filled > self.rows:
            return
        for k, (cells, getter) in enumerate(zip(self.cells, self.getters)):
            if cells.dtype == float:  # floats or None (the parser's promise): numpy takes None as NaN
                cells[at:at + n] = np.fromiter(map(getter, records), dtype=float, count=n)
                continue
            if self.typed and at == 0:
                if self.rows > 1000 and _repeats(list(map(getter, records[:1000]))):
                    self.texts[k] = {}
                else:
                    self.joined[k] = []
            if self.joined[k] is not None:
                try:
                    text = "\x00".join(map(getter, records))
                except TypeError:  # a null
                    text = None
                if text is not None and text.count("\x00") == n - 1:
                    self.joined[k].append(text)
                    continue
                self._split(k)
            piece = np.fromiter(map(getter, records), dtype=object, count=n)
            if self.texts[k] is not None:
                codes, uniques = pd.factorize(piece, use_na_sentinel=True)
                known = self.texts[k]
                piece = np.array([known.setdefault(u, u) for u in uniques] + [None], dtype=object)[codes]
            cells[at:at + n] = piece

    def _split(self, k: int) -> None:
        """Column k's joined parts into its cells; the column is filled cell by cell from then on."""
        parts, self.joined[k] = self.joined[k], None
        if parts:
            texts = "\x00".join(parts).split("\x00")
            self.cells[k][:len(texts)] = np.fromiter(texts, dtype=object, count=len(texts))

    def frame(self) -> pd.DataFrame:
        for k, parts in enumerate(self.joined):
            if parts is not None:
                self._split(k)
        return pd.DataFrame({name: pd.Series(cells, dtype=cells.dtype, copy=False) if self.typed
                             else _column(cells, number) for name, cells, number in
                             zip(self.names, self.cells, self.numeric)}, copy=False)


def _objects_table(records: list, numbers: np.ndarray, skipped: list, numeric: set) -> RawTable:
    """The parsed lines as a table: a line that is not a JSON object is set aside."""
    objects = np.fromiter(map(isinstance, records, repeat(dict, len(records))), dtype=bool, count=len(records))
    for row in numbers[~objects]:
        skipped.append((int(row), "each line must be a JSON object", "D001"))
    if not objects.all():
        records = [r for r, ok in zip(records, objects) if ok]
    frame = pd.DataFrame()
    if records:  # columns in the order keys first appear; a key an object lacks is a missing cell
        names = list(dict.fromkeys(chain.from_iterable(records)))
        n = len(records)
        frame = pd.DataFrame({name: _column(np.fromiter(map(dict.get, records, repeat(name, n)), dtype=object,
                                                        count=n), number)
                              for name, number in zip(names, numeric_flags(names, numeric))}, copy=False)
    check_header(list(frame.columns))
    return RawTable(frame, numbers[objects], skipped, [], [str(c) for c in frame.columns])


def _repeats(cells: np.ndarray | list) -> bool:
    """Whether the column's first cells repeat (codes, names, dates), so that keeping one object
    per distinct text pays: later passes over the column then read a few objects, not one
    scattered object a row (twice as fast), as they do over pandas' CSV parser's columns."""
    first = cells[:1000]
    return len(set(map(str, first))) < len(first) / 2


def _column(cells: np.ndarray, numeric: bool) -> pd.Series:
    """A float column for a numeric column of numbers (or missing cells); else the cells as
    parsed (text as written, lists and objects for validation to reject with their field)."""
    if numeric and pd.api.types.infer_dtype(cells, skipna=True) in ("floating", "integer", "mixed-integer-float",
                                                                    "empty"):
        try:
            return pd.Series(cells.astype(float), dtype=float, copy=False)  # None becomes NaN
        except OverflowError:  # an integer beyond any float: validation rejects it as written
            pass
    elif len(cells) > 1000 and _repeats(cells) and pd.api.types.infer_dtype(cells, skipna=True) == "string":
        codes, uniques = pd.factorize(cells, use_na_sentinel=True)
        cells = np.append(np.asarray(uniques, dtype=object), None)[codes]
    return pd.Series(cells, dtype=object, copy=False)


def nested_cells(column: pd.Series) -> np.ndarray:
    """Cells holding a list or an object (JSON), which no column of a sample can take."""
    if column.dtype != object or pd.api.types.infer_dtype(column, skipna=True) in ("string", "empty",
                                                                                   "floating", "integer"):
        return np.zeros(len(column), dtype=bool)
    return column.map(lambda v: isinstance(v, (list, dict))).to_numpy(dtype=bool)


def read_xlsx(data: bytes, sheet) -> RawTable:
    """A workbook's sheet (by name or 1-based number; the first by default) read by openpyxl."""
    from openpyxl import load_workbook  # imported here: only workbooks need it

    try:
        book = load_workbook(io.BytesIO(data), read_only=True, data_only=True)
    except Exception as exc:  # a damaged or foreign file: openpyxl raises many kinds
        raise InputError(f"cannot read it as an .xlsx workbook: {exc}") from None
    names = book.sheetnames
    notes = []
    if sheet is None:
        chosen = names[0]
        if len(names) > 1:
            notes.append(f"read sheet {chosen!r} of {names} (choose another with file: {{sheet: ...}})")
    elif isinstance(sheet, int):
        if not 1 <= sheet <= len(names):
            raise InputError(f"sheet {sheet} does not exist; the workbook has {len(names)}: {', '.join(names)}")
        chosen = names[sheet - 1]
    elif sheet not in names:
        raise InputError(f"no sheet {sheet!r}; the workbook has: {', '.join(names)}")
    else:
        chosen = sheet
    worksheet = book[chosen]
    worksheet.reset_dimensions()  # every row and column the file holds, whatever its <dimension> says
    cells = [list(map(_cell, row)) for row in worksheet.iter_rows()]
    path = getattr(worksheet, "_worksheet_path", None)  # the sheet's part in the archive, for its merged cells
    book.close()
    unsaved = _unsaved_formulas(data, chosen, cells)
    xml = _sheet_xml(data, path) if path else b""
    if xml:
        _fill_merged(xml, cells)
    top = _title_rows(cells)
    if top:
        titles = [next(str(v) for v in cells[k] if v is not None) for k in range(top) if any(v is not None for v in cells[k])]
        notes.append(f"read the header from sheet row {top + 1}; the rows above it hold one text each, a title, "
                     f"not a header ({'; '.join(repr(t) for t in titles)}), and are not read")
    if len(cells) <= top or not any(v is not None for v in cells[top]):
        raise InputError(f"sheet {chosen!r} is empty: expected a header row and data rows")
    hidden = [row - 1 for row in _hidden_rows(xml)
              if top + 1 < row <= len(cells) and any(v is not None for v in cells[row - 1])]
    if hidden:
        listed = ", ".join(map(str, hidden[:10])) + (f" and {len(hidden) - 10} more" if len(hidden) > 10 else "")
        notes.append(f"{'rows' if len(hidden) > 1 else 'row'} {listed} hidden in the sheet (by a filter or by hand), "
                     f"read like the others; a row hidden as no sample to grade (a superseded result) must be "
                     f"deleted from the sheet")
    header = list(cells[top])
    while header and header[-1] is None:
        header.pop()
    header = ["" if h is None else str(h) for h in header]
    check_header(header)
    shut = [header[k - 1].strip() for k in _hidden_columns(xml) if k <= len(header) and header[k - 1].strip()]
    if shut:
        notes.append(f"{'columns' if len(shut) > 1 else 'column'} {', '.join(map(repr, shut))} hidden in the sheet; "
                     f"hidden or not, a column is read by its name: one hidden as not to be read (a superseded "
                     f"result, a working column) must be deleted from the sheet or renamed")
    width = len(header)
    kept, rows, skipped = [], [], []
    for number, values in enumerate(cells[top + 1:], start=top + 1):
        values = list(values)
        if all(v is None or (isinstance(v, str) and not v.strip()) for v in values):
            continue
        if any(v is not None for v in values[width:]):
            skipped.append((number, f"has cells beyond the header's {width} columns: a row too long is rejected, "
                                    f"its values cannot be matched to columns", "D013"))
            continue
        for k, formula in unsaved.get(number, {}).items():
            values[k] = formula
        kept.append((values + [None] * width)[:width])
        rows.append(number)
    frame = pd.DataFrame(kept, columns=[h.strip() for h in header], dtype=object)
    return RawTable(frame, np.asarray(rows, dtype=np.int64), skipped, notes, [h.strip() for h in header])


def _title_rows(cells: list) -> int:
    """How many rows above the header are a title: a workbook report's heading (`Brackwater Point:
    oil analysis, November`, merged across the table or in one cell), a printed-on line, blank rows.
    Such rows hold one text at most (a merged title gives it to each cell); the header is the first
    row with two different names. 0 when the first row is one, or no row is (common practice, no
    source)."""
    for k, row in enumerate(cells):
        texts = {str(v).strip() for v in row if v is not None and str(v).strip()}
        if len(texts) > 1:
            return k
    return 0


def _unsaved_formulas(data: bytes, sheet: str, cells: list) -> dict:
    """{sheet row - 1: {column index: formula}} of the cells holding a formula whose result the
    file does not hold (saved by a program that does not calculate): openpyxl reads such a cell
    as empty, so a lab's value would go missing without a word; given as the formula instead, a
    number column rejects it (D004) and says why. The workbook is read a second time, for its
    formulas, only when a worksheet has one."""
    import zipfile

    from openpyxl import load_workbook

    with zipfile.ZipFile(io.BytesIO(data)) as archive:
        if not any(b"<f" in archive.read(item) for item in archive.namelist()
                   if item.startswith("xl/worksheets/") and item.endswith(".xml")):
            return {}
    book = load_workbook(io.BytesIO(data), read_only=True, data_only=False)
    book[sheet].reset_dimensions()
    found: dict = {}
    for number, row in enumerate(book[sheet].iter_rows()):
        for k, cell in enumerate(row):
            if getattr(cell, "data_type", None) == "f" and number < len(cells) and k < len(cells[number]) \
                    and cells[number][k] is None:
                found.setdefault(number, {})[k] = str(cell.value)
    book.close()
    return found


_MERGED = re.compile(rb'<(?:\w+:)?mergeCell\s+ref="([A-Z]+[0-9]+(?::[A-Z]+[0-9]+)?)"')


def _sheet_xml(data: bytes, path: str) -> bytes:
    """The sheet's part of the workbook archive (b"" when absent)."""
    import zipfile

    with zipfile.ZipFile(io.BytesIO(data)) as archive:
        try:
            return archive.read(path.lstrip("/"))
        except KeyError:
            return b""


_ROW = re.compile(rb"<(?:\w+:)?row\b([^>]*)>")
_HIDDEN = re.compile(rb"""\bhidden=["'](?:1|true)["']""")
_ROW_NUMBER = re.compile(rb"""\br=["'](\d+)["']""")


def _hidden_rows(xml: bytes) -> list[int]:
    """Sheet row numbers the sheet marks hidden (openpyxl's read-only mode does not say): the row
    element's `hidden` attribute (ECMA-376 Part 1, the row element, 18.3.1.73 from memory)."""
    found = []
    for match in _ROW.finditer(xml):
        attributes = match.group(1)
        if _HIDDEN.search(attributes) and (number := _ROW_NUMBER.search(attributes)):
            found.append(int(number.group(1)))
    return found


_COLUMN = re.compile(rb"<(?:\w+:)?col\b([^>]*)>")
_SPAN = (re.compile(rb"""\bmin=["'](\d+)["']"""), re.compile(rb"""\bmax=["'](\d+)["']"""))


def _hidden_columns(xml: bytes) -> list[int]:
    """1-based column numbers the sheet marks hidden (openpyxl's read-only mode does not say, as
    for rows): the `col` element's `hidden` attribute over its `min` to `max` columns (ECMA-376
    Part 1, the col element, 18.3.1.13 from memory). The list comes before the cells."""
    found = []
    end = xml.find(b"sheetData")
    for match in _COLUMN.finditer(xml, 0, end if end >= 0 else len(xml)):
        attributes = match.group(1)
        low, high = (pattern.search(attributes) for pattern in _SPAN)
        if _HIDDEN.search(attributes) and low and high:
            found.extend(range(int(low.group(1)), int(high.group(1)) + 1))
    return found


def _fill_merged(xml: bytes, cells: list) -> None:
    """Each merged range's cells given its top-left cell's value, as the sheet shows it (in place).

    openpyxl's read-only mode gives the value to the top-left cell only: a unit or a date merged
    down a group of rows would leave the rows below it without one (no trend for them), a header
    merged across two columns would name only the first."""
    from openpyxl.utils.cell import range_boundaries

    at = xml.find(b"mergeCells", max(xml.rfind(b"sheetData"), 0))  # the list follows the cells
    if at < 0:
        return
    for ref in _MERGED.findall(xml, at):
        first_col, first_row, last_col, last_row = range_boundaries(ref.decode("ascii"))
        if first_row > len(cells):
            continue
        top = cells[first_row - 1]
        value = top[first_col - 1] if first_col <= len(top) else None
        for row in cells[first_row - 1:last_row]:
            if len(row) < last_col:
                row.extend([None] * (last_col - len(row)))
            for k in range(first_col - 1, last_col):
                if row[k] is None:
                    row[k] = value


def _cell(cell):
    """A workbook cell as the text/number a CSV would give: dates as ISO 8601 text, and a number
    shown as a percentage (stored 0.0012, shown `0.12%`) as the text shown, with its sign, for
    validation to read in a % column and refuse elsewhere (read as the stored number, 0.12 %
    water in a % column would be 0.0012 %, a hundred times too small). A number's format is
    looked up only for numbers."""
    value = cell.value
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        number_format = getattr(cell, "number_format", None) or ""
        if "%" in number_format and "%" in number_format.replace('"%"', "").replace("\\%", ""):
            return f"{round(value * 100, 9)!r}%"
        return value
    if isinstance(value, datetime):
        return value.date().isoformat() if value.time() == time(0) else value.isoformat(timespec="seconds")
    if isinstance(value, date):
        return value.isoformat()
    return value
