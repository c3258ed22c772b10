"""Tamper evidence: every stored column altered in turn, a batch deleted, a row inserted.

Both storage forms a ledger holds today are covered: a new ledger (form-3 batches, each
verdict in its sample's row) and a ledger written at schema step 4 (form-2 batches, verdicts
in their own table; tests/data/ledger/brackwater-v4.db) migrated, with a form-3 batch on top.

The alterations are made with sqlite3 from the standard library, behind sumpwise's back,
the way someone with the file and a SQLite shell could; replay must name each one.
"""

from __future__ import annotations

import io
import shutil
import sqlite3

import pytest

import sumpwise
from sumpwise.ledger.audit import replay, replay_lines
from sumpwise.ledger.schema import chain
from sumpwise.ledger.store import Correction, grade_into_ledger, migrate, open_ledger
from sumpwise.version import engine_name
from tests.conftest import DATA, run_cli

RULES = DATA / "ledger" / "trend-rules.yaml"
SAMPLES = DATA / "ledger" / "samples.csv"
TABLES = ("rulesets", "batches", "samples", "verdicts", "shapes", "shape_rules", "rejects")
NEW_TABLES = tuple(t for t in TABLES if t != "verdicts")  # a new ledger keeps every verdict in its sample's row
STEP_4_LEDGER = DATA / "ledger" / "brackwater-v4.db"


def _batch(text: str, name: str):
    return sumpwise.read_samples(io.StringIO(text), name)


@pytest.fixture(scope="module")
def clean(tmp_path_factory):
    """Three batches: one with a rejected row, a correction with reason and author, a conflict."""
    db = tmp_path_factory.mktemp("ledger") / "clean.db"
    ruleset = sumpwise.load_ruleset(RULES)
    header, *rows = SAMPLES.read_text().splitlines()
    bad = "T-99,ST-2,steam-turbine,TEST-46,2026-03-06,1700,not-a-number,0.1,2.0,direct,lab-a,false"
    grade_into_ledger(db, _batch("\n".join([header] + rows[:6] + [bad]) + "\n", "first.csv"), ruleset)
    fixed = rows[3].replace(",13.0,", ",6.0,")
    grade_into_ledger(db, _batch("\n".join([header, fixed] + rows[6:]) + "\n", "second.csv"), ruleset,
                      Correction("oxidation was typed as 13.0", "lab desk"))
    conflict = rows[0].replace(",46.0,", ",46.9,")
    _, third = grade_into_ledger(db, _batch("\n".join([header, conflict]) + "\n", "third.csv"), ruleset)
    assert third.conflicts == 1
    assert replay(db).differences == ()
    return db


@pytest.fixture(scope="module")
def mixed(tmp_path_factory):
    """The step-4 ledger migrated, then a form-3 batch on top: a new sample, a correction of a
    form-2 sample and a rejected row."""
    db = tmp_path_factory.mktemp("ledger") / "mixed.db"
    shutil.copyfile(STEP_4_LEDGER, db)
    ruleset = sumpwise.load_ruleset(RULES)
    header, *rows = SAMPLES.read_text().splitlines()
    later = rows[8].replace("T-09", "T-10").replace("2026-02-06", "2026-03-06").replace(",1300,", ",1800,")
    bad = "T-98,ST-2,steam-turbine,TEST-46,2026-04-06,2000,46.2,x,2.0,direct,lab-a,false"
    _, fourth = grade_into_ledger(db, _batch("\n".join([header, later, rows[4].replace(",2.0,", ",2.2,"), bad]) + "\n",
                                             "fourth.csv"), ruleset, Correction("retyped", "lab desk"))
    assert (fourth.batch, fourth.new, fourth.corrections, fourth.rejected) == (4, 1, 1, 1)
    assert replay(db).differences == ()
    return db


def _schema_columns(tables) -> list[str]:
    """Every column of these tables of a new ledger, read from SQLite itself."""
    conn = sqlite3.connect(":memory:", isolation_level=None)
    migrate(conn)
    return [f"{table}.{row[1]}" for table in tables for row in conn.execute(f"PRAGMA table_info({table})")]


def _altered(value):
    if value is None:
        return 1
    if isinstance(value, int):
        return value + 1000  # clear of every key in use
    if isinstance(value, float):
        return value * 1.5 + 1
    return value + " "


def _copy(clean, tmp_path):
    db = tmp_path / "ledger.db"
    with sqlite3.connect(clean) as source, sqlite3.connect(db) as target:
        source.backup(target)
    return db


def test_the_clean_ledgers_have_every_table_filled(clean, mixed):
    with sqlite3.connect(clean) as conn:
        for table in NEW_TABLES:
            assert conn.execute(f"SELECT count(*) FROM {table}").fetchone()[0] > 0, table
        assert conn.execute("SELECT count(*) FROM verdicts").fetchone()[0] == 0
        assert conn.execute("SELECT count(*) FROM samples WHERE grade IS NULL OR shape IS NULL").fetchone()[0] == 0
    with sqlite3.connect(mixed) as conn:
        for table in TABLES:
            assert conn.execute(f"SELECT count(*) FROM {table}").fetchone()[0] > 0, table
        assert conn.execute("SELECT form, count(*) FROM batches GROUP BY form").fetchall() == [(2, 3), (3, 1)]


def _alter_first(db, stored: str, where: str = "1"):
    """The first row's (of those `where` picks) value of `stored` altered; (before, after)."""
    table, column = stored.split(".")
    with sqlite3.connect(db) as conn:
        key = "rowid" if table != "shape_rules" else "shape"
        first, value = conn.execute(f"SELECT {key}, {column} FROM {table} WHERE {where} ORDER BY {key} "
                                    f"LIMIT 1").fetchone()
        conn.execute(f"UPDATE {table} SET {column} = ? WHERE {key} = ?", (_altered(value), first))
    return value, _altered(value)


@pytest.mark.parametrize("stored", _schema_columns(NEW_TABLES))
def test_altering_any_stored_column_is_caught(clean, tmp_path, stored):
    db = _copy(clean, tmp_path)
    before, after = _alter_first(db, stored)
    assert replay(db).differences, f"{stored}: {before!r} -> {after!r} went unnoticed"


@pytest.mark.parametrize("stored", _schema_columns(TABLES))
def test_altering_any_stored_column_of_a_migrated_step_4_ledger_is_caught(mixed, tmp_path, stored):
    # The first row of each table is a form-2 one: its verdict columns in `samples` are empty.
    db = _copy(mixed, tmp_path)
    before, after = _alter_first(db, stored)
    assert replay(db).differences, f"{stored}: {before!r} -> {after!r} went unnoticed"


@pytest.mark.parametrize("column", ["grade", "level", "shape", "vals", "sample_id", "content", "corrects"])
def test_altering_a_form_3_sample_of_a_migrated_ledger_is_caught(mixed, tmp_path, column):
    db = _copy(mixed, tmp_path)
    before, after = _alter_first(db, f"samples.{column}", "batch = 4")
    found = replay(db).differences
    assert any(d.batch == 4 for d in found), f"{column}: {before!r} -> {after!r} went unnoticed"


def test_a_form_2_verdict_copied_into_its_sample_row_is_caught(mixed, tmp_path):
    # Readers take a form-2 sample's verdict from `verdicts`; a verdict put in its row is named anyway.
    db = _copy(mixed, tmp_path)
    with sqlite3.connect(db) as conn:
        conn.execute("UPDATE samples SET grade = 'urgent' WHERE entry = (SELECT min(entry) FROM samples)")
    found = [(d.batch, d.what) for d in replay(db).differences]
    assert (1, "a verdict in the sample's row, which its batch's storage form keeps in the verdicts table "
               "(added?)") in found


def test_a_deleted_batch_is_caught(clean, tmp_path):
    db = _copy(clean, tmp_path)
    with sqlite3.connect(db) as conn:
        conn.execute("PRAGMA foreign_keys = OFF")
        conn.execute("DELETE FROM verdicts WHERE entry IN (SELECT entry FROM samples WHERE batch = 2)")
        conn.execute("DELETE FROM samples WHERE batch = 2")
        conn.execute("UPDATE samples SET superseded_in = NULL WHERE superseded_in = 2")
        conn.execute("DELETE FROM rejects WHERE batch = 2")
        conn.execute("DELETE FROM batches WHERE batch = 2")
    found = [d for d in replay(db).differences if d.batch == 3]
    assert any("the chain is broken" in d.what for d in found)


def test_the_newest_batch_deleted_changes_the_head_a_reader_noted(clean, tmp_path):
    before = replay(clean)
    db = _copy(clean, tmp_path)
    with sqlite3.connect(db) as conn:
        conn.execute("DELETE FROM rejects WHERE batch = 3")
        conn.execute("DELETE FROM batches WHERE batch = 3")
    after = replay(db)
    assert after.differences == ()  # nothing inside the file can show it ...
    assert (after.last_batch, after.head) != (before.last_batch, before.head)  # ... the noted head does
    assert f"ledger head: batch {before.last_batch}, digest {before.head}" in "\n".join(replay_lines(before))
    noted = run_cli("replay", "--db", db, "--head", f"{before.last_batch}:{before.head}")  # the auditor's note
    assert noted.code == 3 and f"batch {before.last_batch}: the noted head batch is not in the ledger" in noted.out


def test_an_inserted_sample_is_caught(clean, tmp_path):
    db = _copy(clean, tmp_path)
    with sqlite3.connect(db) as conn:
        columns = [row[1] for row in conn.execute("PRAGMA table_info(samples)")
                   if row[1] not in ("entry", "grade", "level", "shape", "vals")]  # a sample with no verdict
        picked = ["'T-50'" if c == "sample_id" else "replace(content, 'T-02', 'T-50')" if c == "content" else c
                  for c in columns]
        conn.execute(f"INSERT INTO samples ({', '.join(columns)}) SELECT {', '.join(picked)} FROM samples "
                     f"WHERE sample_id = 'T-02'")
    found = [(d.sample_id, d.batch, d.what) for d in replay(db).differences]
    assert (None, 1, "its stored rows no longer match the batch's digest (a row altered, added or deleted after "
                     "recording)") in found
    assert (None, 1, "it holds 7 sample(s) but recorded 6") in found
    assert ("T-50", 1, "its verdict is missing (deleted, or its shape is gone)") in found


def test_an_inserted_verdict_and_rule_set_are_caught(clean, tmp_path):
    db = _copy(clean, tmp_path)
    with sqlite3.connect(db) as conn:
        conn.execute("INSERT INTO verdicts SELECT entry + 1000, grade, level, shape, vals FROM samples LIMIT 1")
        conn.execute("INSERT INTO rulesets SELECT 'f' || substr(sha256, 2), ruleset_id, version, canonical "
                     "FROM rulesets")
    whats = [d.what for d in replay(db).differences]
    assert any(w.startswith("a verdict of no sample") for w in whats)
    assert any(w.startswith("a stored rule set that no batch was graded with") for w in whats)


def test_a_verdicts_row_added_for_a_form_3_sample_is_caught(clean, tmp_path):
    # Form 3 keeps the verdict in the sample's row; digest 3 counts any `verdicts` row of its samples.
    db = _copy(clean, tmp_path)
    with sqlite3.connect(db) as conn:
        conn.execute("INSERT INTO verdicts SELECT entry, 'normal', 0, shape, vals FROM samples WHERE batch = 2 "
                     "LIMIT 1")
    found = [(d.batch, d.what) for d in replay(db).differences]
    assert (2, "its stored rows no longer match the batch's digest (a row altered, added or deleted after "
               "recording)") in found


def test_replay_reads_without_writing(clean, tmp_path):
    db = _copy(clean, tmp_path)
    conn = open_ledger(db)
    conn.close()
    before = db.read_bytes()
    replay(db)
    assert db.read_bytes() == before


def _forge(db, engine: str, rechain: bool) -> None:
    """T-04's current verdict (not normal) rewritten as normal, the batch's engine string set to
    `engine`; with `rechain`, every digest recomputed as someone who knows the definition could."""
    with sqlite3.connect(db, isolation_level=None) as conn:
        entry, batch = conn.execute("SELECT entry, batch FROM samples WHERE sample_id = 'T-04' "
                                    "AND superseded_in IS NULL").fetchone()
        conn.execute("UPDATE samples SET grade = 'normal', level = 0 WHERE entry = ?", (entry,))
        conn.execute("UPDATE batches SET engine = ? WHERE batch = ?", (engine, batch))
        if rechain:
            chain(conn, 1)


def test_a_forged_grade_under_a_faked_older_engine_is_caught_by_the_digest(clean, tmp_path):
    db = _copy(clean, tmp_path)
    _forge(db, "sumpwise 0.0.1", rechain=False)
    report = replay(db)
    assert [d.what for d in report.integrity if d.sample_id is None][:1] == [
        "its stored rows no longer match the batch's digest (a row altered, added or deleted after recording)"]
    assert report.engine_changes == ()  # a batch whose digest fails never excuses a difference as an engine change
    assert [d.sample_id for d in report.reproducibility] == ["T-04"]
    run = run_cli("replay", "--db", db)
    assert run.code == 3 and "integrity: 1 finding(s)" in run.out


def test_a_difference_under_the_recording_engine_fails_even_with_the_chain_recomputed(clean, tmp_path):
    db = _copy(clean, tmp_path)
    _forge(db, engine_name(), rechain=True)
    report = replay(db)
    assert report.integrity == ()  # the chain was made to hold ...
    assert [d.sample_id for d in report.reproducibility] == ["T-04"]  # ... but the same engine grades it alert
    assert run_cli("replay", "--db", db).code == 3


def test_a_recomputed_chain_shows_against_the_noted_head_and_strict_fails_on_engine_changes(clean, tmp_path):
    noted = replay(clean)
    db = _copy(clean, tmp_path)
    _forge(db, "sumpwise 0.0.1", rechain=True)
    report = replay(db)
    # Inside the file this now reads as an older engine's verdict: only the head noted elsewhere, or
    # --strict, tells it from an engine change.
    assert report.differences == () and [d.sample_id for d in report.engine_changes] == ["T-04"]
    assert run_cli("replay", "--db", db).code == 0
    assert run_cli("replay", "--db", db, "--strict").code == 3
    head = f"{noted.last_batch}:{noted.head}"
    checked = run_cli("replay", "--db", db, "--head", head)
    assert checked.code == 3 and f"batch {noted.last_batch}: its digest is not the one noted" in checked.out
    assert run_cli("replay", "--db", clean, "--head", head).code == 0
    assert run_cli("replay", "--db", clean, "--head", "3:abc").code == 2  # a usage error, not a finding


@pytest.mark.parametrize("form", [1, 2, 4])
def test_a_batch_passed_off_as_another_storage_form_is_caught(clean, tmp_path, form):
    # Form 1 would verify the batch under digest 1 and read its values as JSON objects, form 2
    # read its verdicts from `verdicts`; an unknown form is verified under digest 3: either way
    # the digest (which covers the form) no longer holds, and nothing crashes.
    db = _copy(clean, tmp_path)
    with sqlite3.connect(db) as conn:
        conn.execute("UPDATE batches SET form = ? WHERE batch = 2", (form,))
    run = run_cli("replay", "--db", db)
    assert run.code == 3, run.err
    assert "integrity: batch 2: its stored rows no longer match the batch's digest" in run.out


def test_digest_2_spells_different_columns_differently():
    # A text column is joined by NUL only when the join splits back into the same values; any
    # other column is JSON (the standard json module). Values moved across a row boundary, or a
    # text that looks like a number, must not spell alike.
    from sumpwise.ledger.schema import _spelled
    columns = (["a\x00b", "c"], ["a", "b\x00c"], ["a", "b", "c"], ["ab", "c"], ["1", "2"], [1, 2], ["1", None],
               [None, "1"], [], [""], ["", ""], [1.0, 2.0], [True, False], ["null"], [None])
    spelled = [_spelled(list(column)) for column in columns]
    assert len(set(spelled)) == len(columns)
    assert _spelled(["a", "b"]) == b"Sa\x00b\x1f" and _spelled(["a", None]) == b'J["a", null]\x1f'


@pytest.mark.parametrize("shape", [None, "sha", 10_000, "x", 2.5, "1"])
def test_replay_reads_a_batch_as_the_frozen_digest_queries_do(clean, tmp_path, shape):
    # Replay finds a form-3 batch's used shapes from the shapes table read once, and counts its
    # filled reading columns from the rows it reads (schema.DIGEST_3_FILLED) while `verdicts` is
    # empty: each must give what the frozen digest-3 query gives, whatever a sample's shape id was
    # altered to (None: a reading column filled instead; "sha": a fingerprint).
    from sumpwise.ledger.schema import DIGEST_3_QUERIES
    from sumpwise.ledger.store import batch_entries
    db = _copy(clean, tmp_path)
    with sqlite3.connect(db) as conn:
        if shape is None:
            conn.execute("UPDATE samples SET kv40 = 46.0 WHERE entry = (SELECT min(entry) FROM samples WHERE batch = 2)")
        elif shape == "sha":
            conn.execute("UPDATE samples SET content_sha256 = 0 WHERE entry = (SELECT min(entry) FROM samples "
                         "WHERE batch = 2)")
        else:
            conn.execute("UPDATE samples SET shape = ? WHERE entry = (SELECT min(entry) FROM samples WHERE batch = 2)",
                         (shape,))
        shapes = {row[0]: row[1:] for row in conn.execute("SELECT shape, sha256, facts FROM shapes")}
        for batch in (1, 2, 3):
            frame, columns = batch_entries(conn, batch, 3, shapes)
            joined, joined_columns = batch_entries(conn, batch, 3)
            used = conn.execute(DIGEST_3_QUERIES[3], (batch,)).fetchall()
            assert columns["used_shapes"] == joined_columns["used_shapes"] == [[k for k, _ in used],
                                                                              [sha for _, sha in used]]
            assert frame["facts"].equals(joined["facts"])
            filled = columns["filled"].tolist()
            assert (len(filled) - filled.count(None),) == conn.execute(DIGEST_3_QUERIES[2], (batch,)).fetchone()
            if batch == 2:
                assert len(filled) - filled.count(None) == (1 if shape in (None, "sha") else 0)
    assert replay(db).differences


@pytest.mark.parametrize("alteration", [
    "UPDATE samples SET superseded_in = 2 WHERE entry = 2",  # marked as corrected, by no correction
    "UPDATE samples SET corrects = 1 WHERE entry = (SELECT max(entry) FROM samples)",  # corrects a current sample
    "UPDATE samples SET corrects = 'x' WHERE corrects IS NOT NULL",
    "UPDATE samples SET superseded_in = 3.5 WHERE superseded_in IS NOT NULL",
    "DELETE FROM batches WHERE batch = 2",
])
def test_the_ledger_wide_checks_find_what_their_sql_finds(clean, tmp_path, alteration):
    # Replay finds the samples of no batch and the corrections that do not pair up in one pass over
    # the samples; each finding must be what these queries (the checks as SQL) return, in order.
    from sumpwise.ledger.audit import _ledger_findings
    queries = (
        ("SELECT s.sample_id, s.batch FROM samples s LEFT JOIN batches b ON b.batch = s.batch WHERE b.batch IS NULL "
         "ORDER BY s.entry", "recorded in a batch that is not in the ledger"),
        ("SELECT s.sample_id, s.batch FROM samples s WHERE s.superseded_in IS NOT NULL AND (s.entry, s.superseded_in) "
         "NOT IN (SELECT c.corrects, c.batch FROM samples c WHERE c.corrects IS NOT NULL) ORDER BY s.entry",
         "marked as corrected, but no correction"),
        ("SELECT c.sample_id, c.batch FROM samples c WHERE c.corrects IS NOT NULL AND NOT EXISTS "
         "(SELECT 1 FROM samples s WHERE s.entry = c.corrects AND s.superseded_in = c.batch) ORDER BY c.entry",
         "a correction whose corrected version"),
    )
    db = _copy(clean, tmp_path)
    with sqlite3.connect(db) as conn:
        conn.execute("PRAGMA foreign_keys = OFF")
        conn.execute(alteration)
        found = _ledger_findings(conn)
        expected = [(sid, batch, what) for query, what in queries for sid, batch in conn.execute(query).fetchall()]
    got = [(d.sample_id, d.batch, what) for d in found for _, what in queries if d.what.startswith(what)]
    assert got == expected and expected


@pytest.mark.parametrize("fork", [True, False])
def test_the_digest_computed_beside_the_re_grade_or_here_catches_the_same(clean, tmp_path, monkeypatch, fork):
    # Replay computes a form-3 batch's digest in another process while it re-grades the batch, and
    # here where no process can be had: the findings are the same, the digest's first in its batch.
    from sumpwise.ledger import aside
    monkeypatch.setattr(aside, "two_processes_possible", lambda: fork)
    db = _copy(clean, tmp_path)
    assert replay(db).differences == ()
    with sqlite3.connect(db) as conn:
        conn.execute("UPDATE samples SET vals = replace(vals, 'false', 'true') WHERE sample_id = 'T-02'")
    found = replay(db).differences
    assert [d.what for d in found][0].startswith("its stored rows no longer match the batch's digest")
    assert {d.batch for d in found} == {1} and any(d.sample_id == "T-02" for d in found)
