"""Record formats over time: a ledger recorded before records had a format replays clean.

Such a ledger is made here the way it was then: the same samples recorded, with each stored
record rewritten (with sqlite3, behind sumpwise's back) to the format-1 text of that time.
"""

from __future__ import annotations

import sqlite3

from conftest import DATA

import sumpwise
from sumpwise.ledger.audit import replay
from sumpwise.ledger.store import grade_into_ledger, record_tail
from sumpwise.render.jsonl import jsonl_lines

RULES = DATA / "ledger" / "trend-rules.yaml"
SAMPLES = DATA / "ledger" / "samples.csv"


def test_a_ledger_of_format_1_records_replays_clean_and_alterations_still_show(tmp_path):
    ruleset = sumpwise.load_ruleset(RULES)
    db = tmp_path / "old.db"
    graded, _ = grade_into_ledger(db, sumpwise.read_samples(SAMPLES), ruleset)
    old = "".join(jsonl_lines(graded, form="format-1", drop_tail=record_tail(ruleset))).splitlines()
    assert not old[0].startswith('{"format"') and old[0].startswith('{"sample_id"')
    with sqlite3.connect(db) as conn:
        ids = [row[0] for row in conn.execute("SELECT sample_id FROM samples ORDER BY entry")]
        assert ids == list(graded.measured["sample_id"])
        conn.executemany("UPDATE results SET record = ? WHERE entry = (SELECT entry FROM samples WHERE sample_id = ?)",
                         zip(old, ids))
        stored = [row[0] for row in conn.execute("SELECT record FROM results ORDER BY entry")]
    assert stored == old
    report = replay(db)
    assert report.differences == () and report.checked == len(old)
    with sqlite3.connect(db) as conn:
        conn.execute("UPDATE results SET record = replace(record, '\"grade\": \"alert\"', '\"grade\": \"normal\"') "
                     "WHERE entry = (SELECT entry FROM samples WHERE sample_id = 'T-04')")
    assert [d.sample_id for d in replay(db).differences] == ["T-04"]
