"""Read a samples file in chunks of rows, so that a file larger than memory can be graded.

Each chunk is read by read_samples exactly as a whole file would be (the CSV header is put
in front of every chunk), then its row numbers are moved to where the rows stand in the
whole file. A CSV chunk ends only at a line end outside quotes, so a quoted field that
spans lines stays in one chunk. Sample ids repeated across chunks are rejected as within a
file, found by a 64-bit hash of each id seen (8 bytes and a row number a row, not the ids).
"""

from __future__ import annotations

import csv
import io
import re
from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd

from sumpwise.intake.readers import ENCODING_HINT, PREAMBLE_LINES, detect_delimiter, marked_encoding, marked_note
from sumpwise.intake.samples import (ColumnMap, Reject, SampleBatch, detected_decimal, header_preamble,
                                     lab_numeric_columns, read_samples)
from sumpwise.vocabulary.problems import InputError

DUPLICATE_ID = "D003"  # the reject code of a sample id seen before in the file
_BATCH_CHARS = 1 << 22  # lines read at a time while looking for a chunk's end
_SEEN_AT = re.compile(r"^(sample id '.*' already seen at row )(\d+)$", re.S)
_UNDER = re.compile(r"^(read under the header line at row )(-?\d+)(,.*)$", re.S)  # a D020 naming its header line
# A water reading rejected beside the readings that give its column away names the first one's row.
_BESIDE_ROW = re.compile(r"(as percentages \(row )(-?\d+)\)")


def sample_chunks(source, name: str | None = None, columns: ColumnMap | None = None, fmt: str | None = None,
                  numeric: tuple = (), rows: int = 200_000):
    """Yield SampleBatches of about `rows` data rows each, numbered as in the whole file, each
    saying whether the file goes on after it (`more`)."""
    marked = None
    if isinstance(source, (str, Path)):
        name = name or str(source)
        try:
            with open(source, "rb") as head:
                marked = marked_encoding(head.read(4))
            # a byte that is not UTF-8 is kept as a surrogate, so the chunk can say on which line it is
            stream = open(source, encoding=marked or "utf-8-sig", errors="surrogateescape", newline="")
        except OSError as exc:
            raise InputError(f"{name}: cannot read the file: {exc}") from None
    else:
        name, stream = name or "<stdin>", source
        under = getattr(source, "buffer", None)
        marked = marked_encoding(under.peek(4)[:4]) if hasattr(under, "peek") else None
        if marked:  # standard input from a "Unicode text" export: decoded as its mark says
            stream = io.TextIOWrapper(under, encoding=marked, errors="surrogateescape", newline="")
    fmt = fmt or ("jsonl" if name.endswith((".jsonl", ".ndjson", ".json")) else "csv")
    seen = _SeenIds()
    offset = 0
    peeked, note, above_header = (), None, 0  # above_header: lines above the CSV header (a title)
    layout_break = None  # a header line in another layout, in force from an earlier chunk
    percent_water = None  # the row of a water reading an earlier chunk read as a percentage
    try:
        if fmt == "csv":  # a `sep=;` line or a title above the header: not read, as by the whole-file reader
            peeked = _peek(stream)
            try:
                above = header_preamble("".join(peeked), columns or ColumnMap(), numeric)
            except InputError as exc:
                raise InputError(f"{name}: {exc}") from None
            peeked, note, above_header = peeked[above.skip:], above.note, above.skip
            if above.delimiter:
                columns = columns or ColumnMap()
                columns = replace(columns, options={**columns.options, "delimiter": above.delimiter})
        for text, lines, more in _chunk_texts(stream, fmt, rows, name, peeked):
            if offset == 0 and fmt == "csv":
                chunk_columns, columns = columns, _marks_of_the_file(columns, text, numeric, name)  # later: the first's
            else:
                chunk_columns = columns
            # as UTF-8 bytes: a StringIO of the chunk would hold 4 bytes a character
            try:
                data, text = text.encode("utf-8"), None
            except UnicodeEncodeError as exc:  # a surrogate: a byte the file's UTF-8 could not read
                raise _not_utf8(name, ord(text[exc.start]) - 0xDC00, _file_line(text, exc.start, offset, fmt == "csv") + above_header) from None
            batch = read_samples(io.TextIOWrapper(io.BytesIO(data), encoding="utf-8", newline=""), name,
                                 chunk_columns, fmt, numeric,
                                 layout_break and (layout_break[0] - offset, layout_break[1]),  # the chunk's rows
                                 None if percent_water is None else percent_water - offset)
            data = None
            batch = _moved(batch, offset)
            layout_break, percent_water = batch.layout_break, batch.percent_water
            batch = replace(seen.check(batch), more=more)
            if offset == 0:
                said = (marked_note(marked),) if marked else ()
                batch = replace(batch, notes=(*said, *((note,) if note else ()), *batch.notes))
            offset += lines  # the chunk's lines, blank ones included: rows are numbered by line
            yield batch
            batch = None  # let the chunk go before the next one is read
    except UnicodeDecodeError as exc:  # a stream that decodes strictly: the line is not known
        raise _not_utf8(name, exc.object[exc.start], None) from None
    finally:
        if isinstance(source, (str, Path)):
            stream.close()
        elif stream is not source:
            stream.detach()  # standard input's own buffer stays open


def _marks_of_the_file(columns: ColumnMap | None, text: str, numeric: tuple, name: str) -> ColumnMap:
    """The column map with the delimiter and decimal mark the first chunk shows, for the chunks
    after it: a later chunk whose first lines hold no `46,1` would otherwise take '.' and
    reject its decimal-comma numbers."""
    columns = columns or ColumnMap()
    head = text[: 1 << 16].splitlines()  # line ends of any kind, as the readers take them
    delimiter = columns.option("delimiter") or (detect_delimiter(head[0]) if head else ",")
    try:
        decimal = columns.option("decimal") or detected_decimal(text, delimiter, lab_numeric_columns(columns, numeric))
    except InputError as exc:
        raise InputError(f"{name}: {exc}") from None
    return replace(columns, options={**columns.options, "delimiter": delimiter, "decimal": decimal})


def _not_utf8(name: str, byte: int, line: int | None) -> InputError:
    """The whole-file reader's error for a byte that is not UTF-8, naming the encodings to declare."""
    where = f"line {line}: " if line else ""
    return InputError(f"{name}: {where}byte 0x{byte & 0xFF:02x} is not utf-8 text; {ENCODING_HINT}")


def _file_line(text: str, at: int, offset: int, header: bool) -> int:
    """The file line of character `at` of a chunk's text: a CSV chunk's first line is the header
    (line 1); the others follow the `offset` lines of earlier chunks."""
    index = text.count("\n", 0, at)
    return 1 if header and index == 0 else 1 + index + offset


def _peek(stream) -> list:
    """The stream's first lines (as many as readers.preamble looks at), the byte-order mark dropped."""
    peeked = []
    while len(peeked) < PREAMBLE_LINES and (line := stream.readline()):
        peeked.append(line)
    if peeked:
        peeked[0] = peeked[0].removeprefix("\ufeff")
    return peeked


def _chunk_texts(stream, fmt: str, rows: int, name: str, peeked=()):
    """The file's text a chunk at a time, with the number of its lines after any header and whether
    another chunk follows; CSV chunks each start with the header line.

    A CSV chunk never starts with a row of more fields than the header: pandas would take
    such a first row's extra field as an index column and shift every row of the chunk. No
    chunk starts with a blank line (blank lines stay with the chunk before), so none holds
    only blank lines, which a reader takes for an empty file.
    """
    first = peeked[0] if peeked else stream.readline().removeprefix("\ufeff")
    rest = list(peeked[1:])  # lines read already, after the header
    header, fields = "", 0
    if fmt == "csv":
        header, first = first, ""
        if not header.strip():
            raise InputError(f"{name}: the file is empty: expected a header row and data rows")
        fields = len(next(csv.reader([header]), []))
    lines, quotes, yielded = [first] if first else [], 0, False
    for batch in _batches(stream, rest):  # lines split in C; a Python step only where a chunk may end
        at = 0
        while at < len(batch):
            cut = min(at + max(rows - len(lines), 0), len(batch))  # the first line before which it may end
            lines.extend(batch[at:cut])
            if fmt == "csv":
                quotes += "".join(batch[at:cut]).count('"')
            if cut == len(batch):
                break
            line = batch[cut]
            if quotes % 2 == 0 and line.strip() and (fmt != "csv" or _starts_well(line, fields)):
                text, count = header + "".join(lines), len(lines)
                lines, quotes, yielded = [], 0, True  # the lines go before the chunk is graded
                yield text, count, True  # the line that opens the next chunk is in hand
            lines.append(line)
            if fmt == "csv":
                quotes += line.count('"')
            at = cut + 1
    if lines or not yielded:
        yield header + "".join(lines), len(lines), False


def _batches(stream, rest: list):
    """The lines read already (`rest`), then the stream's, a batch at a time."""
    if rest:
        yield rest
    while batch := stream.readlines(_BATCH_CHARS):
        yield batch


def _starts_well(line: str, fields: int) -> bool:
    """Whether a CSV line can open a chunk: no open quote, no more fields than the header."""
    return line.count('"') % 2 == 0 and len(next(csv.reader([line]), [])) <= fields


def _moved(batch: SampleBatch, offset: int) -> SampleBatch:
    """The chunk's row numbers (from 1 in each chunk) moved to the whole file's."""
    if not offset:
        return batch
    frame = batch.frame.copy(deep=False)  # copy-on-write: a new index, the columns shared
    frame.index = frame.index + offset
    rejects = []
    for r in batch.rejects:
        found = _SEEN_AT.match(r.reason) if r.code == DUPLICATE_ID else None
        reason = f"{found.group(1)}{int(found.group(2)) + offset}" if found else r.reason
        under = _UNDER.match(r.reason) if r.code == "D020" else None
        if under:
            reason = f"{under.group(1)}{int(under.group(2)) + offset}{under.group(3)}"
        if r.code == "D018":  # the row of a percentage beside it, named in the reason
            reason = _BESIDE_ROW.sub(lambda m: f"{m.group(1)}{int(m.group(2)) + offset})", reason)
        rejects.append(replace(r, row=r.row + offset, reason=reason))
    moved = batch.layout_break and (batch.layout_break[0] + offset, batch.layout_break[1])
    percent = None if batch.percent_water is None else batch.percent_water + offset
    return replace(batch, frame=frame, rejects=tuple(rejects), layout_break=moved, percent_water=percent)


class _SeenIds:
    """Hashes and first rows of the sample ids of earlier chunks."""

    def __init__(self):
        self.hashes = np.empty(0, dtype=np.uint64)  # sorted
        self.rows = np.empty(0, dtype=np.int64)

    def check(self, batch: SampleBatch) -> SampleBatch:
        ids = batch.frame["sample_id"].to_numpy(dtype=object) if "sample_id" in batch.frame else np.empty(0, object)
        hashes = id_hashes(ids)
        at = np.searchsorted(self.hashes, hashes)
        known = (at < len(self.hashes)) & (self.hashes[np.minimum(at, len(self.hashes) - 1)] == hashes) \
            if len(self.hashes) else np.zeros(len(ids), dtype=bool)
        if known.any():
            first = self.rows[at[known]]
            extra = [Reject(int(row), sid, "sample_id", f"sample id '{sid}' already seen at row {int(before)}",
                            DUPLICATE_ID)
                     for row, sid, before in zip(batch.frame.index[known], ids[known], first)]
            rejects = tuple(sorted(batch.rejects + tuple(extra), key=lambda r: (r.row, r.field)))
            batch = replace(batch, frame=batch.frame[~known], rejects=rejects)
            hashes = hashes[~known]
        # rows rejected for other reasons still count as the first of their id, as in a whole file
        first_rejects = {r.row: r.sample_id for r in batch.rejects
                         if r.sample_id is not None and r.code != DUPLICATE_ID}
        rows = np.concatenate([batch.frame.index.to_numpy(dtype=np.int64),
                               np.fromiter(first_rejects, dtype=np.int64, count=len(first_rejects))])
        if first_rejects:
            hashes = np.concatenate([hashes, id_hashes(np.array(list(first_rejects.values()), dtype=object))])
        self.hashes, self.rows = merged(self.hashes, self.rows, hashes, rows)
        return batch


def merged(hashes: np.ndarray, rows: np.ndarray, more: np.ndarray, more_rows: np.ndarray) -> tuple:
    """Sorted `hashes` (with their `rows`) and `more` in one sorted array, an equal hash after
    those already there and in its own order: what a stable sort of the two end to end gives,
    by sorting only the chunk's and inserting it (the earlier ids' sort, growing with the
    file, is never redone: 10,000,000 ids would be sorted again at every chunk)."""
    order = np.argsort(more, kind="stable")
    more, more_rows = more[order], more_rows[order]
    at = np.searchsorted(hashes, more, side="right")
    return np.insert(hashes, at, more), np.insert(rows, at, more_rows)


def id_hashes(ids: np.ndarray) -> np.ndarray:
    """64-bit hashes of sample ids (text): the object array hashed as it is, six times as fast
    as through a fixed-width copy, with the same hashes."""
    return pd.util.hash_array(ids, categorize=False) if len(ids) else np.empty(0, dtype=np.uint64)
