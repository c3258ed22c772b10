"""Silent wrong grades found in sample intake with lab exports as labs write them (third hunt).

Each test grades a real-looking export (fixtures in tests/data/intake_found3/, invented
Brackwater Point samples and the shipped rule sets or a small test rule set beside the
fixtures) through the real command line, and checks the grade or the reject. The comment above
each check says what the engine did before the fix and names the source of the expected value.
"""

from __future__ import annotations

import json

import pytest
from conftest import DATA, ROOT, run_cli

FOUND = DATA / "intake_found3"
GEAR_IRON = FOUND / "gear-iron.yaml"
HYDRAULIC = ROOT / "rules" / "hydraulic.yaml"


def _graded(*argv) -> tuple[dict, str]:
    """{sample id: record} of a `grade` run (JSON Lines) and its standard error; exit 0 required."""
    run = run_cli("grade", *argv)
    assert run.code == 0, run.err
    return {r["sample_id"]: r for r in map(json.loads, run.out.splitlines())}, run.err


def _fired(record: dict) -> set:
    return {reason["rule"] for reason in record["reasons"]}


def _workbook(path, rows: list) -> None:
    """A workbook of these rows (the first the header) on its first sheet, cells as given."""
    openpyxl = pytest.importorskip("openpyxl")
    book = openpyxl.Workbook()
    for row in rows:
        book.active.append(row)
    book.save(path)


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
    assert (got["GB7-0419"]["grade"], _fired(got["GB7-0419"])) == ("alert", {"iron-step"})
    assert "oil-changed" not in {c["caveat"] for c in got["GB7-0419"]["caveats"]}
    assert (got["GB7-0420"]["grade"], _fired(got["GB7-0420"])) == ("normal", set())
    assert "iron-step" not in {gap["rule"] for gap in got["GB7-0420"]["not_evaluated"]}  # evaluated, quiet
    assert got["GB7-0419"]["sampled_on"] == "2026-03-02T23:30:00"  # the date as the lab wrote it
    assert got["GB7-0412"]["sampled_on"] == "2026-02-02T14:05:00"


def test_an_offset_date_keeps_its_day_and_the_trend_its_order_csv():
    got, _ = _graded(OFFSET_DATES, "--rules", GEAR_IRON)
    _check_offset_trend(got)


def test_an_offset_date_keeps_its_day_and_the_trend_its_order_json_lines(tmp_path):
    rows = _csv_rows(OFFSET_DATES)
    header, numeric = rows[0], {"oil_hours", "kv40", "an", "iron"}
    lines = [json.dumps({k: float(v) if k in numeric else v for k, v in zip(header, row)}) for row in rows[1:]]
    path = tmp_path / "offset-dates.jsonl"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    got, _ = _graded(path, "--rules", GEAR_IRON)
    _check_offset_trend(got)


def test_an_offset_date_keeps_its_day_and_the_trend_its_order_workbook(tmp_path):
    # A workbook written by a lab system keeps an ISO date-time with offset as text (a spreadsheet
    # date has no offset); the resample's date typed in as a spreadsheet date.
    from datetime import datetime
    rows = _csv_rows(OFFSET_DATES)
    numeric = {5, 6, 7, 8}
    book_rows = [rows[0]] + [[float(v) if k in numeric else v for k, v in enumerate(row)] for row in rows[1:]]
    book_rows[3][4] = datetime(2026, 3, 3)
    path = tmp_path / "offset-dates.xlsx"
    _workbook(path, book_rows)
    got, _ = _graded(path, "--rules", GEAR_IRON)
    _check_offset_trend(got)
