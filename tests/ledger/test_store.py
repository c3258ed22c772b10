"""The ledger: idempotent re-import, refused and recorded corrections, schema checks.

Checks are against SQLite's own integrity check and counts (sqlite3 from the standard
library is the reference), and against grading the same samples in one batch without a
ledger: trend measures computed across ledger batches must give the same records.
"""

from __future__ import annotations

import io
import json
import sqlite3

import pytest

import sumpwise
from sumpwise.ledger.audit import explain_from_ledger, replay, stored_results, unit_history
from sumpwise.ledger.store import SCHEMA_VERSION, Correction, LedgerError, grade_into_ledger, migrate, open_ledger
from sumpwise.render.jsonl import jsonl_lines
from tests.conftest import DATA

RULES = DATA / "ledger" / "trend-rules.yaml"
SAMPLES = DATA / "ledger" / "samples.csv"


def _batch(text: str, name="batch.csv"):
    return sumpwise.read_samples(io.StringIO(text), name)


def _split():
    header, *rows = SAMPLES.read_text().splitlines()
    first = "\n".join([header] + rows[:3]) + "\n"
    second = "\n".join([header] + rows[3:]) + "\n"
    return first, second


def _count(db, table="samples") -> int:
    with sqlite3.connect(db) as conn:
        return conn.execute(f"SELECT count(*) FROM {table}").fetchone()[0]


@pytest.fixture
def ruleset():
    return sumpwise.load_ruleset(RULES)


def test_same_sample_same_content_adds_nothing(tmp_path, ruleset):
    db = tmp_path / "l.db"
    _, first = grade_into_ledger(db, sumpwise.read_samples(SAMPLES), ruleset)
    assert (first.new, first.known, first.corrections) == (9, 0, 0)
    _, again = grade_into_ledger(db, sumpwise.read_samples(SAMPLES), ruleset)
    assert (again.batch, again.new, again.known) == (None, 0, 9)
    assert _count(db) == 9 and _count(db, "batches") == 1
    assert _count(db, "verdicts") == 0  # form 3: each verdict in its sample's row, one row per sample
    assert _count(db, "rulesets") == 1  # the rule set is stored once, by fingerprint


def test_trends_across_batches_equal_one_batch(tmp_path, ruleset):
    db = tmp_path / "l.db"
    first, second = _split()
    grade_into_ledger(db, _batch(first), ruleset)
    later, _ = grade_into_ledger(db, _batch(second), ruleset)
    whole = sumpwise.grade(sumpwise.read_samples(SAMPLES), ruleset)
    def verdict(line: str) -> dict:
        """A record without what is each batch's own: its origin (file, row) and the forecasts made from
        that batch's samples."""
        return {key: value for key, value in json.loads(line).items() if key not in ("origin", "forecasts")}
    wanted = {json.loads(line)["sample_id"]: verdict(line) for line in "".join(jsonl_lines(whole)).splitlines()}
    for line in "".join(jsonl_lines(later)).splitlines():
        assert verdict(line) == wanted[json.loads(line)["sample_id"]]
    assert later.find("T-04").reasons[0].rule == "carbonyl-jump"  # its previous sample came from the ledger


def test_same_id_other_content_is_rejected_and_recorded_then_recorded_as_a_correction(tmp_path, ruleset):
    db = tmp_path / "l.db"
    grade_into_ledger(db, sumpwise.read_samples(SAMPLES), ruleset)
    changed = SAMPLES.read_text().replace("T-04,ST-1,steam-turbine,TEST-46,2026-04-05,3000,47.5,0.21,13.0",
                                          "T-04,ST-1,steam-turbine,TEST-46,2026-04-05,3000,47.5,0.21,6.0")
    changed += "T-10,ST-2,steam-turbine,TEST-46,2026-03-06,1600,46.2,0.10,3.0,direct,lab-a,false\n"
    graded, refused = grade_into_ledger(db, _batch(changed, "fixed.csv"), ruleset)
    assert (refused.batch, refused.new, refused.known, refused.conflicts) == (2, 1, 8, 1)
    [reject] = graded.rejects
    assert (reject.row, reject.sample_id, reject.field) == (4, "T-04", "sample_id")
    assert "batch 1" in reject.reason and "--correction" in reject.reason
    counts = graded.counts()
    assert (counts["read"], counts["graded"] + counts["unrated"], counts["rejected"]) == (10, 9, 1)
    assert graded.find("T-10") is not None and graded.find("T-04") is None  # the rest is graded
    with sqlite3.connect(db) as conn:
        assert conn.execute("SELECT batch, row, sample_id, field FROM rejects").fetchall() == [(2, 4, "T-04",
                                                                                               "sample_id")]
    assert _count(db) == 10
    _, recorded = grade_into_ledger(db, _batch(changed, "fixed.csv"), ruleset, Correction("typo in oxidation", "ana"))
    assert (recorded.new, recorded.known, recorded.corrections) == (0, 9, 1)
    with sqlite3.connect(db) as conn:
        assert conn.execute("SELECT reason, author FROM batches WHERE batch = 3").fetchone() == ("typo in oxidation",
                                                                                                  "ana")
    assert _count(db) == 11  # both versions are kept
    story = "\n".join(explain_from_ledger(db, "T-04"))
    assert "This version is a correction by ana: typo in oxidation." in story
    assert "This is the current record; 1 earlier version(s) were corrected: batch 1" in story
    assert "graded alert" in story  # the old verdict, from the old values
    history = unit_history(db, "ST-1")
    assert history.loc[history["sample_id"] == "T-04", "corrected"].tolist() == [True]
    assert len(history) == 7
    report = replay(db)
    assert report.checked == 11 and report.differences == ()


def test_a_file_that_is_not_a_ledger_is_refused_and_left_alone(tmp_path):
    text = tmp_path / "notes.db"
    text.write_text("not a database at all\n")
    with pytest.raises(LedgerError, match="not an SQLite database"):
        open_ledger(text)
    assert text.read_text() == "not a database at all\n"
    other = tmp_path / "other.db"
    with sqlite3.connect(other) as conn:
        conn.execute("CREATE TABLE inventory (part TEXT)")
    with pytest.raises(LedgerError, match="another kind"):
        open_ledger(other)
    with sqlite3.connect(other) as conn:
        assert [r[0] for r in conn.execute("SELECT name FROM sqlite_master")] == ["inventory"]


def test_a_newer_schema_is_refused(tmp_path, ruleset):
    db = tmp_path / "l.db"
    grade_into_ledger(db, sumpwise.read_samples(SAMPLES), ruleset)
    with sqlite3.connect(db) as conn:
        conn.execute(f"PRAGMA user_version = {SCHEMA_VERSION + 1}")
    with pytest.raises(LedgerError, match=f"schema version {SCHEMA_VERSION + 1}, newer"):
        open_ledger(db)
    assert _count(db) == 9


def test_an_older_schema_is_migrated_keeping_its_data(tmp_path, ruleset):
    db = tmp_path / "old.db"
    conn = sqlite3.connect(db, isolation_level=None)
    migrate(conn, to=1)
    assert conn.execute("PRAGMA user_version").fetchone()[0] == 1
    conn.execute("INSERT INTO rulesets VALUES ('abc', 'x', '1', '{}')")
    conn.close()
    conn = open_ledger(db)
    assert conn.execute("PRAGMA user_version").fetchone()[0] == SCHEMA_VERSION
    names = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'index'")}
    assert {"samples_unit", "samples_current", "samples_batch"} <= names
    # step 4: versions are found through the current one's corrections; `find` by date reads the dates
    assert not {"samples_sample", "samples_date"} & names
    assert conn.execute("SELECT count(*) FROM rulesets").fetchone()[0] == 1
    assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    conn.close()


def test_sample_values_are_stored_once(tmp_path, ruleset):
    db = tmp_path / "l.db"
    grade_into_ledger(db, sumpwise.read_samples(SAMPLES), ruleset)
    with sqlite3.connect(db) as conn:
        content, columns, held, form, sha, typed = conn.execute(
            "SELECT s.content, b.columns, b.held, b.form, s.content_sha256, json_array(s.sample_id, s.unit_id, "
            "s.class, s.sampled_on, s.oil_hours, s.oil_changed, s.method, s.lab) "
            "FROM samples s JOIN batches b USING (batch) WHERE sample_id = 'T-09'").fetchone()
    assert (form, sha) == (3, "")
    # the identity columns hold their values; the rest are one array, in the batch's column order
    assert json.loads(held) == ["sample_id", "unit_id", "class", "sampled_on", "oil_hours", "oil_changed", "method",
                                "lab"]
    assert json.loads(typed) == ["T-09", "ST-2", "steam-turbine", "2026-02-06", 1300.0, 1, "direct", "lab-a"]
    rest = [name for name in json.loads(columns) if name not in json.loads(held)]
    assert dict(zip(rest, json.loads(content))) == {"an": 0.09, "kv40": 46.1, "lubricant": "TEST-46",
                                                    "oxidation": 2.5}
    # Reference: Python's json module spells the whole sample as sample_contents does (what tells a
    # known sample from a changed one, and a form-1 sample's stored text).
    from sumpwise.ledger.store import object_text
    values = {"an": 0.09, "class": "steam-turbine", "kv40": 46.1, "lab": "lab-a", "lubricant": "TEST-46",
              "method": "direct", "oil_changed": True, "oil_hours": 1300.0, "oxidation": 2.5, "sample_id": "T-09",
              "sampled_on": "2026-02-06", "unit_id": "ST-2"}
    assert object_text(content, 2, columns, held, *json.loads(typed)) == json.dumps(values, sort_keys=True,
                                                                                    ensure_ascii=False)


def test_sample_contents_equal_the_standard_json_module_row_by_row():
    # Reference: Python's json module (sorted keys, no ASCII escaping); missing values are left out.
    import math

    import numpy as np
    import pandas as pd

    from sumpwise.ledger.store import sample_contents
    words = ["plain", 'a "quote"', "back\\slash", "tab\tand\nnewline", "é ü ß", "\x7f", "line\u2028sep", ""]
    frame = pd.DataFrame({
        "sample_id": [f"S{k}" for k in range(8)],
        "note": np.array(words, dtype=object),
        "maybe": np.array([None, "x", None, "y", float("nan"), "z", None, "w"], dtype=object),
        "value": [0.1, -0.0, 1e16, 1e-5, float("nan"), 5e-324, float("inf"), 0.30000000000000004],
        "count": np.arange(-3, 5),
        "flag": [True, False] * 4,
        "mixed": np.array([1, 1.0, True, "1", None, 2, "2", 2.5], dtype=object),
        'odd "key" é': ["v"] * 8,
    })
    expected = []
    for k in range(len(frame)):
        row = {}
        for name in frame.columns:
            v = frame[name].iat[k]
            if name in ("value", "count"):
                if math.isfinite(float(v)):
                    row[name] = float(v)
            elif name == "flag":
                row[name] = bool(v)
            elif not pd.isna(v):
                row[name] = str(v)
        expected.append(json.dumps(row, sort_keys=True, ensure_ascii=False, separators=(", ", ": ")))
    assert sample_contents(frame).tolist() == expected
    assert sample_contents(frame.iloc[:0]).tolist() == [] and sample_contents(frame[[]]).tolist() == ["{}"] * 8


def test_missing_values_are_stored_as_null(tmp_path, ruleset):
    # SQLite stores a bound NaN as NULL (sqlite.org/c3ref/bind_blob.html); the ledger relies on it.
    db = tmp_path / "l.db"
    grade_into_ledger(db, sumpwise.read_samples(SAMPLES), ruleset)
    with sqlite3.connect(db) as conn:
        kinds = conn.execute("SELECT typeof(kv100), typeof(oxidation), typeof(oil_hours), typeof(level) FROM samples "
                             "WHERE sample_id = 'T-04'").fetchone()
        unrated = conn.execute("SELECT typeof(level) FROM samples WHERE sample_id = 'T-01'").fetchone()
    # forms 2 and 3 leave the reading columns empty: the values are in the sample's array
    assert kinds == ("null", "null", "real", "integer") and unrated == ("null",)


def test_a_new_ledger_gets_the_larger_page_and_an_old_one_keeps_its_own(tmp_path, ruleset):
    # PRAGMA page_size applies only before a database has content (sqlite.org/pragma.html#pragma_page_size).
    from sumpwise.ledger.store import PAGE_SIZE
    db = tmp_path / "new.db"
    grade_into_ledger(db, sumpwise.read_samples(SAMPLES), ruleset)
    with sqlite3.connect(db) as conn:
        assert conn.execute("PRAGMA page_size").fetchone()[0] == PAGE_SIZE
    old = tmp_path / "old.db"
    conn = sqlite3.connect(old, isolation_level=None)
    conn.execute("PRAGMA page_size=4096")
    migrate(conn)
    conn.close()
    _, recorded = grade_into_ledger(old, sumpwise.read_samples(SAMPLES), ruleset)
    with sqlite3.connect(old) as conn:
        assert conn.execute("PRAGMA page_size").fetchone()[0] == 4096
        assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    assert recorded.new == 9 and _count(old) == 9


def test_values_the_typed_columns_do_not_hold_as_written_stay_in_the_array(tmp_path):
    # A batch given through the API with `method` DIRECT (the typed column holds it as read,
    # "direct") and -0.0 oil hours (SQLite would give back 0.0) keeps those two in the array as
    # written; a unit-less row and a missing lab keep the rest held. Re-importing the same batch
    # adds nothing and the ledger replays clean: the values come back exactly.
    from sumpwise.intake.samples import SampleBatch
    ruleset = sumpwise.load_ruleset(DATA / "ledger" / "wear-rules.yaml")
    text = ("sample_id,unit_id,class,lubricant,sampled_on,oil_hours,iron,oxidation,method,lab,oil_changed\n"
            "M-1,HPU-1,hydraulic,HYD-46,2026-03-02,1000,10,4.0,Differential,lab-a,no\n"
            "M-2,,hydraulic,HYD-46,2026-03-09,1168,22,9.0,differential,,yes\n"
            "M-3,HPU-1,hydraulic,HYD-46,2026-03-16,-0.0,23,9.5,direct,lab-a,no\n")
    frame = _batch(text).frame
    frame.loc[frame["sample_id"] == "M-3", "method"] = "DIRECT"
    db = tmp_path / "l.db"
    _, first = grade_into_ledger(db, SampleBatch(frame.copy(), (), 3, "api"), ruleset)
    _, again = grade_into_ledger(db, SampleBatch(frame.copy(), (), 3, "api"), ruleset)
    assert (first.new, again.new, again.known) == (3, 0, 3)
    with sqlite3.connect(db) as conn:
        held, = conn.execute("SELECT held FROM batches").fetchone()
    assert json.loads(held) == ["sample_id", "unit_id", "class", "sampled_on", "oil_changed", "lab"]
    report = replay(db)
    assert (report.checked, report.differences, report.engine_changes) == (3, (), ())


def test_a_bulk_batch_builds_the_same_indexes_after_its_rows(tmp_path, ruleset, monkeypatch):
    # A batch at least as large as the ledger (and BULK_ROWS) drops the indexes on samples and
    # creates them again after its rows: the schema must come out as incremental recording leaves it.
    import sumpwise.ledger.store as store
    plain, bulk = tmp_path / "plain.db", tmp_path / "bulk.db"
    grade_into_ledger(plain, sumpwise.read_samples(SAMPLES), ruleset)
    monkeypatch.setattr(store, "BULK_ROWS", 0)
    grade_into_ledger(bulk, sumpwise.read_samples(SAMPLES), ruleset)
    schema = "SELECT type, name, sql FROM sqlite_master ORDER BY name"
    with sqlite3.connect(plain) as a, sqlite3.connect(bulk) as b:
        assert a.execute(schema).fetchall() == b.execute(schema).fetchall()
        assert {"samples_unit", "samples_current", "samples_batch"} <= {
            row[1] for row in b.execute(schema).fetchall() if row[0] == "index"}
        assert b.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    from sumpwise.ledger.audit import replay
    assert replay(bulk).differences == ()
    # The unique index on current ids still refuses a second current row of an id, bulk or not.
    with sqlite3.connect(bulk) as conn, pytest.raises(sqlite3.IntegrityError):
        conn.execute("INSERT INTO samples (batch, sample_id, oil_changed, method, content, content_sha256) "
                     "SELECT batch, sample_id, oil_changed, method, content, '' FROM samples LIMIT 1")


def _files(folder) -> list[str]:
    return sorted(p.name for p in folder.iterdir())


def test_a_new_ledger_is_built_aside_and_comes_out_as_one_recorded_in_place(tmp_path, ruleset):
    # The same batch recorded into a new ledger (built beside its place, no journal) and into an
    # empty file (recorded in place, WAL): the same rows, digest chain and journal mode, no side file.
    new, in_place = tmp_path / "new" / "l.db", tmp_path / "old" / "l.db"
    new.parent.mkdir()
    in_place.parent.mkdir()
    in_place.touch()
    for db in (new, in_place):
        _, recorded = grade_into_ledger(db, sumpwise.read_samples(SAMPLES), ruleset)
        assert (recorded.batch, recorded.new) == (1, 9)
    assert _files(new.parent) == ["l.db"]
    rows = "SELECT entry, sample_id, grade, level, shape, vals, content FROM samples ORDER BY entry"
    with sqlite3.connect(new) as a, sqlite3.connect(in_place) as b:
        assert a.execute(rows).fetchall() == b.execute(rows).fetchall()
        assert a.execute("SELECT digest FROM batches").fetchone() != ("",)
        assert a.execute("PRAGMA journal_mode").fetchone() == b.execute("PRAGMA journal_mode").fetchone() == ("wal",)
        assert a.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    report = replay(new)
    assert (report.checked, report.differences) == (9, ())


def test_a_failure_while_a_new_ledger_is_built_leaves_no_ledger(tmp_path, ruleset, monkeypatch):
    import sumpwise.ledger.store as store

    def broken(*args, **kwargs):
        raise RuntimeError("disk trouble")

    monkeypatch.setattr(store, "_record", broken)
    with pytest.raises(RuntimeError):
        grade_into_ledger(tmp_path / "l.db", sumpwise.read_samples(SAMPLES), ruleset)
    assert _files(tmp_path) == []


def test_a_ledger_created_meanwhile_by_another_run_gets_this_batch_too(tmp_path, ruleset, monkeypatch):
    # Another run puts a ledger in place while this one builds its own: this run's side file is
    # dropped and its batch recorded into that ledger, after the other's, with nothing lost.
    import os

    import sumpwise.ledger.store as store
    db = tmp_path / "l.db"
    first, second = _split()
    link = os.link

    def beaten(source, target):
        monkeypatch.setattr(store.os, "link", link)
        grade_into_ledger(db, _batch(first), ruleset)  # the other run, landing first
        return link(source, target)

    monkeypatch.setattr(store.os, "link", beaten)
    _, recorded = grade_into_ledger(db, _batch(second), ruleset)
    assert (recorded.batch, recorded.new) == (2, 6) and _files(tmp_path) == ["l.db"]
    assert _count(db) == 9 and _count(db, "batches") == 2
    assert replay(db).differences == ()


def test_without_hard_links_a_new_ledger_is_recorded_in_place(tmp_path, ruleset, monkeypatch):
    import sumpwise.ledger.store as store

    def unsupported(source, target):
        raise PermissionError(1, "Operation not permitted")

    monkeypatch.setattr(store.os, "link", unsupported)
    _, recorded = grade_into_ledger(tmp_path / "l.db", sumpwise.read_samples(SAMPLES), ruleset)
    assert (recorded.batch, recorded.new) == (1, 9) and _files(tmp_path) == ["l.db"]
    assert _count(tmp_path / "l.db") == 9
    assert replay(tmp_path / "l.db").differences == ()


def test_record_values_the_sample_holds_are_read_back_not_stored_twice(tmp_path, ruleset):
    # Each value once: a record value equal to the sample's stored input is left out of the
    # verdict's values and read back from the sample; a censored reading (kept as the lab wrote
    # it) stays with the verdict. Reference: the records `grade` writes for the same file.
    text = SAMPLES.read_text().replace("T-04,ST-1,steam-turbine,TEST-46,2026-04-05,3000,47.5,0.21,13.0",
                                       "T-04,ST-1,steam-turbine,TEST-46,2026-04-05,3000,47.5,<0.05,13.0")
    db = tmp_path / "l.db"
    graded, _ = grade_into_ledger(db, _batch(text), ruleset)
    with sqlite3.connect(db) as conn:
        names, = conn.execute("SELECT value_names FROM batches").fetchone()
        vals = dict(conn.execute("SELECT sample_id, vals FROM samples").fetchall())
    names = json.loads(names)
    assert names["values"] == ["kv40", "an", "oxidation", "oil_hours", "oxidation_differential"]
    # `an` holds `<0.05` in T-04; T-05's carbonyl is read by subtraction, so the record gives it as
    # oxidation_differential, not as the stored `oxidation`: both stay with the verdict
    assert names["from_content"] == ["kv40", "oil_hours"]
    # T-09's array ends with an, oxidation, oxidation_differential, its derived values and the flag
    assert json.loads(vals["T-09"])[-len(names["derived"]) - 4:-len(names["derived"]) - 1] == [0.09, 2.5, None]
    assert 46.1 not in json.loads(vals["T-09"]) and 1300.0 not in json.loads(vals["T-09"])
    stored, _ = stored_results(db)
    assert [r.values for r in stored] == [r.values for r in graded.results()]
    assert dict(stored[3].values)["an"] == "<0.05"
    assert not replay(db).failed(strict=True)


def test_replay_says_when_the_engine_reads_a_read_back_value_otherwise(tmp_path, ruleset, monkeypatch):
    # The values the ledger reads back from the sample are checked again at replay: an engine
    # that read the stored kv40 otherwise (here: one that halves it before grading) is not silent.
    db = tmp_path / "l.db"
    grade_into_ledger(db, sumpwise.read_samples(SAMPLES), ruleset)
    from sumpwise.ledger import audit
    real = audit.grade_batch

    def halving(batch, *args, **kwargs):
        graded = real(batch, *args, **kwargs)
        graded.measured["kv40"] = graded.measured["kv40"] / 2
        graded.columns._numbers.pop("kv40", None)
        return graded

    monkeypatch.setattr(audit, "grade_batch", halving)
    report = replay(db)
    assert report.failed()
    said = [d for d in report.differences if "reads back from its stored input values" in d.what]
    assert len(said) == 9


def test_a_rate_within_the_noise_margin_is_stored_as_numbers_and_explained_in_words(tmp_path):
    # HPU-3 resampled a day later: iron 9 -> 11 ppm over 20 h, within the rule set's 2 ppm margin
    # (tests/derive/test_trends_found4.py). The ledger keeps the rate's interval as the record's
    # numbers, not a sentence, and `explain` words it from them.
    found = DATA / "derive_found4"
    db = tmp_path / "l.db"
    graded, _ = grade_into_ledger(db, sumpwise.read_samples(found / "resample.csv"),
                                  sumpwise.load_ruleset(found / "rules.yaml"))
    with sqlite3.connect(db) as conn:
        vals, = conn.execute("SELECT vals FROM samples WHERE sample_id = 'B-603'").fetchone()
    # after the grade-may-be-higher caveat's message: rate, interval, step, margin, hours
    assert "from a step of" not in vals and json.loads(vals)[1:7] == [100.0, 0.0, 200.0, 2.0, 2.0, 20.0]
    stored, _ = stored_results(db)
    assert [r.not_evaluated for r in stored] == [r.not_evaluated for r in graded.results()]
    story = " ".join(" ".join(explain_from_ledger(db, "B-603")).split())  # unwrapped
    assert "iron_step_per_1000h 100, [0, 200] from a step of 2 within its noise margin of 2 over 20 h" in story
    assert not replay(db).failed(strict=True)
