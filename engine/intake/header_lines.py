"""Header lines inside the data: exports joined end to end (`cat jan.csv feb.csv`).

The second export's header arrives as a row. When it names the columns as the file's header does,
it is only rejected as the line it is (D020). When it names them in another order (the lab's
export changed between the two files), every row after it holds its values in that other order:
read under the file's header, a water reading would be graded as the acid number. Those rows are
rejected (D020, each naming the header line and the columns that moved) until a header line in
the file's own layout comes back; the rows before it are graded as usual.

A row is a header line when at least two of its cells, and at least half of those it fills,
are names of the file's header (as column_map.header_key compares names: case, spaces, `-` and
`_` aside). Only rows with a header name in a number column are looked at: such a cell is
already set apart as not a number, so a file without one costs nothing.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sumpwise.intake.column_map import header_key


@dataclass(frozen=True)
class HeaderLines:
    """What header lines found in a batch's rows mean for each row."""

    rejected: np.ndarray  # positions of the rows rejected: header lines and rows under another layout
    reasons: list  # the reason of each
    open_break: tuple | None  # (header line's row, columns that moved) still in force after the last row


def header_lines(rows: np.ndarray, candidates: np.ndarray, cells: dict, header: dict,
                 open_break: tuple | None) -> HeaderLines:
    """`rows`: every row's number; `candidates`: positions that may be header lines; `cells`: {column:
    object array of the cells as written at `candidates`}; `header`: {column: its name in the
    file's header}; `open_break`: a break in force from before the first row (a chunk's file)."""
    keys = {column: header_key(name) for column, name in header.items()}
    names = set(keys.values())
    found = []  # (position, moved columns: () when the file's own layout)
    for k, at in enumerate(candidates):
        written = {column: cells[column][k] for column in header
                   if cells[column][k] is not None and header_key(cells[column][k])}
        named = sum(header_key(cell) in names for cell in written.values())
        if named >= 2 and 2 * named >= len(written):
            moved = tuple(f"{str(cell).strip()!r} under {header[column]!r}" for column, cell in written.items()
                          if header_key(cell) != keys[column])
            found.append((int(at), moved))
    if not found and open_break is None:
        return HeaderLines(np.empty(0, dtype=np.int64), [], None)
    rejected, reasons = [], []
    state = open_break
    bounds = [at for at, _ in found] + [len(rows)]
    start = 0
    for (at, moved), end in zip(found + [(None, None)], bounds):
        if state is not None:
            span = range(start, end)
            rejected.extend(span)
            reasons.extend([_under(state)] * len(span))
        if at is None:
            break
        rejected.append(at)
        if moved:
            reasons.append(f"a header line whose columns are not the file's header's ({'; '.join(moved)}): "
                           f"exports of different layouts joined end to end")
            state = (int(rows[at]), moved)
        else:
            reasons.append("the file's header line again (exports joined end to end): not a sample")
            state = None
        start = at + 1
    return HeaderLines(np.asarray(rejected, dtype=np.int64), reasons, state)


def _under(state: tuple) -> str:
    row, moved = state
    return (f"read under the header line at row {row}, whose columns are not the file's header's "
            f"({'; '.join(moved)}): its values cannot be matched to columns with certainty; split the file "
            f"there and read each part with its own header")
