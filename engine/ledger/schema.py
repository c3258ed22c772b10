"""The ledger's schema: its migration steps as frozen SQL text, and the batch digests.

Step n brings a ledger from schema version n - 1 to n. A released step never changes,
not even through a constant it reads: each is literal text. A new trended measure needs no
step: the trend inputs of earlier samples are derived from their stored values.

The digest of a batch covers everything the batch recorded, read back from the tables:
its own row (which holds the previous batch's digest, so the batches form a chain), its
samples, their verdicts with their shapes' fingerprints, and its rejected rows. Digest 1
(form-1 batches, recorded before step 4) covers a sample's values through their
fingerprint and spells chunks of rows as Python's repr; digest 2 (form 2) covers the
values themselves, spelled column by column as JSON; digest 3 (form 3, from step 5)
spells them the same way, with each verdict read from its sample's row. It is read back rather than computed
from what was written so that recording and verifying share one definition, and its
queries are listed here, frozen like the steps.
"""

from __future__ import annotations

import hashlib
import json
import sqlite3

from sumpwise.results.facts import ENGINE_CAVEATS, result_facts, shape_rules
from sumpwise.results.records import (CaveatNote, Clause, NotEvaluated, Reason, SampleResult,
                                      next_step_from_record)

STEP_1 = """
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
        kv40 REAL, kv100 REAL, an REAL, bn REAL, oxidation REAL, nitration REAL, sulfation REAL, antiwear REAL, soot REAL, water REAL, rpvot REAL,
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
"""

STEP_2 = """
    CREATE INDEX samples_unit ON samples(unit_id, sampled_on);
    CREATE INDEX samples_sample ON samples(sample_id);
    CREATE INDEX samples_batch ON samples(batch);
"""

# 3: facts by value (verdicts and their shapes) instead of record text; rejects; who and why
# of a correction; the digest chain; what queries by rule and date read.
STEP_3 = """
    CREATE TABLE shapes (
        shape INTEGER PRIMARY KEY,
        sha256 TEXT NOT NULL UNIQUE,
        facts TEXT NOT NULL
    );
    CREATE TABLE shape_rules (
        shape INTEGER NOT NULL REFERENCES shapes(shape),
        rule TEXT NOT NULL,
        grade TEXT NOT NULL,
        PRIMARY KEY (rule, shape)
    ) WITHOUT ROWID;
    CREATE TABLE verdicts (
        entry INTEGER PRIMARY KEY REFERENCES samples(entry),
        grade TEXT NOT NULL,
        level INTEGER,
        shape INTEGER NOT NULL REFERENCES shapes(shape),
        vals TEXT NOT NULL
    );
    CREATE TABLE rejects (
        batch INTEGER NOT NULL REFERENCES batches(batch),
        row INTEGER,
        sample_id TEXT,
        field TEXT NOT NULL,
        code TEXT NOT NULL,
        reason TEXT NOT NULL
    );
    CREATE INDEX rejects_batch ON rejects(batch);
    CREATE INDEX samples_date ON samples(sampled_on);
    ALTER TABLE batches ADD COLUMN rejected INTEGER NOT NULL DEFAULT 0;
    ALTER TABLE batches ADD COLUMN conflicts INTEGER NOT NULL DEFAULT 0;
    ALTER TABLE batches ADD COLUMN reason TEXT;
    ALTER TABLE batches ADD COLUMN author TEXT;
    ALTER TABLE batches ADD COLUMN previous TEXT NOT NULL DEFAULT '';
    ALTER TABLE batches ADD COLUMN digest TEXT NOT NULL DEFAULT '';
    ALTER TABLE batches ADD COLUMN value_names TEXT NOT NULL DEFAULT '[]';
"""

# 4: a batch's storage form. Form 1 (every batch before this step): a sample's values as a
# canonical JSON object with its SHA-256, the readings also in typed columns, digest 1. Form 2:
# each value once. The values the typed identity columns hold exactly (the batch's `held`
# names) stay there; the others are a JSON array in the order of the batch's `columns` less
# `held`. No per-sample fingerprint and no typed reading columns: digest 2 covers the values
# themselves. Explain finds a sample's versions through the current one's corrections, and
# `find` by date reads the dates, so the indexes on every sample id and on the date go.
STEP_4 = """
    ALTER TABLE batches ADD COLUMN form INTEGER NOT NULL DEFAULT 1;
    ALTER TABLE batches ADD COLUMN held TEXT NOT NULL DEFAULT '[]';
    DROP INDEX samples_sample;
    DROP INDEX samples_date;
"""

# 5: form 3, a sample's verdict in its own row (grade, level, shape, vals), so a batch stores one
# row per sample; form-1 and form-2 batches keep theirs in `verdicts` and leave these empty.
STEP_5 = """
    ALTER TABLE samples ADD COLUMN grade TEXT;
    ALTER TABLE samples ADD COLUMN level INTEGER;
    ALTER TABLE samples ADD COLUMN shape INTEGER REFERENCES shapes(shape);
    ALTER TABLE samples ADD COLUMN vals TEXT
"""

DIGEST_QUERIES = (
    "SELECT batch, recorded_at, source, ruleset_sha256, engine, columns, record_tail, rows_read, new_samples, "
    "known_samples, corrections, rejected, conflicts, reason, author, previous, value_names FROM batches "
    "WHERE batch = ?",
    # A sample's content is covered through its fingerprint (replay checks the one against the other,
    # and the typed columns against the content); a shape's facts through the shape's fingerprint.
    "SELECT entry, sample_id, content_sha256, corrects FROM samples WHERE batch = ? ORDER BY entry",
    "SELECT v.entry, v.grade, v.level, sh.sha256, v.vals FROM samples s JOIN verdicts v ON v.entry = s.entry "
    "JOIN shapes sh ON sh.shape = v.shape WHERE s.batch = ? ORDER BY v.entry",
    "SELECT row, sample_id, field, code, reason FROM rejects WHERE batch = ? ORDER BY rowid",
)
DIGEST_ROWS = 10_000  # rows hashed at a time; part of the definition (each chunk is hashed as its repr)

# Digest 2 (form-2 batches): the batch's own row with its form and held names; its samples'
# columns; that the columns form 2 leaves empty are empty (a count); its verdicts with their
# shape ids, and each shape used with its fingerprint; its rejected rows. Spelled column by
# column (_spelled: text joined by NUL, else JSON; exact for SQLite's values and C-fast), a
# chunk of DIGEST_2_ROWS rows at a time, 0x1f after each column, 0x1e after each query.
# Frozen like the steps.
DIGEST_2_QUERIES = (
    "SELECT batch, recorded_at, source, ruleset_sha256, engine, columns, record_tail, rows_read, new_samples, "
    "known_samples, corrections, rejected, conflicts, reason, author, previous, value_names, form, held FROM batches "
    "WHERE batch = ?",
    "SELECT entry, sample_id, unit_id, class, sampled_on, oil_hours, oil_changed, method, lab, content, corrects "
    "FROM samples WHERE batch = ? ORDER BY entry",
    "SELECT count(*) FROM samples WHERE batch = ? AND (kv40 IS NOT NULL OR kv100 IS NOT NULL OR an IS NOT NULL OR "
    "bn IS NOT NULL OR oxidation IS NOT NULL OR nitration IS NOT NULL OR sulfation IS NOT NULL OR antiwear IS NOT "
    "NULL OR soot IS NOT NULL OR water IS NOT NULL OR rpvot IS NOT NULL OR content_sha256 != '')",
    "SELECT v.entry, v.grade, v.level, v.shape, v.vals FROM samples s JOIN verdicts v ON v.entry = s.entry "
    "WHERE s.batch = ? ORDER BY v.entry",
    "SELECT DISTINCT sh.shape, sh.sha256 FROM samples s JOIN verdicts v ON v.entry = s.entry "
    "JOIN shapes sh ON sh.shape = v.shape WHERE s.batch = ? ORDER BY sh.shape",
    DIGEST_QUERIES[3],
)
DIGEST_2_ROWS = 100_000
DIGEST_2_SAMPLE_COLUMNS = ("entry", "sample_id", "unit_id", "class", "sampled_on", "oil_hours", "oil_changed",
                           "method", "lab", "content", "corrects")
# What a form-1 batch's samples hold (digest 1 covers some through the content fingerprint).
# Digest 3 (form-3 batches): digest 2 with the verdict read from the sample's row; the count
# of what form 3 leaves empty covers any `verdicts` row of its samples too. Frozen like the steps.
DIGEST_3_QUERIES = (
    DIGEST_2_QUERIES[0],
    "SELECT entry, sample_id, unit_id, class, sampled_on, oil_hours, oil_changed, method, lab, content, corrects, "
    "grade, level, shape, vals FROM samples WHERE batch = ? ORDER BY entry",
    "SELECT count(*) FROM samples s WHERE s.batch = ? AND (kv40 IS NOT NULL OR kv100 IS NOT NULL OR an IS NOT NULL "
    "OR bn IS NOT NULL OR oxidation IS NOT NULL OR nitration IS NOT NULL OR sulfation IS NOT NULL OR antiwear IS NOT "
    "NULL OR soot IS NOT NULL OR water IS NOT NULL OR rpvot IS NOT NULL OR content_sha256 != '' OR EXISTS "
    "(SELECT 1 FROM verdicts v WHERE v.entry = s.entry))",
    "SELECT DISTINCT sh.shape, sh.sha256 FROM samples s JOIN shapes sh ON sh.shape = s.shape WHERE s.batch = ? "
    "ORDER BY sh.shape",
    DIGEST_QUERIES[3],
)
DIGEST_3_SAMPLE_COLUMNS = DIGEST_2_SAMPLE_COLUMNS + ("grade", "level", "shape", "vals")
# A sample row's reading columns and fingerprint as one SQL value, NULL when all are empty (as
# form 3 leaves them): while `verdicts` is empty, DIGEST_3_QUERIES[2] counts the rows of a batch
# where it is not NULL (its EXISTS clause can then hold for no row). Replay reads it with each
# row instead of counting in a second pass over the batch; not part of the definition.
DIGEST_3_FILLED = ("coalesce(kv40, kv100, an, bn, oxidation, nitration, sulfation, antiwear, soot, water, rpvot, "
                   "nullif(content_sha256, ''))")
FORM_1_SAMPLE_COLUMNS = ("entry", "sample_id", "unit_id", "class", "sampled_on", "oil_hours", "oil_changed",
                         "method", "lab", "kv40", "kv100", "an", "bn", "oxidation", "nitration", "sulfation",
                         "antiwear", "soot", "water", "rpvot", "content", "content_sha256", "corrects")


def batch_digest(conn: sqlite3.Connection, batch: int, written: dict | None = None) -> str:
    """SHA-256 over the batch's rows as stored, in a fixed order and spelling: digest 1 (Python's
    repr of row chunks) for a form-1 batch, digest 2 (JSON, column by column) for a form-2 one,
    digest 3 (digest 2's spelling, the verdict in the sample's row) for any other.

    `written` maps a query's index to the rows it would return (digest 1) or to its columns as
    lists (digest 2), when the caller has just written them and holds them with the types
    SQLite gives back (recording a batch); replay always reads them back.
    """
    has_form = any(row[1] == "form" for row in conn.execute("PRAGMA table_info(batches)"))  # from step 4 on
    row = conn.execute("SELECT form FROM batches WHERE batch = ?", (batch,)).fetchone() if has_form else None
    if row is not None and row[0] != 1:
        return _digest_2(conn, batch, written, DIGEST_2_QUERIES if row[0] == 2 else DIGEST_3_QUERIES)
    digest = hashlib.sha256()
    for k, query in enumerate(DIGEST_QUERIES):
        if written is not None and k in written:
            rows = written[k]
            for start in range(0, len(rows), DIGEST_ROWS):
                digest.update(repr(rows[start:start + DIGEST_ROWS]).encode("utf-8"))
        else:
            cursor = conn.execute(query, (batch,))
            while chunk := cursor.fetchmany(DIGEST_ROWS):
                digest.update(repr(chunk).encode("utf-8"))
        digest.update(b"\x1e")
    return digest.hexdigest()


def written_digest_3(written: dict) -> str:
    """Digest 3 of a form-3 batch from every query's columns as written (no file read): what
    batch_digest gives for it, computable where no connection may be used (another process)."""
    if set(written) != set(range(len(DIGEST_3_QUERIES))):
        raise ValueError("digest 3 from written rows needs the columns of every one of its queries")
    return _digest_2(None, 0, written, DIGEST_3_QUERIES)


def _digest_2(conn: sqlite3.Connection, batch: int, written: dict | None, queries: tuple) -> str:
    digest = hashlib.sha256()
    for k, query in enumerate(queries):
        if written is not None and k in written:
            columns = written[k]
            n = len(columns[0]) if columns else 0
            for start in range(0, n, DIGEST_2_ROWS):
                for column in columns:
                    part = column[start:start + DIGEST_2_ROWS]  # a list, or an object array (replay)
                    digest.update(_spelled(part if isinstance(part, list) else part.tolist()))
        else:
            cursor = conn.execute(query, (batch,))
            while chunk := cursor.fetchmany(DIGEST_2_ROWS):
                for column in zip(*chunk):
                    digest.update(_spelled(list(column)))
        digest.update(b"\x1e")
    return digest.hexdigest()


def _spelled(values: list) -> bytes:
    """One column's values, exactly: tag S and the texts joined by NUL when every value is text
    and none holds a NUL (so the join splits back into the same n values), else tag J and JSON."""
    if values:
        try:
            joined = "\x00".join(values)
        except TypeError:  # a value that is not text
            joined = None
        if joined is not None and joined.count("\x00") == len(values) - 1:
            return b"S" + joined.encode("utf-8", "surrogatepass") + b"\x1f"
    return b"J" + json.dumps(values, ensure_ascii=False).encode("utf-8", "surrogatepass") + b"\x1f"


def fingerprint(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def shape_ids(conn: sqlite3.Connection, texts) -> list[int]:
    """The row of each shape text, stored once by fingerprint (with its rules, for queries)."""
    ids, known = [], {}
    for text in texts:
        if text in known:
            ids.append(known[text])
            continue
        sha = fingerprint(text)
        row = conn.execute("SELECT shape FROM shapes WHERE sha256 = ?", (sha,)).fetchone()
        if row is None:
            shape = conn.execute("INSERT INTO shapes (sha256, facts) VALUES (?, ?)", (sha, text)).lastrowid
            conn.executemany("INSERT OR IGNORE INTO shape_rules VALUES (?, ?, ?)",
                             ((shape, rule, grade) for rule, grade in shape_rules(json.loads(text))))
            row = (shape,)
        known[text] = row[0]
        ids.append(row[0])
    return ids


def chain(conn: sqlite3.Connection, first: int) -> None:
    """Set `previous` and `digest` of batch `first` and every later one, in order."""
    row = conn.execute("SELECT digest FROM batches WHERE batch < ? ORDER BY batch DESC LIMIT 1", (first,)).fetchone()
    previous = row[0] if row else ""
    for (batch,) in conn.execute("SELECT batch FROM batches WHERE batch >= ? ORDER BY batch", (first,)).fetchall():
        conn.execute("UPDATE batches SET previous = ? WHERE batch = ?", (previous, batch))
        previous = batch_digest(conn, batch)
        conn.execute("UPDATE batches SET digest = ? WHERE batch = ?", (previous, batch))


def result_from_record(record: dict, grades: tuple) -> SampleResult:
    """A self-contained JSON Lines record (a schema-2 ledger's stored text, or a line `grade`
    wrote) as the SampleResult it was written from."""
    reasons = []
    for r in record["reasons"]:
        clauses = tuple(Clause(c["test"], c["limit"], c["held"], c["value"], measure=c.get("measure"),
                               field=c.get("field")) for c in r.get("clauses", ()))
        reasons.append(Reason(r["rule"], r["grade"], grades.index(r["grade"]), r["message"], r["source"],
                              measure=r.get("measure"), value=r.get("value"), unit=r.get("unit"),
                              test=r.get("test"), limit=r.get("limit"), capped_from=r.get("capped_from"),
                              capped_by=r.get("capped_by"), clauses=clauses,
                              next_step=next_step_from_record(r.get("next_step"))))
    ruleset = record["ruleset"]
    return SampleResult(
        sample_id=record["sample_id"], unit_id=record["unit_id"], class_name=record["class"],
        lubricant=record["lubricant"], sampled_on=record["sampled_on"], grade=record["grade"],
        level=record["level"], reasons=tuple(reasons),
        caveats=tuple(CaveatNote(c["caveat"], c["message"], c.get("source", ""), tuple(c.get("unless_missing", ())),
                                 next_step_from_record(c.get("next_step")), by_engine=c["caveat"] in ENGINE_CAVEATS)
                      for c in record["caveats"]),
        not_evaluated=tuple(NotEvaluated(n["rule"], tuple(n["missing"])) for n in record["not_evaluated"]),
        notice=record["notice"], ruleset_id=ruleset["id"], ruleset_version=ruleset["version"],
        ruleset_sha256=ruleset["sha256"], engine=record["engine"], unrated_because=record.get("unrated_because"),
        values=tuple(record["values"].items()), method=record["method"])


def _step_3_data(conn: sqlite3.Connection) -> None:
    """Schema-2 record texts become verdicts (shape and values); then the chain is computed."""
    grades = {sha: tuple(json.loads(text).get("grades", ())) for sha, text in
              conn.execute("SELECT sha256, canonical FROM rulesets").fetchall()}
    names = {}  # batch -> the value names its records carry (one batch's records all carry the same)
    for batch, record in conn.execute("SELECT s.batch, r.record FROM samples s JOIN results r ON r.entry = s.entry "
                                      "GROUP BY s.batch").fetchall():
        names[batch] = list(json.loads(record + "}")["values"])
    names = {batch: {"values": values, "derived": [], "oil_changed": False} for batch, values in names.items()}
    conn.executemany("UPDATE batches SET value_names = ? WHERE batch = ?",
                     [(json.dumps(value_names), batch) for batch, value_names in names.items()])
    cursor = conn.execute("SELECT r.entry, r.grade, r.level, r.record || b.record_tail, b.ruleset_sha256, b.batch "
                          "FROM results r JOIN samples s ON s.entry = r.entry JOIN batches b ON b.batch = s.batch "
                          "ORDER BY r.entry")
    while rows := cursor.fetchmany(DIGEST_ROWS):
        facts = [result_facts(result_from_record(json.loads(record), grades[sha]), names[batch])
                 for _, _, _, record, sha, batch in rows]
        shapes = shape_ids(conn, [shape for shape, _ in facts])
        conn.executemany("INSERT INTO verdicts VALUES (?, ?, ?, ?, ?)",
                         [(entry, grade, level, shape, values) for (entry, grade, level, *_), shape, (_, values)
                          in zip(rows, shapes, facts)])
    conn.execute("DROP TABLE results")
    conn.execute("UPDATE batches SET record_tail = ''")
    chain(conn, 1)


# (SQL, then a data step or None), in order.
MIGRATIONS = ((STEP_1, None), (STEP_2, None), (STEP_3, _step_3_data), (STEP_4, None), (STEP_5, None))

# What step n leaves in a ledger that no earlier state has (one query each, a count above 0 when
# present), so the tables tell the schema version apart from the header's PRAGMA user_version, which
# anyone can set. Frozen like the steps; a new step adds its mark.
STEP_MARKS = (
    "SELECT count(*) FROM sqlite_master WHERE type = 'table' AND name = 'rulesets'",
    "SELECT count(*) FROM sqlite_master WHERE type = 'index' AND name = 'samples_unit'",
    "SELECT count(*) FROM sqlite_master WHERE type = 'table' AND name = 'shapes'",
    "SELECT count(*) FROM pragma_table_info('batches') WHERE name = 'form'",
    "SELECT count(*) FROM pragma_table_info('samples') WHERE name = 'grade'",
)


def schema_step(conn: sqlite3.Connection) -> int:
    """The schema step a ledger's tables are at: the last step whose mark, and every earlier one's, is there."""
    step = 0
    for query in STEP_MARKS:
        if not conn.execute(query).fetchone()[0]:
            break
        step += 1
    return step
