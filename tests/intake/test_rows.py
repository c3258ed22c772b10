"""Every row named correctly and counted once: row numbers by line (blank lines counted),
rows too long and too short rejected alike, non-finite numbers and duplicate columns refused,
file and standard input alike, nested JSON values rejected with the field."""

import io
import json

import pytest
from conftest import ROOT, run_cli

from sumpwise.intake.samples import read_samples
from sumpwise.vocabulary.problems import InputError

SITE = ROOT / "scenarios" / "brackwater" / "site.yaml"
HEADER = "sample_id,unit_id,class,lubricant,kv40,an,water\n"


def _rejects(batch):
    return [(r.row, r.sample_id, r.field, r.code) for r in batch.rejects]


def test_a_surplus_field_on_the_first_row_shifts_nothing():
    text = (HEADER + "S1,GB-1,gearbox,GEAR-320-PAO,320,0.8,100,surplus\n"
            "S2,GB-1,gearbox,GEAR-320-PAO,321,0.8,100\nS3,GB-2,gearbox,GEAR-320-PAO,322,0.9,150\n")
    batch = read_samples(io.StringIO(text))
    assert _rejects(batch) == [(1, None, "(row)", "D013")]
    assert batch.frame["sample_id"].tolist() == ["S2", "S3"]
    assert batch.frame["class"].tolist() == ["gearbox", "gearbox"]
    assert batch.frame.index.tolist() == [2, 3]


def test_rows_too_short_and_too_long_are_rejected_alike():
    text = HEADER + "S1,GB-1,gearbox,GEAR-320-PAO,320\nS2,GB-1,gearbox,GEAR-320-PAO,321,0.8,100,x\n"
    batch = read_samples(io.StringIO(text))
    assert [(r.row, r.code) for r in batch.rejects] == [(1, "D013"), (2, "D013")]
    assert "has 5 field(s), the header has 7" in batch.rejects[0].reason
    assert "has 8 field(s), the header has 7" in batch.rejects[1].reason


def test_row_numbers_count_blank_lines_in_csv_and_json_lines():
    text = HEADER + "S1,GB-1,gearbox,GEAR-320-PAO,320,0.8,100\n\n\nS2,GB-1,gearbox,GEAR-320-PAO,-5,0.8,100\n"
    batch = read_samples(io.StringIO(text))
    assert _rejects(batch) == [(4, "S2", "kv40", "D005")]  # file line 5, the 4th after the header
    assert batch.rows_read == 2
    lines = '{"sample_id": "J1", "class": "gearbox"}\n\n{"sample_id": "J2", "class": "gearbox", "an": -1}\n'
    batch = read_samples(io.StringIO(lines), "x.jsonl")
    assert _rejects(batch) == [(3, "J2", "an", "D005")]
    assert batch.frame.index.tolist() == [1]


@pytest.mark.parametrize("spelled", ["inf", "Infinity", "1e999", "NaN", "-inf"])
def test_numbers_that_are_not_finite_are_rejected_with_the_field(spelled):
    text = HEADER + f"S1,GB-1,gearbox,GEAR-320-PAO,320,0.8,{spelled}\nS2,GB-1,gearbox,GEAR-320-PAO,320,0.8,100\n"
    batch = read_samples(io.StringIO(text))
    assert _rejects(batch) == [(1, "S1", "water", "D014")]
    lines = f'{{"sample_id": "J1", "class": "gearbox", "water": {spelled if spelled != "1e999" else "1e999"}}}\n'
    if spelled in ("inf", "-inf"):
        lines = lines.replace(spelled, "Infinity" if spelled == "inf" else "-Infinity")
    assert _rejects(read_samples(io.StringIO(lines), "x.jsonl")) == [(1, "J1", "water", "D014")]


@pytest.mark.parametrize("header", ["sample_id,class,water,water\n", "sample_id,class,water,water \n"])
def test_duplicate_column_names_are_refused_naming_them(header):
    with pytest.raises(InputError, match=r"duplicate column names in the header: 'water' and 'water ?'"):
        read_samples(io.StringIO(header + "S1,gearbox,1,2\n"))


def test_a_nested_json_value_rejects_its_row_with_the_field():
    lines = ('{"sample_id": "J1", "class": "gearbox", "an": 0.5}\n'
             '{"sample_id": "J3", "class": "gearbox", "tags": ["a", "b"]}\n')
    batch = read_samples(io.StringIO(lines), "x.jsonl")
    assert _rejects(batch) == [(2, "J3", "tags", "D016")]
    assert batch.frame["sample_id"].tolist() == ["J1"]


def test_file_and_standard_input_give_the_same_results_and_counts(tmp_path):
    text = (HEADER + "S1,GB-1,gearbox,GEAR-320-PAO,320,0.8,100,surplus\n\n"
            "S2,GB-1,gearbox,GEAR-320-PAO,321,<0.05,>2500\nS3,GB-2,gearbox,GEAR-320-PAO,inf,0.9,150\n"
            "S4,GB-2,gearbox,GEAR-320-PAO,322\n")
    path = tmp_path / "s.csv"
    path.write_text(text, encoding="utf-8")
    from_file = run_cli("grade", path, "--rules", SITE)
    from_stdin = run_cli("grade", "-", "--rules", SITE, stdin=text)
    # the same records, each naming its origin as the rejects do: the file, or <stdin>
    assert '"origin": {"file": "<stdin>", "row": 3}' in from_stdin.out
    assert from_file.out.replace(json.dumps(str(path)), '"<stdin>"') == from_stdin.out
    assert from_file.err.replace(str(path), "<stdin>") == from_stdin.err
    assert "read 4 row(s): 1 graded, 0 unrated, 3 rejected" in from_file.err


def test_converted_values_carry_no_binary_noise(tmp_path):
    # 0.07 % is 700 ppm exactly (1 % = 10 000 ppm); 0.07 * 10000 is 700.0000000000001 in binary.
    (tmp_path / "map.yaml").write_text('water: {column: "H2O %", unit: "%"}\n', encoding="utf-8")
    from sumpwise.intake.column_map import load_column_map
    batch = read_samples(io.StringIO("sample_id,class,H2O %\nW1,gearbox,0.07\nW2,gearbox,<0.01\n"),
                         columns=load_column_map(tmp_path / "map.yaml"))
    assert batch.frame["water"].iat[0] == 700.0
    assert batch.frame["water:censored"].iat[1] == "<100"
    # a bound in a converted unit is spelt in the engine's unit, as the values beside it are
    assert batch.frame["water:written"].iat[1] == "<100"


def test_dates_iso_or_declared_else_rejected_with_the_reason():
    text = ("sample_id,class,sampled_on\nD1,gearbox,2026-01-15\nD2,gearbox,yesterday\nD3,gearbox,2026-13-45\n"
            "D4,gearbox,15/01/2026\nD5,gearbox,2026-01-15T08:30:00\nD6,gearbox,\n")
    batch = read_samples(io.StringIO(text))
    assert [(r.sample_id, r.code) for r in batch.rejects] == [("D2", "D015"), ("D3", "D015"), ("D4", "D015")]
    assert batch.frame["sampled_on"].tolist() == ["2026-01-15", "2026-01-15T08:30:00", None]
