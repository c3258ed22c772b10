"""Every option value is checked while the command line is read: a bad one is exit 2 with a
message naming the option and the value, before any input is read or any ledger written."""

from __future__ import annotations

import pytest

from conftest import ROOT, run_cli

GEARBOX = ROOT / "rules" / "gearbox.yaml"
SAMPLES = ("sample_id,unit_id,class,lubricant,sampled_on,kv40,an,water\n"
           "GB1-0412,GB-1,gearbox,GEAR-320-PAO,2026-03-02,318.4,0.81,120\n"
           "GB2-0413,GB-2,gearbox,GEAR-320-PAO,2026-03-02,326.0,0.95,5200\n")


@pytest.fixture
def samples(tmp_path):
    path = tmp_path / "lab.csv"
    path.write_text(SAMPLES)
    return path


@pytest.mark.parametrize("option", ["--out", "--rejects"])
def test_grade_output_naming_a_folder_is_a_usage_error_and_nothing_is_recorded(tmp_path, samples, option):
    db = tmp_path / "ledger.db"
    run = run_cli("grade", samples, "--rules", GEARBOX, option, tmp_path, "--db", db)
    assert run.code == 2 and option in run.err and "is a folder" in run.err and str(tmp_path) in run.err
    assert "Traceback" not in run.err and not db.exists()


@pytest.mark.parametrize("option", ["--out", "--rejects"])
def test_grade_output_in_a_missing_folder_is_a_usage_error(tmp_path, samples, option):
    target = tmp_path / "no-such-folder" / "results.jsonl"
    run = run_cli("grade", samples, "--rules", GEARBOX, option, target)
    assert run.code == 2 and option in run.err and "does not exist" in run.err


def test_grade_output_to_a_good_path_still_writes(tmp_path, samples):
    out, rejects = tmp_path / "results.csv", tmp_path / "rejects.csv"
    run = run_cli("grade", samples, "--rules", GEARBOX, "--format", "csv", "--out", out, "--rejects", rejects)
    assert run.code == 0 and "GB2-0413" in out.read_text() and rejects.read_text().startswith("file,row")


@pytest.mark.parametrize("value", ["inf", "-inf", "nan", "1e400", "0", "-0.1", "thin"])
def test_a_path_length_that_is_not_a_finite_positive_number_is_refused(samples, value):
    run = run_cli("grade", samples, "--rules", GEARBOX, f"--path-length={value}")
    assert run.code == 2 and "--path-length" in run.err and repr(value) in run.err


@pytest.mark.parametrize("value", ["2026-13-45", "2026-02-30", "2026-1-5", "yesterday", "2026-03-01T00:00"])
def test_replay_since_must_be_a_calendar_date(tmp_path, value):
    run = run_cli("replay", "--db", tmp_path / "ledger.db", "--since", value)
    assert run.code == 2 and "--since" in run.err and value in run.err


def test_replay_since_a_real_date_reaches_the_ledger(tmp_path):
    run = run_cli("replay", "--db", tmp_path / "ledger.db", "--since", "2024-02-29")
    assert run.code == 2 and "no ledger here" in run.err  # past the option check, refused for the ledger


@pytest.mark.parametrize("argv", [
    ["report", "--results", "r.jsonl", "--out", "{folder}"],
    ["propose-limits", "--samples", "s.csv", "--class", "gearbox", "--measure", "water", "--out", "{folder}"],
    ["spectra", "s.jdx", "--out", "{folder}"],
    ["report", "--results", "r.jsonl", "--out", "{folder}/missing/report.html"],
])
def test_other_commands_refuse_an_output_that_cannot_be_a_file(tmp_path, argv):
    run = run_cli(*[a.replace("{folder}", str(tmp_path)) for a in argv])
    assert run.code == 2 and "--out" in run.err and "Traceback" not in run.err


def test_demo_out_naming_a_file_is_refused(tmp_path):
    target = tmp_path / "out"
    target.write_text("not a folder")
    run = run_cli("demo", "--out", target)
    assert run.code == 2 and "is a file" in run.err


def test_an_output_name_too_long_for_the_file_system_is_a_usage_error(tmp_path, samples):
    run = run_cli("grade", samples, "--rules", GEARBOX, "--out", tmp_path / ("x" * 300 + ".jsonl"))
    assert run.code == 2 and "--out" in run.err and "Traceback" not in run.err


def test_an_output_that_cannot_be_opened_after_the_check_is_still_exit_2(tmp_path, samples, monkeypatch):
    """The check at parse time cannot see everything (permissions, a full disk): opening is guarded too."""
    import builtins
    real_open = builtins.open

    def refusing_open(file, mode="r", *args, **kwargs):
        if str(file).endswith("results.jsonl") and "w" in mode:
            raise PermissionError(13, "Permission denied", str(file))
        return real_open(file, mode, *args, **kwargs)

    monkeypatch.setattr(builtins, "open", refusing_open)
    run = run_cli("grade", samples, "--rules", GEARBOX, "--out", tmp_path / "results.jsonl")
    assert run.code == 2 and "results.jsonl" in run.err and "Permission denied" in run.err


@pytest.mark.parametrize("value", ["0", "-3", "1.5", "1e400", "first"])
def test_report_batch_must_be_a_whole_number_from_1(tmp_path, value):
    run = run_cli("report", "--db", tmp_path / "ledger.db", f"--batch={value}", "--out", tmp_path / "r.html")
    assert run.code == 2 and "--batch" in run.err and repr(value) in run.err
