"""The ledger: an SQLite file that remembers every sample, every verdict and every rule set used.

All of sumpwise's SQLite I/O lives here (the schema and digest in schema.py). A graded
batch is recorded in one transaction (BEGIN IMMEDIATE, so two runs on one file take turns
instead of interleaving), in WAL mode so readers never wait for a writer. A sample's input
values are stored once (a batch's storage form, schema.py): in the typed columns that give
them back exactly, the rest as a JSON array under the batch's column names. The same
sample with the same values (compared as canonical JSON) adds nothing; the same id with
other values is rejected (and the reject recorded) unless the batch is a correction, which
keeps both. A verdict is stored
as facts (results/facts.py): a shape shared by many samples and the sample's own values;
the wording comes back from the stored rule set. Each batch ends with a digest of what it
recorded, chained to the previous batch's. The schema is versioned (PRAGMA user_version)
and migrated step by step; a file that is not a ledger, or is from a newer sumpwise, is
refused and left untouched.
"""

from __future__ import annotations

import contextlib
import difflib
import functools
import itertools
import json
import os
import re
import sqlite3
import sys
import time
from dataclasses import dataclass, replace
from datetime import date, datetime, timedelta, timezone
from pathlib import Path

import numpy as np
import pandas as pd

from sumpwise.derive.cleanliness import read_cleanliness_codes
from sumpwise.derive.row_measures import derive_measures
from sumpwise.derive.trends import CHAIN_COLUMNS, chain_frame, read_oil_changes, trend_bases, unit_id_key
from sumpwise.intake.samples import Reject, SampleBatch
from sumpwise.ledger.aside import Aside
from sumpwise.ledger.schema import (DIGEST_2_SAMPLE_COLUMNS, DIGEST_3_FILLED, DIGEST_3_QUERIES, DIGEST_3_SAMPLE_COLUMNS,
                                    FORM_1_SAMPLE_COLUMNS, MIGRATIONS, fingerprint, schema_step, shape_ids,
                                    written_digest_3)
from sumpwise.results.facts import batch_facts, record_names, same_as_stored
from sumpwise.results.pipeline import grade_batch
from sumpwise.results.records import UNRATED, GradedBatch
from sumpwise.ruleset.model import RuleSet
from sumpwise.ruleset.resolve import DEFAULT_GRADES
from sumpwise.version import engine_name
from sumpwise.vocabulary.problems import InputError

DEFAULT_PATH = "sumpwise.db"
APPLICATION_ID = 0x53574C47  # "SWLG": marks the file as a sumpwise ledger
SCHEMA_VERSION = 5
PAGE_SIZE = 16384  # bytes; a new ledger only (SQLite keeps a file's page size): bulk imports write faster
CACHE_KIB = 262144  # page cache of a writing run: index pages stay in memory while a large batch is stored
BULK_ROWS = 50_000  # a batch this large, and at least as large as the ledger, builds its indexes after the rows
BUSY_SECONDS = 60.0  # how long a run waits for another run's transaction before giving up
_BEGIN_TRIES = 5
PAUSE_VARIABLE = "SUMPWISE_LEDGER_TEST_PAUSE"  # tests only: seconds to wait inside the write transaction

_NEEDS_ESCAPE = re.compile(r'["\\\x00-\x1f\x7f\u2028\u2029]')
_HEADER = b"SQLite format 3\x00"
CONFLICT_CODE = "L001"  # vocabulary/problems.py


class LedgerError(InputError):
    """A ledger file that cannot be used as one, or a batch the ledger refuses."""


class SchemaMismatch(LedgerError):
    """A ledger whose header's schema version is not the step its tables are at: changed after
    it was written (a tamper replay reports as an integrity finding), or damaged."""


@dataclass(frozen=True)
class Recorded:
    """What one grade run added to the ledger."""

    batch: int | None  # None when nothing was new
    new: int
    known: int
    corrections: int
    conflicts: int = 0  # rows refused because their id was recorded with other values
    rejected: int = 0  # rejected rows recorded with the batch (conflicts included)
    # Recorded samples dated after a new sample of their unit whose grade the new samples change:
    # (sample id, unit, level without them, level with them), both under this batch's rule set.
    regraded: tuple = ()
    # The ledger's head after the run, BATCH:DIGEST (empty while it holds no batch): what
    # `replay --head` takes, so the import's log keeps what shows a later truncation or rewrite.
    head: str = ""


@dataclass(frozen=True)
class Correction:
    """Why a batch corrects recorded samples, and who says so."""

    reason: str
    author: str


def reads_ledger(function):
    """SQLite's own errors on a damaged ledger become a LedgerError (exit 2), never a traceback."""
    @functools.wraps(function)
    def run(path, *args, **kwargs):
        try:
            return function(path, *args, **kwargs)
        except sqlite3.DatabaseError as exc:
            raise LedgerError(f"{path}: the ledger cannot be read: {exc} (is the file damaged?)") from None
    return run


def _header(path: Path) -> tuple[int, int] | None:
    """(user_version, application_id) from an SQLite file's header, read without SQLite; None when empty."""
    with open(path, "rb") as head:
        header = head.read(100)
    if not header:
        return None
    if len(header) < 100 or header[:16] != _HEADER:
        raise LedgerError(f"{path}: not a sumpwise ledger: the file is not an SQLite database")
    return int.from_bytes(header[60:64], "big"), int.from_bytes(header[68:72], "big")


def _usable_path(path: Path, create: bool) -> tuple[int, int] | None:
    if path.is_dir():
        raise LedgerError(f"{path}: is a folder, not a ledger file")
    if not path.exists():
        if not create:
            raise LedgerError(f"{path}: no ledger here (grade with --db {path} first)")
        if not path.parent.is_dir():
            raise LedgerError(f"{path}: the folder {path.parent} does not exist")
        return None
    try:
        identity = _header(path)
    except OSError as exc:
        raise LedgerError(f"{path}: cannot read the ledger: {exc.strerror or exc}") from None
    if identity is not None:
        version, app = identity
        if app != APPLICATION_ID and (app != 0 or version != 0 or _has_tables(path)):
            raise LedgerError(f"{path}: not a sumpwise ledger: it is an SQLite database of another kind "
                              f"(application id {app:#x}); sumpwise will not change it")
        if version > SCHEMA_VERSION:
            raise LedgerError(f"{path}: the ledger has schema version {version}, newer than this sumpwise "
                              f"understands ({SCHEMA_VERSION}); use a newer sumpwise")
    return identity


def _has_tables(path: Path) -> bool:
    """Whether an SQLite file with no application id holds anything (read without touching it)."""
    try:
        conn = sqlite3.connect(path.resolve().as_uri() + "?mode=ro&immutable=1", uri=True)
        try:
            return conn.execute("SELECT count(*) FROM sqlite_master").fetchone()[0] > 0
        finally:
            conn.close()
    except sqlite3.DatabaseError:
        return True


def _writable(path: Path) -> bool:
    folder = path.parent if str(path.parent) else Path(".")
    return os.access(folder, os.W_OK) and (not path.exists() or os.access(path, os.W_OK))


def open_ledger(path, create: bool = True, write: bool = True, building: bool = False) -> sqlite3.Connection:
    """A connection to a ledger at SCHEMA_VERSION; refuse anything that is not one, untouched.

    The file's header is read before SQLite opens it, so a foreign or damaged file is never
    switched to WAL or migrated. Readers (`write=False`) open the file read-only; an older
    ledger is migrated in place when it can be written, and in memory when it cannot (an
    archived ledger in a read-only folder). A writer needs the file and its folder writable.
    `building`: a new file no other run can see yet (see _grade_into_new), written with no
    journal and no syncs.
    """
    path = Path(path)
    identity = _usable_path(path, create and write)
    try:
        if not write and identity is not None:
            conn = _read_only(path)
            version = _check_identity(conn, path)
            if version == SCHEMA_VERSION:
                return conn
            if not _writable(path):
                conn = _in_memory(conn)
                migrate(conn)
                return conn
            conn.close()
        if not _writable(path):
            raise LedgerError(f"{path}: the ledger (or its folder) is read-only: reading commands (history, "
                              f"explain, replay, report) work, recording needs write permission")
        conn = sqlite3.connect(path, timeout=BUSY_SECONDS, isolation_level=None)
        try:
            version = _check_identity(conn, path)  # reads only: a refused file is left as it was
            conn.execute(f"PRAGMA page_size={PAGE_SIZE}")  # before WAL; no effect on an existing database
            if building:
                conn.execute("PRAGMA journal_mode=OFF")
                conn.execute("PRAGMA synchronous=OFF")
            else:
                conn.execute("PRAGMA journal_mode=WAL")
                conn.execute("PRAGMA synchronous=NORMAL")  # WAL: a crash never corrupts; power loss may drop the last batch
            conn.execute("PRAGMA foreign_keys=ON")
            conn.execute(f"PRAGMA cache_size=-{CACHE_KIB}")  # a batch of a million samples grows five indexes
            if version < SCHEMA_VERSION:
                migrate(conn)
        except BaseException:
            conn.close()
            raise
    except sqlite3.DatabaseError as exc:
        raise LedgerError(f"{path}: not a usable sumpwise ledger: {exc}") from None
    return conn


def _check_identity(conn: sqlite3.Connection, path: Path) -> int:
    """The ledger's schema version, from SQLite (the header may lag behind a WAL file); refuse others."""
    app = conn.execute("PRAGMA application_id").fetchone()[0]
    version = conn.execute("PRAGMA user_version").fetchone()[0]
    tables = conn.execute("SELECT count(*) FROM sqlite_master").fetchone()[0]
    if app != APPLICATION_ID and (app != 0 or version != 0 or tables != 0):
        raise LedgerError(f"{path}: not a sumpwise ledger: it is an SQLite database of another kind "
                          f"(application id {app:#x}, {tables} schema object(s)); sumpwise will not change it")
    if version > SCHEMA_VERSION:
        raise LedgerError(f"{path}: the ledger has schema version {version}, newer than this sumpwise "
                          f"understands ({SCHEMA_VERSION}); use a newer sumpwise")
    step = schema_step(conn) if tables else 0
    if step != version:  # migrating from the header's version would fail part way, or read what is not there
        raise SchemaMismatch(f"{path}: the ledger's header gives schema version {version} (PRAGMA user_version) but "
                             f"its tables are those of schema step {step}: the header was changed after the ledger "
                             f"was written, or the file is damaged; sumpwise leaves it as it was")
    return version


def _read_only(path: Path) -> sqlite3.Connection:
    """Read-only; immutable when SQLite cannot keep its shared-memory file beside it (a read-only folder)."""
    uri = path.resolve().as_uri()
    try:
        conn = sqlite3.connect(uri + "?mode=ro", uri=True, timeout=BUSY_SECONDS, isolation_level=None)
        conn.execute("SELECT count(*) FROM sqlite_master").fetchone()
        return conn
    except sqlite3.OperationalError:
        conn = sqlite3.connect(uri + "?mode=ro&immutable=1", uri=True, isolation_level=None)
        conn.execute("SELECT count(*) FROM sqlite_master").fetchone()
        return conn


def _in_memory(conn: sqlite3.Connection) -> sqlite3.Connection:
    memory = sqlite3.connect(":memory:", isolation_level=None)
    conn.backup(memory)
    conn.close()
    return memory


def migrate(conn: sqlite3.Connection, to: int = SCHEMA_VERSION) -> None:
    """Apply the missing steps in one transaction; another process may have done it meanwhile."""
    begin(conn)
    try:
        version = conn.execute("PRAGMA user_version").fetchone()[0]
        for step in range(version, to):
            sql, data = MIGRATIONS[step]
            for statement in sql.split(";"):
                if statement.strip():
                    conn.execute(statement)
            if data is not None:
                data(conn)
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
    This is a form-1 sample's stored text, and what tells a known sample from a changed one.
    """
    pieces = [_content_pieces(json.dumps(name, ensure_ascii=False) + ": ", ", ", "", frame[name])
              for name in sorted(frame.columns)]
    return _rows(len(frame), "{", pieces, ", }\n", "}\n", block)


def sample_arrays(frame: pd.DataFrame, block: int = 50_000) -> np.ndarray:
    """Each row's input values as a JSON array in the frame's column order, null where missing:
    a form-2 sample's stored text (the names are kept once, in the batch's `columns`)."""
    pieces = [_content_pieces("", ",", "null,", frame[name]) for name in frame.columns]
    return _rows(len(frame), "[", pieces, ",]\n", "]\n", block)


def _rows(n: int, opening: str, pieces: list, trailing: str, closing: str, block: int) -> np.ndarray:
    table = np.stack([np.full(n, opening, dtype=object), *pieces, np.full(n, closing, dtype=object)], axis=1)
    contents = np.empty(n, dtype=object)
    for start in range(0, n, block):
        text = "".join(table[start:start + block].ravel().tolist())
        # A raw newline only ends a row (JSON escapes it elsewhere), so `trailing` is always a row's last comma.
        contents[start:start + block] = text.replace(trailing, closing).split("\n")[:-1]
    return contents


def _content_pieces(key: str, comma: str, missing: str, column: pd.Series) -> np.ndarray:
    """Every row's piece of one column: `key`, the value as JSON and `comma`, or `missing`."""
    if column.dtype == bool:
        return np.array([key + "false" + comma, key + "true" + comma], dtype=object)[column.to_numpy().astype(np.intp)]
    if column.dtype.kind in "fiu":
        values = column.to_numpy(dtype=float)
        # Factorized by bit pattern, so -0.0 keeps its own spelling; missing and infinite values are left out.
        codes, uniques = pd.factorize(np.where(np.isfinite(values), values, np.nan).view(np.int64))
        spelled = [key + repr(v) + comma if np.isfinite(v) else missing for v in uniques.view(float).tolist()]
        return np.array(spelled + [missing], dtype=object)[codes]
    values = column.astype(object)
    present = values.notna().to_numpy()
    codes, uniques = pd.factorize(values.to_numpy(dtype=object))
    if not all(type(u) is str for u in uniques):  # 1, 1.0 and True factorize alike but are spelled apart
        codes, uniques = pd.factorize(values.where(present, "").astype(str).to_numpy(dtype=object))
    codes[~present] = -1
    uniques = np.asarray(uniques, dtype=object)
    if _NEEDS_ESCAPE.search("".join(uniques)):
        spelled = np.array([key + json.dumps(u, ensure_ascii=False) + comma for u in uniques], dtype=object)
    else:
        spelled = key + '"' + uniques + '"' + comma
    return np.append(spelled, missing).astype(object)[codes]


def canonical_text(values: dict) -> str:
    """A sample's values (missing ones left out) as sample_contents spells them."""
    return json.dumps(values, sort_keys=True, ensure_ascii=False)


# The typed columns a form-2 batch may keep a sample's values in (its `held` names), and the SQL
# that reads a stored sample's values whatever its form (object_text and sample_object take it).
HELD = ("sample_id", "unit_id", "class", "sampled_on", "oil_hours", "oil_changed", "method", "lab")
STORED_VALUES = "s.content, b.form, b.columns, b.held, " + ", ".join(f"s.{name}" for name in HELD)


def sample_object(content: str, form: int, columns: str, held: str, *typed) -> dict:
    """A stored sample's values by name, whatever its batch's form (a row read as STORED_VALUES)."""
    if form == 1:
        return json.loads(content)
    rest, held = _layout(columns, held)
    values = {name: value for name, value in zip(rest, json.loads(content)) if value is not None}
    for name, value in zip(HELD, typed):
        if value is not None and name in held:
            values[name] = bool(value) if name == "oil_changed" else value
    return values


@functools.lru_cache(maxsize=256)
def _layout(columns: str, held: str) -> tuple[list, frozenset]:
    """A form-2 batch's array names and held names, read once per batch rather than per sample."""
    held = frozenset(json.loads(held))
    return [name for name in json.loads(columns) if name not in held], held


def object_text(content: str, form: int, *rest) -> str:
    """A stored sample's values as canonical JSON text (a form-1 sample's content as stored)."""
    return content if form == 1 else canonical_text(sample_object(content, form, *rest))


def _held(frame: pd.DataFrame, typed: dict) -> list[str]:
    """The HELD columns whose typed values (as written) give back the frame's values exactly, so
    the sample's array can leave them out: text or missing, finite numbers, or flags."""
    held = []
    for name in HELD:
        if name not in frame.columns:
            continue
        column = frame[name]
        if name == "oil_changed":
            if column.dtype == bool:
                held.append(name)
            continue
        if name == "oil_hours":
            if column.dtype.kind not in "fiu":
                continue
            values = column.to_numpy(dtype=float)
            finite = np.isfinite(values)
            back = np.array(typed[name], dtype=float)  # None reads as NaN
            if (np.isinf(values).any() or np.signbit(values[finite & (values == 0)]).any()
                    or not np.array_equal(np.where(finite, values, np.nan), back, equal_nan=True)):
                continue
            held.append(name)
            continue
        values = column.to_numpy(dtype=object)
        if pd.api.types.infer_dtype(values, skipna=False) == "string":  # every value text, none missing
            if values.tolist() == typed[name]:
                held.append(name)
            continue
        written = np.array(typed[name], dtype=object)
        missing = pd.isna(values)
        if (not set(map(type, values[~missing].tolist())) <= {str}  # every present value text
                or not (missing == pd.isna(written)).all()):
            continue
        if (values[~missing] == written[~missing]).all():
            held.append(name)
    return held


def _nullable(values: np.ndarray) -> list:
    """Values to bind, as SQLite gives them back: None for a missing value (a NaN float included),
    0.0 for -0.0."""
    values = np.asarray(values)
    if values.dtype.kind == "f":
        values = values + 0.0  # -0.0 + 0.0 is 0.0
        if not np.isnan(values).any():
            return values.tolist()
    elif values.dtype == object and pd.api.types.infer_dtype(values, skipna=False) == "string":
        return values.tolist()  # every value text: none missing
    return pd.Series(values, dtype=object).where(pd.notna(values), None).tolist()


@contextlib.contextmanager
def _indexes_built_after(conn: sqlite3.Connection, bulk: bool):
    """With `bulk` (a batch at least as large as what the ledger holds), the indexes on samples
    are dropped before the rows go in and created again, from their stored SQL, after: sorting
    once costs less than keeping three indexes in order row by row. All inside the batch's
    transaction, so a failure or a crash leaves the indexes as they were; the unique index on
    current sample ids is checked in full when it is created again."""
    saved = conn.execute("SELECT name, sql FROM sqlite_master WHERE type = 'index' AND tbl_name = 'samples' "
                         "AND sql IS NOT NULL ORDER BY name").fetchall() if bulk else []
    for name, _ in saved:
        conn.execute(f'DROP INDEX "{name}"')
    yield
    for _, sql in saved:
        conn.execute(sql)


def _fill_temp(conn: sqlite3.Connection, table: str, values) -> None:
    conn.execute(f"CREATE TEMP TABLE IF NOT EXISTS {table} (value TEXT PRIMARY KEY)")
    conn.execute(f"DELETE FROM {table}")
    conn.executemany(f"INSERT OR IGNORE INTO {table} VALUES (?)", ((v,) for v in values if v is not None))


def _current_entries(conn: sqlite3.Connection, sample_ids) -> pd.DataFrame:
    """The current entries of these ids with their values as canonical JSON text: one join on a
    temporary table, skipped on an empty ledger."""
    columns = ["sample_id", "entry", "content", "batch"]
    if conn.execute("SELECT NOT EXISTS (SELECT 1 FROM samples)").fetchone()[0]:
        return pd.DataFrame({name: pd.Series(dtype=object) for name in columns})
    _fill_temp(conn, "wanted_ids", sample_ids)
    rows = conn.execute(f"SELECT s.sample_id, s.entry, s.batch, {STORED_VALUES} FROM samples s "
                        "JOIN temp.wanted_ids w ON s.sample_id = w.value JOIN batches b ON b.batch = s.batch "
                        "WHERE s.superseded_in IS NULL").fetchall()
    return pd.DataFrame([(sid, entry, object_text(*stored), number) for sid, entry, number, *stored in rows],
                        columns=columns)


def history_frame(conn: sqlite3.Connection, units, ruleset: RuleSet, before_batch: int | None = None) -> pd.DataFrame:
    """Earlier samples of `units` as trends read them: trends.CHAIN_COLUMNS and every measure
    `ruleset` trends (its declared measures, particle counts and ISO 4406 numbers, differential
    oxidation included).

    Each sample's values are derived again from its stored input values (its fingerprinted
    content), under `ruleset`, as the batch being graded is: a fixed set of table columns
    cannot hold the measures rule sets declare. With `before_batch`, the ledger as it stood
    when that batch was recorded (for replay).
    """
    return measures_of(history_inputs(conn, units, before_batch), ruleset)


def history_inputs(conn: sqlite3.Connection, units, before_batch: int | None = None) -> pd.DataFrame | None:
    """The stored input values of those samples, as samples.py read them (None: no samples).
    A unit's samples under every spelling of its id that trends take for one (trends.unit_id_key)."""
    _fill_temp(conn, "wanted_units", _spellings(conn, units))
    sql = (f"SELECT s.batch, {STORED_VALUES} FROM samples s JOIN temp.wanted_units u ON s.unit_id = u.value "
           "JOIN batches b ON b.batch = s.batch ")
    if before_batch is None:
        rows = conn.execute(sql + "WHERE s.superseded_in IS NULL ORDER BY s.entry").fetchall()
    else:
        rows = conn.execute(sql + "WHERE s.batch < ? AND (s.superseded_in IS NULL OR s.superseded_in >= ?) "
                                  "ORDER BY s.entry", (before_batch, before_batch)).fetchall()
    return stored_frame(rows)


def unit_spellings(conn: sqlite3.Connection, unit_id: str) -> None:
    """Fill temp.wanted_units with every stored spelling of `unit_id` (_spellings): queries on
    one unit read `s.unit_id IN (SELECT value FROM temp.wanted_units)`."""
    _fill_temp(conn, "wanted_units", _spellings(conn, [unit_id]))


def _spellings(conn: sqlite3.Connection, units) -> list:
    """`units` and every stored unit id that differs from one of them only in case or surrounding
    spaces. The distinct stored ids are walked on the unit index, one seek each (not a scan of
    every sample)."""
    units = [u for u in units if u is not None]
    keys = {unit_id_key(u) for u in units}
    stored = conn.execute("WITH RECURSIVE ids(id) AS (SELECT MIN(unit_id) FROM samples UNION ALL "
                          "SELECT (SELECT MIN(unit_id) FROM samples WHERE unit_id > ids.id) FROM ids "
                          "WHERE ids.id IS NOT NULL) SELECT id FROM ids WHERE id IS NOT NULL").fetchall()
    return units + [row[0] for row in stored if unit_id_key(row[0]) in keys]


def stored_frame(rows: list) -> pd.DataFrame | None:
    """Stored samples (rows of s.batch then STORED_VALUES, in entry order) as one frame, each
    batch's values read its own way (a form-2 batch's arrays all at once); None for no rows."""
    frames = []
    for (_, form), group in itertools.groupby(rows, key=lambda row: (row[0], row[2])):
        group = list(group)
        columns, contents = json.loads(group[0][3]), [row[1] for row in group]
        if form == 1:
            frames.append(frame_from_contents(contents, columns))
            continue
        held = json.loads(group[0][4])
        frames.append(frame_from_arrays(contents, columns, held,
                                        {name: [row[5 + HELD.index(name)] for row in group] for name in held}))
    if len(frames) < 2:
        return frames[0] if frames else None
    frame = pd.concat(frames, ignore_index=True)
    for name in frame.columns:
        column = frame[name]
        if column.dtype == object:  # a flag or text one batch lacks: None there, as a missing value reads
            frame[name] = column.where(column.notna(), None)
    frame.index = pd.RangeIndex(1, len(frame) + 1, name="row")
    return frame


def measures_of(frame: pd.DataFrame | None, ruleset: RuleSet, also: tuple = ()) -> pd.DataFrame:
    """Stored samples' trend inputs (CHAIN_COLUMNS and the rule set's trend bases, then the
    readings `also` names), derived from a frame of their stored input values (None: no samples)
    exactly as grading derives them."""
    bases = trend_bases(ruleset)
    bases += tuple(name for name in also if name not in bases)
    if frame is None or not len(frame):
        return pd.DataFrame({name: pd.Series(dtype=float if name in ("oil_hours",) + bases else object)
                             for name in list(CHAIN_COLUMNS) + list(bases)}).astype({"oil_changed": bool})
    batch = read_oil_changes(SampleBatch(frame, (), len(frame), "ledger"))
    refused = read_cleanliness_codes(batch).rejects  # a stored code this engine no longer reads
    if refused:  # the sample stays in the unit's history, without that code (its other readings hold)
        frame = batch.frame.copy()
        frame.loc[[r.row for r in refused], "iso4406"] = None
        batch = replace(batch, frame=frame)
    measured = derive_measures(batch.frame, ruleset.lubricants, ruleset.measures, ruleset.fields)
    return chain_frame(measured, batch.frame.get("oil_changed"), bases).reset_index(drop=True)


def frame_from_arrays(contents, columns: list, held: list, typed: dict) -> pd.DataFrame:
    """A form-2 batch's stored values (its arrays, and its `held` columns from `typed`: lists or
    object arrays of what SQLite gave) back into the frame frame_from_contents makes of the same
    values as objects (a column no row has is float NaN; text and flags keep None)."""
    contents = list(contents)
    index = pd.RangeIndex(1, len(contents) + 1, name="row")
    frame = pd.DataFrame(json.loads("[" + ",".join(contents) + "]") if contents else [],
                         columns=[c for c in columns if c not in held], index=index)
    for name in list(frame.columns):  # one object a distinct text (JSON gives one a row): hashed once when graded
        if frame[name].dtype == "str":
            values = frame[name].to_numpy(dtype=object).tolist()
            frame[name] = pd.Series(list(map({}.setdefault, values, values)), index=index, dtype=frame[name].dtype)
    for name in held:
        values = typed[name]
        if name != "oil_hours" and isinstance(values, np.ndarray) and \
                pd.api.types.infer_dtype(values, skipna=True) not in ("string", "empty"):
            values = values.tolist()  # read as a list is: pandas keeps an object array's numbers as objects
        frame[name] = (np.array(values, dtype=bool) if name == "oil_changed" else
                       pd.Series(values, index=index, dtype=float if name == "oil_hours" else None))
    frame = frame[columns]
    for name in frame.columns:
        column = frame[name]
        if column.dtype == object:
            present = column.notna()
            frame[name] = column.where(present, None) if present.any() else np.nan
    return frame


def frame_from_contents(contents, columns: list) -> pd.DataFrame:
    """Stored sample values back into the frame samples.py made of them (floats, text or None, flags)."""
    contents = list(contents)
    frame = pd.DataFrame.from_records(json.loads("[" + ",".join(contents) + "]") if contents else [])
    frame = frame.reindex(columns=columns)
    for name in frame.columns:
        column = frame[name]
        if column.dtype == object:
            frame[name] = column.where(column.notna(), None)
    frame.index = pd.RangeIndex(1, len(frame) + 1, name="row")
    return frame


def _conflict_rejects(batch: SampleBatch, conflicts: np.ndarray, stored_batch: np.ndarray) -> list[Reject]:
    rows = batch.frame.index.to_numpy()[conflicts]
    ids = batch.frame["sample_id"].to_numpy(dtype=object)[conflicts]
    return [Reject(int(row), sid, "sample_id",
                   f"sample {sid} is already recorded (batch {int(earlier)}) with other values; if these values "
                   f"correct it, grade this row again with --correction --reason TEXT", CONFLICT_CODE)
            for row, sid, earlier in zip(rows.tolist(), ids.tolist(), stored_batch[conflicts].tolist())]


def grade_into_ledger(path, batch: SampleBatch, ruleset: RuleSet, correction: Correction | None = None,
                      reuse_version: bool = False) -> tuple[GradedBatch, Recorded]:
    """Grade `batch` after the ledger's earlier samples of its units and record it, all or nothing.

    A row whose id is recorded with other values is rejected (and the reject recorded)
    unless `correction` says why and who; the other rows are graded and recorded.
    """
    path = Path(path)
    batch = read_cleanliness_codes(read_oil_changes(batch))
    if not path.exists() and path.parent.is_dir() and _writable(path):
        built = _grade_into_new(path, batch, ruleset, correction, reuse_version)
        if built is not None:
            return built
    conn = open_ledger(path)
    try:
        begin(conn)
        try:
            graded, recorded = _record(conn, path, batch, ruleset, correction, reuse_version)
            _test_pause()
            conn.execute("COMMIT")
        except BaseException:
            conn.execute("ROLLBACK")
            raise
    except sqlite3.DatabaseError as exc:
        raise LedgerError(f"{path}: the ledger could not be written: {exc}") from None
    finally:
        conn.close()
    return graded, recorded


def _grade_into_new(path: Path, batch: SampleBatch, ruleset: RuleSet, correction: Correction | None,
                    reuse_version: bool) -> tuple[GradedBatch, Recorded] | None:
    """A new ledger is built beside its place, with no journal (about 2 s less a million samples:
    nothing is written twice), and hard-linked into place only when whole. No run can see the
    file while it is built, so no reader waits and nothing half-written is ever a ledger: a
    failure or a crash leaves no ledger (a crash leaves the hidden side file). None when the
    ledger cannot be put in place this way (another run created it meanwhile, or the file
    system has no hard links): the caller then records into the ledger as it is, as always."""
    side = path.with_name(f".{path.name}.building-{os.getpid()}")
    side.unlink(missing_ok=True)  # a crashed run's file under this process id
    try:
        try:
            conn = open_ledger(side, building=True)
            try:
                begin(conn)
                graded, recorded = _record(conn, path, batch, ruleset, correction, reuse_version)
                _test_pause()
                conn.execute("COMMIT")
                conn.execute("PRAGMA journal_mode=WAL")  # as every ledger is: readers never wait for a writer
            finally:
                conn.close()
        except sqlite3.DatabaseError as exc:
            raise LedgerError(f"{path}: the ledger could not be written: {exc}") from None
        with open(side, "rb") as built:
            os.fsync(built.fileno())
        try:
            os.link(side, path)
        except OSError:
            return None
        _sync_folder(path.parent)
        return graded, recorded
    finally:
        side.unlink(missing_ok=True)


def _sync_folder(folder: Path) -> None:
    """The new name made durable (POSIX); a no-op where folders cannot be opened."""
    try:
        handle = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(handle)
    except OSError:
        pass
    finally:
        os.close(handle)


def _test_pause() -> None:
    seconds = float(os.environ.get(PAUSE_VARIABLE, "0") or 0)
    if seconds > 0:
        sys.stderr.write(f"sumpwise: ledger: pausing {seconds:g} s inside the transaction ({PAUSE_VARIABLE})\n")
        sys.stderr.flush()
        time.sleep(seconds)


def _check_version(conn, path, ruleset: RuleSet, reuse_version: bool) -> None:
    """One id and version, one fingerprint: a changed rule set needs a new version number."""
    other = conn.execute("SELECT sha256 FROM rulesets WHERE ruleset_id = ? AND version = ? AND sha256 != ?",
                         (ruleset.id, json.dumps(ruleset.version), ruleset.sha256)).fetchone()
    if other is not None and not reuse_version:
        raise LedgerError(f"{path}: rule set '{ruleset.id}' version {ruleset.version} is already recorded with "
                          f"other content (sha256 {other[0][:12]}..., this one {ruleset.sha256[:12]}...): two rule "
                          f"sets under one version could not be told apart in the ledger's reports. Raise "
                          f"`version:` in the rule set, or pass --same-version to record it anyway")


def _record(conn, path, batch: SampleBatch, ruleset: RuleSet, correction: Correction | None,
            reuse_version: bool) -> tuple[GradedBatch, Recorded]:
    _check_version(conn, path, ruleset, reuse_version)
    frame = batch.frame
    ids = frame["sample_id"].to_numpy(dtype=object)
    stored = _current_entries(conn, ids)
    by_id = stored.set_index("sample_id")
    stored_text = by_id["content"].reindex(ids).to_numpy(dtype=object)
    recorded = pd.notna(stored_text)
    known = np.zeros(len(frame), dtype=bool)  # the same values as recorded: compared as canonical text
    if recorded.any():
        known[recorded] = sample_contents(frame[recorded]) == stored_text[recorded]
    differs = recorded & ~known
    conflicts = differs if correction is None else np.zeros(len(frame), dtype=bool)
    if conflicts.any():
        stored_batch = by_id["batch"].reindex(ids).to_numpy()
        batch = SampleBatch(frame[~conflicts], tuple(batch.rejects) + tuple(_conflict_rejects(batch, conflicts,
                                                                                                stored_batch)),
                            batch.rows_read, batch.source)
        frame, ids = batch.frame, ids[~conflicts]
        known, differs = known[~conflicts], differs[~conflicts]

    units = pd.unique(frame["unit_id"].dropna().to_numpy(dtype=object)) if "unit_id" in frame else []
    inputs = history_inputs(conn, units)
    history = measures_of(inputs, ruleset)
    if len(history):
        history = history[~history["sample_id"].isin(ids)]
        inputs = inputs[~inputs["sample_id"].isin(ids).to_numpy()]
    graded = grade_batch(batch, ruleset, history)
    regraded = _regraded_later(frame, inputs, history, ruleset)
    fresh = ~known
    n_conflicts = int(conflicts.sum())
    if not fresh.any() and not n_conflicts and not _unrecorded_rejects(conn, batch.rejects):
        last = conn.execute("SELECT batch, digest FROM batches ORDER BY batch DESC LIMIT 1").fetchone()
        return graded, Recorded(None, 0, int(known.sum()), 0, head=f"{last[0]}:{last[1]}" if last else "")

    conn.execute("INSERT OR IGNORE INTO rulesets VALUES (?, ?, ?, ?)",
                 (ruleset.sha256, ruleset.id, json.dumps(ruleset.version), ruleset.canonical))
    previous = conn.execute("SELECT digest FROM batches ORDER BY batch DESC LIMIT 1").fetchone()
    names = record_names(graded, [name for name in graded.value_columns if same_as_stored(graded, frame, name).all()])
    n_new, n_corrections = int(fresh.sum() - differs.sum()), int(differs.sum())
    cursor = conn.execute(
        "INSERT INTO batches (recorded_at, source, ruleset_sha256, engine, columns, record_tail, rows_read, "
        "new_samples, known_samples, corrections, rejected, conflicts, reason, author, previous, value_names, form) "
        "VALUES (?, ?, ?, ?, ?, '', ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, 3)",
        (datetime.now(timezone.utc).isoformat(timespec="seconds"), batch.source, ruleset.sha256, engine_name(),
         json.dumps(list(frame.columns)), batch.rows_read, n_new, int(known.sum()), n_corrections,
         len(batch.rejects), n_conflicts, correction.reason if correction else None,
         correction.author if correction else None, previous[0] if previous else "",
         json.dumps(names)))
    number = cursor.lastrowid
    corrected = by_id["entry"].reindex(ids[differs]).astype(int).tolist()
    conn.executemany("UPDATE samples SET superseded_in = ? WHERE entry = ?", ((number, e) for e in corrected))

    measured = graded.measured
    rows = np.flatnonzero(fresh)
    corrects = np.full(len(frame), None, dtype=object)
    corrects[differs] = corrected
    flags = frame["oil_changed"].to_numpy(dtype=bool) if "oil_changed" in frame else np.zeros(len(frame), bool)
    first = conn.execute("SELECT coalesce(max(entry), 0) + 1 FROM samples").fetchone()[0]
    entries = list(range(first, first + len(rows)))
    # Form 3: the typed columns queries and history read; each value once (those columns, or the
    # sample's array); no reading columns; the verdict in the same row (one row per sample).
    typed = {name: _nullable(measured[name].to_numpy()[rows]) for name in HELD if name != "oil_changed"}
    typed["oil_changed"] = flags[rows].astype(int).tolist()
    fresh_frame = frame.iloc[rows]
    held = _held(fresh_frame, typed)
    values = sample_arrays(fresh_frame[[c for c in frame.columns if c not in held]]).tolist()
    conn.execute("UPDATE batches SET held = ? WHERE batch = ?", (json.dumps(held), number))
    typed = [typed[name] for name in HELD]
    facts = batch_facts(graded, names)
    shapes = np.array(shape_ids(conn, facts.shapes), dtype=np.int64)
    levels = facts.levels[rows].astype(object)
    levels[facts.levels[rows] < 0] = None
    shape_of = shapes[facts.shape_of[rows]]
    written = [entries, *typed, values, corrects[rows].tolist(), facts.grades[rows].tolist(), levels.tolist(),
               shape_of.tolist(), facts.values[rows].tolist()]  # DIGEST_3_SAMPLE_COLUMNS, as lists (one bind each)
    # The sqlite3 module binds None through its adapter lookup (about 1 s a million values): a
    # column this batch leaves empty in every row is left out of the insert (NULL), and
    # `corrects`, empty but in corrections, is set afterwards on the corrected rows only.
    bound = [(name, column) for name, column in zip(DIGEST_3_SAMPLE_COLUMNS, written)
             if name == "entry" or (name != "corrects" and any(value is not None for value in column))]
    names = ", ".join(name for name, _ in bound)
    conn.executemany("INSERT INTO rejects VALUES (?, ?, ?, ?, ?, ?)",
                     ((number, r.row, r.sample_id, r.field, r.code, r.reason) for r in batch.rejects))
    # The digest of the rows as written, with the types SQLite gives back (replay reads them
    # back): the batch's row and rejects are final now, so it is computed beside the insert.
    used = np.unique(shape_of).tolist()
    sha_of = dict(zip(shapes.tolist(), (fingerprint(text) for text in facts.shapes)))
    rows_written = {0: digest_columns(conn, DIGEST_3_QUERIES[0], number), 1: written, 2: [[0]],
                    3: [used, [sha_of[shape] for shape in used]], 4: digest_columns(conn, DIGEST_3_QUERIES[4], number)}
    with Aside(lambda: written_digest_3(rows_written)) as digest:
        with _indexes_built_after(conn, len(rows) >= max(BULK_ROWS, first - 1)):
            conn.executemany(f"INSERT INTO samples ({names}, content_sha256, batch) "
                             f"VALUES ({', '.join('?' * len(bound))}, '', {int(number)})",
                             zip(*(column for _, column in bound)))
            fixing = np.flatnonzero(differs[rows])
            conn.executemany("UPDATE samples SET corrects = ? WHERE entry = ?",
                             zip(corrects[rows[fixing]].tolist(), (first + fixing).tolist()))
        conn.execute("UPDATE batches SET digest = ? WHERE batch = ?", (digest.result(), number))
    return graded, Recorded(number, n_new, int(known.sum()), n_corrections, n_conflicts, len(batch.rejects),
                            regraded, f"{number}:{digest.result()}")


def _unrecorded_rejects(conn: sqlite3.Connection, rejects) -> bool:
    """Whether a refused row is not in the ledger's rejects yet: a file whose every row is refused is
    recorded (the auditor sees the import and why), the same file again adds nothing."""
    if not rejects:
        return False
    recorded = set(conn.execute("SELECT row, sample_id, field, code, reason FROM rejects"))
    return any((r.row, r.sample_id, r.field, r.code, r.reason) not in recorded for r in rejects)


def _regraded_later(new: pd.DataFrame, inputs: pd.DataFrame | None, history: pd.DataFrame,
                    ruleset: RuleSet) -> tuple:
    """Recorded samples dated after a new sample of their unit (a late result, a backfill) whose
    grade the new samples change: their trends were graded without them. Each is graded now
    without and with the batch's samples of its unit, under this rule set, so a rule-set
    change is not mistaken for the backfill. Their recorded verdicts stand (replay grades each
    batch after what the ledger held then); the run says which would now differ."""
    if inputs is None or not len(inputs) or not {"unit_id", "sampled_on"} <= set(new.columns):
        return ()
    dated = new.dropna(subset=["unit_id", "sampled_on"])
    first_new = dated.groupby(dated["unit_id"].map(unit_id_key))["sampled_on"].min()  # trends' unit, any spelling
    since = inputs["unit_id"].map(unit_id_key, na_action="ignore").map(first_new)
    later = inputs[(since.notna() & inputs["sampled_on"].notna()).to_numpy()]
    later = later[(later["sampled_on"] > since[later.index]).to_numpy()]
    if not len(later):
        return ()
    before = history[~history["sample_id"].isin(later["sample_id"])]
    alone = grade_batch(SampleBatch(later.reset_index(drop=True), (), len(later), "ledger"), ruleset, before)
    keys = set(later["unit_id"].map(unit_id_key))
    joined = pd.concat([new[new["unit_id"].map(unit_id_key, na_action="ignore").isin(keys).to_numpy()], later],
                       ignore_index=True)
    joined.index = pd.RangeIndex(1, len(joined) + 1, name="row")
    together = grade_batch(SampleBatch(joined, (), len(joined), "ledger"), ruleset, before)
    now = dict(zip(together.measured["sample_id"], together.outcome.level.tolist()))
    return tuple((sid, unit, level, now[sid]) for sid, unit, level in
                 zip(alone.measured["sample_id"], alone.measured["unit_id"], alone.outcome.level.tolist())
                 if now.get(sid, level) != level)


def digest_columns(conn: sqlite3.Connection, query: str, batch: int) -> list[list]:
    """A digest query's rows for one batch as columns (lists), as the digest spells them."""
    return [list(column) for column in zip(*conn.execute(query, (batch,)).fetchall())]


# -- reading the ledger back ---------------------------------------------------------------------

_UNIT_COLUMNS = ("entry", "batch", "sample_id", "unit_id", "sampled_on", "oil_hours", "oil_changed", "method", "lab", "kv40",
                 "an", "oxidation", "water", "corrects")
# A sample's verdict where its batch's form keeps it: its own row (form 3) or `verdicts`.
_GRADE, _LEVEL, _SHAPE, _VALS = (f"(CASE WHEN b.form >= 3 THEN s.{name} ELSE v.{name} END)"
                                 for name in ("grade", "level", "shape", "vals"))
_VERDICT = f"{_GRADE}, {_LEVEL}, sh.facts, {_VALS}"
_JOINS = (f"FROM samples s JOIN batches b ON b.batch = s.batch LEFT JOIN verdicts v ON v.entry = s.entry "
          f"JOIN shapes sh ON sh.shape = {_SHAPE}")


def sample_entries(conn: sqlite3.Connection, sample_id: str) -> list[dict]:
    """Every recorded version of a sample, oldest first, with its verdict, batch and rule set (its
    values as canonical JSON text): the current version and the ones its corrections replaced."""
    cursor = conn.execute(
        "WITH RECURSIVE versions(entry) AS (SELECT entry FROM samples WHERE sample_id = ? AND superseded_in IS NULL "
        "UNION SELECT c.corrects FROM samples c JOIN versions v ON c.entry = v.entry WHERE c.corrects IS NOT NULL) "
        f"SELECT s.entry, s.batch, s.unit_id, s.sampled_on, s.superseded_in, s.corrects, s.content, {_VERDICT}, "
        f"b.recorded_at, b.source, b.ruleset_sha256, b.engine, b.columns, b.value_names, b.reason, b.author, "
        f"rs.canonical, s.method, rs.ruleset_id, rs.version, {STORED_VALUES} "
        f"{_JOINS} JOIN rulesets rs ON rs.sha256 = b.ruleset_sha256 WHERE s.entry IN versions ORDER BY s.entry",
        (sample_id,))
    names = ("entry", "batch", "unit_id", "sampled_on", "superseded_in", "corrects", "content", "grade", "level",
             "facts", "vals", "recorded_at", "source", "ruleset_sha256", "engine", "columns", "value_names", "reason",
             "author", "canonical", "method", "ruleset_id", "version")
    return [dict(zip(names, row[:len(names)]), content=object_text(*row[len(names):])) for row in cursor.fetchall()]


def unit_entries(conn: sqlite3.Connection, unit_id: str) -> pd.DataFrame:
    """The current samples of a unit (under every spelling of its id: unit_spellings) with their
    verdicts, stored values and batch columns, in trend order (date, then oil hours)."""
    unit_spellings(conn, unit_id)
    rows = conn.execute(
        f"SELECT {', '.join('s.' + c for c in _UNIT_COLUMNS)}, {_VERDICT}, b.columns, b.ruleset_sha256, b.author, "
        f"b.reason, {STORED_VALUES} {_JOINS} WHERE s.unit_id IN (SELECT value FROM temp.wanted_units) "
        f"AND s.superseded_in IS NULL ORDER BY s.sampled_on, s.oil_hours, s.entry").fetchall()
    at = len(_UNIT_COLUMNS) + 4
    rows = [row[:at] + (object_text(*row[at + 4:]),) + row[at:at + 4] for row in rows]
    return pd.DataFrame(rows, columns=list(_UNIT_COLUMNS) + ["grade", "level", "facts", "vals", "content", "columns",
                                                             "ruleset_sha256", "author", "reason"])


def batch_list(conn: sqlite3.Connection) -> list[dict]:
    """Every batch in order, with its rule set's stored text (None when that row is gone)."""
    names = ("batch", "recorded_at", "source", "ruleset_sha256", "engine", "columns", "rows_read", "new_samples",
             "known_samples", "corrections", "rejected", "conflicts", "reason", "author", "previous", "digest",
             "value_names", "form", "held", "canonical", "ruleset_id", "version")
    rows = conn.execute(f"SELECT {', '.join('b.' + n for n in names[:19])}, rs.canonical, rs.ruleset_id, rs.version "
                        "FROM batches b LEFT JOIN rulesets rs ON rs.sha256 = b.ruleset_sha256 ORDER BY b.batch")
    return [dict(zip(names, row)) for row in rows.fetchall()]


def _object_table(rows: list) -> np.ndarray:
    """Rows of tuples as a 2-D object array: pandas' own routine for records (a quarter of the time
    numpy's general conversion takes, which probes every value for nesting), numpy's if it is gone."""
    try:
        from pandas._libs.lib import to_object_array_tuples
    except ImportError:
        return np.array(rows, dtype=object)
    return to_object_array_tuples(rows)


# Text columns of few distinct values that grading hashes anyway (to group units, classes, methods
# and dates): replay keeps one object a value, so each is hashed once and held once. SQLite gives a
# TEXT column back as text, NULL or a blob, so values that compare equal are the same value.
_SHARED_TEXTS = ("unit_id", "class", "sampled_on", "method")


def batch_entries(conn: sqlite3.Connection, batch: int, form: int,
                  shapes: dict | None = None) -> tuple[pd.DataFrame, dict]:
    """The samples a batch recorded, in the order it recorded them, with their stored verdicts
    (from `verdicts` for forms 1 and 2, None where a sample has none; from the sample's row for
    form 3); and the columns its digest covers, as object arrays of what SQLite gave (each row
    is read once, into one table these columns are views of). The frame has the columns its
    form stores (a form-2 or form-3 batch's digest counts any reading column that is not
    empty) but the stored values' texts, which are only in `columns`: once the caller has let
    go of those, the rows read back can go. `shapes` (shape -> (sha256, facts), the whole table, read once by the
    caller) spares a form-3 batch the join that finds the shapes its samples use. A form-3
    batch's `columns` also hold each row's schema.DIGEST_3_FILLED ("filled")."""
    names = {1: FORM_1_SAMPLE_COLUMNS, 2: DIGEST_2_SAMPLE_COLUMNS}.get(form, DIGEST_3_SAMPLE_COLUMNS + ("filled",))
    read = ", ".join(names) if form in (1, 2) else ", ".join(DIGEST_3_SAMPLE_COLUMNS) + ", " + DIGEST_3_FILLED
    rows = conn.execute(f"SELECT {read} FROM samples WHERE batch = ? ORDER BY entry", (batch,)).fetchall()
    table = _object_table(rows) if rows else np.empty((0, len(names)), dtype=object)
    del rows
    for k, name in enumerate(names):
        if name in _SHARED_TEXTS:
            values = table[:, k].tolist()
            table[:, k] = list(map({}.setdefault, values, values))
    columns = {name: table[:, k] for k, name in enumerate(names)}
    verdict = ("grade", "level", "shape", "vals")
    if form in (1, 2):
        rows = conn.execute("SELECT v.entry, v.grade, v.level, v.shape, v.vals FROM samples s JOIN verdicts v "
                            "ON v.entry = s.entry WHERE s.batch = ? ORDER BY v.entry", (batch,)).fetchall()
        columns.update(zip(("verdict_entry",) + verdict,
                           ([list(column) for column in zip(*rows)] if rows else [[] for _ in range(5)])))
        del rows
        used = conn.execute("SELECT DISTINCT sh.shape, sh.sha256, sh.facts FROM samples s JOIN verdicts v "
                            "ON v.entry = s.entry JOIN shapes sh ON sh.shape = v.shape WHERE s.batch = ? "
                            "ORDER BY sh.shape", (batch,)).fetchall()
    elif shapes is not None:  # as the join below: the distinct shape ids that name a stored shape, in order
        used = [(shape, *shapes[shape]) for shape in sorted(s for s in set(columns["shape"].tolist()) if s in shapes)]
    else:
        used = conn.execute("SELECT DISTINCT sh.shape, sh.sha256, sh.facts FROM samples s JOIN shapes sh "
                            "ON sh.shape = s.shape WHERE s.batch = ? ORDER BY sh.shape", (batch,)).fetchall()
    columns["used_shapes"] = [[shape for shape, _, _ in used], [sha for _, sha, _ in used]]
    facts = {shape: text for shape, _, text in used}
    kept = [k for k, name in enumerate(names) if name not in verdict + ("content", "filled")]
    frame = pd.DataFrame(table[:, kept], columns=[names[k] for k in kept], dtype=object)  # a copy: not a view
    if form in (1, 2):
        verdicts = pd.DataFrame({name: pd.Series(columns[name], dtype=object) for name in ("verdict_entry",) + verdict})
        verdicts = verdicts.set_index("verdict_entry").reindex(columns["entry"])
        stored = {name: verdicts[name].to_numpy(dtype=object) for name in verdict}
    else:
        stored = {name: columns[name] for name in verdict}
    for name in ("grade", "level", "vals"):
        frame[name] = stored[name]
    frame["facts"] = pd.Series(stored["shape"], dtype=object).map(facts).to_numpy(dtype=object)  # NaN: shape gone
    return frame, columns


def current_contents(conn: sqlite3.Connection) -> tuple[list[str], list[str]]:
    """The stored values of every current sample (corrections applied), in trend order, and the
    union of the columns their batches carried."""
    rows = conn.execute(f"SELECT {STORED_VALUES} FROM samples s JOIN batches b ON b.batch = s.batch "
                        "WHERE s.superseded_in IS NULL ORDER BY s.unit_id, s.sampled_on, s.oil_hours, s.entry")
    columns: list[str] = []
    for (text,) in conn.execute("SELECT columns FROM batches ORDER BY batch").fetchall():
        columns.extend(c for c in json.loads(text) if c not in columns)
    return [object_text(*row) for row in rows], columns


def current_verdicts(conn: sqlite3.Connection, batch: int | None = None) -> list[tuple]:
    """(content as canonical JSON text, facts, vals, ruleset sha256, engine, value names, batch source,
    the FTIR method the engine read the sample in) of the current samples, or of one batch."""
    where = "s.batch = ?" if batch is not None else "s.superseded_in IS NULL"
    rows = conn.execute(f"SELECT sh.facts, {_VALS}, b.ruleset_sha256, b.engine, b.value_names, b.source, s.method, "
                        f"{STORED_VALUES} {_JOINS} WHERE {where} ORDER BY s.entry", (batch,) if batch is not None else ())
    return [(object_text(*row[7:]),) + row[:7] for row in rows]


def stored_rulesets(conn: sqlite3.Connection) -> list[dict]:
    """Every stored rule set: fingerprint, id, version, its batches, the samples they recorded
    (every version) and those still current (corrections applied: what the ledger's results
    hold, so the current counts add up to the ledger's samples), first and last use.

    The replaced versions are counted from the correction batches' samples (few, on the batch
    index) rather than by reading every sample's row."""
    rows = conn.execute(
        "SELECT rs.sha256, rs.ruleset_id, rs.version, count(DISTINCT b.batch), "
        "(SELECT count(*) FROM samples s JOIN batches c ON c.batch = s.batch WHERE c.ruleset_sha256 = rs.sha256), "
        "min(b.recorded_at), max(b.recorded_at) FROM rulesets rs LEFT JOIN batches b ON b.ruleset_sha256 = rs.sha256 "
        "GROUP BY rs.sha256 ORDER BY min(b.batch)").fetchall()
    replaced = dict(conn.execute(
        "SELECT c.ruleset_sha256, count(*) FROM samples s JOIN samples old ON old.entry = s.corrects "
        "JOIN batches c ON c.batch = old.batch WHERE s.batch IN (SELECT batch FROM batches WHERE corrections > 0) "
        "AND old.superseded_in IS NOT NULL GROUP BY c.ruleset_sha256").fetchall())
    names = ("sha256", "id", "version", "batches", "samples", "current", "first", "last")
    return [dict(zip(names, (*row[:5], row[4] - replaced.get(row[0], 0), *row[5:]))) for row in rows]


def ruleset_text(conn: sqlite3.Connection, selector: str) -> list[tuple[str, str]]:
    """(sha256, canonical) of the stored rule sets a selector names: a fingerprint or a prefix of
    one (at least 8 hex digits), or ID@VERSION."""
    if "@" in selector:
        ruleset_id, version = selector.rsplit("@", 1)
        rows = conn.execute("SELECT sha256, canonical, version FROM rulesets WHERE ruleset_id = ?",
                            (ruleset_id,)).fetchall()
        return [(sha, text) for sha, text, stored in rows if version_text(stored) == version]
    if re.fullmatch(r"[0-9a-fA-F]{8,64}", selector):
        return conn.execute("SELECT sha256, canonical FROM rulesets WHERE sha256 LIKE ?",
                            (selector.lower() + "%",)).fetchall()
    return []


def version_text(stored: str) -> str:
    value = json.loads(stored)
    return value if isinstance(value, str) else json.dumps(value)


def find_entries(conn: sqlite3.Connection, rule=None, grade_at_least=None, grades=None, unit=None, since=None,
                 until=None, ruleset=None, version=None, everything: bool = False) -> pd.DataFrame:
    """The recorded samples that match every filter given (current versions unless `everything`).

    `grade_at_least` is a level; `grades` names grades exactly; `ruleset` a fingerprint prefix;
    `version` the rule-set version as written. Dates compare as ISO text; `until` takes in the
    whole day, so a sample stored with its time of day (`2026-10-05T08:30:00`) is on or before
    2026-10-05.
    """
    if unit is not None:  # every spelling of the unit's id, as grading, history and explain take it
        unit_spellings(conn, unit)
    refused = _unknown_filter(conn, rule, grades, grade_at_least, ruleset, version) or _unknown_unit(conn, unit)
    if refused:
        raise LedgerError(refused)
    where, params = [] if everything else ["s.superseded_in IS NULL"], []
    if rule is not None:
        where.append(f"{_SHAPE} IN (SELECT shape FROM shape_rules WHERE rule = ?)")
        params.append(rule)
    if grade_at_least is not None:
        where.append(f"{_LEVEL} >= ?")
        params.append(grade_at_least)
    if grades:
        where.append(f"{_GRADE} IN ({', '.join('?' * len(grades))})")
        params.extend(grades)
    if unit is not None:
        where.append("s.unit_id IN (SELECT value FROM temp.wanted_units)")
    if since is not None:
        where.append("s.sampled_on >= ?")
        params.append(since)
    if until is not None:
        where.append("s.sampled_on < ?")  # before the next day: its times of day included
        params.append((date.fromisoformat(until) + timedelta(days=1)).isoformat())
    if ruleset is not None:
        where.append("b.ruleset_sha256 LIKE ?")
        params.append(ruleset.lower() + "%")
    names = ["sample_id", "unit_id", "class", "sampled_on", "grade", "level", "facts", "ruleset_id", "version",
             "ruleset_sha256", "batch", "superseded_in", "corrects_batch", "correction_author", "correction_reason"]
    # A correction names the batch of the version it replaced, and its batch's author and reason.
    rows = conn.execute(
        f"SELECT s.sample_id, s.unit_id, s.class, s.sampled_on, {_GRADE}, {_LEVEL}, sh.facts, rs.ruleset_id, rs.version, "
        f"b.ruleset_sha256, s.batch, s.superseded_in, old.batch, "
        f"CASE WHEN s.corrects IS NOT NULL THEN b.author END, CASE WHEN s.corrects IS NOT NULL THEN b.reason END "
        f"{_JOINS} JOIN rulesets rs ON rs.sha256 = b.ruleset_sha256 LEFT JOIN samples old ON old.entry = s.corrects "
        f"{'WHERE ' + ' AND '.join(where) if where else ''} ORDER BY s.sampled_on, s.unit_id, s.entry",
        params).fetchall()
    frame = pd.DataFrame(rows, columns=names)
    frame["version"] = [version_text(v) for v in frame["version"]]
    for name in ("batch", "superseded_in", "corrects_batch"):  # batch numbers, never 5.0 (as stored if altered)
        stored = [row[names.index(name)] for row in rows]
        if all(isinstance(v, int) or v is None for v in stored):
            frame[name] = pd.array(stored, dtype="Int64")
    if version is not None:
        frame = frame[frame["version"] == version].reset_index(drop=True)
    return frame


def _unknown_filter(conn: sqlite3.Connection, rule, grades, grade_at_least, ruleset, version) -> str | None:
    """Why a filter can match nothing in this ledger, whatever it holds: a rule id, grade, ladder level,
    fingerprint or version that no stored rule set has (a typo, `Alert` for `alert`). An auditor told "0 samples" would
    take it for "none flagged". None when every filter names something stored, or nothing is stored yet."""
    stored = conn.execute("SELECT sha256, version, canonical FROM rulesets").fetchall()
    if not stored:
        return None
    known = {"rule": {}, "grade": {}, "version": {}}  # dicts: ladder and recording order kept
    top = None  # the highest ladder level of any stored rule set
    for _, stored_version, canonical in stored:
        known["version"][version_text(stored_version)] = None
        try:
            text = json.loads(canonical)
        except ValueError:  # a damaged rule set: replay reports it; its names are not known here
            continue
        ladder = text.get("grades", DEFAULT_GRADES)
        known["grade"].update(dict.fromkeys(ladder))
        top = max(top or 0, len(ladder) - 1)
        for rules in [text.get("rules", [])] + [c.get("rules", []) for c in text.get("classes", {}).values()]:
            known["rule"].update((r["id"], None) for r in rules if isinstance(r, dict) and "id" in r)
    known["grade"][UNRATED] = None
    known["rule"] = dict.fromkeys(sorted(known["rule"]))
    asked = [("rule", rule)] + [("grade", g) for g in grades or ()] + [("version", version)]
    for kind, value in asked:
        if value is not None and value not in known[kind]:
            close = difflib.get_close_matches(value, list(known[kind]), n=1)
            hint = f" (did you mean '{close[0]}'?)" if close else ""
            return (f"no rule set recorded in this ledger has the {kind} '{value}'{hint}, so it can match no "
                    f"sample; the recorded {kind}s: {', '.join(known[kind])}")
    if grade_at_least is not None and top is not None and not 0 <= grade_at_least <= top:
        return (f"--at-least {grade_at_least}: the recorded ladders run from level 0 ({next(iter(known['grade']))}) "
                f"to level {top}, so it can match no sample")
    if ruleset is not None and not any(sha.startswith(ruleset.lower()) for sha, _, _ in stored):
        return (f"no rule set recorded in this ledger has a fingerprint starting '{ruleset}'; `sumpwise rulesets "
                f"--db PATH` lists them")
    return None


def _unknown_unit(conn: sqlite3.Connection, unit) -> str | None:
    """Why `--unit` can match nothing: no sample of that unit, under any spelling of its id that
    grading takes for it (`hp-4 ` for `HP-4`), was ever recorded (`U9` for `U-9`). Reads the
    spellings unit_spellings put in temp.wanted_units."""
    if unit is None:
        return None
    if conn.execute("SELECT 1 FROM samples WHERE unit_id IN (SELECT value FROM temp.wanted_units) LIMIT 1").fetchone():
        return None
    units = [row[0] for row in conn.execute("SELECT DISTINCT unit_id FROM samples WHERE unit_id IS NOT NULL")]
    if not units:
        return None
    close = difflib.get_close_matches(unit, units, n=3)
    hint = f" (did you mean {', '.join(repr(u) for u in close)}?)" if close else ""
    return f"no sample of unit '{unit}' is recorded in this ledger{hint}; `sumpwise find --db PATH` lists every sample"


def batch_rejects(conn: sqlite3.Connection) -> pd.DataFrame:
    """Every recorded reject, with the file and batch it came from."""
    rows = conn.execute("SELECT r.batch, b.recorded_at, b.source, r.row, r.sample_id, r.field, r.code, r.reason "
                        "FROM rejects r JOIN batches b ON b.batch = r.batch ORDER BY r.batch, r.rowid").fetchall()
    return pd.DataFrame(rows, columns=["batch", "recorded_at", "source", "row", "sample_id", "field", "code",
                                       "reason"])
