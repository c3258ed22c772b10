"""The real command line, end to end: outputs, counts, rejects and the documented exit codes."""

import json
import subprocess
import sys

from conftest import DATA, ROOT, run_cli

SITE = ROOT / "scenarios" / "brackwater" / "site.yaml"
SAMPLES = ROOT / "scenarios" / "brackwater" / "samples.csv"
DRAFT = DATA / "rulesets" / "draft.yaml"


def test_check_valid_rule_sets_exit_0():
    run = run_cli("check", DRAFT, SITE)
    assert run.code == 0, run.err
    assert run.out.count(": ok: rule set") == 2


def test_check_invalid_rule_set_exit_2_with_file_line(tmp_path):
    bad = tmp_path / "bad.yaml"
    bad.write_text("ruleset: bad\nversion: 1\nclasses:\n  x:\n    rules:\n"
                   "      - {id: r, measure: nope, above: {watch: 1}, message: m, source: s}\n")
    run = run_cli("check", bad)
    assert run.code == 2
    assert f"{bad}:6:" in run.err and "unknown measure 'nope'" in run.err


def test_grade_counts_add_up_and_rejects_go_to_a_file(tmp_path):
    rejects = tmp_path / "rejects.csv"
    run = run_cli("grade", SAMPLES, "--rules", SITE, "--rejects", rejects)
    assert run.code == 0, run.err
    records = [json.loads(line) for line in run.out.splitlines()]
    assert "read 331 row(s): 326 graded, 1 unrated, 4 rejected" in run.err
    assert len(records) == 327
    reject_rows = rejects.read_text().splitlines()
    assert reject_rows[0] == "file,row,sample_id,field,code,reason" and len(reject_rows) == 5


def test_a_rejects_file_named_in_upper_case_is_csv_too(tmp_path):
    """`REJECTS.CSV` (a name as some systems write it) was written as JSON Lines under a .CSV name,
    which a spreadsheet then showed as one column of text; the report reads it back as CSV too."""
    rejects, results = tmp_path / "REJECTS.CSV", tmp_path / "results.jsonl"
    run = run_cli("grade", SAMPLES, "--rules", SITE, "--rejects", rejects, "--out", results)
    assert run.code == 0, run.err
    lines = rejects.read_text().splitlines()
    assert lines[0] == "file,row,sample_id,field,code,reason" and len(lines) == 5
    report = run_cli("report", "--results", results, "--rejects", rejects, "--rules", SITE, "--out",
                     tmp_path / "report.html")
    assert report.code == 0, report.err


def test_grade_from_stdin_as_json_lines():
    text = '{"sample_id": "S1", "class": "steam-turbine", "lubricant": "TURB-46-M", "an": 0.5}\n'
    run = run_cli("grade", "-", "--rules", DRAFT, "--input-format", "jsonl", stdin=text)
    assert run.code == 0, run.err
    assert json.loads(run.out)["grade"] == "urgent"  # rise 0.43 is above 0.4


def test_fail_at_gives_exit_3_only_when_reached():
    text = "sample_id,class,lubricant,an\nS1,steam-turbine,TURB-46-M,0.2\n"  # rise 0.13: watch
    assert run_cli("grade", "-", "--rules", DRAFT, "--fail-at", "watch", stdin=text).code == 3
    assert run_cli("grade", "-", "--rules", DRAFT, "--fail-at", "alert", stdin=text).code == 0
    bad = run_cli("grade", "-", "--rules", DRAFT, "--fail-at", "severe", stdin=text)
    assert bad.code == 2 and "not on the grade ladder" in bad.err


def test_usage_and_input_errors_exit_2_without_traceback(tmp_path):
    assert run_cli("grade", SAMPLES).code == 2                        # --rules missing
    missing = run_cli("grade", tmp_path / "none.csv", "--rules", DRAFT)
    assert missing.code == 2 and "cannot read the file" in missing.err
    no_class = run_cli("grade", "-", "--rules", DRAFT, stdin="sample_id,an\nS1,1\n")
    assert no_class.code == 2 and "missing required column(s) class" in no_class.err
    for run in (missing, no_class):
        assert "Traceback" not in run.err


def test_internal_fault_exits_1(monkeypatch):
    import importlib
    grading = importlib.import_module("sumpwise.results.pipeline")  # the module, not sumpwise.results.pipeline() the function

    def broken(*args, **kwargs):
        raise RuntimeError("boom")

    monkeypatch.setattr(grading, "evaluate", broken)
    run = run_cli("grade", DATA / "samples" / "draft-record.csv", "--rules", DRAFT)
    assert run.code == 1 and "internal error" in run.err


def test_formats_csv_and_table():
    csv_run = run_cli("grade", DATA / "samples" / "draft-record.csv", "--rules", DRAFT, "--format", "csv")
    assert csv_run.out.startswith("sample_id,unit_id,class")
    table = run_cli("grade", DATA / "samples" / "draft-record.csv", "--rules", DRAFT, "--format", "table")
    assert "BP-0412" in table.out and "watch +" in table.out


def test_explain_command_and_a_rejected_sample():
    run = run_cli("explain", "BP-0412", "--samples", DATA / "samples" / "draft-record.csv", "--rules", DRAFT)
    assert run.code == 0 and "capped by caveat ester-carbonyl" in run.out
    rejected = run_cli("explain", "BP-0118", "--samples", SAMPLES, "--rules", SITE)
    assert rejected.code == 2 and "was rejected, not graded" in rejected.err


def test_explain_of_a_sample_grading_refused_says_why(tmp_path):
    """An ISO 4406 code that cannot be read is refused when graded, not when read: explain said
    "no sample 'H1' in" the file that holds it."""
    samples = tmp_path / "s.csv"
    samples.write_text("sample_id,class,lubricant,iso4406\nH1,hydraulic,HYD-46-M,18/16/x\n")
    run = run_cli("explain", "H1", "--samples", samples, "--rules", SITE)
    assert run.code == 2 and "sample H1 was rejected, not graded: row 1: iso4406:" in run.err, run.err


def test_every_command_has_help():
    for command in ("check", "grade", "explain", "demo", "spectra"):
        run = run_cli(command, "--help")
        assert run.code == 0 and "usage: sumpwise" in run.out


def test_demo_writes_results(tmp_path):
    run = run_cli("demo", "--out", tmp_path)
    assert run.code == 0, run.err
    assert "steam-turbine" in run.out and "Screening aid only" in run.out
    assert len((tmp_path / "brackwater-results.jsonl").read_text().splitlines()) == 327


def test_the_installed_console_script_runs():
    script = ROOT / ".venv" / "bin" / "sumpwise"
    command = [str(script)] if script.exists() else [sys.executable, "-m", "sumpwise"]
    done = subprocess.run(command + ["check", str(DRAFT)], capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    assert "ok: rule set brackwater-site version 4" in done.stdout


def test_a_pipeline_can_fail_on_a_caveat_such_as_a_misspelt_lubricant():
    # Issue #12's row: with the lubricant code misspelt, most rules lack their new-oil value and the
    # sample grades normal; the caveat says so, and --fail-on-caveat lets a pipeline stop on it.
    rules = ROOT / "rules" / "steam-turbine.yaml"
    row = "sample_id,unit_id,class,lubricant,kv40,an,water,oxidation\nT1,ST-1,steam-turbine,{},49.0,0.5,50,20\n"
    misspelt = run_cli("grade", "-", "--rules", rules, "--fail-at", "alert", stdin=row.format("TURB-46M"))
    record = json.loads(misspelt.out)
    assert misspelt.code == 0 and record["grade"] == "normal"
    assert [c["caveat"] for c in record["caveats"]] == ["unknown-lubricant", "few-rules-evaluated"]
    assert "nearest: TURB-46-M" in record["caveats"][0]["message"]
    failed = run_cli("grade", "-", "--rules", rules, "--fail-on-caveat", "unknown-lubricant",
                     stdin=row.format("TURB-46M"))
    assert failed.code == 3 and "--fail-on-caveat unknown-lubricant: 1 sample(s)" in failed.err
    spelt = run_cli("grade", "-", "--rules", rules, "--fail-on-caveat", "unknown-lubricant", "--fail-at", "alert",
                    stdin=row.format("TURB-46-M"))
    assert spelt.code == 3 and json.loads(spelt.out)["grade"] == "alert" and "carry it" not in spelt.err
    typo = run_cli("grade", "-", "--rules", rules, "--fail-on-caveat", "unknown-lubricnt", stdin=row.format("X"))
    assert typo.code == 2 and "did you mean 'unknown-lubricant'" in typo.err


def test_a_sample_id_repeated_in_a_later_file_is_named(tmp_path):
    """A lab's re-issued result (last week's sample id in this week's export, with other values):
    each file is graded on its own, so the run has two records for it; it must say so. Grades
    from the draft rule set's acid-rise ladder (a rise of 0.03 is normal, 0.83 urgent)."""
    earlier, later = tmp_path / "week-48.csv", tmp_path / "week-49.csv"
    earlier.write_text("sample_id,class,lubricant,an\nS1,steam-turbine,TURB-46-M,0.1\n"
                       "S2,steam-turbine,TURB-46-M,0.1\n")
    later.write_text("sample_id,class,lubricant,an\nS3,steam-turbine,TURB-46-M,0.1\n"
                     "S1,steam-turbine,TURB-46-M,0.9\n")
    summary = tmp_path / "summary.json"
    run = run_cli("grade", earlier, later, "--rules", DRAFT, "--summary", summary, "--chunk-rows", "1")
    assert run.code == 0, run.err
    grades = [(r["sample_id"], r["grade"]) for r in map(json.loads, run.out.splitlines())]
    assert grades == [("S1", "normal"), ("S2", "normal"), ("S3", "normal"), ("S1", "urgent")]
    warned = [line for line in run.err.splitlines() if "earlier file" in line]
    assert len(warned) == 1 and f"{later}: 1 sample id(s)" in warned[0] and f"'S1' (also in {earlier})" in warned[0]
    files = json.loads(summary.read_text())["files"]
    assert [f["repeated_ids"] is not None for f in files] == [False, True]
    # One file alone, or the two in a ledger, say nothing of it: the ledger decides (L001).
    assert "earlier file" not in run_cli("grade", later, "--rules", DRAFT).err
    db = tmp_path / "l.db"
    in_ledger = run_cli("grade", earlier, later, "--rules", DRAFT, "--db", db)
    assert "earlier file" not in in_ledger.err and "L001" in in_ledger.err
