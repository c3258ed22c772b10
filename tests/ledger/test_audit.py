"""Audit reads of the ledger: the story of one verdict, and replay finding what was altered.

Replay's reference is the engine grading the stored values afresh; alterations are made
with sqlite3 from the standard library, behind sumpwise's back.
"""

from __future__ import annotations

import sqlite3

import pytest

import sumpwise
from sumpwise.ledger.audit import explain_from_ledger, replay, stored_results
from sumpwise.ledger.store import LedgerError, grade_into_ledger
from tests.conftest import DATA

RULES = DATA / "ledger" / "trend-rules.yaml"
SAMPLES = DATA / "ledger" / "samples.csv"


@pytest.fixture
def ruleset():
    return sumpwise.load_ruleset(RULES)


def test_explain_tells_the_story_from_the_ledger(tmp_path, ruleset):
    db = tmp_path / "l.db"
    grade_into_ledger(db, sumpwise.read_samples(SAMPLES), ruleset)
    story = "\n".join(explain_from_ledger(db, "T-04"))
    for text in ("Values as recorded: kv40 47.5 mm2/s, an 0.21 mg KOH/g, oxidation 13 abs/cm, oil_hours 3000 h; method direct",
                 "carbonyl-jump: alert", "above 5 abs/cm", "Source: test limit, invented",
                 f"sha256 {ruleset.sha256}", "Notice:", "Cautions:", "Unit ST-1: this sample and the ones before it",
                 "2026-01-05  T-01"):
        assert text in story, text
    broken = "\n".join(explain_from_ledger(db, "T-05"))
    assert "trend-break: method changed from direct to subtraction" in broken
    with pytest.raises(LedgerError, match="no sample 'NOPE'"):
        explain_from_ledger(db, "NOPE")


def test_replay_finds_altered_results_values_and_rule_sets(tmp_path, ruleset):
    db = tmp_path / "l.db"
    grade_into_ledger(db, sumpwise.read_samples(SAMPLES), ruleset)
    assert replay(db).differences == ()
    with sqlite3.connect(db) as conn:
        conn.execute("UPDATE samples SET grade = 'normal' WHERE sample_id = 'T-04'")
        conn.execute("UPDATE samples SET content = replace(content, '0.12', '0.99') WHERE sample_id = 'T-02'")
    found = {d.sample_id: d.what for d in replay(db).differences}
    assert found.pop(None).startswith("its stored rows no longer match the batch's digest")
    assert found["T-04"].startswith("stored normal, replayed alert (recorded by sumpwise")
    assert found["T-04"].endswith("altered after recording?)")  # never excused as an engine change
    # A batch stored in form 2 has no fingerprint a sample: its digest covers the values, and the
    # altered sample shows as graded otherwise than recorded.
    assert "its values differ" in found["T-02"] and "altered after recording?" in found["T-02"]
    # T-03's acid step was taken from T-02's altered value:
    assert found["T-03"].startswith("stored watch, replayed normal")
    assert set(found) == {"T-02", "T-03", "T-04"}
    assert {d.sample_id for d in replay(db, since="2026-03-10").differences} == {"T-04", None}
    with sqlite3.connect(db) as conn:
        conn.execute("UPDATE rulesets SET canonical = replace(canonical, '0.05', '0.06')")
    assert all("no longer has its fingerprint" in d.what for d in replay(db).differences if d.sample_id)


def test_a_sample_that_names_no_method_is_told_from_the_ledger_in_the_method_it_was_graded_in(tmp_path, ruleset):
    # The same samples without their `method` column: the engine reads each in the direct
    # convention (its record says so), and the ledger's story and records must say the same.
    text = SAMPLES.read_text(encoding="utf-8").splitlines()
    at = text[0].split(",").index("method")
    unnamed = tmp_path / "unnamed.csv"
    unnamed.write_text("\n".join(",".join(c for k, c in enumerate(line.split(",")) if k != at) for line in text)
                       + "\n", encoding="utf-8")
    db = tmp_path / "l.db"
    graded = grade_into_ledger(db, sumpwise.read_samples(unnamed), ruleset)[0]
    assert {r.method for r in graded.results()} == {"direct"}
    assert "; method direct" in "\n".join(explain_from_ledger(db, "T-04"))
    assert {r.method for r in stored_results(db)[0]} == {"direct"}


def test_history_shows_a_censored_reading_as_the_lab_wrote_it(tmp_path):
    # Water `>500` ppm (above a Karl Fischer range) is a reading, not a missing value: the unit's
    # table must not show it as '-' beside an alert it caused (Brackwater steam-turbine water limits).
    import io

    from sumpwise.ledger.audit import unit_history, write_history
    from tests.conftest import ROOT
    text = ("sample_id,unit_id,class,lubricant,sampled_on,water,kv40,an,oxidation\n"
            "B-3,ST-6,steam-turbine,TURB-46-M,2026-02-02,80,46,0.1,2\n"
            "B-4,ST-6,steam-turbine,TURB-46-M,2026-03-02,>500,46,0.1,2\n")
    db = tmp_path / "l.db"
    grade_into_ledger(db, sumpwise.read_samples(io.StringIO(text), "w.csv"),
                      sumpwise.load_ruleset(ROOT / "scenarios" / "brackwater" / "site.yaml"))
    unit = unit_history(db, "ST-6")
    assert unit["water"].tolist() == [80.0, ">500"]
    out = io.StringIO()
    write_history(unit, "ST-6", out)
    line = next(row for row in out.getvalue().splitlines() if row.startswith("2026-03-02"))
    assert line.split()[-2:] == [">500", "alert"]
    as_csv = io.StringIO()
    write_history(unit, "ST-6", as_csv, "csv")
    assert [row.split(",")[9] for row in as_csv.getvalue().splitlines()] == ["water", "80.0", ">500"]
