"""The JSON Lines reader's fast route (one numpy pass over the bytes, msgspec a part at a time)
reads what Python's own json module reads line by line, the reference (Python standard
library), or hands the file to the slower routes that do.

The shortcuts checked here: line ends, colons and the "every line end lies between two
objects" test counted a block at a time in numpy (against bytes.count and a plain reading
of each line end); the lines parsed a part at a time (against the json module, with parts
and blocks small enough that every file here spans many); numeric columns built straight
into floats (a null as NaN); repeated texts kept as one object each across parts; id texts
joined a part at a time and split at the end (against the slower route, which builds each
column cell by cell)."""

import json
from contextlib import contextmanager
from unittest import mock

import numpy as np
import pandas as pd
import pytest
from hypothesis import example, given, settings, strategies as st

from sumpwise.intake import readers
from sumpwise.intake.samples import NUMERIC_COLUMNS

NUMERIC = set(NUMERIC_COLUMNS)
FAST = settings(max_examples=150, deadline=None, derandomize=True)


@contextmanager
def _sizes(block: int, part: int):
    """The numpy block and the msgspec part shrunk to a few bytes: every file spans many."""
    with mock.patch.object(readers, "_BLOCK", block), mock.patch.object(readers, "_PART", part):
        yield


def _between_objects_by_hand(data: bytes) -> bool:
    """Each line end read on its own: '}' before it and '{' after it, spaces, tabs and '\\r'
    aside, or the file's start or end."""
    for at in (k for k, byte in enumerate(data) if byte == ord("\n")):
        left, right = data[:at].rstrip(b" \t\r"), data[at + 1:].lstrip(b" \t\r")
        if not (left == b"" or left.endswith(b"}")) or not (right == b"" or right.startswith(b"{")):
            return False
    return True


def _tidy_by_hand(data: bytes) -> bool:
    """The numpy pass's quick answer, spelled out: '}' or '}\\r' right before each line end,
    '{' right after it or the file's end."""
    for at in (k for k, byte in enumerate(data) if byte == ord("\n")):
        before = data[:at].removesuffix(b"\r")
        if not before.endswith(b"}") or data[at + 1:at + 2] not in (b"{", b""):
            return False
    return True


@FAST
@given(data=st.lists(st.sampled_from([b"{", b"}", b"\n", b"\r", b" ", b"\t", b":", b'"a"', b"1"]),
                     max_size=40).map(b"".join),
       block=st.integers(1, 9))
@example(data=b'{"a":1}\r\n{"a":2}\r\n', block=4)  # CRLF: tidy
@example(data=b'{"a":1}\n{"a":2}', block=8)  # no last line end: tidy
@example(data=b'{"a":1}\n\n{"a":2}\n', block=3)  # a blank line: not
@example(data=b'{"a":1} \n {"a":2}\n', block=5)  # spaced: not tidy, but between objects
@example(data=b'\r\n{"a":1}\n', block=2)  # a line end at the start, after a '\r'
def test_line_facts_count_as_bytes_count_and_find_lines_as_read_by_hand(data, block):
    with _sizes(block, 1 << 19):
        ends, colons, tidy = readers._line_facts(data)
        between = readers._between_objects(data, tidy)
    assert (ends, colons) == (data.count(b"\n"), data.count(b":"))
    assert tidy == _tidy_by_hand(data)  # a CRLF file of objects takes no pattern search
    assert between == _between_objects_by_hand(data)
    if tidy:  # the numpy answer is taken without the patterns: it must never say yes wrongly
        assert _between_objects_by_hand(data)


# Lines a lab file can hold, good and broken: whole objects (every key, a key left out, a null,
# a censored reading as text, an empty object), halves of an object, two objects on one line.
GOOD = ['{"sample_id": "BP-1", "class": "gearbox", "an": 0.82, "water": 140}',
        '{"sample_id": "BP-2", "class": "gearbox", "an": null, "water": 95}',
        '{"sample_id":"BP-3","class":"hydraulic","an":0.41,"water":60.5}',
        '{"sample_id": "BP-4", "class": "hydraulic", "an": "<0.05", "water": 20}',
        '{"sample_id": "BP-5", "class": "gearbox", "water": 12}',
        '{}']
BROKEN = ['{"sample_id": "BP-8", "class":', '"gearbox", "an": 0.5, "water": 30}', "}", "{",
          GOOD[0] + " " + GOOD[1], GOOD[0] + "," + GOOD[2], GOOD[0] + " " + '{"sample_id": "BP-9",']
BLANK = ["", " ", "\t", "\r"]
ENDS = ["\n", "\r\n", " \n", "\t\r\n"]


def _reference(data: bytes):
    """(row numbers, cells by row, rejected row numbers) as json.loads of each line reads them."""
    rows, cells, rejected = [], [], []
    for number, line in enumerate(data.decode("utf-8").split("\n"), start=1):
        if not line.strip():
            continue
        try:
            value = json.loads(line)
        except ValueError:
            rejected.append(number)
            continue
        rows.append(number)
        cells.append(value)
    return rows, cells, rejected


def _check(data: bytes) -> None:
    table = readers.read_jsonl(data, NUMERIC)
    rows, cells, rejected = _reference(data)
    assert table.rows.tolist() == rows
    assert sorted(s[0] for s in table.skipped) == rejected
    assert all(s[2] == "D001" for s in table.skipped)
    for k, want in enumerate(cells):
        for name in ("sample_id", "class", "an", "water"):
            got = table.frame[name].iloc[k] if name in table.frame.columns else None
            if want.get(name) is None:
                assert got is None or (isinstance(got, float) and np.isnan(got)), (rows[k], name)
            elif isinstance(want[name], str):
                assert got == want[name], (rows[k], name)
            else:
                assert float(got) == float(want[name]), (rows[k], name)


@FAST
@given(lines=st.lists(st.tuples(st.sampled_from(GOOD[:3]) | st.sampled_from(GOOD + BROKEN + BLANK),
                                st.sampled_from(ENDS)), min_size=1, max_size=12),
       last_end=st.booleans(), block=st.integers(1, 64), part=st.integers(1, 200))
def test_tricky_files_read_as_the_json_module_reads_each_line(lines, last_end, block, part):
    text = "".join(line + end for line, end in lines)
    if not last_end:
        text = text[: -len(lines[-1][1])]
    if not text.strip():
        return  # an empty file: an error, checked elsewhere
    with _sizes(block, part):
        _check(text.encode("utf-8"))


G0, G1, G2 = GOOD[:3]


@pytest.mark.parametrize("text", [
    f"{G0}\n{G1} {G2}\n",  # one line too many objects: the counts differ
    f"{G0}\n{G1} {G2}\n\n",  # ... and a blank last line
    f"{G0}\n\n{G1} {G2}\n",  # the counts balance: a blank line, two objects on a line
    f"{G0}\r\n{G1}\r\n{G2}",  # CRLF, no last line end
    f"{G0}\n {G1}\n\t{G2} \n",  # spaced lines
    f"{G0}\n{G1}\n{G2}\n ",  # a last line of spaces
])
@pytest.mark.parametrize("part", [1, 1 << 19])
def test_files_whose_counts_could_mislead_read_as_the_json_module_reads_each_line(text, part):
    with _sizes(1 << 20, part):
        _check(text.encode("utf-8"))


def _lab_lines(count: int, null_at=(), **changes) -> list[dict]:
    rng = np.random.default_rng(7)
    rows = [{"sample_id": f"BP-{k:05d}", "unit_id": f"GB-{k % 40}", "class": ("gearbox", "hydraulic")[k % 2],
             "lubricant": "GEAR-320-PAO", "sampled_on": f"2026-03-{1 + k % 28:02d}",
             "kv40": round(float(rng.uniform(290, 350)), 2), "an": round(float(rng.uniform(0.3, 1.2)), 2),
             "water": round(float(rng.uniform(10, 400)), 1)} for k in range(count)]
    for k in null_at:
        rows[k]["an"] = None
    for k, row in changes.items():
        rows[int(k[1:])] = row
    return rows


@pytest.mark.parametrize("null_at", [(), (0,), (2999,), (5, 1500, 2998)])
def test_a_file_read_in_many_parts_gives_the_rows_the_whole_file_gives(null_at):
    # 3,000 rows take the route that keeps one object per repeated text; parts of 4 kB split
    # them into about a hundred parts, and a null in the acid number column can sit in the
    # first part, the last, or a few; the reference is json.loads of each line.
    rows = _lab_lines(3000, null_at)
    data = "".join(json.dumps(row) + "\n" for row in rows).encode("utf-8")
    with _sizes(1 << 12, 1 << 12):
        parts = readers.read_jsonl(data, NUMERIC)
    whole = readers.read_jsonl(data, NUMERIC)
    pd.testing.assert_frame_equal(parts.frame, readers.read_jsonl(data, NUMERIC, encoding="cp1252").frame)
    assert parts.rows.tolist() == whole.rows.tolist() == list(range(1, 3001))
    for table in (parts, whole):
        assert table.frame["an"].dtype == float and table.frame["kv40"].dtype == float
        assert np.isnan(table.frame["an"].to_numpy()).tolist() == [k in null_at for k in range(3000)]
        for name in ("sample_id", "unit_id", "class", "lubricant", "sampled_on", "kv40", "water"):
            assert table.frame[name].tolist() == [row[name] for row in rows], name
        assert table.frame["an"].fillna(-1.0).tolist() == [-1.0 if row["an"] is None else row["an"] for row in rows]
        # one object per distinct text across all parts (why the route keeps them so: see readers._repeats)
        assert len({id(v) for v in table.frame["class"]}) == 2
        assert len({id(v) for v in table.frame["sample_id"]}) == 3000


@pytest.mark.parametrize("changed", [
    {"unit_id": {0: None}},  # a null in an id column: in the first part
    {"sample_id": {1700: None}, "unit_id": {2999: None}},  # ... in a middle part, in the last
    {"sample_id": {40: "BP-\u0000-40"}, "unit_id": {2000: "GB-\u0000"}},  # a NUL in a text (JSON: \u0000)
    {"class": {3: None, 2500: "turbine"}, "lubricant": {0: None}},  # a null, a new text in a repeated column
])
def test_text_columns_with_a_null_or_a_nul_read_as_the_slower_route_reads_them(changed):
    # The fast route joins an id column's texts by NUL a part at a time; a part with a null or
    # a NUL inside a text turns the column into cells. The slower route (the text decoded
    # first, as for a declared encoding) builds every column cell by cell once all lines are
    # parsed: both tables must be the same, cell for cell and type for type.
    rows = _lab_lines(3000)
    for name, cells in changed.items():
        for k, value in cells.items():
            rows[k][name] = value
    data = "".join(json.dumps(row) + "\n" for row in rows).encode("utf-8")
    with _sizes(1 << 12, 1 << 12):
        fast = readers.read_jsonl(data, NUMERIC)
    slow = readers.read_jsonl(data, NUMERIC, encoding="cp1252")  # ASCII bytes: the same text
    pd.testing.assert_frame_equal(fast.frame, slow.frame)
    assert fast.rows.tolist() == slow.rows.tolist() == list(range(1, 3001))
    for name in ("sample_id", "unit_id", "class", "lubricant"):
        assert fast.frame[name].tolist() == [row[name] for row in rows], name


def test_a_value_running_from_one_line_onto_the_next_rejects_both_lines():
    # Line 2 holds a whole sample and the start of the next, line 3 the rest: as many objects as
    # lines, so only the line ends show that line 3 is not an object (the json module rejects
    # both lines). Read as one parse, the half sample would be graded as row 3.
    first, second, third = (json.dumps(row) for row in _lab_lines(3))
    cut = third.index('"kv40"')
    data = (first + "\n" + second + " " + third[:cut] + "\n" + third[cut:] + "\n").encode("utf-8")
    for block, part in ((1 << 20, 1 << 19), (7, 30)):
        with _sizes(block, part):
            table = readers.read_jsonl(data, NUMERIC)
        assert table.rows.tolist() == [1]
        assert [(s[0], s[2]) for s in table.skipped] == [(2, "D001"), (3, "D001")]


def test_a_key_given_twice_is_found_by_the_colons_counted_in_blocks():
    # The colon count of the numpy pass decides whether lines are read pair by pair (D017).
    rows = _lab_lines(50)
    lines = [json.dumps(row) for row in rows]
    lines[37] = lines[37][:-1] + ', "water": 9000}'
    with _sizes(5, 64):
        table = readers.read_jsonl(("\n".join(lines) + "\n").encode("utf-8"), NUMERIC)
    assert [(s[0], s[2], s[3]) for s in table.skipped] == [(38, "D017", "water")]
    assert len(table.frame) == 49 and 38 not in table.rows
