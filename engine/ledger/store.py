"""The ledger: an SQLite file that remembers every sample, every verdict and every rule set used.

All of sumpwise's SQLite I/O lives here. A graded batch is recorded in one transaction
(BEGIN IMMEDIATE, so two runs on one file take turns instead of interleaving), in WAL
mode so readers never wait for a writer. A sample is stored with its input values as
canonical JSON and that text's SHA-256: the same sample with the same content adds
nothing; the same id with other content is refused unless recorded as a correction,
which keeps both. The schema is versioned (PRAGMA user_version) and migrated step by
step; a file that is not a ledger, or is from a newer sumpwise, is refused, never
recreated.
"""

from __future__ import annotations

import hashlib
import json
import os
import re
import sqlite3
import sys
import time
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pandas as pd

from sumpwise.version import engine_name
from sumpwise.results.pipeline import grade_batch
from sumpwise.vocabulary.measures import TREND_BASES
from sumpwise.vocabulary.problems import InputError
from sumpwise.render.jsonl import dumps, jsonl_lines
from sumpwise.results.records import GradedBatch
from sumpwise.ruleset.model import RuleSet
from sumpwise.intake.samples import SampleBatch
from sumpwise.derive.cleanliness import read_cleanliness_codes
from sumpwise.derive.trends import CHAIN_COLUMNS, read_oil_changes

DEFAULT_PATH = "sumpwise.db"
APPLICATION_ID = 0x53574C47  # "SWLG": marks the file as a sumpwise ledger
SCHEMA_VERSION = 2
PAGE_SIZE = 16384  # bytes; a new ledger only (SQLite keeps a file's page size): bulk imports write faster
BUSY_SECONDS = 60.0  # how long a run waits for another run's transaction before giving up
_BEGIN_TRIES = 5
PAUSE_VARIABLE = "SUMPWISE_LEDGER_TEST_PAUSE"  # tests only: seconds to wait inside the write transaction

_NEEDS_ESCAPE = re.compile(r'["\\\x00-\x1f\x7f\u2028\u2029]')
_VALUE_COLUMNS = ", ".join(f"{base} REAL" for base in TREND_BASES)

# Step n brings a ledger from schema version n - 1 to n. Never edit a step once released: add one.
MIGRATIONS = (
    # 1: the tables.
    f"""
    CREATE TABLE rulesets (
        sha256 TEXT PRIMARY KEY,
        ruleset_id TEXT NOT NULL,
        version TEXT NOT NULL,
        canonical TEXT NOT NULL
    );
    CREATE TABLE batches (
        batch INTEGER PRIMARY KEY,
        recorded_at TEXT NOT NULL,
        source TEXT NOT NULL,
        ruleset_sha256 TEXT NOT NULL REFERENCES rulesets(sha256),
        engine TEXT NOT NULL,
        columns TEXT NOT NULL,
        record_tail TEXT NOT NULL,
        rows_read INTEGER NOT NULL,
        new_samples INTEGER NOT NULL,
        known_samples INTEGER NOT NULL,
        corrections INTEGER NOT NULL
    );
    CREATE TABLE samples (
        entry INTEGER PRIMARY KEY,
        batch INTEGER NOT NULL REFERENCES batches(batch),
        sample_id TEXT NOT NULL,
        unit_id TEXT,
        class TEXT,
        sampled_on TEXT,
        oil_hours REAL,
        oil_changed INTEGER NOT NULL,
        method TEXT NOT NULL,
        lab TEXT,
        {_VALUE_COLUMNS},
        content TEXT NOT NULL,
        content_sha256 TEXT NOT NULL,
        corrects INTEGER REFERENCES samples(entry),
        superseded_in INTEGER REFERENCES batches(batch)
    );
    CREATE UNIQUE INDEX samples_current ON samples(sample_id) WHERE superseded_in IS NULL;
    CREATE TABLE results (
        entry INTEGER PRIMARY KEY REFERENCES samples(entry),
        grade TEXT NOT NULL,
        level INTEGER,
        record TEXT NOT NULL
    );
    """,
    # 2: indexes that keep history and explain fast on a large ledger.
    """
    CREATE INDEX samples_unit ON samples(unit_id, sampled_on);
    CREATE INDEX samples_sample ON samples(sample_id);
    CREATE INDEX samples_batch ON samples(batch);
    """,
)


class LedgerError(InputError):
    """A ledger file that cannot be used as one, or a batch the ledger refuses."""


@dataclass(frozen=True)
class Recorded:
    """What one grade run added to the ledger."""

    batch: int | None  # None when nothing was new
    new: int
    known: int
    corrections: int


def open_ledger(path, create: bool = True) -> sqlite3.Connection:
    """A connection to a ledger, migrated to SCHEMA_VERSION; refuse anything that is not one."""
    path = Path(path)
    if not path.exists() and not create:
        raise LedgerError(f"{path}: no ledger here (grade with --db {path} first)")
    if path.exists() and path.stat().st_size:
        with open(path, "rb") as head:
            if head.read(16) != b"SQLite format 3\x00":
                raise LedgerError(f"{path}: not a sumpwise ledger: the file is not an SQLite database")
    try:
        conn = sqlite3.connect(path, timeout=BUSY_SECONDS, isolation_level=None)
        conn.execute(f"PRAGMA page_size={PAGE_SIZE}")  # before WAL; no effect on an existing database
        conn.execute("PRAGMA journal_mode=WAL")
        conn.execute("PRAGMA synchronous=NORMAL")  # WAL: a crash never corrupts; power loss may drop the last batch
        conn.execute("PRAGMA foreign_keys=ON")
        _check_and_migrate(conn, path)
    except sqlite3.DatabaseError as exc:
        raise LedgerError(f"{path}: not a usable sumpwise ledger: {exc}") from None
    return conn


def _identity(conn: sqlite3.Connection) -> tuple[int, int, int]:
    app = conn.execute("PRAGMA application_id").fetchone()[0]
    version = conn.execute("PRAGMA user_version").fetchone()[0]
    tables = conn.execute("SELECT count(*) FROM sqlite_master").fetchone()[0]
    return app, version, tables


def _check_and_migrate(conn: sqlite3.Connection, path: Path) -> None:
    app, version, tables = _identity(conn)
    fresh = app == 0 and version == 0 and tables == 0
    if not fresh and app != APPLICATION_ID:
        raise LedgerError(f"{path}: not a sumpwise ledger: it is an SQLite database of another kind "
                          f"(application id {app:#x}, {tables} schema object(s)); sumpwise will not change it")
    if version > SCHEMA_VERSION:
        raise LedgerError(f"{path}: the ledger has schema version {version}, newer than this sumpwise "
                          f"understands ({SCHEMA_VERSION}); use a newer sumpwise")
    if version < SCHEMA_VERSION:
        migrate(conn)


def migrate(conn: sqlite3.Connection, to: int = SCHEMA_VERSION) -> None:
    """Apply the missing steps in one transaction; another process may have done it meanwhile."""
    begin(conn)
    try:
        version = conn.execute("PRAGMA user_version").fetchone()[0]
        for step in range(version, to):
            for statement in MIGRATIONS[step].split(";"):
                if statement.strip():
                    conn.execute(statement)
        conn.execute(f"PRAGMA application_id = {APPLICATION_ID}")
        conn.execute(f"PRAGMA user_version = {max(version, to)}")
        conn.execute("COMMIT")
    except BaseException:
        conn.execute("ROLLBACK")
        raise


def begin(conn: sqlite3.Connection) -> None:
    """Take the write lock, waiting (busy timeout) and retrying while another run holds it."""
    for attempt in range(_BEGIN_TRIES):
        try:
            conn.execute("BEGIN IMMEDIATE")
            return
        except sqlite3.OperationalError as exc:
            if "locked" not in str(exc) and "busy" not in str(exc):
                raise
            if attempt == _BEGIN_TRIES - 1:
                raise LedgerError(f"the ledger stayed busy for {BUSY_SECONDS * _BEGIN_TRIES:.0f} s: another "
                                  f"run is writing to it; try again when it has finished") from None
            time.sleep(0.1 * (attempt + 1))


# -- recording a graded batch ------------------------------------------------------------------

def sample_contents(frame: pd.DataFrame, block: int = 50_000) -> np.ndarray:
    """Each row's input values as canonical JSON (sorted keys, missing values left out), column-wise.

    Each column gives every row one piece, `"name": value, ` or "" where the value is missing,
    each distinct value spelled once; a block of rows' pieces is joined in one pass and split
    at the row ends (blocks keep each joined text small, which keeps this linear in the rows).
    """
    n = len(frame)
    pieces = [np.full(n, "{", dtype=object)]
    pieces += [_content_pieces(name, frame[name]) for name in sorted(frame.columns)]
    pieces.append(np.full(n, "}\n", dtype=object))
    table = np.stack(pieces, axis=1)
    contents = np.empty(n, dtype=object)
    for start in range(0, n, block):
        text = "".join(table[start:start + block].ravel().tolist())
        # A raw newline only ends a row (JSON escapes it elsewhere), so ", }\n" is always a row's trailing comma.
        contents[start:start + block] = text.replace(", }\n", "}\n").split("\n")[:-1]
    return contents


def _content_pieces(name: str, column: pd.Series) -> np.ndarray:
    key = json.dumps(name, ensure_ascii=False) + ": "
    if column.dtype == bool:
        return np.array([key + "false, ", key + "true, "], dtype=object)[column.to_numpy().astype(np.intp)]
    if column.dtype.kind in "fiu":
        values = column.to_numpy(dtype=float)
        # Factorized by bit pattern, so -0.0 keeps its own spelling; missing and infinite values are left out.
        codes, uniques = pd.factorize(np.where(np.isfinite(values), values, np.nan).view(np.int64))
        spelled = [key + repr(v) + ", " if np.isfinite(v) else "" for v in uniques.view(float).tolist()]
        return np.array(spelled + [""], dtype=object)[codes]
    values = column.astype(object)
    present = values.notna().to_numpy()
    codes, uniques = pd.factorize(values.to_numpy(dtype=object))
    if not all(type(u) is str for u in uniques):  # 1, 1.0 and True factorize alike but are spelled apart
        codes, uniques = pd.factorize(values.where(present, "").astype(str).to_numpy(dtype=object))
    codes[~present] = -1
    uniques = np.asarray(uniques, dtype=object)
    if _NEEDS_ESCAPE.search("".join(uniques)):
        spelled = np.array([key + json.dumps(u, ensure_ascii=False) + ", " for u in uniques], dtype=object)
    else:
        spelled = key + '"' + uniques + '", '
    return np.append(spelled, "").astype(object)[codes]


def _fingerprints(contents: np.ndarray) -> np.ndarray:
    return np.array(list(map(fingerprint, contents.tolist())), dtype=object)


def _nullable(values: np.ndarray) -> list:
    """Values ready to bind: SQLite itself stores a NaN float as NULL, so floats go as they are."""
    values = np.asarray(values)
    if values.dtype.kind == "f":
        return values.tolist()
    return pd.Series(values, dtype=object).where(pd.notna(values), None).tolist()


def _fill_temp(conn: sqlite3.Connection, table: str, values) -> None:
    conn.execute(f"CREATE TEMP TABLE IF NOT EXISTS {table} (value TEXT PRIMARY KEY)")
    conn.execute(f"DELETE FROM {table}")
    conn.executemany(f"INSERT OR IGNORE INTO {table} VALUES (?)", ((v,) for v in values if v is not None))


def _current_entries(conn: sqlite3.Connection, sample_ids) -> pd.DataFrame:
    """The current entries of these ids: one join on a temporary table, skipped on an empty ledger."""
    columns = ["sample_id", "entry", "content_sha256", "batch"]
    if conn.execute("SELECT NOT EXISTS (SELECT 1 FROM samples)").fetchone()[0]:
        return pd.DataFrame({name: pd.Series(dtype=object) for name in columns})
    _fill_temp(conn, "wanted_ids", sample_ids)
    rows = conn.execute("SELECT s.sample_id, s.entry, s.content_sha256, s.batch FROM samples s "
                        "JOIN temp.wanted_ids w ON s.sample_id = w.value WHERE s.superseded_in IS NULL").fetchall()
    return pd.DataFrame(rows, columns=columns)


def history_frame(conn: sqlite3.Connection, units, before_batch: int | None = None) -> pd.DataFrame:
    """Earlier samples of `units` as trends read them (trends.CHAIN_COLUMNS and the trend bases).

    With `before_batch`, the ledger as it stood when that batch was recorded (for replay).
    """
    _fill_temp(conn, "wanted_units", units)
    columns = list(CHAIN_COLUMNS) + list(TREND_BASES)
    sql = (f"SELECT {', '.join('s.' + c for c in columns)} FROM samples s "
           f"JOIN temp.wanted_units u ON s.unit_id = u.value ")
    if before_batch is None:
        rows = conn.execute(sql + "WHERE s.superseded_in IS NULL ORDER BY s.entry").fetchall()
    else:
        rows = conn.execute(sql + "WHERE s.batch < ? AND (s.superseded_in IS NULL OR s.superseded_in >= ?) "
                                  "ORDER BY s.entry", (before_batch, before_batch)).fetchall()
    frame = pd.DataFrame(rows, columns=columns)
    frame["oil_changed"] = frame["oil_changed"].astype(bool)
    for name in ("oil_hours",) + TREND_BASES:
        frame[name] = pd.to_numeric(frame[name], errors="coerce").astype(float)
    for name in ("sample_id", "unit_id", "sampled_on", "method", "lab"):
        frame[name] = frame[name].astype(object).where(frame[name].notna(), None)
    return frame


def _conflict_message(path, batch: SampleBatch, conflicts: pd.DataFrame) -> str:
    rows = pd.Series(batch.frame.index, index=batch.frame["sample_id"].to_numpy(dtype=object))
    shown = [f"{sid} (row {rows[sid]}, recorded in batch {b})" for sid, b in
             zip(conflicts["sample_id"][:5], conflicts["batch"][:5])]
    more = f" and {len(conflicts) - 5} more" if len(conflicts) > 5 else ""
    return (f"{path}: {len(conflicts)} sample id(s) of {batch.source} are already in the ledger with different "
            f"values: {', '.join(shown)}{more}. Nothing was recorded. If the new values are a correction, "
            f"run again with --correction to record them as the current version (the old one is kept)")


def grade_into_ledger(path, batch: SampleBatch, ruleset: RuleSet, correction: bool = False
                      ) -> tuple[GradedBatch, Recorded]:
    """Grade `batch` after the ledger's earlier samples of its units and record it, all or nothing."""
    conn = open_ledger(path)
    try:
        begin(conn)
        try:
            graded, recorded = _record(conn, path, read_cleanliness_codes(read_oil_changes(batch)), ruleset,
                                       correction)
            _test_pause()
            conn.execute("COMMIT")
        except BaseException:
            conn.execute("ROLLBACK")
            raise
    finally:
        conn.close()
    return graded, recorded


def _test_pause() -> None:
    seconds = float(os.environ.get(PAUSE_VARIABLE, "0") or 0)
    if seconds > 0:
        sys.stderr.write(f"sumpwise: ledger: pausing {seconds:g} s inside the transaction ({PAUSE_VARIABLE})\n")
        sys.stderr.flush()
        time.sleep(seconds)


def _record(conn, path, batch: SampleBatch, ruleset: RuleSet, correction: bool) -> tuple[GradedBatch, Recorded]:
    frame = batch.frame
    ids = frame["sample_id"].to_numpy(dtype=object)
    contents = sample_contents(frame)
    shas = _fingerprints(contents)
    stored = _current_entries(conn, ids)
    by_id = stored.set_index("sample_id")
    stored_sha = by_id["content_sha256"].reindex(ids).to_numpy(dtype=object)
    known = pd.notna(stored_sha) & (stored_sha == shas)
    differs = pd.notna(stored_sha) & ~known
    if differs.any() and not correction:
        raise LedgerError(_conflict_message(path, batch, stored[stored["sample_id"].isin(ids[differs])]))

    units = pd.unique(frame["unit_id"].dropna().to_numpy(dtype=object)) if "unit_id" in frame else []
    history = history_frame(conn, units)
    history = history[~history["sample_id"].isin(ids)]
    graded = grade_batch(batch, ruleset, history)
    fresh = ~known
    if not fresh.any():
        return graded, Recorded(None, 0, int(known.sum()), 0)

    conn.execute("INSERT OR IGNORE INTO rulesets VALUES (?, ?, ?, ?)",
                 (ruleset.sha256, ruleset.id, json.dumps(ruleset.version), ruleset.canonical))
    tail = record_tail(ruleset)
    cursor = conn.execute(
        "INSERT INTO batches (recorded_at, source, ruleset_sha256, engine, columns, record_tail, rows_read, "
        "new_samples, known_samples, corrections) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
        (datetime.now(timezone.utc).isoformat(timespec="seconds"), batch.source, ruleset.sha256, engine_name(),
         json.dumps(list(frame.columns)), tail, batch.rows_read, int(fresh.sum() - differs.sum()), int(known.sum()),
         int(differs.sum())))
    number = cursor.lastrowid
    corrected = by_id["entry"].reindex(ids[differs]).astype(int).tolist()
    conn.executemany("UPDATE samples SET superseded_in = ? WHERE entry = ?", ((number, e) for e in corrected))

    measured = graded.measured
    rows = np.flatnonzero(fresh)
    corrects = np.full(len(frame), None, dtype=object)
    corrects[differs] = corrected
    flags = frame["oil_changed"].to_numpy(dtype=bool) if "oil_changed" in frame else np.zeros(len(frame), bool)
    columns = [[number] * len(rows)]
    columns += [_nullable(measured[name].to_numpy()[rows]) for name in
                ("sample_id", "unit_id", "class", "sampled_on", "oil_hours")]
    columns.append(flags[rows].astype(int).tolist())
    columns += [_nullable(measured[name].to_numpy()[rows]) for name in ("method", "lab") + TREND_BASES]
    columns += [contents[rows].tolist(), shas[rows].tolist(), corrects[rows].tolist()]
    names = ("batch", "sample_id", "unit_id", "class", "sampled_on", "oil_hours", "oil_changed", "method", "lab",
             *TREND_BASES, "content", "content_sha256", "corrects")
    first = conn.execute("SELECT coalesce(max(entry), 0) + 1 FROM samples").fetchone()[0]
    conn.executemany(f"INSERT INTO samples ({', '.join(names)}) VALUES ({', '.join('?' * len(names))})",
                     zip(*columns))

    entries = np.full(len(frame), -1, dtype=np.int64)
    entries[rows] = np.arange(first, first + len(rows))
    grades = np.array(graded.grades(), dtype=object)
    levels = np.where(graded.outcome.level >= 0, graded.outcome.level, np.nan)
    start = 0
    for block in jsonl_lines(graded, drop_tail=tail):
        heads = block.split("\n")
        heads.pop()
        span = np.arange(start, start + len(heads))
        start += len(heads)
        keep = fresh[span]
        if not keep.all():
            heads = np.array(heads, dtype=object)[keep].tolist()
        picked = span[keep]
        conn.executemany("INSERT INTO results VALUES (?, ?, ?, ?)",
                         zip(entries[picked].tolist(), grades[picked].tolist(), _nullable(levels[picked]), heads))
    return graded, Recorded(number, int(fresh.sum() - differs.sum()), int(known.sum()), int(differs.sum()))


def record_tail(ruleset: RuleSet) -> str:
    """The end every result record of a rule set shares (notice, rule set, engine): stored once a batch."""
    shared = dumps({"notice": ruleset.notice,
                    "ruleset": {"id": ruleset.id, "version": ruleset.version, "sha256": ruleset.sha256},
                    "engine": engine_name()})
    return ", " + shared[1:]


# -- reading the ledger back ---------------------------------------------------------------------

_UNIT_COLUMNS = ("entry", "batch", "sample_id", "sampled_on", "oil_hours", "oil_changed", "method", "lab", "kv40",
                 "an", "oxidation", "water", "corrects")


def sample_entries(conn: sqlite3.Connection, sample_id: str) -> list[dict]:
    """Every recorded version of a sample, oldest first, with its result record and batch."""
    cursor = conn.execute(
        "SELECT s.entry, s.batch, s.unit_id, s.sampled_on, s.superseded_in, s.corrects, r.grade, "
        "r.record || b.record_tail, b.recorded_at, b.source, b.ruleset_sha256, rs.canonical "
        "FROM samples s JOIN results r ON r.entry = s.entry JOIN batches b ON b.batch = s.batch "
        "JOIN rulesets rs ON rs.sha256 = b.ruleset_sha256 WHERE s.sample_id = ? ORDER BY s.entry", (sample_id,))
    names = ("entry", "batch", "unit_id", "sampled_on", "superseded_in", "corrects", "grade", "record",
             "recorded_at", "source", "ruleset_sha256", "canonical")
    return [dict(zip(names, row)) for row in cursor.fetchall()]


def unit_entries(conn: sqlite3.Connection, unit_id: str) -> pd.DataFrame:
    """The current samples of a unit with their grades, in trend order (date, then oil hours)."""
    rows = conn.execute(
        f"SELECT {', '.join('s.' + c for c in _UNIT_COLUMNS)}, r.grade, r.level, r.record || b.record_tail "
        "FROM samples s JOIN results r ON r.entry = s.entry JOIN batches b ON b.batch = s.batch "
        "WHERE s.unit_id = ? AND s.superseded_in IS NULL ORDER BY s.sampled_on, s.oil_hours, s.entry",
        (unit_id,)).fetchall()
    return pd.DataFrame(rows, columns=list(_UNIT_COLUMNS) + ["grade", "level", "record"])


def batch_list(conn: sqlite3.Connection) -> list[dict]:
    names = ("batch", "source", "ruleset_sha256", "columns", "record_tail", "canonical")
    rows = conn.execute("SELECT b.batch, b.source, b.ruleset_sha256, b.columns, b.record_tail, rs.canonical "
                        "FROM batches b JOIN rulesets rs ON rs.sha256 = b.ruleset_sha256 ORDER BY b.batch")
    return [dict(zip(names, row)) for row in rows.fetchall()]


def batch_entries(conn: sqlite3.Connection, batch: int) -> pd.DataFrame:
    """The samples a batch recorded, in the order it recorded them, with their stored results."""
    rows = conn.execute("SELECT s.entry, s.sample_id, s.unit_id, s.sampled_on, s.content, s.content_sha256, "
                        "r.record FROM samples s JOIN results r ON r.entry = s.entry WHERE s.batch = ? "
                        "ORDER BY s.entry", (batch,)).fetchall()
    return pd.DataFrame(rows, columns=["entry", "sample_id", "unit_id", "sampled_on", "content", "content_sha256",
                                       "record"])


def fingerprint(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def current_contents(conn: sqlite3.Connection) -> tuple[list[str], list[str]]:
    """The stored values of every current sample (corrections applied), in trend order, and the
    union of the columns their batches carried."""
    rows = conn.execute("SELECT s.content FROM samples s WHERE s.superseded_in IS NULL "
                        "ORDER BY s.unit_id, s.sampled_on, s.oil_hours, s.entry").fetchall()
    columns: list[str] = []
    for (text,) in conn.execute("SELECT columns FROM batches ORDER BY batch").fetchall():
        columns.extend(c for c in json.loads(text) if c not in columns)
    return [text for (text,) in rows], columns


def current_records(conn: sqlite3.Connection, batch: int | None = None) -> list[str]:
    """The stored result records (JSON Lines text) of the current samples, or of one batch."""
    where = "s.batch = ?" if batch is not None else "s.superseded_in IS NULL"
    rows = conn.execute("SELECT r.record || b.record_tail FROM samples s JOIN results r ON r.entry = s.entry "
                        f"JOIN batches b ON b.batch = s.batch WHERE {where} ORDER BY s.entry",
                        (batch,) if batch is not None else ()).fetchall()
    return [text for (text,) in rows]
