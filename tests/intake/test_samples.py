"""Reading samples: every row is graded, unrated or rejected with row, field and reason."""

import io

import numpy as np
import pytest
from conftest import DATA

from sumpwise.vocabulary.problems import InputError, InvalidFile
from sumpwise.intake.samples import load_column_map, read_samples


def test_each_bad_row_is_rejected_with_row_field_and_reason():
    batch = read_samples(DATA / "samples" / "bad-rows.csv")
    got = [(r.row, r.sample_id, r.field) for r in batch.rejects]
    assert got == [(2, "G-2", "kv40"), (3, None, "sample_id"), (4, "G-1", "sample_id"),
                   (5, "G-5", "oil_hours"), (6, "G-6", "kv40"), (7, None, "(row)")]
    reasons = {r.row: r.reason for r in batch.rejects}
    assert reasons[2] == "expected a number or a censored reading such as <0.05, found 'pending'"
    assert reasons[4] == "sample id 'G-1' already seen at row 1"
    assert reasons[5] == "cannot be negative, found -5"
    assert reasons[6] == "must be above 0, found -46.1"
    assert "has 10 field(s), the header has 9" in reasons[7]
    assert {r.row: r.code for r in batch.rejects}[7] == "D013"
    assert list(batch.frame.index) == [1, 8]
    assert batch.rows_read == 8
    assert batch.rejected_rows + len(batch.frame) == batch.rows_read


def test_missing_values_stay_missing_not_zero():
    batch = read_samples(DATA / "samples" / "bad-rows.csv")
    row = batch.frame.loc[8]
    assert np.isnan(row["kv100"]) and np.isnan(row["an"]) and np.isnan(row["water"])


def test_json_lines_with_a_broken_line():
    text = ('{"sample_id": "J-1", "class": "pump", "an": 0.2}\n'
            '{"sample_id": "J-2", "class": "pump", "an": "lots"}\n'
            'not json\n'
            '{"sample_id": "J-4", "class": "pump", "an": null, "kv40": true}\n')
    batch = read_samples(io.StringIO(text), "s.jsonl", fmt="jsonl")
    got = [(r.row, r.field) for r in batch.rejects]
    assert got == [(2, "an"), (3, "(row)"), (4, "kv40")]
    assert list(batch.frame["sample_id"]) == ["J-1"]
    assert batch.rows_read == 4


def test_column_map_renames_and_converts_units():
    columns = load_column_map(DATA / "samples" / "lab-columns.yaml")
    batch = read_samples(DATA / "samples" / "lab-columns.csv", columns=columns)
    row = batch.frame.iloc[0]
    assert row["sample_id"] == "L-1" and row["class"] == "pump"
    assert row["oxidation"] == pytest.approx(12.0)   # 0.12 abs/0.1mm = 12 abs/cm (ASTM D7412 §12)
    assert row["water"] == pytest.approx(300.0)       # 0.03 % = 300 ppm


def test_column_map_names_a_column_the_file_lacks():
    columns = load_column_map(DATA / "samples" / "lab-columns.yaml")
    with pytest.raises(InputError, match="names column 'Sample No' for sample_id"):
        read_samples(DATA / "samples" / "bad-rows.csv", columns=columns)


def test_column_map_with_a_bad_unit(tmp_path):
    path = tmp_path / "map.yaml"
    path.write_text("water: {column: W, unit: grams}\nkv40: {column: K, unit: cSt}\n")
    with pytest.raises(InvalidFile) as caught:
        load_column_map(path)
    messages = [p.message for p in caught.value.problems]
    assert "unknown unit 'grams' for water" in messages[0]
    assert "'kv40' has one fixed unit" in messages[1]


def test_missing_required_column_is_an_input_error():
    with pytest.raises(InputError, match="missing required column"):
        read_samples(io.StringIO("sample_id,an\nx,1\n"), "s.csv")


def test_empty_and_unreadable_files(tmp_path):
    with pytest.raises(InputError, match="empty"):
        read_samples(io.StringIO(""), "empty.csv")
    with pytest.raises(InputError, match="cannot read"):
        read_samples(tmp_path / "nope.csv")


@pytest.mark.parametrize("cell, expected", [
    ("G-1", "G-1"), ("  G-1", "G-1"), ("G-1\t", "G-1"), ("\u00a0G-1\u2003", "G-1"), ("Pump\u00e9 1", "Pump\u00e9 1"),
    ("   ", None), ("", None)])
def test_text_cells_are_stripped_and_blank_ones_missing(tmp_path, cell, expected):
    # str.strip semantics (Python docs: Unicode whitespace); the quick path for clean text must agree.
    path = tmp_path / "s.csv"
    path.write_text(f'sample_id,unit_id,class\nA-1,"{cell}",pump\nA-2,U-2,pump\n', encoding="utf-8")
    units = read_samples(path).frame["unit_id"].tolist()
    assert units == [expected, "U-2"]


def test_a_byte_order_mark_is_not_part_of_the_first_column(tmp_path):
    path = tmp_path / "bom.csv"
    path.write_bytes("sample_id,class,an\nB-1,pump,0.2\n".encode("utf-8-sig"))
    batch = read_samples(path)
    assert list(batch.frame.columns[:2]) == ["sample_id", "class"] and batch.frame["an"].tolist() == [0.2]


def test_a_file_that_is_not_utf8_is_an_input_error(tmp_path):
    path = tmp_path / "latin1.csv"
    path.write_bytes("sample_id,unit_id,class\nC-1,Pump\u00e9,pump\n".encode("latin-1"))
    with pytest.raises(InputError, match="line 2: byte 0xe9 is not utf-8 text.*cp1252"):
        read_samples(path)


def test_row_numbers_skip_unreadable_lines():
    text = "sample_id,class,an\nR-1,pump,0.1\nR-2,pump,0.1,extra\nR-3,pump,0.3\n"
    batch = read_samples(io.StringIO(text), "s.csv")
    assert list(batch.frame.index) == [1, 3] and [r.row for r in batch.rejects] == [2]


def test_a_byte_order_mark_on_a_text_stream_is_dropped_too():
    batch = read_samples(io.StringIO("\ufeffsample_id,class,an\nB-2,pump,0.3\n"), "stdin.csv")
    assert list(batch.frame.columns[:2]) == ["sample_id", "class"] and batch.frame["sample_id"].tolist() == ["B-2"]


@pytest.mark.parametrize("newline", ["\n", "\r\n", "\r"], ids=["lf", "crlf", "cr"])
def test_every_line_ending_reads_the_same(tmp_path, newline):
    # RFC 4180 writes CRLF; LF and old-style lone CR files turn up from lab systems too.
    path = tmp_path / "ends.csv"
    path.write_bytes(newline.join(["sample_id,class,an", "N-1,pump,0.2", "N-2,pump,0.3", ""]).encode())
    batch = read_samples(path)
    assert list(batch.frame.columns) == ["sample_id", "class", "an"]
    assert batch.frame["an"].tolist() == [0.2, 0.3] and batch.rows_read == 2 and not batch.rejects


def test_a_column_nobody_reads_is_named_once_with_the_name_it_resembles():
    # A misspelt header must not vanish without a word: `wter` holds the sample's water reading,
    # which the engine would otherwise never see (the row then grades on fewer rules).
    text = ("sample_id,unit_id,class,lubricant,sampled_on,kv40,wter,Remarks\n"
            "W-1,HPU-1,hydraulic,HYD-46-M,2026-03-01,46.2,5000,ok\n")
    batch = read_samples(io.StringIO(text), name="week.csv")
    assert batch.notes == ("lab columns not used: wter (did you mean water?), Remarks",)
    assert "water" not in batch.frame.columns or np.isnan(batch.frame["water"]).all()


def test_validating_a_frame_leaves_the_callers_frame_as_it_was():
    """Validation works on a copy-on-write view of the caller's DataFrame (nothing is copied up
    front): the caller's cells, column names and index must come out unchanged."""
    import pandas as pd
    from sumpwise.intake.samples import ColumnMap, validate_samples
    frame = pd.DataFrame({" sample_id ": ["B-1", "B-2", "B-2", "  "], "class": [" pump", "pump", "pump", "pump"],
                          "kv40": ["46.2", "<0.5", "pending", "44"], "water": [120.0, -3.0, 80.0, 60.0]})
    before = frame.copy(deep=True)
    batch = validate_samples(frame, [], "<DataFrame>", ColumnMap())
    assert {r.code for r in batch.rejects} == {"D002", "D003", "D004", "D005"}  # the rows were worked on
    assert list(batch.frame["class"]) == ["pump"]
    pd.testing.assert_frame_equal(frame, before)


@pytest.mark.parametrize("decimal", [",", ".", ";;"])
def test_the_decimal_mark_is_swapped_as_numpys_string_replace_swaps_it(decimal):
    # Reference: numpy's own np.strings.replace (a general-purpose library), on cells as labs
    # write them, non-ASCII and empty ones too.
    from sumpwise.intake.samples import _with_decimal_point
    cells = np.array(["12,5", " 0,05 ", "<0,05", "1.500", "", "ND", "2,5,1", "µ,3", "1;;5"], dtype=str)
    assert _with_decimal_point(cells, decimal).tolist() == np.strings.replace(cells, decimal, ".").tolist()
    assert _with_decimal_point(np.array([], dtype=str), decimal).tolist() == []
