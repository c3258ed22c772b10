"""Real-looking lab exports: a decimal-comma, semicolon, Windows-1252 file with censored readings,
Y/N flags, day-first dates, component names mapped to classes and a remarks column; the same
rows as a workbook and as JSON Lines grade the same.

Expected grades are worked by hand from the Brackwater Point rule set (scenarios/brackwater/site.yaml,
invented site limits) and the lubricants' new-oil values there."""

import io
import json
from datetime import datetime

import pytest
from conftest import DATA, ROOT, run_cli

from sumpwise import grade, load_ruleset
from sumpwise.intake.column_map import load_column_map
from sumpwise.intake.samples import read_samples
from sumpwise.vocabulary.problems import InputError

SITE = ROOT / "scenarios" / "brackwater" / "site.yaml"
EXPORT = DATA / "samples" / "lab-semicolon.csv"
MAP = DATA / "samples" / "lab-semicolon.yaml"


@pytest.fixture(scope="module")
def site():
    return load_ruleset(SITE)


@pytest.fixture(scope="module")
def graded(site):
    return grade(read_samples(EXPORT, columns=load_column_map(MAP)), site)


def _records(graded):
    return {r.sample_id: r for r in graded.results()}


def test_the_semicolon_export_grades_every_row_or_rejects_it(graded):
    assert graded.counts() == {"read": 6, "graded": 5, "unrated": 0, "rejected": 1}
    (reject,) = graded.rejects
    # 30 February does not exist: the row is rejected with its field, not graded undated.
    assert (reject.row, reject.sample_id, reject.field, reject.code) == (5, "BP-S5", "sampled_on", "D015")


def test_censored_readings_decide_what_they_can(graded):
    got = _records(graded)
    # water '>5000' lies above the steam-turbine urgent step (1000 ppm): urgent, shown as written.
    s2 = got["BP-S2"]
    assert s2.grade == "urgent"
    assert [(r.rule, r.value) for r in s2.reasons] == [("water", ">5000")]
    # water '<50' lies below the watch step (100 ppm): known normal, not "not evaluated".
    assert "water" not in {n.rule for n in got["BP-S1"].not_evaluated}
    # water '<200' might be above 100 or not: not evaluated, the reading given as the lab wrote it.
    gap = {n.rule: n for n in got["BP-S6"].not_evaluated}["water"]
    assert dict(gap.undecided) == {"water": "<200"}


def test_a_censored_viscosity_carries_its_bound_into_the_change(graded):
    # kv40 '>50' against HYD-46-M new oil: the change is above (50 - 45.6) / 45.6, known beyond the 5 %
    # watch step, undecided against 10 %: the ladder gives the step it is known to cross.
    s3 = _records(graded)["BP-S3"]
    assert s3.grade == "watch"
    assert s3.reasons[0].rule == "visc-drift"
    assert "kv40 '>50'" in s3.reasons[0].value
    assert dict(s3.values)["kv40"] == ">50"


def test_flags_dates_classes_and_comments_as_the_lab_writes_them(graded):
    got = _records(graded)
    assert got["BP-S3"].class_name == "hydraulic"  # "Hydraulic Power Unit" through the map
    assert "oil-changed" in {c.caveat for c in got["BP-S3"].caveats}  # "Y"
    assert got["BP-S1"].sampled_on == "2026-01-15"  # 15/01/2026 with the declared day-first format
    assert got["BP-S2"].comment == "drawn hot at 60 \u00b0C, water ingress suspected"  # a cp1252 degree sign
    assert got["BP-S4"].comment == "-" and got["BP-S6"].comment is None  # as written; an empty cell is none
    assert json.loads(json.dumps(got["BP-S2"].to_record()))["comment"].startswith("drawn hot")


def test_not_detected_uses_the_map_detection_limit(graded):
    frame = graded.measured.set_index("sample_id")
    # water ND with detection_limit 10 ppm is the interval [0, 10): below every water step
    assert frame.loc["BP-S3", "water:high"] == 10.0 and frame.loc["BP-S3", "water:high_open"]
    # oxidation n.d. without a detection limit is missing
    assert "carbonyl-rise" in {n.rule for n in _records(graded)["BP-S4"].not_evaluated}


def test_the_same_rows_as_a_workbook_grade_the_same(tmp_path, site, graded):
    import openpyxl
    book = openpyxl.Workbook()
    sheet = book.active
    sheet.title = "Notes"
    sheet["A1"] = "exported by the lab's system"
    data = book.create_sheet("Results")
    lines = EXPORT.read_bytes().decode("cp1252").splitlines()
    for k, line in enumerate(lines):
        cells = line.split(";")
        if k:
            for j, cell in enumerate(cells):
                if j == 4:
                    try:
                        cells[j] = datetime.strptime(cell, "%d/%m/%Y")
                    except ValueError:
                        pass  # 30/02/2026 stays text, as a lab's sheet would keep it
                elif cell.replace(",", "", 1).isdigit():
                    cells[j] = float(cell.replace(",", "."))
        data.append(cells)
    path = tmp_path / "export.xlsx"
    book.save(path)
    yaml = MAP.read_text(encoding="utf-8").replace(
        'file: {delimiter: ";", decimal: ",", encoding: cp1252, date_format: "%d/%m/%Y"}',
        'file: {sheet: Results, decimal: ",", date_format: "%d/%m/%Y"}')
    (tmp_path / "map.yaml").write_text(yaml, encoding="utf-8")
    book_graded = grade(read_samples(path, columns=load_column_map(tmp_path / "map.yaml")), site)
    assert book_graded.grades() == graded.grades()
    assert [(r.row, r.field, r.code) for r in book_graded.rejects] == [(r.row, r.field, r.code) for r in graded.rejects]
    with pytest.raises(InputError, match="no sheet 'Other'"):
        read_samples(path, columns=load_column_map(tmp_path / "map.yaml").__class__(options={"sheet": "Other"}))


def test_an_undeclared_encoding_is_an_error_naming_the_options():
    with pytest.raises(InputError, match=r"line 1: byte 0xb0 is not utf-8 text.*cp1252.*latin-1"):
        read_samples(EXPORT)


def test_delimiter_and_decimal_comma_are_detected_with_a_note(site):
    text = "sample_id;class;lubricant;kv40\nD1;steam-turbine;TURB-46-M;46,1\n"
    batch = read_samples(io.StringIO(text))
    assert batch.frame["kv40"].tolist() == [46.1]
    assert batch.notes == ("detected the delimiter ';' from the header", "detected the decimal mark ',' from the data")


def test_cli_reads_the_export_with_its_map_and_lists_unused_columns_once():
    run = run_cli("grade", EXPORT, "--columns", MAP, "--rules", SITE, "--format", "csv")
    assert run.code == 0
    assert run.err.count("lab columns not used: Lab ref") == 1
    assert "rejected D015: sampled_on" in run.err


def test_censored_readings_and_comments_go_through_the_ledger(tmp_path):
    db = tmp_path / "ledger.db"
    assert run_cli("grade", EXPORT, "--columns", MAP, "--rules", SITE, "--db", db).code == 0
    replay = run_cli("replay", "--db", db)
    assert replay.code == 0 and "every result matches its record" in replay.out
    told = run_cli("explain", "BP-S3", "--db", db)
    assert told.code == 0
    assert "kv40 >50" in told.out and "Lab comment: oil changed last week" in told.out
    assert "oil_hours written '>20000' does" in told.out


def test_a_censored_reading_in_a_converted_unit_is_shown_in_the_engine_unit(site, tmp_path):
    # Water declared in % (1 % = 10 000 ppm, the README's unit table): '>0.5' % is above 5000 ppm.
    # The record's values and the reason carry ppm beside the number, so the reading must be
    # spelt in ppm (">5000"), never ">0.5" beside "ppm": that would read as half a ppm.
    cmap = tmp_path / "map.yaml"
    cmap.write_text('water: {column: "Water %", unit: "%"}\n', encoding="utf-8")
    text = "sample_id,class,lubricant,Water %\nP1,gearbox,GEAR-320-PAO,>0.5\nP2,gearbox,GEAR-320-PAO,<0.01\n" \
           "P3,gearbox,GEAR-320-PAO,ND\n"
    got = _records(grade(read_samples(io.StringIO(text), columns=load_column_map(cmap)), site))
    # gearbox water ladder: watch above 300, alert above 1000, urgent above 2000 ppm
    assert [(r.rule, r.value, r.unit, r.grade) for r in got["P1"].reasons] == [("water", ">5000", "ppm", "urgent")]
    assert dict(got["P1"].values)["water"] == ">5000"
    # '<0.01' % is below 100 ppm: known under the watch step, so the rule is evaluated and quiet
    assert "water" not in {n.rule for n in got["P2"].not_evaluated}
    assert got["P2"].grade == "normal" and dict(got["P2"].values)["water"] == "<100"
    assert dict(got["P3"].values)["water"] is None  # ND without a detection limit: missing


def test_a_detected_decimal_comma_reads_every_cell_of_the_column(site):
    # Detected, not declared: '46,1' beside a censored '<50' (which keeps the column as text) must
    # read as 46.1, and '<0,05' as below 0.05, exactly as with `file: {decimal: ","}`.
    text = ("sample_id;class;lubricant;kv40;an;water\n"
            "D1;hydraulic;HYD-46-M;46,1;<0,05;<50\nD2;hydraulic;HYD-46-M;>50;0,35;120\n")
    batch = read_samples(io.StringIO(text))
    assert batch.rejects == ()
    assert batch.notes == ("detected the delimiter ';' from the header", "detected the decimal mark ',' from the data")
    assert batch.frame["kv40"].iat[0] == 46.1 and batch.frame["an"].iat[1] == 0.35
    assert batch.frame["an:censored"].iat[0] == "<0.05"


@pytest.mark.parametrize("declared", [True, False])
def test_a_point_in_a_decimal_comma_file_is_refused_not_guessed(site, tmp_path, declared):
    # Where ',' is the decimal mark, '1.500' is a thousands separator (1500 ppm) or a slip for 1,5:
    # either reading could be a wrong grade (1.5 ppm water passes the hydraulic watch step of
    # 200 ppm, 1500 crosses urgent at 1000), so the row is rejected with the field, never guessed.
    text = ("sample_id;class;lubricant;kv40;water\n"
            "D1;hydraulic;HYD-46-M;46,1;1.500\nD2;hydraulic;HYD-46-M;46,3;<1.000\nD3;hydraulic;HYD-46-M;46,2;90\n")
    columns = None
    if declared:
        (tmp_path / "map.yaml").write_text('file: {delimiter: ";", decimal: ","}\n', encoding="utf-8")
        columns = load_column_map(tmp_path / "map.yaml")
    graded = grade(read_samples(io.StringIO(text), columns=columns), site)
    assert [(r.row, r.field, r.code) for r in graded.rejects] == [(1, "water", "D004"), (2, "water", "D004")]
    assert "decimal mark is ','" in graded.rejects[0].reason
    assert graded.counts() == {"read": 3, "graded": 1, "unrated": 0, "rejected": 2}


def test_the_readme_column_map_reads_the_export_it_names(site, tmp_path):
    # The README's example map, copied out as written, on the file it says it is for: every lab
    # column but the lab's own reference is read, and every row is graded or rejected.
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    start = readme.index("**A column map for a real export.**")
    block = readme[readme.index("```yaml", start) + len("```yaml\n"):]
    (tmp_path / "map.yaml").write_text(block[:block.index("```")], encoding="utf-8")
    batch = read_samples(EXPORT, columns=load_column_map(tmp_path / "map.yaml"))
    assert batch.notes == ("lab columns not used: Lab ref",)
    graded = grade(batch, site)
    assert graded.counts() == {"read": 6, "graded": 5, "unrated": 0, "rejected": 1}


def test_a_map_column_missing_from_the_first_sheet_names_the_sheets(tmp_path):
    # A lab's workbook often opens on a cover sheet; the results are on another. The error must
    # say which sheet was read and how to choose another, not only the cover's one "column".
    import openpyxl
    book = openpyxl.Workbook()
    book.active.title = "Cover"
    book.active["A1"] = "Results for Brackwater Point"
    results = book.create_sheet("Results")
    results.append(["Sample", "Component"])
    results.append(["XL-1", "gearbox"])
    book.save(tmp_path / "export.xlsx")
    (tmp_path / "map.yaml").write_text("sample_id: Sample\nclass: Component\n", encoding="utf-8")
    with pytest.raises(InputError, match=r"no such column.*read sheet 'Cover' of \['Cover', 'Results'\]"):
        read_samples(tmp_path / "export.xlsx", columns=load_column_map(tmp_path / "map.yaml"))


def test_a_workbook_without_a_map_whose_first_sheet_is_a_cover_names_the_sheets(tmp_path):
    import openpyxl
    book = openpyxl.Workbook()
    book.active.title = "Cover"
    book.active["A1"] = "Results for Brackwater Point"
    book.create_sheet("Results").append(["sample_id", "class"])
    book.save(tmp_path / "export.xlsx")
    with pytest.raises(InputError, match=r"missing required column\(s\) sample_id, class.*read sheet 'Cover'"):
        read_samples(tmp_path / "export.xlsx")
