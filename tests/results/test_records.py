"""Results as data: every row read is counted once, and a record says what the draft lists.

The key list is the rule-language draft's "What a graded sample records"
(../shared/rule-language.md); the counts are checked against the fixture's own rows.
"""

from conftest import DATA, ROOT

from sumpwise import grade, load_ruleset, read_samples

SITE = ROOT / "scenarios" / "brackwater" / "site.yaml"
SAMPLES = ROOT / "scenarios" / "brackwater" / "samples.csv"


def test_counts_add_up_to_the_rows_read():
    batch = read_samples(DATA / "samples" / "bad-rows.csv")
    graded = grade(batch, load_ruleset(DATA / "rulesets" / "draft.yaml"))
    counts = graded.counts()
    data_rows = len((DATA / "samples" / "bad-rows.csv").read_text().splitlines()) - 1
    assert counts["read"] == data_rows
    assert counts["graded"] + counts["unrated"] + counts["rejected"] == counts["read"]
    assert counts["rejected"] == len({r.row for r in batch.rejects}) > 0


def test_a_record_carries_what_the_draft_lists():
    ruleset = load_ruleset(SITE)
    graded = grade(read_samples(SAMPLES), ruleset)
    record = graded.find("BP-0013").to_record()
    for key in ("sample_id", "unit_id", "class", "grade", "level", "reasons", "caveats", "not_evaluated",
                "notice", "ruleset", "engine"):
        assert key in record, key
    assert record["ruleset"] == {"id": ruleset.id, "version": ruleset.version, "sha256": ruleset.sha256}
    reason = record["reasons"][0]
    for key in ("rule", "grade", "message", "source"):
        assert key in reason, key
    assert reason.get("capped_from") == "alert" and reason.get("capped_by") == "ester-carbonyl"
    assert record["level"] == list(ruleset.grades).index(record["grade"])


def test_find_and_grades_agree_with_the_records():
    graded = grade(read_samples(SAMPLES), load_ruleset(SITE))
    grades = graded.grades()
    assert len(grades) == len(graded)
    assert [r.grade for r in graded.results()] == grades
    assert graded.find("no-such-sample") is None
