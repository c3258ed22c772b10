"""A file that begins with a UTF-16 or UTF-32 byte-order mark is read in that encoding, with a note.

Before, a spreadsheet's "Unicode text" export (UTF-16 little-endian with its mark, tab-separated:
common practice, no source) was refused whole as "byte 0xff is not utf-8 text" until someone
declared its encoding. The mark is the file saying how it is written (The Unicode Standard,
§23.8 "Byte Order Mark"; RFC 2781 §3.2 for UTF-16), so it is followed, not guessed. The check is
against the scenario's own UTF-8 export of the same rows: every grade and rule fired must agree.
"""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

from conftest import ROOT, run_cli
from support.grade_runs import counts_said, fired_rules, graded_run

from sumpwise.intake.readers import marked_encoding
from sumpwise.intake.samples import load_column_map, read_samples

SCENARIO = ROOT / "scenarios" / "brackwater"
FOUND = ROOT / "tests" / "data" / "intake_found6"
COLUMNS = SCENARIO / "columns.yaml"
RULES = SCENARIO / "site.yaml"


def _verdicts(records: dict) -> dict:
    return {sid: (r["grade"], sorted(fired_rules(r)), r["values"]) for sid, r in records.items()}


@pytest.fixture(scope="module")
def utf8_verdicts() -> dict:
    records, _ = graded_run(SCENARIO / "lab-export.csv", "--rules", RULES, "--columns", COLUMNS)
    return _verdicts(records)


@pytest.mark.parametrize("name", ["unicode-text-export.txt", "unicode-text-export-be.csv"])
@pytest.mark.parametrize("chunk", ["200000", "2"])
def test_a_marked_utf16_export_grades_as_its_utf8_twin(name, chunk, utf8_verdicts):
    records, err = graded_run(FOUND / name, "--rules", RULES, "--columns", COLUMNS, "--input-format", "csv",
                              "--chunk-rows", chunk)
    assert _verdicts(records) == utf8_verdicts
    assert {v[0] for v in utf8_verdicts.values()} == {"normal", "watch"}  # the comparison has grades to lose
    assert counts_said(err) == (9, 9, 0, 0)
    assert "read as UTF-16" in err


def test_the_whole_file_reader_follows_the_mark_too(utf8_verdicts):
    """A ledger import and the table read the file whole (read_samples), not in chunks."""
    whole = read_samples(FOUND / "unicode-text-export.txt", columns=load_column_map(COLUMNS), fmt="csv")
    twin = read_samples(SCENARIO / "lab-export.csv", columns=load_column_map(COLUMNS))
    assert whole.frame.drop(columns=["file"], errors="ignore").equals(twin.frame.drop(columns=["file"], errors="ignore"))
    assert any("UTF-16" in note for note in whole.notes)


def test_standard_input_with_the_mark_is_read_as_utf16(utf8_verdicts):
    """The real command line, the export piped in as bytes."""
    done = subprocess.run([sys.executable, "-m", "sumpwise", "grade", "-", "--rules", str(RULES), "--columns",
                           str(COLUMNS)], input=(FOUND / "unicode-text-export.txt").read_bytes(),
                          capture_output=True, cwd=ROOT, timeout=120)
    assert done.returncode == 0, done.stderr.decode()
    records = {r["sample_id"]: r for r in map(json.loads, done.stdout.decode().splitlines())}
    assert _verdicts(records) == utf8_verdicts


def test_utf32_and_jsonl_with_a_mark(tmp_path):
    rows = [{"sample_id": "BP-U32-01", "unit_id": "HPU-7", "class": "hydraulic", "lubricant": "HYD-46-M",
             "sampled_on": "2026-09-01", "oil_hours": 5200, "kv40": 46.2, "an": 0.31, "water": 1250}]
    jsonl = tmp_path / "u16.jsonl"
    jsonl.write_bytes("".join(json.dumps(r) + "\n" for r in rows).encode("utf-16"))
    csv32 = tmp_path / "u32.csv"
    csv32.write_bytes(("sample_id,unit_id,class,lubricant,sampled_on,oil_hours,kv40,an,water\n"
                       "BP-U32-01,HPU-7,hydraulic,HYD-46-M,2026-09-01,5200,46.2,0.31,1250\n").encode("utf-32"))
    for path in (jsonl, csv32):
        records, err = graded_run(path, "--rules", RULES)
        # 1250 ppm water in a hydraulic oil: the shipped hydraulic water rule's top step (rules/hydraulic.yaml)
        assert records["BP-U32-01"]["grade"] == "urgent", err
        assert records["BP-U32-01"]["values"]["water"] == 1250.0


def test_a_declared_encoding_wins_over_the_mark(tmp_path):
    """A map that says cp1252 is taken at its word: the mark's bytes are then not text, and the run says so."""
    mapped = tmp_path / "map.yaml"
    mapped.write_text(COLUMNS.read_text(encoding="utf-8") + "file: {encoding: cp1252}\n", encoding="utf-8")
    run = run_cli("grade", FOUND / "unicode-text-export.txt", "--rules", RULES, "--columns", mapped,
                  "--input-format", "csv")
    assert "read as UTF-16" not in run.err
    assert counts_said(run.err)[1] == 0  # nothing graded from text read in the wrong encoding


@pytest.mark.parametrize("head, expected", [(b"\xff\xfeS\x00", "utf-16"), (b"\xfe\xff\x00S", "utf-16"),
                                            (b"\xff\xfe\x00\x00", "utf-32"), (b"\x00\x00\xfe\xff", "utf-32"),
                                            (b"\xef\xbb\xbfS", None), (b"Samp", None), (b"", None)])
def test_marks_named(head, expected):
    """The marks of The Unicode Standard's table 23-4 (UTF-8's is read as UTF-8 by the reader itself)."""
    assert marked_encoding(head) == expected
