"""Silent wrong grades found in sample intake with lab exports as labs write them (third hunt).

Each test grades a real-looking export (fixtures in tests/data/intake_found3/, invented
Brackwater Point samples and the shipped rule sets or a small test rule set beside the
fixtures) through the real command line, and checks the grade or the reject. The comment above
each check says what the engine did before the fix and names the source of the expected value.
"""

from __future__ import annotations

import json

import pytest
from conftest import DATA, ROOT
from grade_runs import counts_said, fired_rules, graded_run, rejects_said
from workbooks import write_workbook

FOUND = DATA / "intake_found3"
GEAR_IRON = FOUND / "gear-iron.yaml"
HYDRAULIC = ROOT / "rules" / "hydraulic.yaml"






def _csv_rows(path) -> list:
    return [line.split(",") for line in path.read_text(encoding="utf-8").splitlines()]


# --- 2. A date-time with a UTC offset kept as the site's own date ------------------------------

OFFSET_DATES = FOUND / "offset-dates.csv"


def _check_offset_trend(got: dict) -> None:
    # GB-7: an evening sample (23:30 at the site, written with its offset -05:00) showed iron 75 ppm
    # after 36; the next morning's resample, written as a date, confirmed 77. The step of the
    # evening sample is 75 - 36 = 39 ppm > 30: alert; the resample's is 77 - 75 = 2: quiet (limits
    # in gear-iron.yaml, common practice, no source; the step is the plain difference of two
    # readings, rule-language "trend measures"). Was: the offset was converted to UTC, so the
    # evening sample was dated 2026-03-03T04:30, after the resample: the resample took the step
    # of 41 (alert) and the evening sample graded normal with an oil-changed caveat (oil hours
    # 6029 -> 6020 read as a fall).
    assert (got["GB7-0419"]["grade"], fired_rules(got["GB7-0419"])) == ("alert", {"iron-step"})
    assert "oil-changed" not in {c["caveat"] for c in got["GB7-0419"]["caveats"]}
    assert (got["GB7-0420"]["grade"], fired_rules(got["GB7-0420"])) == ("normal", set())
    assert "iron-step" not in {gap["rule"] for gap in got["GB7-0420"]["not_evaluated"]}  # evaluated, quiet
    assert got["GB7-0419"]["sampled_on"] == "2026-03-02T23:30:00"  # the date as the lab wrote it
    assert got["GB7-0412"]["sampled_on"] == "2026-02-02T14:05:00"


def test_an_offset_date_keeps_its_day_and_the_trend_its_order_csv():
    got, _ = graded_run(OFFSET_DATES, "--rules", GEAR_IRON)
    _check_offset_trend(got)


def test_an_offset_date_keeps_its_day_and_the_trend_its_order_json_lines(tmp_path):
    rows = _csv_rows(OFFSET_DATES)
    header, numeric = rows[0], {"oil_hours", "kv40", "an", "iron"}
    lines = [json.dumps({k: float(v) if k in numeric else v for k, v in zip(header, row)}) for row in rows[1:]]
    path = tmp_path / "offset-dates.jsonl"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    got, _ = graded_run(path, "--rules", GEAR_IRON)
    _check_offset_trend(got)


def test_an_offset_date_keeps_its_day_and_the_trend_its_orderwrite_workbook(tmp_path):
    # A workbook written by a lab system keeps an ISO date-time with offset as text (a spreadsheet
    # date has no offset); the resample's date typed in as a spreadsheet date.
    from datetime import datetime
    rows = _csv_rows(OFFSET_DATES)
    numeric = {5, 6, 7, 8}
    book_rows = [rows[0]] + [[float(v) if k in numeric else v for k, v in enumerate(row)] for row in rows[1:]]
    book_rows[3][4] = datetime(2026, 3, 3)
    path = tmp_path / "offset-dates.xlsx"
    write_workbook(path, book_rows)
    got, _ = graded_run(path, "--rules", GEAR_IRON)
    _check_offset_trend(got)


# --- 1. Summary lines of an export rejected as what they are (D019) -----------------------------





def test_a_footer_of_statistics_and_a_limit_line_is_rejected_not_graded():
    # A semicolon, decimal-comma export (BOM, CRLF) whose footer gives the mean, maximum,
    # standard deviation and count of the four samples and the operator's limit line. Was: the
    # five lines graded as hydraulic samples, `Max` and `Grenzwert` (water 260 and 500 ppm above
    # the 200 ppm watch step) at watch. A statistic or a limit is not a sample (common practice,
    # no source).
    got, err = graded_run(FOUND / "summary-semicolon.csv", "--rules", HYDRAULIC,
                       "--columns", FOUND / "summary-semicolon.yaml")
    assert set(got) == {"HY-2026-0311", "HY-2026-0312", "MAX-PUMP-03", "HY-2026-0314"}
    assert rejects_said(err) == [(5, "D019", "sample_id"), (6, "D019", "sample_id"), (7, "D019", "sample_id"),
                             (8, "D019", "sample_id"), (9, "D019", "sample_id")]
    assert counts_said(err) == (9, 4, 0, 5)  # read = graded + unrated + rejected
    # MAX-PUMP-03 merely contains a label: a sample, graded on hydraulic.yaml's rules: kv40 47.9
    # against new 45.6 is +5.0 % (> 5: watch), acid number 0.71 - 0.50 = 0.21 (> 0.2: watch), water
    # 260 ppm (> 200: watch) (common practice, no source, as the rules say).
    assert (got["MAX-PUMP-03"]["grade"], fired_rules(got["MAX-PUMP-03"])) == ("watch", {"visc-drift", "acid-rise", "water"})


def test_summary_objects_in_json_lines_are_rejected_each_time_they_come():
    # A LIMS JSON export with an `Average` object after each unit's samples (unit given, no date),
    # then the new oil's typical values and a limit line. Was: both averages, the new oil and the
    # limit graded (the limit line alert: water 500 ppm, acid rise 0.4, kv40 +10.1 %), and the
    # second `Average` would have been a D003 repeat at best.
    got, err = graded_run(FOUND / "summary-lines.jsonl", "--rules", HYDRAULIC)
    assert set(got) == {"HY-2026-0402", "HY-2026-0403", "HY-2026-0404"}
    assert rejects_said(err) == [(3, "D019", "sample_id"), (5, "D019", "sample_id"), (6, "D019", "sample_id"),
                             (7, "D019", "sample_id")]
    assert counts_said(err) == (7, 3, 0, 4)


def test_a_label_column_beside_an_empty_or_counted_sample_id_in_awrite_workbook(tmp_path):
    # A workbook whose first column names the sampling point and carries the group's labels, the
    # sample number beside it: `Average` with no sample number, and `Count` with the count (3) in
    # the sample number's column and in every result column. Was: `Count` graded as sample "3"
    # (normal) and each `Average` rejected as a row without a sample id (D002).
    rows = [["Point", "Sample No.", "Date", "Oil", "Visc 40", "TAN", "Water"],
            ["HPU-1", 260411, "2026-04-02", "HYD-46-M", 46.4, 0.61, 150],
            ["HPU-1", 260412, "2026-04-16", "HYD-46-M", 46.6, 0.63, 170],
            ["Average", None, None, None, 46.5, 0.62, 160],
            ["HPU-2", 260413, "2026-04-02", "HYD-46-M", 45.3, 0.56, 110],
            ["Average", None, None, None, 45.3, 0.56, 110],
            ["Count", 3, None, None, 3, 3, 3]]
    path = tmp_path / "labels.xlsx"
    write_workbook(path, rows)
    (tmp_path / "map.yaml").write_text(
        'sample_id: "Sample No."\nunit_id: Point\nclass: {value: hydraulic}\nlubricant: Oil\nsampled_on: Date\n'
        'kv40: "Visc 40"\nan: TAN\nwater: Water\n', encoding="utf-8")
    got, err = graded_run(path, "--rules", HYDRAULIC, "--columns", tmp_path / "map.yaml")
    assert set(got) == {"260411", "260412", "260413"}
    assert rejects_said(err) == [(3, "D019", "unit_id"), (5, "D019", "unit_id"), (6, "D019", "unit_id")]
    assert counts_said(err) == (6, 3, 0, 3)


def test_per_unit_average_lines_that_repeat_the_unit_and_a_date_are_rejected():
    # A LIMS report grouped by unit: after each unit's samples an `Average` line that repeats the
    # unit and carries the report's date. Was: the first `Average` graded as a sample of HPU-1 (and
    # taken into its trend as the latest sample), the second rejected as a repeated id (D003).
    # The lone `Max` line after them, which gives a unit and a date too, was graded as a sample of
    # HPU-2 until the fourth hunt (test_intake_found4.py): a sample id that is a summary label is
    # no sample whatever else the row holds.
    got, err = graded_run(FOUND / "summary-grouped.csv", "--rules", HYDRAULIC)
    assert set(got) == {"HY-2026-0501", "HY-2026-0502", "HY-2026-0503", "HY-2026-0504"}
    assert rejects_said(err) == [(3, "D019", "sample_id"), (6, "D019", "sample_id"), (7, "D019", "sample_id")]
    assert counts_said(err) == (7, 4, 0, 3)


@pytest.mark.parametrize("cell", ["MAX-PUMP-03", "Total-Lube-Tank-A", "MEAN CREEK PUMP", "Limit switch gearbox",
                                  "Countershaft GB", "Average-line-2B"])
def test_a_sample_id_that_contains_a_label_is_graded(tmp_path, cell):
    # Whole-cell matches only: each of these is a sample (common practice, no source): water 260 ppm
    # is watch on hydraulic.yaml (above 200).
    path = tmp_path / "one.csv"
    path.write_text("sample_id,unit_id,class,lubricant,water\n"
                    f"{cell},HPU-1,hydraulic,HYD-46-M,260\n", encoding="utf-8")
    got, err = graded_run(path, "--rules", HYDRAULIC)
    assert got[cell]["grade"] == "watch" and counts_said(err) == (1, 1, 0, 0)


@pytest.mark.parametrize("cell", ["Average", "AVERAGE:", " mean ", "Std. Dev.", "std-dev", "Min.", "MAXIMUM",
                                  "Count", "n", "Total", "Limit", "Limits", "Typical new oil", "TYPICAL NEW OIL",
                                  "Mean (n=12)", "% RSD"])
def test_summary_labels_are_matched_whatever_their_case_spaces_and_punctuation(tmp_path, cell):
    path = tmp_path / "one.csv"
    path.write_text("sample_id,unit_id,class,lubricant,water\n"
                    f"HY-1,HPU-1,hydraulic,HYD-46-M,120\n\"{cell}\",,hydraulic,,500\n", encoding="utf-8")
    got, err = graded_run(path, "--rules", HYDRAULIC)
    assert set(got) == {"HY-1"} and rejects_said(err) == [(2, "D019", "sample_id")] and counts_said(err) == (2, 1, 0, 1)


# --- 3. Exports joined end to end: a header line among the data (D020) -------------------------

JOINED_MAP = FOUND / "summary-semicolon.yaml"  # the same lab's column names


@pytest.mark.parametrize("chunk_rows", [None, 1, 3])
def test_rows_under_a_header_line_in_another_layout_are_rejected_not_graded(chunk_rows):
    # January's and February's exports joined (each with its BOM, CRLF); February's has water and
    # TAN in the other order. Was: February's rows read under January's header, HY-2026-0211
    # (water 150 ppm, TAN 0.60) graded alert on acid-rise with an acid number of 150, and
    # HY-2026-0212's 850 ppm water (alert above 500 in hydraulic.yaml, common practice, no
    # source) read as 0.55 ppm. A value is only what its column says it is (common practice, no
    # source): rows whose columns cannot be matched with certainty are not graded.
    chunks = () if chunk_rows is None else ("--chunk-rows", chunk_rows)
    got, err = graded_run(FOUND / "joined-reordered.csv", "--rules", HYDRAULIC, "--columns", JOINED_MAP, *chunks)
    assert set(got) == {"HY-2026-0111", "HY-2026-0112"}
    assert rejects_said(err) == [(3, "D020", "(row)"), (4, "D020", "(row)"), (5, "D020", "(row)")]
    assert "header line at row 3" in err and "'TAN' under 'Wasser ppm'" in err
    assert counts_said(err) == (5, 2, 0, 3)


def test_a_header_line_repeated_in_the_same_layout_is_rejected_alone():
    # The same exports joined, both in January's layout: the second header line is rejected once
    # (D020, not four D004/D015 rejects of a "sample" named 'Probe Nr'), and the rows after it
    # grade as written: HY-2026-0212's water 850 ppm is alert (above 500), HY-2026-0211 normal.
    got, err = graded_run(FOUND / "joined-same.csv", "--rules", HYDRAULIC, "--columns", JOINED_MAP)
    assert rejects_said(err) == [(3, "D020", "(row)")]
    assert (got["HY-2026-0212"]["grade"], fired_rules(got["HY-2026-0212"])) == ("alert", {"water"})
    assert got["HY-2026-0211"]["grade"] == "normal"
    assert counts_said(err) == (5, 4, 0, 1)


def test_sheets_pasted_one_under_the_other_in_awrite_workbook(tmp_path):
    # The same in a workbook: a second header row in another order, then a header row in the
    # first order again, after which rows grade as usual.
    head = ["Sample", "Unit", "Oil", "Date", "Visc 40", "TAN", "Water"]
    moved = ["Sample", "Unit", "Oil", "Date", "Visc 40", "Water", "TAN"]
    rows = [head, ["HY-11", "HPU-1", "HYD-46-M", "2026-01-12", 46.1, 0.56, 120],
            moved, ["HY-21", "HPU-1", "HYD-46-M", "2026-02-09", 46.2, 150, 0.60],
            head, ["HY-31", "HPU-1", "HYD-46-M", "2026-03-09", 46.3, 0.61, 620]]
    path = tmp_path / "pasted.xlsx"
    write_workbook(path, rows)
    (tmp_path / "map.yaml").write_text('sample_id: Sample\nunit_id: Unit\nclass: {value: hydraulic}\nlubricant: Oil\n'
                                       'sampled_on: Date\nkv40: "Visc 40"\nan: TAN\nwater: Water\n', encoding="utf-8")
    got, err = graded_run(path, "--rules", HYDRAULIC, "--columns", tmp_path / "map.yaml")
    assert set(got) == {"HY-11", "HY-31"}
    assert rejects_said(err) == [(2, "D020", "(row)"), (3, "D020", "(row)"), (4, "D020", "(row)")]
    assert (got["HY-31"]["grade"], fired_rules(got["HY-31"])) == ("alert", {"water"})  # 620 ppm > 500
    assert counts_said(err) == (5, 2, 0, 3)


# --- 4. Workbooks: every row the sheet holds, merged cells as the sheet shows them -------------

def _gear_book(path, unit_cells: list) -> None:
    """GB-7's three samples: iron 30, 34, then 80 ppm (a step of 46 > 30: alert on iron-step)."""
    rows = [["Unit", "Sample", "Class", "Oil", "Date", "Hours", "Visc 40", "TAN", "Iron"],
            [unit_cells[0], "GB7-1", "gearbox", "GEAR-320-M", "2026-01-05", 5000, 319.0, 1.00, 30],
            [unit_cells[1], "GB7-2", "gearbox", "GEAR-320-M", "2026-02-05", 5700, 319.5, 1.02, 34],
            [unit_cells[2], "GB7-3", "gearbox", "GEAR-320-M", "2026-03-05", 6400, 320.0, 1.04, 80]]
    import openpyxl
    book = openpyxl.Workbook()
    for row in rows:
        book.active.append(row)
    if unit_cells[1] is None:
        book.active.merge_cells("A2:A4")  # the unit written once for its group of rows
    book.save(path)


GEAR_MAP = ('sample_id: Sample\nunit_id: Unit\nclass: Class\nlubricant: Oil\nsampled_on: Date\noil_hours: Hours\n'
            'kv40: "Visc 40"\nan: TAN\niron: Iron\n')


def test_a_unit_merged_down_its_group_of_rows_applies_to_each(tmp_path):
    # The unit GB-7 in one cell merged over its three rows, as lab workbooks group samples. Was:
    # openpyxl's read-only mode gives the value to the top cell only, so GB7-2 and GB7-3 had no unit
    # and no trend: GB7-3's iron step of 46 ppm (alert above 30 in gear-iron.yaml, common practice,
    # no source) was not evaluated and the sample graded normal. A merged cell shows its value over
    # the whole range (ECMA-376 Part 1, mergeCell: from memory).
    _gear_book(tmp_path / "merged.xlsx", ["GB-7", None, None])
    (tmp_path / "map.yaml").write_text(GEAR_MAP, encoding="utf-8")
    got, _ = graded_run(tmp_path / "merged.xlsx", "--rules", GEAR_IRON, "--columns", tmp_path / "map.yaml")
    assert {k: r["unit_id"] for k, r in got.items()} == {"GB7-1": "GB-7", "GB7-2": "GB-7", "GB7-3": "GB-7"}
    assert (got["GB7-3"]["grade"], fired_rules(got["GB7-3"])) == ("alert", {"iron-step"})


def test_rows_beyond_a_stale_sheet_dimension_are_read(tmp_path):
    # A workbook whose <dimension> says A1:I3 while its rows run to 4 (written by a program that
    # set it before the last row). openpyxl's read-only mode reads only the rows the dimension
    # names unless reset (openpyxl documentation, "Optimised Modes", Worksheet dimensions). Was:
    # "read 2", GB7-3 (alert) left out without a word.
    import zipfile
    _gear_book(tmp_path / "whole.xlsx", ["GB-7", "GB-7", "GB-7"])
    stale = tmp_path / "stale.xlsx"
    with zipfile.ZipFile(tmp_path / "whole.xlsx") as source, zipfile.ZipFile(stale, "w") as target:
        for item in source.infolist():
            data = source.read(item.filename)
            if item.filename == "xl/worksheets/sheet1.xml":
                assert b'<dimension ref="A1:I4"' in data
                data = data.replace(b'<dimension ref="A1:I4"', b'<dimension ref="A1:I3"')
            target.writestr(item, data)
    (tmp_path / "map.yaml").write_text(GEAR_MAP, encoding="utf-8")
    got, err = graded_run(stale, "--rules", GEAR_IRON, "--columns", tmp_path / "map.yaml")
    assert set(got) == {"GB7-1", "GB7-2", "GB7-3"} and counts_said(err) == (3, 3, 0, 0)
    assert (got["GB7-3"]["grade"], fired_rules(got["GB7-3"])) == ("alert", {"iron-step"})


# --- 5. A result's qualifier in a column of its own (LIMS exports) ----------------------------

def _check_qualified(got: dict, decimal: str) -> None:
    # HY-2026-0601: water '>' 1000 (the top of the Karl Fischer range the lab ran) lies above the
    # 1000 ppm urgent step of hydraulic.yaml (common practice, no source): urgent. Was: the
    # qualifier column was left unused and 1000 read as the reading: alert.
    assert (got["HY-2026-0601"]["grade"], got["HY-2026-0601"]["values"]["water"]) == ("urgent", ">1000")
    # HY-2026-0605: water '>' 500 is above the 500 ppm alert step, undecided against urgent: alert, with
    # the grade-may-be-higher caveat (README, "No silent pass"). Was: 500, not above 500: watch.
    assert got["HY-2026-0605"]["grade"] == "alert"
    assert "grade-may-be-higher" in {c["caveat"] for c in got["HY-2026-0605"]["caveats"]}
    # '<' makes the number a bound below it; '=' and a lab's H flag leave it as it is.
    assert got["HY-2026-0602"]["values"]["an"] == f"<0{decimal}05"
    assert got["HY-2026-0603"]["values"]["water"] == "<10"
    assert got["HY-2026-0604"]["values"]["water"] == 180.0 and got["HY-2026-0604"]["grade"] == "normal"


def test_a_qualifier_column_makes_its_result_a_bound_csv():
    got, err = graded_run(FOUND / "lims-qualifiers.csv", "--rules", HYDRAULIC, "--columns", FOUND / "lims-qualifiers.yaml")
    _check_qualified(got, ",")
    assert "not used" not in err  # the qualifier columns are read, not listed as unused


def test_a_qualifier_column_makes_its_result_a_boundwrite_workbook(tmp_path):
    rows = [line.split(";") for line in (FOUND / "lims-qualifiers.csv").read_text(encoding="utf-8").splitlines()]
    numbers = {4, 5, 6, 8}
    book = [rows[0]] + [[float(v.replace(",", ".")) if k in numbers else (v or None) for k, v in enumerate(row)]
                        for row in rows[1:]]
    write_workbook(tmp_path / "lims.xlsx", book)
    (tmp_path / "map.yaml").write_text((FOUND / "lims-qualifiers.yaml").read_text(encoding="utf-8").replace(
        'file: {delimiter: ";", decimal: ",", date_format: "%d.%m.%Y"}', 'file: {date_format: "%d.%m.%Y"}'),
        encoding="utf-8")
    got, _ = graded_run(tmp_path / "lims.xlsx", "--rules", HYDRAULIC, "--columns", tmp_path / "map.yaml")
    _check_qualified(got, ".")


# --- 6. Water in percent under a header that does not say so ----------------------------------

def test_water_readings_below_what_karl_fischer_reports_are_rejected_not_read_as_ppm(tmp_path):
    # Water in %, the header only 'Water'. Was: read as ppm, HY-2026-0702's 0.12 % (1200 ppm, urgent
    # above 1000 in hydraulic.yaml) graded normal at 0.12 ppm. Coulometric Karl Fischer reports water
    # from 10 mg/kg (ASTM D6304 §1.1), so a reading between 0 and 1 ppm is not ppm: rejected, D018.
    got, err = graded_run(FOUND / "water-percent-unlabelled.csv", "--rules", HYDRAULIC,
                       "--columns", FOUND / "water-percent-unlabelled.yaml")
    assert got == {} and rejects_said(err) == [(1, "D018", "water"), (2, "D018", "water"), (3, "D018", "water")]
    assert counts_said(err) == (3, 0, 0, 3) and "unit: '%'" in err
    # Declared in %, the same file grades: 0.12 % = 1200 ppm urgent, 0.035 % = 350 ppm watch,
    # 0.012 % = 120 ppm normal (1 % = 10,000 ppm by definition; steps of hydraulic.yaml).
    (tmp_path / "map.yaml").write_text((FOUND / "water-percent-unlabelled.yaml").read_text(encoding="utf-8")
                                       .replace("water: Water", "water: {column: Water, unit: '%'}"), encoding="utf-8")
    got, _ = graded_run(FOUND / "water-percent-unlabelled.csv", "--rules", HYDRAULIC, "--columns", tmp_path / "map.yaml")
    assert {k: r["grade"] for k, r in got.items()} == {"HY-2026-0701": "normal", "HY-2026-0702": "urgent",
                                                       "HY-2026-0703": "watch"}
