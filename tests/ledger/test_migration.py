"""Migrations: released steps never change, and a ledger written before the change (schema 2,
every result kept as its JSON Lines text) is migrated in place and replays clean, but for the
verdicts a later engine change re-decides (ENGINE_CHANGES).

The reference for step 1 and 2 is tests/data/ledger/brackwater-v1.db itself: a ledger that
sumpwise wrote with those steps before they were frozen as text.
"""

import hashlib
import shutil
import sqlite3
from pathlib import Path

from sumpwise.ledger.audit import replay, stored_results
from sumpwise.ledger.schema import MIGRATIONS
from sumpwise.ledger.store import SCHEMA_VERSION, migrate, open_ledger
from sumpwise.vocabulary.measures import TREND_BASES

OLD_LEDGER = Path(__file__).resolve().parents[1] / "data" / "ledger" / "brackwater-v1.db"
STEP_4_LEDGER = OLD_LEDGER.with_name("brackwater-v4.db")  # form-2 batches (tests/data/ledger/README.md)

# Verdicts of the old ledger that today's engine grades otherwise, and why. Replay must name
# these and nothing else. Since FTIR conventions became distinct measures, an oxidation value
# read by spectral subtraction (method "subtraction") is the measure `oxidation_differential`,
# which the 2026 site rule set has no limit on; in 2026 it was graded as `oxidation`. And a
# sample of a class the rule set lacks now carries the `unknown-class` caveat (no silent pass).
ENGINE_CHANGES = {"BP-0059": "screw-compressor, oxidation 19.6 by subtraction",
                  "BP-0148": "screw-compressor, oxidation 27.7 by subtraction",
                  "BP-0225": "class ro-high-pressure-pump, not in the rule set: unknown-class caveat",
                  "BP-0260": "screw-compressor, oxidation 41.0 by subtraction"}

# SHA-256 of each released step's text. A failure here means a released step was edited:
# put the edit back and add a step instead (DEVELOPERS.md, "Change the ledger's schema").
RELEASED = ("20e63dfeb2b5ce4df369c6b07f49c6e2c1e8b953c9306d8d5cc6b6943b501da2",
            "05b510c348a44a964fd1f38cba058af3b27a01df55c3bfebb8006a12acc347a1",
            "376b66162183b588b4409b300e787dff7418101af80174cf986feab65bea33c1",
            "2dd8a471c4733d99c0b45ed2ceef20ad7b501725909150bbf4401ce84c1fd18e",
            "83820988ad987dda9b4315155f17ffeec039596d5058fb1bb80e9b33b42abd96")


def test_released_steps_are_unchanged():
    assert len(MIGRATIONS) == SCHEMA_VERSION
    assert tuple(hashlib.sha256(sql.encode()).hexdigest() for sql, _ in MIGRATIONS[:len(RELEASED)]) == RELEASED


def test_steps_1_and_2_make_the_schema_the_old_ledger_has():
    conn = sqlite3.connect(":memory:", isolation_level=None)
    migrate(conn, to=2)
    made = conn.execute("SELECT type, name, sql FROM sqlite_master ORDER BY name").fetchall()
    old = sqlite3.connect(OLD_LEDGER.resolve().as_uri() + "?mode=ro&immutable=1", uri=True)
    assert made == old.execute("SELECT type, name, sql FROM sqlite_master ORDER BY name").fetchall()
    assert old.execute("PRAGMA user_version").fetchone()[0] == 2


def test_every_trend_base_has_its_column():
    conn = sqlite3.connect(":memory:", isolation_level=None)
    migrate(conn)
    columns = {row[1] for row in conn.execute("PRAGMA table_info(samples)")}
    assert set(TREND_BASES) <= columns, "a new trend base needs a migration step that adds its column"


def test_a_ledger_written_before_the_change_is_migrated_in_place_and_replays_clean_but_for_engine_changes(tmp_path):
    db = tmp_path / "old.db"
    shutil.copyfile(OLD_LEDGER, db)
    report = replay(db)
    assert report.differences == () and report.integrity == ()  # nothing altered, nothing failing
    assert {d.sample_id for d in report.engine_changes} == set(ENGINE_CHANGES)
    assert all("recorded by sumpwise 0.1.0" in d.what and "an engine change, not an alteration" in d.what
               for d in report.engine_changes)  # told apart from tampering: the batch's digest holds
    what = {d.sample_id: d.what for d in report.engine_changes}
    assert "caveats: recorded none, now unknown-class" in what["BP-0225"]
    assert "fired: recorded carbonyl-rise=urgent, acid-rise=watch, carbonyl-rising-fast=watch, now acid-rise=watch" \
        in what["BP-0260"]
    assert (report.checked, report.batches, report.rulesets) == (329, 4, 2)
    conn = open_ledger(db)
    assert conn.execute("PRAGMA user_version").fetchone()[0] == SCHEMA_VERSION
    assert conn.execute("SELECT name FROM sqlite_master WHERE name = 'results'").fetchall() == []
    assert conn.execute("SELECT count(*) FROM verdicts").fetchone()[0] == 329
    assert conn.execute("SELECT count(*) FROM shapes").fetchone()[0] < 100  # shared, not one a sample
    conn.close()


def test_the_migrated_verdicts_are_the_records_the_old_ledger_held(tmp_path):
    import json

    from sumpwise.render.jsonl import dumps
    old = sqlite3.connect(OLD_LEDGER.resolve().as_uri() + "?mode=ro&immutable=1", uri=True)
    stored = {json.loads(text)["sample_id"]: text for (text,) in old.execute(
        "SELECT r.record || b.record_tail FROM results r JOIN samples s ON s.entry = r.entry "
        "JOIN batches b ON b.batch = s.batch WHERE s.superseded_in IS NULL")}
    db = tmp_path / "old.db"
    shutil.copyfile(OLD_LEDGER, db)
    results, _ = stored_results(db)
    assert len(results) == len(stored) == 327
    for result in results:
        record, old_record = json.loads(dumps(result.to_record())), json.loads(stored[result.sample_id])
        # Every key the old record had, with the same value (a newer record may carry more keys).
        assert {key: record.get(key) for key in old_record} == old_record, result.sample_id


def test_replay_of_the_old_ledger_exits_clean_and_lists_the_engine_changes_strict_fails(tmp_path):
    from tests.conftest import run_cli
    db = tmp_path / "old.db"
    shutil.copyfile(OLD_LEDGER, db)
    run = run_cli("replay", "--db", db)
    assert run.code == 0, run.out
    assert "integrity: clean" in run.out
    listed = [line.split(" (batch ")[0] for line in run.out.splitlines() if line.startswith("engine change: ")]
    assert listed == [f"engine change: {sid}" for sid in sorted(ENGINE_CHANGES)]
    assert "reproducibility: 325 result(s) graded as recorded; 4 graded otherwise than an older engine" in run.out
    assert run_cli("replay", "--db", db, "--strict").code == 3


def test_a_step_4_ledger_is_migrated_in_place_keeps_its_digests_and_takes_form_3_batches(tmp_path):
    import io

    import sumpwise
    from sumpwise.ledger.audit import explain_from_ledger, find_samples, recorded_rejects, unit_history
    from sumpwise.ledger.store import grade_into_ledger
    db = tmp_path / "v4.db"
    shutil.copyfile(STEP_4_LEDGER, db)
    old = sqlite3.connect(STEP_4_LEDGER.resolve().as_uri() + "?mode=ro&immutable=1", uri=True)
    digests = old.execute("SELECT batch, form, digest FROM batches ORDER BY batch").fetchall()
    verdicts = old.execute("SELECT * FROM verdicts ORDER BY entry").fetchall()
    assert old.execute("PRAGMA user_version").fetchone()[0] == 4 and {form for _, form, _ in digests} == {2}
    report = replay(db)  # the file is writable: migrated in place first
    # Engine 0.6.0 adds `oxidation-below-new` to every direct reading of this file: its rule set writes
    # TEST-46's new-oil carbonyl 1.0 in abs/0.1 mm (100 abs/cm) while the readings are 1.2-13 abs/cm.
    # The recorded verdicts stand; replay lists the new caveat as an engine change, nothing else.
    assert report.differences == () and report.checked == 10
    assert {d.sample_id for d in report.engine_changes} == {"T-01", "T-02", "T-03", "T-04", "T-06", "T-07",
                                                            "T-08", "T-09"}
    assert all(d.kind == "engine change" and "now" in d.what and "oxidation-below-new" in d.what.split("now")[1]
               and "oxidation-below-new" not in d.what.split("now")[0] for d in report.engine_changes)
    conn = open_ledger(db)
    assert conn.execute("PRAGMA user_version").fetchone()[0] == SCHEMA_VERSION
    assert conn.execute("SELECT batch, form, digest FROM batches ORDER BY batch").fetchall() == digests
    assert conn.execute("SELECT * FROM verdicts ORDER BY entry").fetchall() == verdicts  # kept where they were
    assert conn.execute("SELECT count(*) FROM samples WHERE grade IS NOT NULL OR shape IS NOT NULL").fetchone() == (0,)
    conn.close()
    assert replay(db).differences == ()
    # A new batch on top is form 3 (one row a sample), chained to the last form-2 batch.
    ruleset = sumpwise.load_ruleset(STEP_4_LEDGER.with_name("trend-rules.yaml"))
    header, *rows = STEP_4_LEDGER.with_name("samples.csv").read_text().splitlines()
    later = rows[8].replace("T-09", "T-10").replace("2026-02-06", "2026-03-06").replace(",1300,", ",1800,")
    fix = rows[4].replace(",2.0,", ",2.2,")  # T-05's oxidation retyped
    _, recorded = grade_into_ledger(db, sumpwise.read_samples(io.StringIO("\n".join([header, later, fix]) + "\n"),
                                                              "fourth.csv"), ruleset,
                                    sumpwise.ledger.store.Correction("retyped", "lab desk"))
    assert (recorded.batch, recorded.new, recorded.corrections) == (4, 1, 1)
    with sqlite3.connect(db) as conn:
        assert conn.execute("SELECT form, previous FROM batches WHERE batch = 4").fetchone() == (3, digests[-1][2])
        assert conn.execute("SELECT count(*) FROM verdicts v JOIN samples s USING (entry) WHERE s.batch = 4"
                            ).fetchone() == (0,)
    report = replay(db)
    assert report.differences == () and report.checked == 12 and report.last_batch == 4
    # The auditor's queries read both forms alike.
    assert set(find_samples(db, unit="ST-2")["sample_id"]) >= {"T-09", "T-10"}
    assert len(unit_history(db, "ST-2")) == len(find_samples(db, unit="ST-2"))
    fixed_id = fix.split(",")[0]
    lines = "\n".join(explain_from_ledger(db, fixed_id))
    assert "retyped" in lines and "lab desk" in lines
    assert len(recorded_rejects(db)) == 2  # the step-4 reject and conflict, kept
