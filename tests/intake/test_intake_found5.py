"""Silent wrong grades found in sample intake with lab exports as labs write them (fifth hunt).

Each test grades a real-looking export (fixtures in tests/data/intake_found5/, invented
Brackwater Point samples, the shipped hydraulic rule set) through the real command line and
checks the grade or the reject. The comment above each check says what the engine did before
the fix and names the source of the expected value. The hydraulic limits used (rules/hydraulic.yaml,
common practice, no source there): water above 200 ppm watch, above 500 alert, above 1000 urgent.
"""

from __future__ import annotations

import re

import numpy as np
import pytest
from conftest import DATA, ROOT, run_cli
from grade_runs import counts_said, fired_rules, graded_run, rejects_said, water_file

from sumpwise.intake import summary_rows

FOUND = DATA / "intake_found5"
HYDRAULIC = ROOT / "rules" / "hydraulic.yaml"










# --- 1. Statistic lines numbered or named for their group, with a unit and a date ---------------

def test_numbered_statistic_lines_with_a_unit_and_a_date_are_rejected_not_graded():
    # A LIMS block under each unit's samples: `Average 1`, `Average 2`, `Max of 3`, `Std dev #2` and
    # `Average for HPU-2`, each repeating the unit and the last sampling date. Was: graded as samples
    # of HPU-1 and HPU-2 (`Average 2`'s 370 ppm watch, `Max of 3`'s 900 ppm alert, the newest
    # "samples" of HPU-2 after its normal HY-2026-0906), only a bare `Average` was rejected. A
    # statistic is no sample (common practice, no source): D019 each, naming the id.
    got, err = graded_run(FOUND / "summary-numbered.csv", "--rules", HYDRAULIC,
                       "--columns", FOUND / "summary-numbered.yaml")
    assert rejects_said(err) == [(3, "D019", "sample_id"), (7, "D019", "sample_id"), (8, "D019", "sample_id"),
                             (9, "D019", "sample_id"), (10, "D019", "sample_id")]
    assert "'Average 2' is a summary label" in err and "'Average for HPU-2' is a summary label" in err
    assert counts_said(err) == (11, 6, 0, 5)
    # The samples grade on their own water: 900 ppm alert (above 500), 260 ppm watch (above 200; the
    # id MAX-PUMP-07 only contains a label), the rest normal; HPU-2's newest sample is HY-2026-0906.
    assert {k: r["grade"] for k, r in got.items()} == {
        "HY-2026-0901": "normal", "HY-2026-0902": "normal", "HY-2026-0904": "alert", "HY-2026-0905": "normal",
        "HY-2026-0906": "normal", "MAX-PUMP-07": "watch"}
    assert fired_rules(got["HY-2026-0904"]) == {"water"} and fired_rules(got["MAX-PUMP-07"]) == {"water"}


@pytest.mark.parametrize("cell", ["Average 2", "Mean 3", "Avg. 1", "Std dev 2", "Std. Dev. #2", "Total: 12",
                                  "Mean of 3", "Max of all samples", "Average for HPU-1", "Mittelwert 2",
                                  "Mean (n=3)", "Avg.", "Std dev"])
def test_a_numbered_label_as_sample_id_is_a_summary_line_in_any_file(tmp_path, cell):
    # One such line among 1,500 samples (over the 1,000 distinct ids above which only ids that may be
    # labels are keyed, so the numpy pre-filter is exercised). Was: the numbered forms graded as a
    # sample of HPU-1 (watch on 450 ppm water, above 200 in hydraulic.yaml).
    rows = [f"HY-2026-{k:05d},HPU-{k % 7},hydraulic,HYD-46-M,2026-10-05,120" for k in range(1500)]
    rows.insert(700, f"{cell},HPU-1,hydraulic,HYD-46-M,2026-10-05,450")
    path = tmp_path / "many.csv"
    path.write_text("sample_id,unit_id,class,lubricant,sampled_on,water\n" + "\n".join(rows) + "\n", encoding="utf-8")
    got, err = graded_run(path, "--rules", HYDRAULIC)
    assert rejects_said(err) == [(701, "D019", "sample_id")] and counts_said(err) == (1501, 1500, 0, 1)
    assert {r["grade"] for r in got.values()} == {"normal"}


@pytest.mark.parametrize("cell", ["MAX-PUMP-03", "Average-line-2", "MEAN CREEK PUMP", "Limit switch gearbox",
                                  "PUMP 12", "N 2", "HY-2026-0803", "Mean Creek 2"])
def test_ids_that_only_contain_a_label_stay_samples(cell):
    # The other side: a label joined to a code by `-`, followed by other words, or no label at all.
    # Checked on the pre-filter and the label itself (the pre-filter may pass more, never fewer).
    assert summary_rows.id_label(cell) is None
    assert summary_rows._may_be_labels(np.array([cell, "Average 2", "Total:12", "HY-2026-0001"], dtype=object)).tolist()[1:] == [
        True, True, False]


# --- 2. Water in percent read as ppm: readings from 10 to 100 beside percentages ---------------

def test_a_water_reading_from_10_to_100_beside_percentages_is_rejected():
    # Water in % under the header `Water` (the map gives no unit): 0.05, 0.3, 12 (an emulsion) and
    # 0.02. The readings below 1 were rejected since the third hunt (D018), but 12 (12 % = 120,000
    # ppm, far above the 1000 ppm urgent step) was graded normal as 12 ppm. Karl Fischer reports from
    # 10 mg/kg (ASTM D6304 §1.1), so 12 could be ppm; beside percentages it could as well be one,
    # and which is not guessed: D018, naming the row of the first percentage.
    got, err = graded_run(FOUND / "water-percent-mixed.csv", "--rules", HYDRAULIC,
                       "--columns", FOUND / "water-percent-mixed.yaml")
    assert got == {} and rejects_said(err) == [(1, "D018", "water"), (2, "D018", "water"), (3, "D018", "water"),
                                           (4, "D018", "water")]
    assert "'12' could be ppm or a percentage" in err and "(row 1)" in err and counts_said(err) == (4, 0, 0, 4)


def test_a_header_that_says_percent_reads_the_same_column_as_percentages():
    # The same readings headed `Water %`, the map saying unit '%': read correctly (1 % = 10,000 ppm by
    # definition): 0.05 % = 500 ppm watch (not above 500), 0.3 % = 3000 ppm urgent, 12 % urgent,
    # 0.02 % = 200 ppm normal (not above 200). Mapped without the unit the file is refused (test_export_scales).
    got, err = graded_run(FOUND / "water-percent-headed.csv", "--rules", HYDRAULIC,
                       "--columns", FOUND / "water-percent-headed.yaml")
    assert {k: r["grade"] for k, r in got.items()} == {"HY-2026-0911": "watch", "HY-2026-0912": "urgent",
                                                       "HY-2026-0913": "urgent", "HY-2026-0914": "normal"}
    assert got["HY-2026-0913"]["values"]["water"] == 120000 and "water" in fired_rules(got["HY-2026-0913"])


def test_a_header_named_water_percent_without_a_map_is_read_in_percent(tmp_path):
    # `Water %` is the engine name `water` and a unit: read in %, 12 % is 120,000 ppm, urgent.
    path = tmp_path / "headed.csv"
    path.write_text("sample_id,unit_id,class,lubricant,sampled_on,Water %\n"
                    "HY-2026-0931,HPU-1,hydraulic,HYD-46-M,2026-10-12,0.05\n"
                    "HY-2026-0932,HPU-3,hydraulic,HYD-46-M,2026-10-12,12\n", encoding="utf-8")
    got, err = graded_run(path, "--rules", HYDRAULIC)
    assert (got["HY-2026-0932"]["grade"], got["HY-2026-0932"]["values"]["water"]) == ("urgent", 120000)
    assert got["HY-2026-0931"]["grade"] == "watch" and counts_said(err) == (2, 2, 0, 0)


def test_a_column_of_only_percent_sized_water_readings_is_rejected():
    # 2, 5, 12 and 0 under `Water`: no reading below 1, none above 100. Was: all graded normal as ppm
    # (12 % is 120,000 ppm). 2 and 5 are below what Karl Fischer reports as ppm (ASTM D6304 §1.1:
    # from 10 mg/kg) and nothing in the column says ppm (no percentage is above 100), so they are
    # percentages, and 12 beside them could be either: D018 each. A reading of 0 is 0 in any unit: graded.
    got, err = graded_run(FOUND / "water-percent-small.csv", "--rules", HYDRAULIC,
                       "--columns", FOUND / "water-percent-mixed.yaml")
    assert rejects_said(err) == [(1, "D018", "water"), (2, "D018", "water"), (3, "D018", "water")]
    assert "none of it is above 100 ppm" in err and "'12' could be ppm or a percentage" in err
    assert set(got) == {"HY-2026-0924"} and got["HY-2026-0924"]["grade"] == "normal"


def test_a_header_that_names_ppm_keeps_readings_from_10_to_100(tmp_path):
    # `Water ppm` says what 12 is: read as 12 ppm (normal); only the 0.3 beside it, below what Karl
    # Fischer reports (ASTM D6304 §1.1), is rejected, as before this hunt.
    path = tmp_path / "ppm.csv"
    path.write_text("sample_id,unit_id,class,lubricant,sampled_on,Water ppm\n"
                    "HY-2026-0941,HPU-1,hydraulic,HYD-46-M,2026-10-12,0.3\n"
                    "HY-2026-0942,HPU-2,hydraulic,HYD-46-M,2026-10-12,12\n", encoding="utf-8")
    got, err = graded_run(path, "--rules", HYDRAULIC)
    assert rejects_said(err) == [(1, "D018", "water")] and got["HY-2026-0942"]["values"]["water"] == 12


def test_a_censored_water_bound_below_1_is_a_percentage_too(tmp_path):
    # `<0.05` under `water`: a bound Karl Fischer never writes in ppm (ASTM D6304 §1.1: from 10 mg/kg),
    # so it is `<0.05` % (below 500 ppm, which may be watch). Was: read as below 0.05 ppm, known to
    # be under every water step, the sample graded normal with the rule evaluated.
    path = tmp_path / "bound.csv"
    water_file(path, [("HY-2026-0951", "HPU-1", "<0.05"),
                      ("HY-2026-0952", "HPU-2", "<10"),
                      ("HY-2026-0953", "HPU-3", "260")], on="2026-10-12")
    got, err = graded_run(path, "--rules", HYDRAULIC)
    assert rejects_said(err) == [(1, "D018", "water"), (2, "D018", "water")] and "'<0.05' ppm is below" in err
    assert (got["HY-2026-0953"]["grade"], fired_rules(got["HY-2026-0953"])) == ("watch", {"water"})


# --- 3. A workbook report with a title above its table -------------------------------------------

def _titled_workbook(path, merged: bool) -> None:
    import openpyxl  # a runtime dependency
    book = openpyxl.Workbook()
    sheet = book.active
    sheet.append(["Brackwater Point: hydraulic oil analysis, November 2026"])
    if merged:
        sheet.merge_cells("A1:H1")
    sheet.append(["Printed on 2026-11-09 by the site laboratory"])
    sheet.append([])
    sheet.append(["sample_id", "unit_id", "class", "lubricant", "sampled_on", "kv40", "an", "water"])
    sheet.append(["HY-2026-0961", "HPU-1", "hydraulic", "HYD-46-M", "2026-11-02", 46.1, 0.56, 900])
    sheet.append(["HY-2026-0962", "HPU-2", "hydraulic", "HYD-46-M", "2026-11-02", 45.9, 0.55, "0,12"])
    sheet.append(["HY-2026-0963", "HPU-3", "hydraulic", "HYD-46-M", "2026-11-02", 46.0, 0.57, 120])
    book.save(path)


@pytest.mark.parametrize("merged", [True, False])
def test_a_title_above_a_workbook_table_is_skipped_and_rows_keep_their_sheet_numbers(tmp_path, merged):
    # A report workbook: a title (merged across the table, or in A1 alone), a printed-on line and a
    # blank row above the header. Was: refused ("duplicate column names", the merged title read as the
    # header) or, unmerged, a one-column header and no sample read. Now the header is read from sheet
    # row 4, said in a note, and rows keep the README's numbering (row N is sheet row N + 1): the
    # decimal-comma text `0,12` is rejected at row 5 (sheet row 6). Water 900 ppm: alert (above 500).
    _titled_workbook(tmp_path / "report.xlsx", merged)
    got, err = graded_run(tmp_path / "report.xlsx", "--rules", HYDRAULIC)
    assert "read the header from sheet row 4" in err and "Brackwater Point: hydraulic oil analysis" in err
    assert rejects_said(err) == [(5, "D004", "water")] and counts_said(err) == (3, 2, 0, 1)
    assert (got["HY-2026-0961"]["grade"], fired_rules(got["HY-2026-0961"])) == ("alert", {"water"})
    assert got["HY-2026-0963"]["grade"] == "normal"


# --- 4. `<LOD` written for a reading below the limit of detection ------------------------------

def test_below_the_limit_of_detection_reads_as_not_detected(tmp_path):
    # `<LOD` is `<DL` in the limit-of-detection words (IUPAC's term). Was: rejected as no number
    # (D004). Now the map's detection limit makes it `<10` ppm water, known to be below the 200 ppm
    # watch step: normal, the water rule evaluated.
    path = tmp_path / "lod.csv"
    water_file(path, [("HY-2026-0971", "HPU-1", "<LOD"),
                      ("HY-2026-0972", "HPU-2", "< LOD"),
                      ("HY-2026-0973", "HPU-3", "260")], on="2026-11-02")
    (tmp_path / "map.yaml").write_text("water: {column: water, detection_limit: 10}\n", encoding="utf-8")
    got, err = graded_run(path, "--rules", HYDRAULIC, "--columns", tmp_path / "map.yaml")
    assert counts_said(err) == (3, 3, 0, 0)
    for sample in ("HY-2026-0971", "HY-2026-0972"):
        assert got[sample]["values"]["water"] in ("<LOD", "< LOD") and got[sample]["grade"] == "normal"
        assert "water" not in {gap["rule"] for gap in got[sample]["not_evaluated"]}
    assert got["HY-2026-0973"]["grade"] == "watch"


def test_not_detected_at_a_declared_limit_below_10_ppm_is_no_percentage(tmp_path):
    # `ND` with the map's detection_limit 5 (ppm) beside 40 and 80 ppm: the bound is the map's, not
    # a reading the lab wrote, so it says nothing of the column's scale; all three graded normal
    # (below the 200 ppm watch step).
    path = tmp_path / "nd.csv"
    water_file(path, [("HY-2026-0981", "HPU-1", "ND"),
                      ("HY-2026-0982", "HPU-2", "40"),
                      ("HY-2026-0983", "HPU-3", "80")], on="2026-11-02")
    (tmp_path / "map.yaml").write_text("water: {column: water, detection_limit: 5}\n", encoding="utf-8")
    got, err = graded_run(path, "--rules", HYDRAULIC, "--columns", tmp_path / "map.yaml")
    assert counts_said(err) == (3, 3, 0, 0) and {r["grade"] for r in got.values()} == {"normal"}


def test_a_column_declared_in_ppm_is_read_as_declared():
    # The map's `unit: ppm` says what the column is: 2, 5, 12 and 0 ppm, all below the 200 ppm watch
    # step (hydraulic.yaml): normal, nothing rejected. The declaration is the user's answer to D018.
    got, err = graded_run(FOUND / "water-percent-small.csv", "--rules", HYDRAULIC,
                       "--columns", FOUND / "water-percent-small-ppm.yaml")
    assert counts_said(err) == (4, 4, 0, 0) and got["HY-2026-0923"]["values"]["water"] == 12


def test_percent_signs_on_some_cells_give_the_water_column_away(tmp_path):
    # `0.05 %` and `0.3%` written with the sign (rejected, D018, since the third hunt) and an emulsion's
    # `12` without it, in a column read in ppm. Was: 12 graded normal as 12 ppm (12 % is 120,000 ppm,
    # urgent above 1000); beside percentages it could be one: D018, naming the row of the first sign.
    path = tmp_path / "signs.csv"
    water_file(path, [("HY-2026-0991", "HPU-1", "0.05 %"),
                      ("HY-2026-0992", "HPU-2", "0.3%"),
                      ("HY-2026-0993", "HPU-3", "12"),
                      ("HY-2026-0994", "HPU-4", "450")], on="2026-11-02")
    got, err = graded_run(path, "--rules", HYDRAULIC)
    assert rejects_said(err) == [(1, "D018", "water"), (2, "D018", "water"), (3, "D018", "water")]
    assert "'12' could be ppm or a percentage" in err and "(row 1)" in err
    assert (got["HY-2026-0994"]["grade"], fired_rules(got["HY-2026-0994"])) == ("watch", {"water"})


# --- 5. Rows hidden in a workbook -----------------------------------------------------------------

def test_rows_hidden_in_a_workbook_are_graded_and_said(tmp_path):
    # A lab's sheet with a superseded result hidden by hand (HY-2026-0962, water 900 ppm) above its
    # retest. Was: graded like the others without a word, its alert beside the retest's normal. A
    # hidden row is still a row of the file (it is read, so the counts add up), but the run says
    # which rows were hidden (row N is sheet row N + 1), so a user who sees fewer rows in the sheet
    # than in the results knows why.
    import openpyxl  # a runtime dependency
    book = openpyxl.Workbook()
    sheet = book.active
    sheet.append(["sample_id", "unit_id", "class", "lubricant", "sampled_on", "water"])
    sheet.append(["HY-2026-0961", "HPU-1", "hydraulic", "HYD-46-M", "2026-11-02", 120])
    sheet.append(["HY-2026-0962", "HPU-2", "hydraulic", "HYD-46-M", "2026-11-02", 900])
    sheet.append(["HY-2026-0962R", "HPU-2", "hydraulic", "HYD-46-M", "2026-11-02", 110])
    sheet.row_dimensions[3].hidden = True
    book.save(tmp_path / "hidden.xlsx")
    got, err = graded_run(tmp_path / "hidden.xlsx", "--rules", HYDRAULIC)
    assert "note: row 2 hidden in the sheet" in err and counts_said(err) == (3, 3, 0, 0)
    assert got["HY-2026-0962"]["grade"] == "alert" and got["HY-2026-0962R"]["grade"] == "normal"


# --- 6. A units line that says what the percentage is a share of -------------------------------

@pytest.mark.parametrize("unit", ["% m/m", "%(m/m)", "% w/w", "% mass", "%wt"])
def test_a_units_line_in_mass_percent_refuses_the_file_like_percent(tmp_path, unit):
    # A units line under the header naming the water column `% m/m` (a mass fraction, as a lab writes
    # it). Was: the cell rejected as no number (D004) and 12 (12 % = 120,000 ppm, urgent) graded
    # normal as 12 ppm beside a 450 ppm sample. `% m/m` is % (what the share is of aside, ISO 80000-1
    # would put it in the quantity): the file is refused, as for `%`, saying what to declare.
    path = tmp_path / "units.csv"
    path.write_text(f"sample_id,unit_id,class,lubricant,sampled_on,kv40,water\n,,,,,mm²/s,{unit}\n"
                    "HY-2026-1001,HPU-1,hydraulic,HYD-46-M,2026-11-02,46.0,12\n"
                    "HY-2026-1002,HPU-2,hydraulic,HYD-46-M,2026-11-02,46.1,450\n", encoding="utf-8")
    run = run_cli("grade", path, "--rules", HYDRAULIC)
    assert run.code == 2 and run.out == ""
    assert "a units line under the header, in column 'water' names the unit %" in run.err and "unit: '%'" in run.err
    (tmp_path / "map.yaml").write_text("water: {column: water, unit: '%'}\n", encoding="utf-8")
    got, err = graded_run(path, "--rules", HYDRAULIC, "--columns", tmp_path / "map.yaml")
    assert (got["HY-2026-1001"]["grade"], got["HY-2026-1001"]["values"]["water"]) == ("urgent", 120000)


@pytest.mark.parametrize("unit", ["counts/100 mL", "particles/100 mL", "n/100ml", "#/100 mL", "counts per 100 mL"])
def test_a_units_line_in_counts_per_100_ml_refuses_the_file(tmp_path, unit):
    # Particle counts per 100 mL (as some counters report them) under a units line that says what is
    # counted. Was: the cells rejected as no number (D004), the counts graded per mL, 100 times too
    # many (ISO 4406:1999 codes count per mL: 250,000/100 mL is 2,500/mL, code 18, not 25).
    path = tmp_path / "counts.csv"
    path.write_text(f"sample_id,unit_id,class,lubricant,sampled_on,particles_4um,particles_6um,particles_14um\n"
                    f",,,,,{unit},{unit},{unit}\n"
                    "HY-2026-1011,HPU-1,hydraulic,HYD-46-M,2026-11-02,250000,64000,4000\n", encoding="utf-8")
    run = run_cli("grade", path, "--rules", HYDRAULIC)
    assert run.code == 2 and run.out == "" and "names /100mL, which is not a unit particles_4um can be read in" in run.err


@pytest.mark.parametrize("unit", ["mPa.s @ 40°C", "cP (40 °C)", "mPa·s at 40C"])
def test_a_units_line_naming_a_dynamic_viscosity_at_its_temperature_refuses_the_file(tmp_path, unit):
    # A dynamic viscosity (mPa·s) is the kinematic one times the density (ASTM D445's terminology,
    # from memory), about 0.87 g/mL for a mineral hydraulic oil (from memory): 40.0 mPa·s is about
    # 46 mm²/s, read as kv40 12 % below the new oil's 45.6. Was: the cell, with its temperature, read
    # as no unit (D004), and 40.0 graded as kv40.
    path = tmp_path / "dynamic.csv"
    path.write_text(f"sample_id,unit_id,class,lubricant,sampled_on,kv40\n,,,,,{unit}\n"
                    "HY-2026-1021,HPU-1,hydraulic,HYD-46-M,2026-11-02,40.0\n", encoding="utf-8")
    run = run_cli("grade", path, "--rules", HYDRAULIC)
    assert run.code == 2 and run.out == "" and "mPa.s (a dynamic viscosity)" in run.err


def test_a_row_whose_unit_column_says_ppm_keeps_its_reading_from_10_to_100(tmp_path):
    # A LIMS export with a unit column beside water: HY-2026-1031's 0.3 is written with `%` (rejected,
    # D018: the column is read in ppm), HY-2026-1032's 0.4 with no unit (below what Karl Fischer
    # reports as ppm, ASTM D6304 §1.1: D018), HY-2026-1033's 45 says `ppm`: read as 45 ppm (normal,
    # below 200), and HY-2026-1034's 12 without a unit beside the percentages: D018.
    path = tmp_path / "lims.csv"
    path.write_text("sample_id,unit_id,class,lubricant,sampled_on,water,water unit\n"
                    "HY-2026-1031,HPU-1,hydraulic,HYD-46-M,2026-11-02,0.3,%\n"
                    "HY-2026-1032,HPU-2,hydraulic,HYD-46-M,2026-11-02,0.4,\n"
                    "HY-2026-1033,HPU-3,hydraulic,HYD-46-M,2026-11-02,45,ppm\n"
                    "HY-2026-1034,HPU-4,hydraulic,HYD-46-M,2026-11-02,12,\n", encoding="utf-8")
    got, err = graded_run(path, "--rules", HYDRAULIC)
    assert rejects_said(err) == [(1, "D018", "water"), (2, "D018", "water"), (4, "D018", "water")]
    assert set(got) == {"HY-2026-1033"} and got["HY-2026-1033"]["values"]["water"] == 45


@pytest.mark.parametrize("cell", ["Alert limit", "Reject limit", "Upper warning limit", "Action level", "Threshold",
                                  "Std. deviation", "Median value", "Maximum value", "95th percentile",
                                  "New oil value", "Typical new"])
def test_limit_and_statistic_lines_named_as_labs_name_them_are_rejected(tmp_path, cell):
    # A limit line named by its last word (`Alert limit`), a statistic or a reference named with its
    # noun (`Median value`, `Typical new`), with the unit and a date. Was: graded as a sample of HPU-1
    # (the 450 ppm of a limit line watch, above 200 in hydraulic.yaml). Now D019 (common practice, no source).
    path = tmp_path / "limits.csv"
    water_file(path, [("HY-2026-1041", "HPU-1", "120"), (cell, "HPU-1", "450")], on="2026-11-02")
    got, err = graded_run(path, "--rules", HYDRAULIC)
    assert rejects_said(err) == [(2, "D019", "sample_id")] and set(got) == {"HY-2026-1041"}


@pytest.mark.parametrize("cell", ["Limit switch gearbox", "P1", "P95", "Speed 2 GB", "HPU-1 Level gauge 3",
                                  "iron above its watch limit", "hydraulics keep their own limit"])
def test_ids_that_end_or_begin_otherwise_stay_samples(cell):
    # Free text that ends in `limit` (the names of a rule set's examples) is no limit line.
    assert summary_rows.id_label(cell) is None


def test_a_chunk_names_the_percentage_beside_a_reading_by_its_row_in_the_file():
    # Read two rows at a time: the 12 (row 3) is rejected beside the 0.02 of row 4, the same chunk.
    # Was: the reason named "row 2", the row within the chunk (the row of another sample).
    run = run_cli("grade", FOUND / "water-percent-mixed.csv", "--rules", HYDRAULIC,
                  "--columns", FOUND / "water-percent-mixed.yaml", "--chunk-rows", 2)
    assert run.code == 0 and rejects_said(run.err) == [(1, "D018", "water"), (2, "D018", "water"), (3, "D018", "water"),
                                                   (4, "D018", "water")]
    (line,) = [line for line in run.err.splitlines() if ": row 3 (" in line]
    assert "as percentages (row 4)" in line


@pytest.mark.parametrize("chunk_rows", [1, 2, 3])
def test_a_percentage_in_an_earlier_chunk_reaches_the_readings_of_later_ones(chunk_rows):
    # Read a chunk at a time (as a file over 200,000 rows is), the 12 of row 3 may be alone in its
    # chunk. Was (one row a chunk): graded normal as 12 ppm, the percentages of rows 1 and 2 in
    # earlier chunks. Now the file's first percentage is handed on: D018 each, as in one read.
    run = run_cli("grade", FOUND / "water-percent-mixed.csv", "--rules", HYDRAULIC,
                  "--columns", FOUND / "water-percent-mixed.yaml", "--chunk-rows", chunk_rows)
    assert run.code == 0 and run.out == ""
    assert rejects_said(run.err) == [(1, "D018", "water"), (2, "D018", "water"), (3, "D018", "water"),
                                 (4, "D018", "water")]
    (line,) = [line for line in run.err.splitlines() if ": row 3 (" in line]
    assert re.search(r"as percentages \(row [124]\)", line)


# --- 7. Columns named in the trade's words, not read, say which engine name they are -------------

def test_columns_named_in_the_trades_words_are_hinted_at_their_engine_names(tmp_path):
    # `Moisture`, `H2O`, `Visc 40`, `TBN` are not read without a map (a column is read on its engine
    # name, or that name and a unit). Was: listed as not used with no hint, so a 900 ppm water column
    # left unread looked unrelated to water. Now each names its engine name (ASTM D6304 water, D2896
    # base number, D445 kinematic viscosity; the short forms common practice, no source). The sample
    # is graded without them and says so (few-rules-evaluated), as before.
    path = tmp_path / "trade.csv"
    path.write_text("sample_id,unit_id,class,lubricant,sampled_on,Moisture,Visc 40,TBN,H2O\n"
                    "HY-2026-1051,HPU-1,hydraulic,HYD-46-M,2026-11-02,900,46.1,5.2,900\n", encoding="utf-8")
    got, err = graded_run(path, "--rules", HYDRAULIC)
    assert ("lab columns not used: Moisture (did you mean water?), Visc 40 (did you mean kv40?), "
            "TBN (did you mean bn?), H2O (did you mean water?)") in err
    assert "few-rules-evaluated" in err and "water" not in got["HY-2026-1051"]["values"]


# --- 8. Thousands groups that cannot be read two ways -------------------------------------------

def test_numbers_with_both_marks_or_space_groups_are_read_and_one_mark_alone_is_not(tmp_path):
    # A semicolon, decimal-comma export: `1.234,5` (the point between groups of three, the comma the
    # mark) is 1234.5 ppm, `1 234` (a space between groups, as ISO 80000-1 writes them, from memory) 1234 ppm:
    # urgent, above 1000. Was: both rejected (D004). `1.234` alone could be 1.234 or 1234: rejected
    # as before (D004). A '.'-decimal export's `1,234.5` is 1234.5 likewise.
    path = tmp_path / "groups.csv"
    path.write_text("sample_id;unit_id;class;lubricant;sampled_on;kv40;water\n"
                    "HY-2026-1061;HPU-1;hydraulic;HYD-46-M;2026-11-02;46,3;1.234,5\n"
                    "HY-2026-1062;HPU-2;hydraulic;HYD-46-M;2026-11-02;45,9;1 234\n"
                    "HY-2026-1063;HPU-3;hydraulic;HYD-46-M;2026-11-02;46,0;1.234\n", encoding="utf-8")
    got, err = graded_run(path, "--rules", HYDRAULIC)
    assert rejects_said(err) == [(3, "D004", "water")]
    assert got["HY-2026-1061"]["values"]["water"] == 1234.5 and got["HY-2026-1062"]["values"]["water"] == 1234
    assert got["HY-2026-1061"]["grade"] == got["HY-2026-1062"]["grade"] == "urgent"
    point = tmp_path / "point.csv"
    water_file(point, [("HY-2026-1064", "HPU-1", '"1,234.5"')], on="2026-11-02")
    got, _ = graded_run(point, "--rules", HYDRAULIC)
    assert got["HY-2026-1064"]["values"]["water"] == 1234.5


def test_a_dry_ppm_column_with_one_reading_below_ten_is_read_as_ppm(tmp_path):
    # Dry hydraulic oils by Karl Fischer (ASTM D6304 reports from 10 mg/kg; coulometric titrators
    # read lower): 8, 25, 40 and 60 under a header `Water` that names no unit. One reading below 10
    # is not a column of percentages (common practice, no source): every row is graded, as ppm.
    samples = tmp_path / "dry.csv"
    samples.write_text("Sample No,Unit,Oil,Date Sampled,Visc 40C cSt,Water\n"
                       "HY-2026-0931,HPU-1,HYD-46-M,2026-10-26,46.2,8\n"
                       "HY-2026-0932,HPU-2,HYD-46-M,2026-10-26,45.8,25\n"
                       "HY-2026-0933,HPU-3,HYD-46-M,2026-10-26,47.9,40\n"
                       "HY-2026-0934,HPU-4,HYD-46-M,2026-10-26,46.1,60\n")
    got, err = graded_run(samples, "--rules", HYDRAULIC, "--columns", FOUND / "water-percent-mixed.yaml")
    assert rejects_said(err) == []
    assert {sid: r["values"]["water"] for sid, r in got.items()} == {
        "HY-2026-0931": 8.0, "HY-2026-0932": 25.0, "HY-2026-0933": 40.0, "HY-2026-0934": 60.0}
