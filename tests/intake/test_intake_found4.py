"""Silent wrong grades found in sample intake with lab exports as labs write them (fourth hunt).

Each test grades a real-looking export (fixtures in tests/data/intake_found4/, invented
Brackwater Point samples, the shipped hydraulic rule set) through the real command line and
checks the grade or the reject. The comment above each check says what the engine did before
the fix and names the source of the expected value. The hydraulic limits used (rules/hydraulic.yaml,
common practice, no source there): water above 200 ppm watch, above 500 alert, above 1000 urgent;
acid number rise over the new oil's 0.50 mg KOH/g (HYD-46-M) above 0.2 watch, above 0.4 alert.
"""

from __future__ import annotations

import json
import re

import pytest
from conftest import DATA, ROOT, run_cli
from grade_runs import counts_said, fired_rules, graded_run, rejects_said, water_file
from workbooks import write_workbook

FOUND = DATA / "intake_found4"
HYDRAULIC = ROOT / "rules" / "hydraulic.yaml"










# --- 1. A header that is an engine name but for case, spaces, '-' or '_' ------------------------

def _check_mixed_case(got: dict, first: str, second: str, third: str) -> None:
    # Water 900 ppm: alert (above 500, not above 1000); an acid number of 0.98 is a rise of 0.48
    # over the new oil's 0.50: alert (above 0.4); water 150 and a rise of 0.08: normal. Was: `AN`
    # and `Water` were not read (only a note "lab columns not used: AN (did you mean an?)"), and
    # all three graded normal, no limit crossed.
    assert (got[first]["grade"], fired_rules(got[first])) == ("alert", {"water"})
    assert got[first]["values"]["water"] == 900
    assert (got[second]["grade"], fired_rules(got[second])) == ("alert", {"acid-rise"})
    assert got[second]["derived"]["an_rise"] == pytest.approx(0.48)
    assert (got[third]["grade"], fired_rules(got[third])) == ("normal", set())
    assert "water" not in {gap["rule"] for gap in got[third]["not_evaluated"]}  # evaluated, quiet


def test_title_case_and_dashed_headers_are_read_as_the_engine_columns():
    got, err = graded_run(FOUND / "mixed-case-headers.csv", "--rules", HYDRAULIC)
    _check_mixed_case(got, "HY-2026-0701", "HY-2026-0702", "HY-2026-0703")
    assert got["HY-2026-0701"]["unit_id"] == "HPU-1" and got["HY-2026-0701"]["values"]["oil_hours"] == 8120
    # said once, naming each header and the column it is read as
    assert err.count("note: read column 'Sample ID' as sample_id") == 1
    assert "column 'Oil-Hours' as oil_hours" in err and "column 'AN' as an, column 'Water' as water" in err
    assert "not used" not in err


def test_upper_case_headers_in_a_semicolon_export_with_decimal_commas():
    # `;`, BOM, CRLF, decimal commas only in the columns whose headers differ in case: the mark is
    # detected from them (46,2 is 46.2, not a reject). Was: graded normal, the three columns unread.
    got, err = graded_run(FOUND / "semicolon-upper.csv", "--rules", HYDRAULIC)
    _check_mixed_case(got, "HY-2026-0711", "HY-2026-0712", "HY-2026-0713")
    assert got["HY-2026-0711"]["values"]["kv40"] == 46.2
    assert "detected the decimal mark ','" in err


def test_upper_case_keys_of_json_lines_are_read_as_the_engine_columns(tmp_path):
    lines = [{"Sample_ID": "HY-2026-0731", "unit_id": "HPU-1", "class": "hydraulic", "lubricant": "HYD-46-M",
              "sampled_on": "2026-08-17", "KV40": 46.1, "AN": 0.55, "Water": 900},
             {"Sample_ID": "HY-2026-0732", "unit_id": "HPU-2", "class": "hydraulic", "lubricant": "HYD-46-M",
              "sampled_on": "2026-08-17", "KV40": 46.0, "AN": 0.98, "Water": 120},
             {"Sample_ID": "HY-2026-0733", "unit_id": "HPU-3", "class": "hydraulic", "lubricant": "HYD-46-M",
              "sampled_on": "2026-08-17", "KV40": 45.9, "AN": 0.58, "Water": 150}]
    path = tmp_path / "upper.jsonl"
    path.write_text("".join(json.dumps(line) + "\n" for line in lines), encoding="utf-8")
    got, _ = graded_run(path, "--rules", HYDRAULIC)
    _check_mixed_case(got, "HY-2026-0731", "HY-2026-0732", "HY-2026-0733")


def test_title_case_headers_of_a_workbook_and_on_standard_input(tmp_path):
    text = (FOUND / "mixed-case-headers.csv").read_text(encoding="utf-8")
    rows = [line.split(",") for line in text.splitlines()]
    book = [rows[0]] + [[float(c) if k >= 5 else c for k, c in enumerate(row)] for row in rows[1:]]
    write_workbook(tmp_path / "mixed.xlsx", book)
    got, _ = graded_run(tmp_path / "mixed.xlsx", "--rules", HYDRAULIC)
    _check_mixed_case(got, "HY-2026-0701", "HY-2026-0702", "HY-2026-0703")
    got, _ = graded_run("-", "--rules", HYDRAULIC, stdin=text)
    _check_mixed_case(got, "HY-2026-0701", "HY-2026-0702", "HY-2026-0703")


def test_two_headers_that_land_on_one_column_are_refused_with_a_code():
    # `Water` and `water` both read as water: which one holds the Karl Fischer result is not
    # guessed (common practice, no source). Was: `water` read, `Water` listed as not used, and
    # HY-2026-0721 (900 ppm under `Water`, nothing under `water`) graded normal.
    run = run_cli("grade", FOUND / "two-water-columns.csv", "--rules", HYDRAULIC)
    assert run.code == 2 and run.out == ""
    assert re.search(r"two-water-columns\.csv: error D024: columns 'Water' and 'water' are both read as water",
                     run.err), run.err
    assert "(at $.header.water)" in run.err and "read 0 row(s)" in run.err
    # the refusal is a record with its code, and an InputError: a run of several files grades the others
    from sumpwise.intake.samples import HeaderError, read_samples
    from sumpwise.vocabulary.problems import InputError
    with pytest.raises(HeaderError) as refused:
        read_samples(FOUND / "two-water-columns.csv")
    assert isinstance(refused.value, InputError)
    assert [(p.code, p.path) for p in refused.value.problems] == [("D024", "$.header.water")]
    both = run_cli("grade", FOUND / "two-water-columns.csv", FOUND / "mixed-case-headers.csv", "--rules", HYDRAULIC)
    assert both.code == 2 and {json.loads(line)["sample_id"] for line in both.out.splitlines()} == {
        "HY-2026-0701", "HY-2026-0702", "HY-2026-0703"}


def test_a_column_map_that_names_one_of_them_wins():
    got, err = graded_run(FOUND / "two-water-columns.csv", "--rules", HYDRAULIC,
                       "--columns", FOUND / "two-water-columns.yaml")
    assert (got["HY-2026-0721"]["grade"], fired_rules(got["HY-2026-0721"])) == ("alert", {"water"})
    assert got["HY-2026-0722"]["values"].get("water") is None  # `water` is not read
    assert "columns water not used: the column map reads these names from other columns" in err


def test_a_mapped_column_is_still_read_on_its_exact_name_only(tmp_path):
    # The map names `TAN`; a `tan` header is not that column (a map names the lab's own spelling).
    (tmp_path / "map.yaml").write_text('an: "TAN"\n', encoding="utf-8")
    path = tmp_path / "lower.csv"
    path.write_text("sample_id,class,lubricant,tan\nHY-1,hydraulic,HYD-46-M,0.98\n", encoding="utf-8")
    run = run_cli("grade", path, "--rules", HYDRAULIC, "--columns", tmp_path / "map.yaml")
    assert run.code == 2 and "the column map names column 'TAN' for an, but the file has no such column" in run.err


def test_header_names_are_compared_in_one_place():
    # The reader's numeric columns, the engine names, the repeated-header check and the unit and
    # qualifier columns all compare names with column_map.header_key.
    from sumpwise.intake.column_map import header_key
    assert {header_key(n) for n in ("Oil-Hours", " oil hours ", "OIL_HOURS", "Oil  -  Hours", "\ufeffoil_hours")} \
        == {"oil_hours"}
    assert header_key("KV 40") == header_key("kv40") and header_key("ISO-4406") == header_key("iso4406")
    assert header_key("Oil Hours") != header_key("oilhours")  # a space between words stays a separator
    assert header_key("Water 2") != header_key("water")


# --- 2. A lone summary line that names a unit and a date; subtotal lines without a sample id ------

def test_a_lone_summary_line_with_a_unit_and_a_date_is_rejected():
    # `Max`, `Limit` and `Typical new oil` lines that repeat HPU-2 and the report's date. Was: each
    # graded as a sample of HPU-2 (the `Limit` line, kv40 50.2 against 45.6 new, +10.1 %, and water
    # 500 ppm, at alert) and taken into HPU-2's trend. A statistic or a limit is no sample (common
    # practice, no source).
    got, err = graded_run(FOUND / "summary-lone.csv", "--rules", HYDRAULIC)
    assert rejects_said(err) == [(3, "D019", "sample_id"), (4, "D019", "sample_id"), (5, "D019", "sample_id")]
    # The other side: a unit named `Average 2` or `MAX`, and the one-letter id `N`, with an id and
    # a date, are samples: water 260 ppm is watch (above 200), 120 and 140 normal.
    assert set(got) == {"HY-2026-0801", "HY-2026-0802", "HY-2026-0803", "HY-2026-0804", "N"}
    assert (got["HY-2026-0803"]["grade"], fired_rules(got["HY-2026-0803"])) == ("watch", {"water"})
    assert got["HY-2026-0804"]["grade"] == got["N"]["grade"] == "normal"
    assert counts_said(err) == (8, 5, 0, 3)


def test_subtotal_lines_without_a_sample_id_are_rejected_as_summary_lines():
    # A spreadsheet's subtotal command wrote `HPU-1 Average`, `HPU-2 Average` and `Grand Average`
    # in the unit column, the id empty; an `Average` line names its unit cell `Average`. Was:
    # rejected as rows without a sample id (D002), which says nothing of what they are. A row
    # without an id and without a label stays D002.
    got, err = graded_run(FOUND / "subtotals.csv", "--rules", HYDRAULIC)
    assert rejects_said(err) == [(3, "D019", "unit_id"), (5, "D019", "unit_id"), (6, "D019", "unit_id"),
                             (7, "D019", "unit_id"), (8, "D002", "sample_id")]
    assert "'HPU-1 Average' is a summary label (a spreadsheet subtotal line) and the row has no sample id" in err
    assert (got["HY-2026-0812"]["grade"], fired_rules(got["HY-2026-0812"])) == ("watch", {"water"})
    assert counts_said(err) == (8, 3, 0, 5)


def test_a_sample_id_that_is_a_label_is_found_among_many_ids(tmp_path):
    # Over 1000 distinct ids the label check reads only ids without a digit; a `Limit` among
    # 1500 samples is still found, and ids ending in letters (HY-2026-0001-A) are not taken for labels.
    rows = ["sample_id,unit_id,class,lubricant,sampled_on,water"]
    rows += [f"HY-2026-{k:04d}-A,HPU-{k % 7},hydraulic,HYD-46-M,2026-09-01,150" for k in range(1500)]
    rows.insert(700, "Limit,HPU-1,hydraulic,HYD-46-M,2026-09-30,500")
    path = tmp_path / "many.csv"
    path.write_text("\n".join(rows) + "\n", encoding="utf-8")
    got, err = graded_run(path, "--rules", HYDRAULIC)
    assert rejects_said(err) == [(700, "D019", "sample_id")]
    assert len(got) == 1500


# --- 3. A header that names the engine column followed by its unit ------------------------------

def test_headers_with_units_are_read_in_the_unit_they_name():
    # A semicolon, decimal-comma export (BOM, CRLF, day-first dates) whose headers carry the unit:
    # `Oil Hours (h)`, `KV40 [cSt]`, `AN (mg KOH/g)`, `Water (%)`. Was: none of the four read (a note
    # "lab columns not used"), every sample graded normal. Now read in the unit named: water 0.09 %
    # is 900 ppm (1 % = 10,000 ppm: the definition of ppm by mass, ASTM D6304 reports either), alert.
    got, err = graded_run(FOUND / "units-in-headers.csv", "--rules", HYDRAULIC,
                       "--columns", FOUND / "units-in-headers.yaml")
    _check_mixed_case(got, "HY-2026-0741", "HY-2026-0742", "HY-2026-0743")
    assert got["HY-2026-0742"]["values"]["water"] == 120 and got["HY-2026-0741"]["values"]["oil_hours"] == 8800
    assert "column 'Water (%)' as water in %" in err and "not used" not in err


def test_a_qualifier_column_beside_a_header_with_its_unit_is_read(tmp_path):
    # `>` and 0.1 under `Water (%)` is above 1000 ppm: urgent (above 1000), not 1000 ppm at alert.
    path = tmp_path / "qualified.csv"
    path.write_text("sample_id,unit_id,class,lubricant,sampled_on,Water (%),Water (%) Qualifier\n"
                    "HY-2026-0761,HPU-1,hydraulic,HYD-46-M,2026-08-24,0.1,>\n", encoding="utf-8")
    got, _ = graded_run(path, "--rules", HYDRAULIC)
    assert (got["HY-2026-0761"]["grade"], fired_rules(got["HY-2026-0761"])) == ("urgent", {"water"})


def test_a_header_naming_a_unit_the_column_cannot_be_read_in_is_refused():
    # `KV40 (cP)`: a dynamic viscosity in mPa.s is no kinematic one (ASTM D445: kinematic = dynamic /
    # density); read as mm²/s, 41.5 cP of a 0.87 g/mL oil (47.7 mm²/s) would be a 9 % thinning.
    # Was: the column unused and the sample graded normal.
    run = run_cli("grade", FOUND / "dynamic-viscosity-header.csv", "--rules", HYDRAULIC)
    assert run.code == 2 and run.out == ""
    assert "the header of column 'KV40 (cP)' names mPa.s (a dynamic viscosity)" in run.err


@pytest.mark.parametrize("header", ["Water (KF)", "Water KF ppm", "Water ppb x", "Water Qualifier", "Waterppm"])
def test_a_header_that_is_more_than_a_name_and_a_unit_is_not_read(tmp_path, header):
    # Only a measure's name followed by a unit of its own and nothing else is read: the rest stays
    # unused and is said to be (a column map names it).
    path = tmp_path / "other.csv"
    path.write_text(f"sample_id,unit_id,class,lubricant,sampled_on,{header}\n"
                    "HY-2026-0771,HPU-1,hydraulic,HYD-46-M,2026-08-24,900\n", encoding="utf-8")
    got, err = graded_run(path, "--rules", HYDRAULIC)
    assert "water" not in got["HY-2026-0771"]["values"] and f"lab columns not used: {header}" in err


def test_headers_with_units_on_standard_input_and_wrapped_in_awrite_workbook(tmp_path):
    # The same export piped in (the chunked reader detects the marks from its first chunk), and a
    # workbook whose header cells wrap the unit onto a second line (`Water\n(%)`, as a spreadsheet
    # writes a header with a line break in the cell). Was: the four columns unread, all normal.
    text = (FOUND / "units-in-headers.csv").read_bytes().decode("utf-8-sig")
    got, _ = graded_run("-", "--rules", HYDRAULIC, "--columns", FOUND / "units-in-headers.yaml", stdin=text)
    _check_mixed_case(got, "HY-2026-0741", "HY-2026-0742", "HY-2026-0743")
    rows = [line.split(";") for line in text.splitlines()]
    header = [name.replace(" (", "\n(").replace(" [", "\n[") for name in rows[0]]
    book = [header] + [[float(c.replace(",", ".")) if k >= 5 else c for k, c in enumerate(row)] for row in rows[1:]]
    write_workbook(tmp_path / "wrapped.xlsx", book)
    got, _ = graded_run(tmp_path / "wrapped.xlsx", "--rules", HYDRAULIC, "--columns", FOUND / "units-in-headers.yaml")
    _check_mixed_case(got, "HY-2026-0741", "HY-2026-0742", "HY-2026-0743")


# --- 4. A wet sample's water in % beside smaller percentages, the column read in ppm -------------

def test_a_water_reading_from_1_to_10_beside_percentages_is_rejected_too():
    # Water in % under the header `Water`; the readings below 1 were rejected as percentages since the
    # third hunt (D018), but HY-2026-0782's 1.5 (1.5 % = 15,000 ppm: urgent above 1000) was graded
    # normal as 1.5 ppm. Karl Fischer reports from 10 mg/kg (ASTM D6304 §1.1), so 1.5 is no ppm
    # reading either, and beside percentages it is one: rejected, D018. A row with no water reading
    # (HY-2026-0784) is graded, without the water rule.
    got, err = graded_run(FOUND / "water-percent-wet.csv", "--rules", HYDRAULIC,
                       "--columns", FOUND / "water-percent-wet.yaml")
    assert rejects_said(err) == [(1, "D018", "water"), (2, "D018", "water"), (3, "D018", "water")]
    assert "'1.5' ppm is below what a Karl Fischer titration reports" in err and "(row 1)" in err
    assert set(got) == {"HY-2026-0784"} and counts_said(err) == (4, 1, 0, 3)


def test_a_water_reading_from_1_to_10_alone_is_graded(tmp_path):
    # Without a reading below 1 in the column, 5 ppm is read as written (normal): the check that
    # rejects it needs the column's other readings to say it is a percentage.
    path = tmp_path / "dry.csv"
    water_file(path, [("HY-2026-0791", "HPU-1", "5"), ("HY-2026-0792", "HPU-2", "260")], on="2026-09-28")
    got, err = graded_run(path, "--rules", HYDRAULIC)
    assert got["HY-2026-0791"]["values"]["water"] == 5 and got["HY-2026-0791"]["grade"] == "normal"
    assert (got["HY-2026-0792"]["grade"], fired_rules(got["HY-2026-0792"])) == ("watch", {"water"})


def test_a_space_between_letters_and_digits_is_no_other_column(tmp_path):
    # `KV 40` and `ISO 4406` as the standards write them (ISO 4406:1999's own title) are kv40 and
    # iso4406. kv40 51.0 against the new oil's 45.6 is +11.8 %: alert (outside 10 %, hydraulic.yaml).
    # Was: both columns unread, the sample normal.
    path = tmp_path / "spaced.csv"
    path.write_text("sample_id,unit_id,class,lubricant,sampled_on,KV 40,ISO 4406\n"
                    "HY-2026-0801,HPU-1,hydraulic,HYD-46-M,2026-10-05,51.0,22/21/18\n", encoding="utf-8")
    got, err = graded_run(path, "--rules", HYDRAULIC)
    assert (got["HY-2026-0801"]["grade"], fired_rules(got["HY-2026-0801"])) == ("alert", {"visc-drift"})
    assert got["HY-2026-0801"]["iso4406"] == "22/21/18" and "not used" not in err
