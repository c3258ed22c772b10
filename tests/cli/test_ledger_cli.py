"""The ledger from the command line, including real processes: two writers at once, a killed run.

Integrity is judged by SQLite itself (PRAGMA integrity_check) and by counting rows.
The killed run uses the documented test hook SUMPWISE_LEDGER_TEST_PAUSE, which makes a
grade run wait inside its write transaction so the test can kill it there.
"""

from __future__ import annotations

import json
import os
import signal
import sqlite3
import subprocess
import sys
import time

from tests.conftest import DATA, ROOT, run_cli

RULES = DATA / "ledger" / "trend-rules.yaml"
SAMPLES = DATA / "ledger" / "samples.csv"
SCENARIO = ROOT / "scenarios" / "brackwater"


def _halves(tmp_path):
    header, *rows = (SCENARIO / "samples.csv").read_text().splitlines()
    del rows[247]  # data row 248 repeats row 144's sample id; split apart, it would be a conflicting import
    paths = []
    for k, part in enumerate((rows[:160], rows[160:])):
        path = tmp_path / f"part{k}.csv"
        path.write_text("\n".join([header] + part) + "\n")
        paths.append(path)
    return paths


def _grade_process(samples, db, pause=0.0):
    env = dict(os.environ, SUMPWISE_LEDGER_TEST_PAUSE=str(pause))
    return subprocess.Popen([sys.executable, "-m", "sumpwise", "grade", str(samples), "--rules",
                             str(SCENARIO / "site.yaml"), "--db", str(db), "--out", os.devnull],
                            cwd=ROOT, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


def _state(db):
    with sqlite3.connect(db) as conn:
        return (conn.execute("PRAGMA integrity_check").fetchone()[0],
                conn.execute("SELECT count(*) FROM samples").fetchone()[0],
                conn.execute("SELECT count(*) FROM samples WHERE grade IS NOT NULL").fetchone()[0]  # form 3
                + conn.execute("SELECT count(*) FROM verdicts").fetchone()[0],
                conn.execute("SELECT count(*) FROM batches").fetchone()[0])


def test_grade_explain_history_replay(tmp_path):
    db = tmp_path / "l.db"
    graded = run_cli("grade", SAMPLES, "--rules", RULES, "--db", db)
    assert graded.code == 0
    assert f"ledger {db}: batch 1: 9 new sample(s), 0 already recorded, 0 correction(s)" in graded.err
    assert len(graded.out.splitlines()) == 9
    again = run_cli("grade", SAMPLES, "--rules", RULES, "--db", db)
    assert "nothing new: 0 new sample(s), 9 already recorded" in again.err
    story = run_cli("explain", "T-06", "--db", db)
    assert story.code == 0 and "oil-changed: first sample after an oil change (oil hours fell from 3500" in story.out
    table = run_cli("history", "ST-1", "--db", db)
    assert table.code == 0 and "Unit ST-1: 7 sample(s) in the ledger" in table.out and "T-04: carbonyl-jump=alert" in table.out
    assert "Screening aid only" in table.out
    as_csv = run_cli("history", "ST-1", "--db", db, "--format", "csv")
    assert as_csv.out.splitlines()[0].startswith("sample_id,sampled_on,oil_hours,oil_changed")
    assert [line.split(",")[0] for line in as_csv.out.splitlines()[1:]] == [f"T-0{k}" for k in range(1, 8)]
    lines = run_cli("history", "ST-2", "--db", db, "--format", "jsonl").out.splitlines()
    assert [json.loads(line)["oil_changed"] for line in lines] == [False, True]
    assert run_cli("replay", "--db", db).code == 0
    with sqlite3.connect(db) as conn:
        conn.execute("UPDATE samples SET level = 1 WHERE level = 2")
    replayed = run_cli("replay", "--db", db)
    assert replayed.code == 3 and "T-04 (batch 1): stored level 1, replayed 2" in replayed.out
    assert run_cli("replay", "--db", db, "--since", "May 2026").code == 2


def test_explain_from_the_ledger_keeps_what_a_cap_exception_lacked(tmp_path):
    samples = tmp_path / "ester.csv"
    samples.write_text("sample_id,unit_id,class,lubricant,oxidation\nE-1,AC-9,screw-compressor,COMP-46-PE,215\n")
    db = tmp_path / "ledger.db"
    assert run_cli("grade", samples, "--rules", ROOT / "rules" / "screw-compressor.yaml", "--db", db).code == 0
    story = run_cli("explain", "E-1", "--db", db)
    assert story.code == 0 and "could not be checked: it lacks an." in " ".join(story.out.split())
    assert run_cli("replay", "--db", db).code == 0


def test_explain_needs_a_ledger_or_samples_and_rules(tmp_path):
    result = run_cli("explain", "T-01")
    assert result.code == 2 and "give --db PATH" in result.err
    assert run_cli("explain", "T-04", "--samples", SAMPLES, "--rules", RULES).code == 0
    missing = run_cli("explain", "T-04", "--db", tmp_path / "none.db")
    assert missing.code == 2 and "no ledger here" in missing.err
    assert not (tmp_path / "none.db").exists()


def test_not_a_ledger_exits_2_and_a_conflicting_row_is_rejected_with_exit_3(tmp_path):
    notes = tmp_path / "notes.db"
    notes.write_text("hello\n")
    result = run_cli("grade", SAMPLES, "--rules", RULES, "--db", notes)
    assert result.code == 2 and "not a sumpwise ledger" in result.err and result.out == ""
    db = tmp_path / "l.db"
    run_cli("grade", SAMPLES, "--rules", RULES, "--db", db)
    changed = tmp_path / "changed.csv"
    changed.write_text(SAMPLES.read_text().replace(",47.5,0.21,13.0,", ",47.5,0.21,6.0,"))
    refused = run_cli("grade", changed, "--rules", RULES, "--db", db)
    assert refused.code == 3 and "1 row(s) rejected: their sample id is already recorded" in refused.err
    assert "row 4 (sample T-04): rejected L001: sample_id: sample T-04 is already recorded (batch 1)" in refused.err
    assert run_cli("grade", changed, "--rules", RULES, "--db", db, "--correction").code == 2  # no --reason
    accepted = run_cli("grade", changed, "--rules", RULES, "--db", db, "--correction", "--reason", "lab re-ran it")
    assert accepted.code == 0 and "1 correction(s)" in accepted.err
    assert run_cli("grade", SAMPLES, "--rules", RULES, "--correction").code == 2


def test_two_runs_at_once_lose_nothing(tmp_path):
    db = tmp_path / "shared.db"
    first, second = _halves(tmp_path)
    slow = _grade_process(first, db, pause=1.5)  # holds the write lock for 1.5 s
    time.sleep(0.3)
    quick = _grade_process(second, db)
    outcomes = [p.communicate(timeout=120) + (p.returncode,) for p in (slow, quick)]
    assert [code for _, _, code in outcomes] == [0, 0], outcomes
    integrity, samples, results, batches = _state(db)
    # 331 rows less the 4 rejected rows of the scenario (rows 71, 118, 190, 248)
    assert (integrity, samples, results, batches) == ("ok", 327, 327, 2)
    assert run_cli("replay", "--db", db).code == 0


def test_a_run_killed_inside_its_transaction_leaves_the_ledger_as_it_was(tmp_path):
    db = tmp_path / "crash.db"
    first, second = _halves(tmp_path)
    assert _grade_process(first, db).wait(timeout=120) == 0
    before = _state(db)
    victim = _grade_process(second, db, pause=30)
    line = victim.stderr.readline()
    assert "pausing 30 s inside the transaction" in line
    victim.send_signal(signal.SIGKILL)
    victim.wait(timeout=30)
    assert _state(db) == before and before[0] == "ok"
    assert _grade_process(second, db).wait(timeout=120) == 0  # the ledger is usable afterwards
    assert _state(db)[1] == 327


def test_demo_records_the_year_in_a_ledger(tmp_path):
    out = tmp_path / "out"
    assert run_cli("demo", "--out", out).code == 0
    db = out / "brackwater.db"
    history = run_cli("history", "ST-1", "--db", db, "--format", "csv")
    grades = [line.split(",")[10] for line in history.out.splitlines()[1:]]
    # scenarios/brackwater/README.md: ST-1 is normal in January and urgent by December.
    assert grades[0] == "normal" and grades[-1] == "urgent" and len(grades) == 27
    assert run_cli("demo", "--out", out).code == 0  # a second run records nothing new
    assert _state(db)[1:] == (327, 327, 1)


def test_a_run_killed_while_building_a_new_ledger_leaves_no_ledger(tmp_path):
    # A new ledger is built in a hidden side file and linked into place only when whole.
    db = tmp_path / "new.db"
    first, _ = _halves(tmp_path)
    victim = _grade_process(first, db, pause=30)
    assert "pausing 30 s inside the transaction" in victim.stderr.readline()
    victim.send_signal(signal.SIGKILL)
    victim.wait(timeout=30)
    assert not db.exists()
    assert [p.name for p in tmp_path.glob(".new.db.building-*")] == [f".new.db.building-{victim.pid}"]
    assert _grade_process(first, db).wait(timeout=120) == 0
    assert _grade_process(first, tmp_path / "reference.db").wait(timeout=120) == 0
    assert _state(db) == _state(tmp_path / "reference.db") == ("ok", 158, 158, 1)  # rows 71 and 118 rejected
