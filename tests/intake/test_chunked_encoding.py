"""A samples file that is not UTF-8, read the way `grade` reads an undeclared file (in chunks):
the same error as the whole-file reader, with the line, the byte and the encodings to declare,
never a codec's bare message or an internal error (issue 12: "'utf-8' codec can't decode byte
0xb0")."""

import io

import pytest
from conftest import ROOT, run_cli

from sumpwise.intake.chunked import sample_chunks
from sumpwise.vocabulary.problems import InputError

SITE = ROOT / "scenarios" / "brackwater" / "site.yaml"
# 0xb0 is the degree sign in Windows-1252 (cp1252), a byte UTF-8 cannot start a character with
ROWS = b"sample_id,class,lubricant,water\nA,gearbox,GEAR-320-PAO,120\nB,gearbox,GEAR-320-PAO,90 \xb0C\n"


def test_grade_on_a_windows_1252_file_names_the_line_and_the_encodings(tmp_path):
    path = tmp_path / "export.csv"
    path.write_bytes(ROWS)
    run = run_cli("grade", path, "--rules", SITE)
    assert run.code == 2 and "internal error" not in run.err
    assert "line 3: byte 0xb0 is not utf-8 text" in run.err and "cp1252" in run.err


@pytest.mark.parametrize("rows", [1, 2])
def test_the_line_is_the_file_line_whatever_the_chunk(tmp_path, rows):
    path = tmp_path / "export.csv"
    path.write_bytes(ROWS)
    with pytest.raises(InputError, match=r"line 3: byte 0xb0 is not utf-8 text; .*cp1252"):
        list(sample_chunks(path, rows=rows))
    jsonl = tmp_path / "export.jsonl"
    jsonl.write_bytes(b'{"sample_id": "A", "class": "gearbox"}\n{"sample_id": "B", "class": "gear\xb0"}\n')
    with pytest.raises(InputError, match=r"line 2: byte 0xb0 is not utf-8 text"):
        list(sample_chunks(jsonl, rows=rows))


def test_standard_input_that_is_not_utf8_is_an_error_not_a_fault():
    # a stream read with surrogateescape (the C locale's standard input) holds the byte as a surrogate
    stdin = io.TextIOWrapper(io.BytesIO(ROWS), encoding="utf-8", errors="surrogateescape", newline="")
    with pytest.raises(InputError, match=r"<stdin>: line 3: byte 0xb0 is not utf-8 text"):
        list(sample_chunks(stdin, "<stdin>"))
    strict = io.TextIOWrapper(io.BytesIO(ROWS), encoding="utf-8", newline="")
    with pytest.raises(InputError, match=r"<stdin>: byte 0xb0 is not utf-8 text; .*cp1252"):
        list(sample_chunks(strict, "<stdin>"))
