"""Ledgers written by older engines of this repository, opened by today's; and a careful tamperer.

tests/data/ledger_found7 holds the weekly imports of tests/data/ledger_found6 recorded by
sumpwise 0.2.0 (schema 3), 0.6.0 (schema 5, record format 3) and 0.7.0 (record format 4),
with the JSON Lines records each of those engines wrote in the same runs (see its README).
Those records, written by the recording engine itself and not read back from any ledger, are
the oracle for what the ledger must still say: which grade, which rule-set version, which
rejects, which correction by whom and why.
"""

from __future__ import annotations

import json
import re
import shutil
import sqlite3

import pandas as pd
import pytest

from sumpwise.ledger.schema import chain, fingerprint
from tests.conftest import DATA, run_cli

OLD = DATA / "ledger_found7"
WEEKS = DATA / "ledger_found6"
ENGINES = ("0.2.0", "0.6.0", "0.7.0")
REASON, AUTHOR = "lab re-ran water", "R. Tamsin"  # the correction as the old runs recorded it
# The samples today's engine grades otherwise than every one of these engines recorded: the
# unit-id-spelling caveat (engine 0.8.0) on an id written in another case than the unit's
# previous sample. Grades unchanged; listed as engine changes, never as alterations.
SPELLING_CHANGES = {("BW-0914-01", 2), ("BW-0914-03", 2), ("BW-1005-01", 3), ("BW-1005-02", 3), ("BW-1005-03", 3),
                    ("BW-1005-01", 5)}


def _old(engine: str, tmp_path):
    db = tmp_path / f"weeks-{engine}.db"
    shutil.copyfile(OLD / f"weeks-{engine}.db", db)  # opening migrates in place
    records = [json.loads(line) for line in (OLD / f"records-{engine}.jsonl").read_text().splitlines()]
    return db, records


def _jsonl(result) -> list[dict]:
    assert result.code == 0, result.err
    return [json.loads(line) for line in result.out.splitlines()]


@pytest.mark.parametrize("engine", ENGINES)
def test_an_older_engines_ledger_migrates_in_place_and_replays_clean_with_engine_changes_named(engine, tmp_path):
    db, _ = _old(engine, tmp_path)
    replayed = run_cli("replay", "--db", db)
    assert replayed.code == 0 and "integrity: clean" in replayed.out, replayed.out
    changes = {(m.group(1), int(m.group(2))) for m in
               re.finditer(r"^engine change: (\S+) \(batch (\d+)\): .*unit-id-spelling", replayed.out, re.M)}
    assert changes == SPELLING_CHANGES
    assert not re.search(r"^(integrity|not reproduced): \S+ \(batch", replayed.out, re.M)
    assert "replayed 14 result(s) from 7 batch(es) under 2 rule set(s)" in replayed.out
    assert run_cli("replay", "--db", db, "--strict").code == 3  # the auditor may fail on engine changes
    with sqlite3.connect(db) as conn:
        assert conn.execute("PRAGMA user_version").fetchone()[0] == 5


@pytest.mark.parametrize("engine", ENGINES)
def test_find_on_an_older_ledger_says_what_its_engine_wrote_in_the_same_runs(engine, tmp_path):
    db, records = _old(engine, tmp_path)
    oracle = pd.DataFrame([{"sample_id": r["sample_id"], "grade": r["grade"], "version": str(r["ruleset"]["version"]),
                            "sha256": r["ruleset"]["sha256"]} for r in records])
    every = _jsonl(run_cli("find", "--db", db, "--all-versions", "--format", "jsonl"))
    assert sorted((r["sample_id"], r["grade"], r["version"], r["ruleset_sha256"]) for r in every) == \
        sorted(oracle.itertuples(index=False, name=None))  # every version, none lost, each under its own rule set
    current = oracle.drop_duplicates("sample_id", keep="last")
    found = _jsonl(run_cli("find", "--db", db, "--format", "jsonl"))
    assert sorted((r["sample_id"], r["grade"], r["version"]) for r in found) == \
        sorted(current[["sample_id", "grade", "version"]].itertuples(index=False, name=None))
    corrections = [(r["sample_id"], r["batch"], r["corrects_batch"], r["correction_author"], r["correction_reason"])
                   for r in found if r["corrects_batch"] is not None]
    assert corrections == [("BW-1005-01", 5, 3, AUTHOR, REASON)]


@pytest.mark.parametrize("engine", ENGINES)
def test_rejects_rule_sets_history_and_explain_of_an_older_ledger_lose_nothing(engine, tmp_path):
    db, records = _old(engine, tmp_path)
    rejects = _jsonl(run_cli("find", "--db", db, "--rejects", "--format", "jsonl"))
    # As the runs' own rejects said: ledger_found6/README.md lists these four refused rows.
    assert [(r["batch"], r["row"], r["sample_id"], r["code"]) for r in rejects] == [
        (4, 2, "BW-1012-02", "D004"), (4, 3, "BW-1012-03", "D015"), (7, 2, None, "D002"), (7, 3, "BW-1026-03", "D015")]
    listed = run_cli("rulesets", "--db", db)
    rows = {r[2]: (int(r[4]), int(r[5])) for r in (line.split() for line in listed.out.splitlines()[1:])}
    assert rows == {"1": (6, 6), "2": (8, 7)}  # version 2 recorded BW-1005-01 twice
    exported = run_cli("rulesets", "brackwater-found6@2", "--db", db, "--out", tmp_path / "v2.json")
    assert exported.code == 0 and run_cli("check", tmp_path / "v2.json").code == 0
    history = _jsonl(run_cli("history", "HP-4", "--db", db, "--format", "jsonl"))
    by_record = {r["sample_id"]: (r["grade"], f"brackwater-found6@{r['ruleset']['version']}") for r in records}
    assert [(h["sample_id"], h["grade"], h["ruleset"], h["corrected"]) for h in history] == [
        (sid, *by_record[sid], sid == "BW-1005-01") for sid in
        ("BW-0907-01", "BW-0914-01", "BW-0921-01", "BW-1005-01", "BW-1012-01", "BW-1026-01")]
    told = run_cli("explain", "BW-1005-01", "--db", db)
    assert told.code == 0 and f"This version is a correction by {AUTHOR}: {REASON}." in told.out
    assert f"sumpwise {engine}." in told.out and "water 160 (now 260)" in told.out
    made = run_cli("report", "--db", db, "--out", tmp_path / "report.html")
    assert made.code == 0 and "4 rejected row(s)" in made.err, made.err


def test_the_find_table_marks_a_current_sample_that_is_a_correction(tmp_path):
    """Noticed at the ninth stop: the table listed the correction like any other sample."""
    db, _ = _old("0.7.0", tmp_path)
    table = run_cli("find", "--db", db, "--unit", "HP-4")
    assert table.code == 0
    lines = table.out.splitlines()
    start = lines[0].index("corrects_batch")  # the table's columns are right-aligned under their names
    column = {line.split()[0]: line[start:start + len("corrects_batch")].strip() for line in lines[1:7]}
    assert column == {"BW-0907-01": "", "BW-0914-01": "", "BW-0921-01": "", "BW-1005-01": "3", "BW-1012-01": "",
                      "BW-1026-01": ""}
    assert f"BW-1005-01 (batch 5) is a correction of the version batch 3 recorded, by {AUTHOR}: {REASON}" in table.out
    every = run_cli("find", "--db", db, "--unit", "HP-4", "--all-versions", "--format", "csv")
    assert ",3,5,,,," in every.out and ",5,,3,R. Tamsin,lab re-ran water," in every.out  # batches as integers


# A careful tamperer, with the sqlite3 module, on a ledger today's engine recorded.

RUNS = (("week-2026-09-07.csv", 1, ()), ("week-2026-09-14.csv", 1, ()), ("week-2026-10-05.csv", 2, ()),
        ("correction-2026-10-14.csv", 2, ("--correction", "--reason", REASON, "--author", AUTHOR)))


def _heads(err: str) -> list[str]:
    return re.findall(r"^sumpwise: ledger \S+: head (\d+:[0-9a-f]{64}) ", err, re.M)


@pytest.fixture(scope="module")
def recorded(tmp_path_factory):
    """The ledger after each run (copies), and the head each import printed."""
    folder = tmp_path_factory.mktemp("found7")
    db, copies, heads = folder / "site.db", [], []
    for k, (name, version, extra) in enumerate(RUNS):
        graded = run_cli("grade", WEEKS / name, "--rules", WEEKS / f"rules-v{version}.yaml", "--db", db,
                         "--out", folder / f"run{k}.jsonl", *extra)
        assert graded.code == 0, graded.err
        heads += _heads(graded.err)
        copies.append(folder / f"after{k}.db")
        shutil.copyfile(db, copies[-1])
    return copies, heads


def _copy(recorded, tmp_path, k: int = -1):
    db = tmp_path / "site.db"
    shutil.copyfile(recorded[0][k], db)
    return db


def test_every_import_prints_the_head_replay_prints(recorded, tmp_path):
    copies, heads = recorded
    assert [h.split(":")[0] for h in heads] == ["1", "2", "3", "4"]
    replayed = run_cli("replay", "--db", copies[-1])
    assert replayed.code == 0 and f"--head {heads[-1]}:" in replayed.out
    again = run_cli("grade", WEEKS / "week-2026-09-07.csv", "--rules", WEEKS / "rules-v1.yaml", "--db",
                    _copy(recorded, tmp_path), "--out", tmp_path / "again.jsonl")
    assert "nothing new" in again.err and _heads(again.err) == [heads[-1]]  # the log keeps it every night


def test_the_last_batch_deleted_or_an_older_copy_put_back_shows_only_against_the_printed_head(recorded, tmp_path):
    copies, heads = recorded
    db = _copy(recorded, tmp_path)
    with sqlite3.connect(db) as conn:  # the correction batch, and the mark it left on the version it replaced
        conn.execute("DELETE FROM samples WHERE batch = 4")
        conn.execute("UPDATE samples SET superseded_in = NULL WHERE superseded_in = 4")
        conn.execute("DELETE FROM batches WHERE batch = 4")
    assert run_cli("replay", "--db", db).code == 0  # nothing inside the file can show it
    noted = run_cli("replay", "--db", db, "--head", heads[-1])
    assert noted.code == 3 and "batch 4: the noted head batch is not in the ledger" in noted.out
    shutil.copyfile(copies[2], db)  # a rollback: yesterday's file over today's
    assert run_cli("replay", "--db", db).code == 0
    assert run_cli("replay", "--db", db, "--head", heads[-1]).code == 3
    assert run_cli("replay", "--db", db, "--head", heads[2]).code == 0  # the head of the file it really is


def _recomputed(db, alter) -> None:
    with sqlite3.connect(db, isolation_level=None) as conn:
        conn.execute("PRAGMA foreign_keys = OFF")
        alter(conn)
        chain(conn, 1)  # every digest after it recomputed, as a tamperer with the source would


def test_two_samples_grades_swapped_with_the_chain_recomputed_are_not_reproduced(recorded, tmp_path):
    db = _copy(recorded, tmp_path)

    def swap(conn):
        rows = {sid: conn.execute("SELECT grade, level, shape, vals FROM samples WHERE sample_id = ?", (sid,)).fetchone()
                for sid in ("BW-0907-01", "BW-0907-02")}
        for sid, other in (("BW-0907-01", "BW-0907-02"), ("BW-0907-02", "BW-0907-01")):
            conn.execute("UPDATE samples SET grade = ?, level = ?, shape = ?, vals = ? WHERE sample_id = ?",
                         (*rows[other], sid))
    _recomputed(db, swap)
    replayed = run_cli("replay", "--db", db)
    assert replayed.code == 3 and "integrity: clean" in replayed.out
    assert re.search(r"^not reproduced: BW-0907-01 \(batch 1\): stored watch, replayed normal", replayed.out, re.M)
    assert re.search(r"^not reproduced: BW-0907-02 \(batch 1\): stored normal, replayed watch", replayed.out, re.M)


@pytest.mark.parametrize("edit, alone", [
    (("Water in the hydraulic oil", "Water in the oil"), 0),  # wording only: the grades stand
    (('"watch":200', '"watch":250'), 3),  # a limit: BW-0907-02 (water 240 ppm) re-grades normal
])
def test_a_rule_sets_text_and_fingerprint_changed_together(recorded, tmp_path, edit, alone):
    copies, heads = recorded
    db = _copy(recorded, tmp_path)

    def rewrite(conn):
        sha, text = conn.execute("SELECT sha256, canonical FROM rulesets WHERE version = '1'").fetchone()
        assert edit[0] in text
        new = text.replace(*edit)
        conn.execute("UPDATE rulesets SET sha256 = ?, canonical = ? WHERE sha256 = ?", (fingerprint(new), new, sha))
        conn.execute("UPDATE batches SET ruleset_sha256 = ? WHERE ruleset_sha256 = ?", (fingerprint(new), sha))
    _recomputed(db, rewrite)
    replayed = run_cli("replay", "--db", db)
    assert replayed.code == alone and "integrity: clean" in replayed.out
    if alone:
        assert re.search(r"^not reproduced: BW-0907-02 \(batch 1\): stored watch, replayed normal", replayed.out, re.M)
    noted = run_cli("replay", "--db", db, "--head", heads[-1])
    assert noted.code == 3 and "batch 4: its digest is not the one noted" in noted.out


@pytest.mark.parametrize("version", [0, 4])
def test_a_rewritten_schema_version_is_an_integrity_finding_named_as_such(recorded, tmp_path, version):
    db = _copy(recorded, tmp_path)
    with sqlite3.connect(db) as conn:
        conn.execute(f"PRAGMA user_version = {version}")
    before = db.read_bytes()
    replayed = run_cli("replay", "--db", db)
    assert replayed.code == 3, replayed.out + replayed.err  # it was exit 2, "duplicate column name: grade"
    assert f"integrity: ledger: {db}: the ledger's header gives schema version {version} (PRAGMA user_version) but " \
           f"its tables are those of schema step 5" in " ".join(replayed.out.split())
    listed = run_cli("find", "--db", db)
    assert listed.code == 2 and "its tables are those of schema step 5" in listed.err
    assert db.read_bytes() == before  # refused, left as it was


def test_vacuum_changes_no_digest(recorded, tmp_path):
    copies, heads = recorded
    db = _copy(recorded, tmp_path)
    with sqlite3.connect(db, isolation_level=None) as conn:
        conn.execute("VACUUM")
    replayed = run_cli("replay", "--db", db, "--head", heads[-1])
    assert replayed.code == 0 and "integrity: clean" in replayed.out


def test_rows_reordered_are_caught_from_the_file_alone(recorded, tmp_path):
    db = _copy(recorded, tmp_path)
    with sqlite3.connect(db) as conn:  # two samples of batch 1 trade places (their entry numbers)
        first, second = [e for (e,) in conn.execute("SELECT entry FROM samples WHERE batch = 1 ORDER BY entry LIMIT 2")]
        conn.execute("UPDATE samples SET entry = -1 WHERE entry = ?", (first,))
        conn.execute("UPDATE samples SET entry = ? WHERE entry = ?", (first, second))
        conn.execute("UPDATE samples SET entry = ? WHERE entry = -1", (second,))
    replayed = run_cli("replay", "--db", db)
    assert replayed.code == 3 and "integrity: batch 1: its stored rows no longer match the batch's digest" in replayed.out


def test_explain_keeps_every_corrections_author_and_reason_and_each_versions_rule_set(tmp_path):
    """A sample corrected twice: the middle version was itself a correction (its author and reason
    were dropped from the story), and the first was graded under version 1 of the rule set (the
    story did not say so, beside a current version graded under version 2)."""
    db = tmp_path / "site.db"
    fixed = tmp_path / "fixed-again.csv"
    fixed.write_text((WEEKS / "correction-2026-10-14.csv").read_text().replace(",260,", ",310,"))
    for source, version, extra in ((WEEKS / "week-2026-10-05.csv", 1, ()),
                                   (WEEKS / "correction-2026-10-14.csv", 2,
                                    ("--correction", "--reason", "first fix", "--author", "A. Ferro")),
                                   (fixed, 2, ("--correction", "--reason", "second fix", "--author", "B. Lund"))):
        graded = run_cli("grade", source, "--rules", WEEKS / f"rules-v{version}.yaml", "--db", db,
                         "--out", tmp_path / "out.jsonl", *extra)
        assert graded.code == 0, graded.err
    text = " ".join(run_cli("explain", "BW-1005-01", "--db", db).out.split())
    assert "This version is a correction by B. Lund: second fix." in text
    assert "graded normal (rule set brackwater-found6 version 1), with water 160 (now 310);" in text
    assert ("graded watch (rule set brackwater-found6 version 2), with water 260 (now 310), itself a correction by "
            "A. Ferro: first fix.") in text
    every = _jsonl(run_cli("find", "--db", db, "--all-versions", "--format", "jsonl"))
    assert [(r["batch"], r["superseded_in"], r["corrects_batch"], r["correction_author"]) for r in every
            if r["sample_id"] == "BW-1005-01"] == [(1, 2, None, None), (2, 3, 1, "A. Ferro"), (3, None, 2, "B. Lund")]


def test_the_history_table_says_which_values_are_a_correction_and_whose(tmp_path):
    db, _ = _old("0.6.0", tmp_path)
    table = run_cli("history", "HP-4", "--db", db)
    assert table.code == 0 and f"  BW-1005-01: a correction (batch 5) by {AUTHOR}: {REASON}" in table.out
    rows = _jsonl(run_cli("history", "HP-4", "--db", db, "--format", "jsonl"))
    assert [(r["sample_id"], r["batch"], r["correction_author"], r["correction_reason"]) for r in rows
            if r["corrected"]] == [("BW-1005-01", 5, AUTHOR, REASON)]


def test_a_samples_values_and_verdict_forged_together_show_only_against_the_printed_head(recorded, tmp_path):
    """The limit of what a file can say about itself: water 240 ppm (watch, over rules-v1's 200)
    rewritten as 120 ppm with the normal verdict today's engine gives it, every digest recomputed."""
    copies, heads = recorded
    db = _copy(recorded, tmp_path)

    def forge(conn):
        content, vals = conn.execute("SELECT content, vals FROM samples WHERE sample_id = 'BW-0907-02'").fetchone()
        assert json.loads(content)[3] == 240.0 and json.loads(vals)[0] == 240.0  # water, as the batch stores it
        normal = conn.execute("SELECT shape FROM samples WHERE sample_id = 'BW-0907-01'").fetchone()[0]
        conn.execute("UPDATE samples SET content = ?, grade = 'normal', level = 0, shape = ?, vals = ? "
                     "WHERE sample_id = 'BW-0907-02'",
                     (content.replace("240.0", "120.0"), normal, json.dumps(json.loads(vals)[1:], separators=(",", ":"))))
    _recomputed(db, forge)
    replayed = run_cli("replay", "--db", db)
    assert replayed.code == 0 and "integrity: clean" in replayed.out, replayed.out  # consistent, so not seen
    assert "every result matches its record" in replayed.out
    noted = run_cli("replay", "--db", db, "--head", heads[-1])
    assert noted.code == 3 and "batch 4: its digest is not the one noted" in noted.out
