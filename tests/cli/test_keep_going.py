"""A run over several samples files goes on past a file it cannot read.

A nightly pipeline hands `grade` the week's exports; one unreadable file (a lab's PDF
saved as .csv, a damaged transfer) stopped the run there: the later files' urgent samples
never came out, and `--summary` was not written, so the pipeline could not tell which file
failed. Now the file's error is said, the other files are graded, the summary lists the
file with its error, and the run ends with exit 2 (an input error), as one bad file alone does.
"""

from __future__ import annotations

import json
from datetime import date, timedelta

import pytest

from tests.conftest import ROOT, run_cli

RULES = ROOT / "rules" / "hydraulic.yaml"
HEADER = "sample_id,unit_id,class,lubricant,sampled_on,oil_hours,kv40,an,water\n"


def _samples(path, first: int, count: int, water: int = 80):
    # Hydraulic water limits (rules/hydraulic.yaml, common practice, no source): urgent above 1000 ppm.
    rows = [f"HP-{k},HP-{k % 3},hydraulic,HYD-46-M,{date(2025, 1, 1) + timedelta(days=k)},{1000 + 24 * k},46.2,0.35,"
            f"{water}\n" for k in range(first, first + count)]
    path.write_text(HEADER + "".join(rows), encoding="utf-8")
    return path


def test_the_files_after_an_unreadable_one_are_graded_and_the_summary_names_it(tmp_path):
    early = _samples(tmp_path / "monday.csv", 0, 3)
    broken = tmp_path / "tuesday.csv"
    broken.write_bytes(b"%PDF-1.7\n%\xe2\xe3\xcf\xd3\n1 0 obj\n")  # a report saved under the wrong name
    late = _samples(tmp_path / "wednesday.csv", 10, 2, water=1500)
    summary = tmp_path / "summary.json"
    run = run_cli("grade", early, broken, late, "--rules", RULES, "--record", "compact", "--summary", summary)
    assert run.code == 2
    records = [json.loads(line) for line in run.out.splitlines()]
    assert [r["sample_id"] for r in records] == ["HP-0", "HP-1", "HP-2", "HP-10", "HP-11"]
    assert {r["grade"] for r in records[3:]} == {"urgent"}  # the late file's urgent samples surface
    report = json.loads(summary.read_text())
    assert [(f["file"], f["read"], f["error"] is None) for f in report["files"]] == [
        (str(early), 3, True), (str(broken), 0, False), (str(late), 2, True)]
    assert str(broken) in report["files"][1]["error"] and report["exit"] == 2
    assert report["total"]["read"] == 5
    assert f"1 of 3 file(s) could not be read to the end: {broken}" in run.err


@pytest.mark.parametrize("jobs", ["1", "2"])
def test_a_file_that_fails_part_way_keeps_what_it_gave_and_says_where_it_stopped(tmp_path, jobs):
    path = _samples(tmp_path / "export.csv", 0, 120)
    text = path.read_bytes()
    cut = text.index(b"HP-100,")
    path.write_bytes(text[:cut] + b"HP-100,HP-1,hydraulic,HYD-46-M,2025-04-11,3400,46\xe9,0.35,80\n"
                     + text[cut:].split(b"\n", 1)[1])  # a Latin-1 byte in chunk 3: an encoding error at its line
    summary = tmp_path / "summary.json"
    run = run_cli("grade", path, _samples(tmp_path / "next.csv", 500, 1), "--rules", RULES, "--chunk-rows", "40",
                  "--jobs", jobs, "--out", tmp_path / "out.jsonl", "--summary", summary)
    assert run.code == 2
    written = [json.loads(line)["sample_id"] for line in (tmp_path / "out.jsonl").read_text().splitlines()]
    assert written == [f"HP-{k}" for k in range(80)] + ["HP-500"]  # two whole chunks, then the next file
    [first, second] = json.loads(summary.read_text())["files"]
    assert first["read"] == 80 and "line 102" in first["error"] and second["error"] is None
    assert "stopped by the error above; before it, read 80 row(s)" in run.err


def test_a_ledger_refusal_still_stops_the_run(tmp_path):
    """The ledger refusing the rule set is no fault of one file: every file would meet it."""
    db = tmp_path / "ledger.db"
    first = _samples(tmp_path / "a.csv", 0, 2)
    assert run_cli("grade", first, "--rules", RULES, "--db", db).code == 0
    changed = tmp_path / "changed.yaml"
    changed.write_text(RULES.read_text().replace("watch: 200", "watch: 150"))
    run = run_cli("grade", _samples(tmp_path / "b.csv", 5, 2), _samples(tmp_path / "c.csv", 9, 2), "--rules",
                  changed, "--db", db)
    assert run.code == 2 and run.err.count("already recorded with other content") == 1
