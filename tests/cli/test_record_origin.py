"""Every result names the file and row it came from, spelt as the rejects name them, through the
real command: JSON Lines (both forms), CSV and the table, several files in one run, standard input
and chunks. The reference for a row is the file itself, read here with the standard library's csv
and json modules under the row-numbering rule of sumpwise.intake.readers (row N: the N-th line
after a CSV header, blank lines counted; the N-th line of a JSON Lines file). The samples are
invented Brackwater Point rows (regression data, not a published source)."""

from __future__ import annotations

import csv
import io
import json
import subprocess
import sys
from collections import Counter

from conftest import ROOT, run_cli

SITE = ROOT / "scenarios" / "brackwater" / "site.yaml"

CSV_TEXT = ("sample_id,unit_id,class,lubricant,sampled_on,oil_hours,kv40,an,water,oxidation,iso4406\n"
            "W1,ST-1,steam-turbine,TURB-46-M,2026-03-02,41000,46.2,0.12,60,4,17/15/12\n"
            "W2,ST-2,steam-turbine,TURB-46-M,2026-03-02,15000,46.0,pending,40,3,\n"  # rejected: an
            "\n"  # a blank line is counted, so the rows below keep the numbers an editor shows
            "W3,HPU-1,hydraulic,HYD-46-M,2026-03-03,9000,45.1,0.6,120,9,-/19/16\n"
            "W4,ST-1,steam-turbine,TURB-46M,2026-03-04,41100,49.0,0.5,50,20,\n"  # unknown lubricant code
            "W5,XX-9,no-such-class,TURB-46-M,2026-03-05,100,46.0,0.1,50,3,\n")  # unrated: no such class
JSONL_TEXT = ('{"sample_id": "J1", "unit_id": "GB-1", "class": "gearbox", "lubricant": "GEAR-320-PAO", "an": 0.9}\n'
              '{"sample_id": "J2", "class": "gearbox", "tags": ["a"]}\n'  # rejected: a nested value
              '\n'
              '{"sample_id": "J3", "unit_id": "GB-1", "class": "gearbox", "lubricant": "GEAR-320-PAO", "an": 1.4, '
              '"water": 900}\n')


def _files(tmp_path):
    (tmp_path / "week-a.csv").write_text(CSV_TEXT, encoding="utf-8")
    (tmp_path / "week-b.jsonl").write_text(JSONL_TEXT, encoding="utf-8")
    return tmp_path / "week-a.csv", tmp_path / "week-b.jsonl"


def _rows_as_written(path) -> dict:
    """Row number -> sample id, read from the file itself (see the module docstring)."""
    lines = path.read_text(encoding="utf-8").splitlines()
    if path.suffix == ".csv":
        header = next(csv.reader([lines[0]]))
        return {n: dict(zip(header, next(csv.reader([line]))))["sample_id"]
                for n, line in enumerate(lines[1:], 1) if line.strip()}
    return {n: json.loads(line)["sample_id"] for n, line in enumerate(lines, 1) if line.strip()}


def test_every_record_points_to_its_own_file_and_row_and_the_counts_add_up(tmp_path):
    a, b = _files(tmp_path)
    out, rejects, summary = tmp_path / "out.jsonl", tmp_path / "rejects.jsonl", tmp_path / "summary.json"
    done = subprocess.run([sys.executable, "-m", "sumpwise", "grade", str(a), str(b), "--rules", str(SITE),
                           "--out", str(out), "--rejects", str(rejects), "--summary", str(summary)],
                          capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    records = [json.loads(line) for line in out.read_text(encoding="utf-8").splitlines()]
    rejected = [json.loads(line) for line in rejects.read_text(encoding="utf-8").splitlines()]
    written = {str(a): _rows_as_written(a), str(b): _rows_as_written(b)}
    for record in records:
        origin = record["origin"]
        assert list(origin) == ["file", "row"]
        assert written[origin["file"]][origin["row"]] == record["sample_id"], origin
    assert sorted((r["origin"]["file"], r["origin"]["row"]) for r in records) == sorted(
        (file, row) for file, rows in written.items() for row in rows
        if (file, row) not in {(x["file"], x["row"]) for x in rejected})
    # the rejects spell the same files and rows: every row read is in exactly one of the two
    assert {(x["file"], x["row"]) for x in rejected} == {(str(a), 2), (str(b), 2)}
    report = json.loads(summary.read_text(encoding="utf-8"))
    for counts in report["files"]:
        mine = [r for r in records if r["origin"]["file"] == counts["file"]]
        grades = Counter("unrated" if r["level"] is None else "graded" for r in mine)
        assert (grades["graded"], grades["unrated"]) == (counts["graded"], counts["unrated"])
        assert counts["rejected"] == len({x["row"] for x in rejected if x["file"] == counts["file"]})
        assert counts["read"] == counts["graded"] + counts["unrated"] + counts["rejected"] == len(
            written[counts["file"]])
    assert report["total"] == {"read": 8, "graded": 5, "unrated": 1, "rejected": 2}


def test_both_record_forms_csv_and_the_table_name_the_same_origin(tmp_path):
    a, b = _files(tmp_path)
    full = [json.loads(x) for x in run_cli("grade", a, b, "--rules", SITE).out.splitlines()]
    compact = [json.loads(x) for x in run_cli("grade", a, b, "--rules", SITE, "--record", "compact").out.splitlines()]
    table_rows = list(csv.DictReader(io.StringIO(run_cli("grade", a, b, "--rules", SITE, "--format", "csv").out)))
    origins = [(r["sample_id"], r["origin"]["file"], r["origin"]["row"]) for r in full]
    assert origins == [(r["sample_id"], r["origin"]["file"], r["origin"]["row"]) for r in compact]
    assert origins == [(r["sample_id"], r["file"], int(r["row"])) for r in table_rows]
    assert ("W3", str(a), 4) in origins and ("J3", str(b), 4) in origins
    table = run_cli("grade", a, b, "--rules", SITE, "--format", "table").out
    head = next(line for line in table.splitlines() if line.startswith("sample"))
    assert head.split()[:3] == ["sample", "row", "unit"]
    line = next(line for line in table.splitlines() if line.startswith("W3 "))
    assert line.split()[1] == "4"
    assert f"{a}: read 5:" in table and f"{b}: read 3:" in table  # each file's table names its file


def test_standard_input_is_named_as_the_rejects_name_it(tmp_path):
    rejects = tmp_path / "rejects.jsonl"
    run = run_cli("grade", "-", "--rules", SITE, "--rejects", rejects, stdin=CSV_TEXT)
    records = [json.loads(x) for x in run.out.splitlines()]
    (rejected,) = [json.loads(x) for x in rejects.read_text(encoding="utf-8").splitlines()]
    assert rejected["file"] == "<stdin>" and rejected["row"] == 2
    assert {r["origin"]["file"] for r in records} == {"<stdin>"}
    assert [(r["sample_id"], r["origin"]["row"]) for r in records] == [("W1", 1), ("W3", 4), ("W4", 5), ("W5", 6)]


def test_rows_keep_their_numbers_in_chunks(tmp_path):
    # a blank line is a numbered row in every chunk too (it once shifted the rows of later chunks)
    a, b = _files(tmp_path)
    rejects = tmp_path / "rejects.csv"

    def origins(*options):
        run = run_cli("grade", a, b, "--rules", SITE, "--rejects", rejects, *options)
        return [(json.loads(x)["sample_id"], json.loads(x)["origin"]) for x in run.out.splitlines()], \
            rejects.read_text(encoding="utf-8")
    whole = origins()
    assert [(sid, o["row"]) for sid, o in whole[0]] == [("W1", 1), ("W3", 4), ("W4", 5), ("W5", 6), ("J1", 1),
                                                          ("J3", 4)]
    for rows in (1, 2, 3):
        assert origins("--chunk-rows", rows) == whole, rows


def test_the_cleanliness_code_is_recorded_as_the_lab_wrote_it(tmp_path):
    a, _ = _files(tmp_path)
    records = {r["sample_id"]: r for r in map(json.loads, run_cli("grade", a, "--rules", SITE).out.splitlines())}
    assert records["W1"]["iso4406"] == "17/15/12" and records["W3"]["iso4406"] == "-/19/16"
    assert records["W4"]["iso4406"] is None  # an empty cell: no code, and the key is still there
    # beside it, the scale numbers the engine derived from it (ISO 4406: one number per size, '-' not reported)
    assert [records["W3"]["derived"].get(f"iso4406_{size}") for size in ("4um", "6um", "14um")] == [None, 19.0, 16.0]


def test_explain_says_where_the_sample_was_read_and_its_code_as_written(tmp_path):
    a, _ = _files(tmp_path)
    run = run_cli("explain", "W3", "--samples", a, "--rules", SITE)
    assert run.code == 0, run.err
    text = " ".join(run.out.split())
    assert f"Read from {a}, row 4; ISO 4406 code as written -/19/16." in text
