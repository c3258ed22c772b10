"""JSON Lines input read by its fast routes gives what Python's own json module reads.

The reader parses a file in one call: into one small record a line when every line has the
first line's keys, else into dicts, and with the json module when the fast parser refuses
the file (NaN, Infinity). Each route is checked here against json.loads of each line, the
reference (Python standard library), on realistic lab rows."""

import io
import json

import numpy as np
import pytest

from sumpwise.intake.column_map import load_column_map
from sumpwise.intake.samples import read_samples
from sumpwise.vocabulary.problems import InputError

LAB_ROWS = [
    {"sample_id": "BP-0001", "unit_id": "GB-1", "class": "gearbox", "lubricant": "GEAR-320-PAO",
     "sampled_on": "2026-03-02", "kv40": 318.4, "an": 0.82, "water": 140},
    {"sample_id": "BP-0002", "unit_id": "GB-2", "class": "gearbox", "lubricant": "GEAR-320-PAO",
     "sampled_on": "2026-03-02", "kv40": 331.0, "an": None, "water": 95},
    {"sample_id": "BP-0003", "unit_id": "HY-7", "class": "hydraulic", "lubricant": "HYD-46-M",
     "sampled_on": "2026-03-03", "kv40": 44.12, "an": 0.41},  # no water key: a missing cell
]


def _lines(rows) -> str:
    return "".join(json.dumps(row) + "\n" for row in rows)


def _reference(text: str) -> list[dict]:
    """Each line by json.loads, cells as the table gives them: text as text, numbers as floats."""
    rows = []
    for line in text.splitlines():
        if line.strip():
            rows.append(json.loads(line))
    return rows


def _check_against_reference(batch, text: str, numbers=("kv40", "an", "water")) -> None:
    reference = _reference(text)
    assert len(batch.frame) == len(reference)
    for (row_number, got), want in zip(batch.frame.iterrows(), reference):
        for name in ("sample_id", "unit_id", "class", "lubricant", "sampled_on"):
            assert got[name] == want.get(name), (row_number, name)
        for name in numbers:
            value = want.get(name)
            if value is None:
                assert np.isnan(got[name]), (row_number, name)
            else:
                assert got[name] == float(value), (row_number, name)


def test_lines_with_the_first_lines_keys_read_as_json_reads_them():
    text = _lines(LAB_ROWS)
    batch = read_samples(io.StringIO(text), "x.jsonl")
    assert batch.rejects == ()
    _check_against_reference(batch, text)


def test_a_key_the_first_line_lacks_is_read_too():
    rows = LAB_ROWS + [dict(LAB_ROWS[0], sample_id="BP-0004", oxidation=12.5)]
    text = _lines(rows)
    batch = read_samples(io.StringIO(text), "x.jsonl")
    _check_against_reference(batch, text)
    assert batch.frame["oxidation"].isna().tolist() == [True, True, True, False]
    assert batch.frame["oxidation"].iloc[3] == 12.5


def test_a_file_with_nan_is_read_by_the_json_module_and_the_row_rejected():
    text = _lines(LAB_ROWS[:2]) + '{"sample_id": "BP-0009", "class": "gearbox", "water": NaN}\n'
    batch = read_samples(io.StringIO(text), "x.jsonl")
    assert [(r.row, r.sample_id, r.field, r.code) for r in batch.rejects] == [(3, "BP-0009", "water", "D014")]
    _check_against_reference(batch, _lines(LAB_ROWS[:2]))


def test_an_integer_sample_id_beyond_64_bits_is_kept_exactly():
    # A float would spell it 1.2345678901234568e+29: another sample's id, silently.
    text = _lines([dict(LAB_ROWS[0], sample_id=123456789012345678901234567890)])
    batch = read_samples(io.StringIO(text), "x.jsonl")
    assert batch.frame["sample_id"].tolist() == ["123456789012345678901234567890"]


def test_two_objects_on_one_line_reject_that_line_by_number():
    text = _lines(LAB_ROWS[:1]) + json.dumps(LAB_ROWS[1]) + "," + json.dumps(LAB_ROWS[2]) + "\n"
    batch = read_samples(io.StringIO(text), "x.jsonl")
    assert [(r.row, r.field, r.code) for r in batch.rejects] == [(2, "(row)", "D001")]
    assert "not valid JSON" in batch.rejects[0].reason
    assert batch.frame["sample_id"].tolist() == ["BP-0001"]


def test_a_nested_value_in_a_line_of_the_first_lines_keys_rejects_its_row_with_the_field():
    rows = [LAB_ROWS[0], dict(LAB_ROWS[1], an={"value": 0.5, "unit": "mg KOH/g"})]
    batch = read_samples(io.StringIO(_lines(rows)), "x.jsonl")
    assert [(r.row, r.sample_id, r.field, r.code) for r in batch.rejects] == [(2, "BP-0002", "an", "D016")]


@pytest.mark.parametrize("count", [3, 2500])
def test_repeated_codes_and_lab_column_names_read_as_json_reads_them(tmp_path, count):
    # Lab names with spaces and signs (not identifiers); 2,500 rows take the path that keeps
    # one text object per distinct code.
    (tmp_path / "map.yaml").write_text('sample_id: "Probe Nr"\nclass: Equipment\nlubricant: Oil\n'
                                       'water: {column: "H2O %", unit: "%"}\n', encoding="utf-8")
    rng = np.random.default_rng(4)
    rows = [{"Probe Nr": f"BP-{k:05d}", "unit_id": f"GB-{k % 40}", "Equipment": "gearbox",
             "Oil": "GEAR-320-PAO", "sampled_on": "2026-03-02", "kv40": round(float(rng.uniform(290, 350)), 2),
             "an": None if k % 7 == 0 else round(float(rng.uniform(0.3, 1.2)), 2),
             "H2O %": round(float(rng.uniform(0.001, 0.05)), 4)} for k in range(count)]
    text = _lines(rows)
    batch = read_samples(io.StringIO(text), "x.jsonl", columns=load_column_map(tmp_path / "map.yaml"))
    assert batch.rejects == ()
    assert batch.frame["sample_id"].tolist() == [r["Probe Nr"] for r in rows]
    assert batch.frame["unit_id"].tolist() == [r["unit_id"] for r in rows]
    assert batch.frame["class"].tolist() == ["gearbox"] * count
    assert batch.frame["an"].isna().tolist() == [r["an"] is None for r in rows]
    # 1 % = 10,000 ppm (the unit's definition)
    assert batch.frame["water"].tolist() == pytest.approx([r["H2O %"] * 10_000 for r in rows])


def test_a_key_given_twice_with_two_values_rejects_its_row_naming_the_key():
    # RFC 8259 section 4 (wording from memory): names within an object SHOULD be unique, and with
    # duplicates the behaviour of software that receives such an object is unpredictable; Python's json
    # module (the reference here) keeps the last value, which would grade water 9000 ppm.
    rows = [dict(LAB_ROWS[0]), dict(LAB_ROWS[1])]
    text = _lines(rows)
    text += text.splitlines()[0].replace('"sample_id": "BP-0001"', '"sample_id": "BP-0009"')[:-1] \
        + ', "water": 9000}\n'  # row 3: water 140 then 9000
    text += json.dumps({**LAB_ROWS[2], "sample_id": "BP-0010"})[:-1] + ', "an": 0.41}\n'  # the same value twice
    assert json.loads(text.splitlines()[2])["water"] == 9000  # what a silent reader would grade
    batch = read_samples(io.StringIO(text), name="week.jsonl", fmt="jsonl")
    assert [(r.row, r.field, r.code) for r in batch.rejects] == [(3, "water", "D017")]
    assert "140 and 9000" in batch.rejects[0].reason
    assert sorted(batch.frame["sample_id"]) == ["BP-0001", "BP-0002", "BP-0010"]
    assert batch.rows_read == 4 and batch.rejected_rows + len(batch.frame) == batch.rows_read


@pytest.mark.parametrize("blank", ["\n", " \t\n", "\r\n"])
def test_a_blank_line_and_a_line_of_two_objects_keep_every_row_at_its_own_line(blank):
    # The counts balance (four lines, four objects), so a reader that skipped the blank line
    # and took both objects of line 4 would shift row 3 onto line 4.
    end = "\r\n" if blank == "\r\n" else "\n"
    text = (json.dumps(LAB_ROWS[0]) + end + blank + json.dumps(LAB_ROWS[1]) + end
            + json.dumps(LAB_ROWS[2]) + " " + json.dumps(dict(LAB_ROWS[2], sample_id="BP-0004")) + end)
    batch = read_samples(io.StringIO(text), "x.jsonl")
    assert batch.frame.index.tolist() == [1, 3]
    assert batch.frame["sample_id"].tolist() == ["BP-0001", "BP-0002"]
    assert [(r.row, r.code) for r in batch.rejects] == [(4, "D001")]


@pytest.mark.parametrize("spelling", ["indented", "crlf", "pretty"])
def test_lines_spelled_otherwise_read_as_json_reads_them_or_are_rejected_by_line(spelling):
    if spelling == "pretty":  # one object over several lines: not JSON Lines, no line an object
        text = json.dumps(LAB_ROWS[0], indent=1) + "\n"
        with pytest.raises(InputError, match="missing required column"):
            read_samples(io.StringIO(text), "x.jsonl")
        return
    text = _lines(LAB_ROWS)
    text = "".join("  " + line + "\n" for line in text.splitlines()) if spelling == "indented" \
        else text.replace("\n", "\r\n")
    batch = read_samples(io.StringIO(text), "x.jsonl")
    assert batch.rejects == ()
    _check_against_reference(batch, text)


def test_a_key_given_null_then_a_value_is_caught_when_every_line_gives_every_key():
    # Every line gives each of the file's keys (as exports write them, null where empty), so a
    # line with more keys than that repeats one: water null then 9000 is not read as 9000.
    rows = [dict(LAB_ROWS[0]), dict(LAB_ROWS[1], water=None)]
    lines = [json.dumps(row) for row in rows]
    lines[1] = lines[1][:-1] + ', "water": 9000}'
    assert json.loads(lines[1])["water"] == 9000  # what a silent reader would grade
    batch = read_samples(io.StringIO("\n".join(lines) + "\n"), "x.jsonl")
    assert [(r.row, r.field, r.code) for r in batch.rejects] == [(2, "water", "D017")]
    assert "null and 9000" in batch.rejects[0].reason
    assert batch.frame["sample_id"].tolist() == ["BP-0001"]


@pytest.mark.parametrize("route", ["every key, numbers in numeric columns", "every key, a censored reading",
                                   "a key left out"])
def test_each_route_of_the_one_pass_parse_reads_as_json_reads_them(route):
    rows = [dict(LAB_ROWS[0]), dict(LAB_ROWS[1]), dict(LAB_ROWS[2], water=60)]
    if route == "every key, a censored reading":
        rows[2]["an"] = "<0.05"  # text in a numeric column: the parse that takes any value
    if route == "a key left out":
        del rows[2]["water"]
    text = _lines(rows)
    batch = read_samples(io.StringIO(text), "x.jsonl")
    assert batch.rejects == ()
    if route == "every key, a censored reading":
        assert batch.frame["an:written"].tolist()[2] == "<0.05"  # as the lab wrote it, for validation
        _check_against_reference(batch, text, numbers=("kv40", "water"))
    else:
        _check_against_reference(batch, text)


@pytest.mark.parametrize("spelling", ["byte-order mark", "not UTF-8", "declared cp1252"])
def test_bytes_read_straight_or_decoded_give_the_same_rows_and_errors(tmp_path, spelling):
    # The usual file is parsed from its bytes; a BOM, a byte that is not UTF-8 and a declared
    # encoding take the decoded text, as the json module (the reference) would need.
    rows = [dict(row, water=row.get("water")) for row in LAB_ROWS]  # every key on every line
    text = _lines(rows)
    path = tmp_path / "x.jsonl"
    if spelling == "byte-order mark":
        path.write_bytes(b"\xef\xbb\xbf" + text.encode("utf-8"))
        _check_against_reference(read_samples(path), text)
    elif spelling == "not UTF-8":
        path.write_bytes(text.encode("utf-8") + b'{"sample_id": "BP-0009", "class": "gear\xb0"}\n')
        with pytest.raises(InputError, match="line 4: byte 0xb0 is not utf-8"):
            read_samples(path)
    else:
        path.write_bytes(text.replace("HY-7", "HY-7\u00b0").encode("cp1252"))
        (tmp_path / "map.yaml").write_text("file: {encoding: cp1252}\n", encoding="utf-8")
        batch = read_samples(path, columns=load_column_map(tmp_path / "map.yaml"))
        assert batch.frame["unit_id"].tolist()[2] == "HY-7\u00b0"
