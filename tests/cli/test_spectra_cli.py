"""`sumpwise spectra` through command.run with in-memory streams."""

import argparse
import csv
import io

import pytest

from sumpwise.cli import spectra as command
from synthetic_spectra import oil_spectrum, wavenumber_grid, write_jcampdx

X = wavenumber_grid()
COLUMNS = ["spectrum", "oxidation", "oxidation_area", "nitration", "sulfation", "antiwear", "water", "soot"]


def _run(argv):
    parser = argparse.ArgumentParser(prog="sumpwise spectra")
    command.add_arguments(parser)
    out, err = io.StringIO(), io.StringIO()
    code = command.run(parser.parse_args(argv), out, err)
    return code, out.getvalue(), err.getvalue()


@pytest.fixture
def folder(tmp_path):
    write_jcampdx(tmp_path / "a_new.jdx", X, oil_spectrum(X), form="DIFDUP")
    write_jcampdx(tmp_path / "b_used.jdx", X, oil_spectrum(X, oxidation=0.2, water=0.1), form="SQZ")
    (tmp_path / "c_bad.jdx").write_text("##TITLE= truncated\n##XYDATA=(X++(Y..Y))\n4000 1\n")
    (tmp_path / "notes.txt").write_text("not a spectrum")
    return tmp_path


def test_folder_read_directly_one_row_per_spectrum_and_rejection_on_stderr(folder):
    code, out, err = _run([str(folder)])
    assert code == 0
    rows = list(csv.DictReader(io.StringIO(out)))
    assert [r["spectrum"].rsplit("/", 1)[-1] for r in rows] == ["a_new.jdx", "b_used.jdx", "c_bad.jdx"]
    assert list(rows[0])[: len(COLUMNS)] == COLUMNS and {"method", "unit", "rejection"} <= set(rows[0])
    assert [r["method"] for r in rows[:2]] == ["direct", "direct"] and rows[0]["unit"] == "abs/0.1mm"
    assert float(rows[1]["oxidation"]) > float(rows[0]["oxidation"])
    assert rows[2]["rejection"].endswith(":3: file ends without ##END=")
    assert "rejected: " in err and "c_bad.jdx:3" in err
    assert "not a substitute for a qualified lubricant analyst" in err  # house cautions on the human-facing stream


def test_reference_switches_every_row_to_subtraction(folder, tmp_path):
    out_file = tmp_path / "out.csv"
    code, out, _ = _run([str(folder / "b_used.jdx"), str(folder / "a_new.jdx"),
                         "--reference", str(folder / "a_new.jdx"), "--out", str(out_file)])
    assert code == 0 and out == ""
    rows = list(csv.DictReader(out_file.open()))
    assert [(r["method"], r["unit"], r["area_unit"]) for r in rows] == [("subtraction", "abs/cm", "abs*cm-1/cm")] * 2
    # 0.2 absorbance of carbonyl added at 0.1 mm is 20 abs/cm (ASTM D7412 12.1-12.2: x 100)
    assert float(rows[0]["oxidation"]) == pytest.approx(20.0, abs=0.05) and abs(float(rows[1]["oxidation"])) < 1e-6


@pytest.mark.parametrize("value", ["inf", "nan", "-1", "0", "1e400"])
def test_non_finite_or_non_positive_path_length_is_refused(folder, value):
    code, out, err = _run([str(folder / "b_used.jdx"), f"--path-length={value}"])
    assert code == 2 and out == "" and "--path-length" in err


def test_a_damaged_npoints_rejects_only_its_own_file(folder):
    text = (folder / "b_used.jdx").read_text()
    (folder / "d_nan.jdx").write_text(text.replace("##NPOINTS= 1726", "##NPOINTS= nan"))
    (folder / "e_big.jdx").write_text(text.replace("##NPOINTS= 1726", "##NPOINTS= 1e400"))
    code, out, err = _run([str(folder)])
    rows = list(csv.DictReader(io.StringIO(out)))
    assert code == 0 and len(rows) == 5  # one row per file, whatever its damage (issue 14)
    assert [bool(r["rejection"]) for r in rows] == [False, False, True, True, True]
    assert "NPOINTS" in rows[3]["rejection"] and "NPOINTS" in rows[4]["rejection"]


def test_path_length_option_normalises(folder):
    _, at_01, _ = _run([str(folder / "b_used.jdx")])
    _, at_02, _ = _run([str(folder / "b_used.jdx"), "--path-length", "0.2"])
    ox_01 = float(next(csv.DictReader(io.StringIO(at_01)))["oxidation"])
    ox_02 = float(next(csv.DictReader(io.StringIO(at_02)))["oxidation"])
    assert ox_02 == pytest.approx(ox_01 / 2, rel=1e-5)


def test_every_file_rejected_exits_2_and_still_writes_the_reasons(folder):
    code, out, err = _run([str(folder / "c_bad.jdx")])
    assert code == 2 and "c_bad.jdx" in out and "0 of 1 spectra measured" in err


@pytest.mark.parametrize(
    "argv_tail, message",
    [
        (["--path-length", "0"], "--path-length"),
        (["--reference", "missing.jdx"], "reference spectrum unusable"),
        (["--bands", "missing.yaml"], "cannot read band file"),
    ],
)
def test_input_errors_exit_2(folder, argv_tail, message):
    code, out, err = _run([str(folder / "b_used.jdx"), *argv_tail])
    assert code == 2 and out == "" and message in err


def test_missing_input_and_empty_folder_exit_2(tmp_path):
    code, _, err = _run([str(tmp_path / "nowhere")])
    assert code == 2 and "no such file" in err
    code, _, err = _run([str(tmp_path)])
    assert code == 2 and "no spectrum files" in err


@pytest.mark.parametrize("value", ["inf", "nan", "0"])
def test_grade_refuses_a_non_finite_path_length(tmp_path, value):
    from conftest import run_cli

    (tmp_path / "s.csv").write_text("sample_id,class\nA,steam-turbine\n")
    run = run_cli("grade", tmp_path / "s.csv", "--rules", "rules/steam-turbine.yaml", "--path-length", value)
    assert run.code == 2 and "--path-length" in run.err and "Traceback" not in run.err
