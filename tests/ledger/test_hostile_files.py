"""Ledger files that are damaged, foreign, read-only or not files: exit 2, never a traceback,
and the file left byte for byte as it was.

SQLite's file format (sqlite.org/fileformat.html) is the reference for the header: the
16-byte magic string, the file format write/read versions at offsets 18 and 19 (2 means
WAL), user_version at offset 60 and application_id at offset 68.
"""

from __future__ import annotations

import os
import shutil
import sqlite3
import stat

import pytest

from sumpwise.ledger import store
from tests.conftest import DATA, run_cli

RULES = DATA / "ledger" / "trend-rules.yaml"
SAMPLES = DATA / "ledger" / "samples.csv"
READERS = (("history", "ST-1"), ("explain", "T-04"), ("replay",))


def _ledger(tmp_path):
    db = tmp_path / "ledger.db"
    assert run_cli("grade", SAMPLES, "--rules", RULES, "--db", db).code == 0
    return db


def _every_command(db, tmp_path):
    runs = [run_cli(*command, "--db", db) for command in READERS]
    runs.append(run_cli("report", "--db", db, "--out", tmp_path / "report.html"))
    runs.append(run_cli("grade", SAMPLES, "--rules", RULES, "--db", db))
    runs.append(run_cli("find", "--db", db))
    runs.append(run_cli("rulesets", "--db", db))
    return runs


def test_a_foreign_sqlite_file_is_refused_untouched_and_never_switched_to_wal(tmp_path):
    foreign = tmp_path / "inventory.db"
    with sqlite3.connect(foreign) as conn:
        conn.execute("CREATE TABLE parts (name TEXT)")
        conn.execute("INSERT INTO parts VALUES ('bearing')")
    conn.close()
    before = foreign.read_bytes()
    assert before[18:20] == b"\x01\x01"  # rollback journal, not WAL
    for run in _every_command(foreign, tmp_path):
        assert run.code == 2 and "another kind" in run.err and "Traceback" not in run.err, run.err
    assert foreign.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir() if p.name.startswith("inventory")) == ["inventory.db"]


def test_a_damaged_ledger_exits_2_and_is_left_as_it_was(tmp_path):
    db = _ledger(tmp_path)
    with sqlite3.connect(db) as conn:
        conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    conn.close()
    data = bytearray(db.read_bytes())
    page = store.PAGE_SIZE
    data[page:len(data)] = bytes(range(256)) * ((len(data) - page) // 256) + bytes((len(data) - page) % 256)
    db.write_bytes(bytes(data))
    for run in _every_command(db, tmp_path):
        assert run.code == 2 and "Traceback" not in run.err, run.err
        assert "malformed" in run.err or "not a database" in run.err or "cannot be read" in run.err, run.err
    assert db.read_bytes() == bytes(data)


def test_a_file_that_is_not_sqlite_and_a_folder_exit_2(tmp_path):
    text = tmp_path / "notes.db"
    text.write_text("shift notes\n")
    for run in _every_command(text, tmp_path):
        assert run.code == 2 and "not an SQLite database" in run.err
    assert text.read_text() == "shift notes\n"
    folder = tmp_path / "folder.db"
    folder.mkdir()
    for run in _every_command(folder, tmp_path):
        assert run.code == 2 and "is a folder, not a ledger file" in run.err
    missing = run_cli("grade", SAMPLES, "--rules", RULES, "--db", tmp_path / "no" / "such" / "l.db")
    assert missing.code == 2 and "does not exist" in missing.err


def _pretend_read_only(monkeypatch, folder):
    """As a non-root user would see a read-only folder (root passes every permission check)."""
    real = os.access

    def access(path, mode):
        if mode & os.W_OK and str(path).startswith(str(folder)):
            return False
        return real(path, mode)

    monkeypatch.setattr(store.os, "access", access)


def _ledger_in_one_file(folder):
    """A ledger whose write-ahead log is checkpointed and gone, as an archived copy is kept."""
    db = _ledger(folder)
    with sqlite3.connect(db) as conn:
        conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    conn.close()
    for side in ("-wal", "-shm"):
        (folder / f"ledger.db{side}").unlink(missing_ok=True)
    return db


def test_a_read_only_ledger_is_read_and_writing_to_it_exits_2(tmp_path, monkeypatch):
    db = _ledger_in_one_file(tmp_path)
    before = db.read_bytes()
    _pretend_read_only(monkeypatch, tmp_path)
    for command in READERS:
        run = run_cli(*command, "--db", db)
        assert run.code == 0, run.err
    assert run_cli("report", "--db", db, "--out", tmp_path.parent / "ro-report.html").code == 0
    written = run_cli("grade", SAMPLES, "--rules", RULES, "--db", db)
    assert written.code == 2 and "read-only" in written.err and "reading commands" in written.err
    assert db.read_bytes() == before


@pytest.mark.skipif(os.geteuid() == 0, reason="root ignores file permissions; the test above pretends instead")
def test_a_ledger_in_a_truly_read_only_folder_is_read(tmp_path):
    folder = tmp_path / "archive"
    folder.mkdir()
    db = _ledger_in_one_file(folder)
    db.chmod(stat.S_IRUSR)
    folder.chmod(stat.S_IRUSR | stat.S_IXUSR)
    try:
        for command in READERS:
            assert run_cli(*command, "--db", db).code == 0
        assert run_cli("grade", SAMPLES, "--rules", RULES, "--db", db).code == 2
    finally:
        folder.chmod(stat.S_IRWXU)
        db.chmod(stat.S_IRUSR | stat.S_IWUSR)


def test_an_old_ledger_in_a_read_only_folder_is_read_through_a_migration_in_memory(tmp_path, monkeypatch):
    db = tmp_path / "old.db"
    shutil.copyfile(DATA / "ledger" / "brackwater-v1.db", db)
    before = db.read_bytes()
    _pretend_read_only(monkeypatch, tmp_path)
    history = run_cli("history", "ST-1", "--db", db)
    assert history.code == 0 and "Unit ST-1: 27 sample(s) in the ledger" in history.out
    replayed = run_cli("replay", "--db", db)  # four verdicts re-decided by a later engine (test_migration)
    assert replayed.code == 0 and "integrity: clean" in replayed.out and replayed.out.count("engine change: ") == 4
    assert db.read_bytes() == before  # still schema 2: migrated only in memory
