"""What an auditor asks of a ledger, from the command line: its rule sets shown and exported,
one sample re-graded under other limits without changing anything, a changed rule set under
an old version number refused, samples listed by rule, grade, unit, dates and rule-set
version, and the recorded rejects.

The reference ledger is tests/data/ledger/brackwater-v1.db (see its README): four batches of
the Brackwater scenario, the last graded under version 3 of the site rule set, whose
steam-turbine water watch limit is 80 ppm instead of 100 (site practice, invented).
"""

from __future__ import annotations

import json
import re
import shutil

import pytest

from sumpwise.ledger.audit import stored_results, stored_ruleset
from sumpwise.ledger.store import open_ledger
from tests.conftest import DATA, ROOT, run_cli

V2 = "ddde04dac6492f6184827892cc540880541903b1e2a2795f0af5eef2057e9a2a"
V3 = "fadb40c9f4d1e737d098e8eb1d1df27fa44397e4b624c22a0b0d8615367effb8"
SITE = ROOT / "scenarios" / "brackwater" / "site.yaml"


@pytest.fixture
def db(tmp_path):
    path = tmp_path / "ledger.db"
    shutil.copyfile(DATA / "ledger" / "brackwater-v1.db", path)
    assert run_cli("replay", "--db", path).out.count("(batch ") == 4  # migrated; see test_migration.ENGINE_CHANGES
    return path


def test_rule_sets_are_listed_and_exported_as_files_check_and_compare_accept(db, tmp_path):
    listed = run_cli("rulesets", "--db", db)
    assert listed.code == 0
    rows = [line.split() for line in listed.out.splitlines()[1:]]
    assert [(r[0], r[1], r[2], r[3], r[4]) for r in rows] == [(V2[:16], "brackwater-site", "2", "3", "298"),
                                                              (V3[:16], "brackwater-site", "3", "1", "31")]
    old, new = tmp_path / "v2.json", tmp_path / "v3.json"
    assert run_cli("rulesets", V2[:10], "--db", db, "--out", old).code == 0
    assert run_cli("rulesets", "brackwater-site@3", "--db", db, "--out", new).code == 0
    checked = run_cli("check", old, new)
    assert checked.code == 0 and f"sha256 {V2}" in checked.out and f"sha256 {V3}" in checked.out
    same = run_cli("compare", old, new, "--db", db)
    assert same.code == 0  # no current steam-turbine sample has water between 80 and 100 ppm
    moved = run_cli("compare", old, _tighter(tmp_path), "--db", db)
    assert moved.code == 3 and "water" in moved.out  # BP-0001 and others, 50 to 100 ppm
    assert stored_ruleset(db, "brackwater-site@2").sha256 == V2
    unknown = run_cli("rulesets", "brackwater-site@9", "--db", db)
    assert unknown.code == 2 and "rule set 'brackwater-site@9' is not stored intact" in unknown.err


def _tighter(tmp_path):
    tighter = tmp_path / "tighter.yaml"
    tighter.write_text(re.sub(r"(?m)^version: .*$", "version: 40", SITE.read_text()).replace(
        "above: {watch: 100, alert: 300, urgent: 1000}", "above: {watch: 50, alert: 300, urgent: 1000}").replace(
        "../../rules/", str(ROOT / "rules") + "/"))
    return tighter


def test_explain_re_grades_one_sample_under_other_limits_and_changes_nothing(db, tmp_path):
    before = run_cli("find", "--db", db, "--format", "csv").out
    # BP-0001: ST-1, water 65 ppm, normal under version 2 (watch from 100 ppm).
    recorded = run_cli("explain", "BP-0001", "--db", db)
    assert recorded.code == 0 and "Re-graded" not in recorded.out and "Grade: NORMAL" in recorded.out
    stored = run_cli("explain", "BP-0001", "--db", db, "--rules", "brackwater-site@3")
    assert stored.code == 0 and "not recorded, the ledger is unchanged: normal as recorded, normal under" in stored.out
    assert "Re-graded under rule set brackwater-site version 3" in stored.out
    assert run_cli("explain", "BP-0001", "--db", db, "--rules", f"sha256:{V3}").out == stored.out
    from_file = run_cli("explain", "BP-0001", "--db", db, "--rules", _tighter(tmp_path))
    assert from_file.code == 0 and "version 40" in from_file.out
    assert "normal as recorded, watch under this rule set" in from_file.out
    assert "water = 65 ppm, above 50 ppm (the watch limit)" in " ".join(from_file.out.split())
    assert run_cli("find", "--db", db, "--format", "csv").out == before
    assert run_cli("replay", "--db", db).out.count("(batch ") == 4  # as before


def test_a_changed_rule_set_under_a_recorded_version_is_refused_unless_asked(db, tmp_path):
    samples = tmp_path / "new.csv"
    samples.write_text("sample_id,unit_id,class,lubricant,sampled_on,oil_hours,kv40,an,water,method,lab\n"
                       "BP-9001,ST-1,steam-turbine,TURB-46-M,2027-01-04,45000,47.1,0.3,90,direct,lab-a\n")
    changed = tmp_path / "changed.yaml"
    changed.write_text(re.sub(r"(?m)^version: .*$", "version: 2", SITE.read_text()).replace(
        "above: {watch: 100, alert: 300, urgent: 1000}", "above: {watch: 60, alert: 300, urgent: 1000}").replace(
        "../../rules/", str(ROOT / "rules") + "/"))
    refused = run_cli("grade", samples, "--rules", changed, "--db", db)
    assert refused.code == 2 and "version 2 is already recorded with other content" in refused.err
    assert "--same-version" in refused.err and "Raise `version:`" in refused.err
    assert run_cli("find", "--db", db, "--unit", "ST-1", "--since", "2027-01-01").out.startswith("0 sample(s)\n")
    allowed = run_cli("grade", samples, "--rules", changed, "--db", db, "--same-version")
    assert allowed.code == 0
    replayed = run_cli("replay", "--db", db)
    assert replayed.out.count("(batch ") == 4 and "BP-9001" not in replayed.out  # the new batch replays clean


def test_find_lists_samples_by_rule_grade_unit_dates_and_rule_set_version(db):
    def ids(*options):
        run = run_cli("find", "--db", db, "--format", "jsonl", *options)
        assert run.code == 0, run.err
        return [json.loads(line) for line in run.out.splitlines()]

    water = ids("--rule", "water")
    assert water and all("water=" in r["fired"] for r in water)
    urgent = ids("--grade", "urgent")
    assert urgent and {r["grade"] for r in urgent} == {"urgent"}
    assert {r["grade"] for r in ids("--at-least", "2")} == {"alert", "urgent"}
    december = ids("--unit", "ST-1", "--since", "2026-12-01", "--until", "2026-12-31")
    assert december and all(r["unit_id"] == "ST-1" and r["sampled_on"].startswith("2026-12") for r in december)
    version_3 = ids("--version", "3")
    assert len(version_3) == 31 and {r["ruleset_sha256"] for r in version_3} == {V3}
    assert len(ids("--ruleset", V2[:8])) == 298 - 2  # two samples of version 2 were later corrected
    assert len(ids("--ruleset", V2[:8], "--all-versions")) == 298
    both = ids("--rule", "water", "--version", "3")
    assert {r["sample_id"] for r in both} == {r["sample_id"] for r in water} & {r["sample_id"] for r in version_3}
    assert run_cli("find", "--db", db, "--since", "2026-13-45").code == 2


def test_rejected_rows_and_conflicts_are_recorded_with_their_origin(db, tmp_path):
    samples = tmp_path / "nightly.csv"
    samples.write_text("sample_id,unit_id,class,lubricant,sampled_on,oil_hours,kv40,an,water,method,lab\n"
                       "BP-0001,ST-1,steam-turbine,TURB-46-M,2026-01-05,38090,46.75,0.15,9999,direct,lab-a\n"
                       "BP-9002,ST-1,steam-turbine,TURB-46-M,2027-01-11,45100,abc,0.31,70,direct,lab-a\n"
                       "BP-9003,ST-1,steam-turbine,TURB-46-M,2027-01-18,45200,47.2,0.32,1500,direct,lab-a\n")
    rules = tmp_path / "recorded-v3.json"  # the rule set as the ledger recorded it
    assert run_cli("rulesets", "brackwater-site@3", "--db", db, "--out", rules).code == 0
    run = run_cli("grade", samples, "--rules", rules, "--db", db, "--format", "csv")
    assert run.code == 3 and "BP-9003" in run.out and "urgent" in run.out  # the rest is graded
    assert "read 3 row(s): 1 graded, 0 unrated, 2 rejected" in run.err
    rejects = run_cli("find", "--db", db, "--rejects", "--format", "jsonl")
    found = [json.loads(line) for line in rejects.out.splitlines()]
    assert [(r["source"], r["row"], r["sample_id"], r["code"]) for r in found] == [
        (str(samples), 2, "BP-9002", "D004"), (str(samples), 1, "BP-0001", "L001")]
    assert "batch 1" in found[1]["reason"] and "--correction" in found[1]["reason"]


def test_results_of_several_rule_sets_each_come_with_their_own(db):
    results, rulesets = stored_results(db)
    assert set(rulesets) == {V2, V3}
    by_id = {r.sample_id: r for r in results}
    assert by_id["BP-0320"].ruleset_sha256 == V3 and by_id["BP-0001"].ruleset_sha256 == V2
    for result in results:
        ruleset = rulesets[result.ruleset_sha256]
        for reason in result.reasons:
            rule = next(r for r in ruleset.rules_for(result.class_name) if r.id == reason.rule)
            assert (reason.message, reason.source) == (rule.message, rule.source)
        assert result.notice == ruleset.notice


@pytest.mark.parametrize("options, named", [
    (("--grade", "Alert"), "the grade 'Alert' (did you mean 'alert'?)"),
    (("--grade", "watch", "--grade", "critical"), "the grade 'critical'"),
    (("--rule", "watr"), "the rule 'watr' (did you mean 'water'?)"),
    (("--version", "9"), "the version '9'"),
    (("--at-least", "4"), "--at-least 4: the recorded ladders run from level 0 (normal) to level 3"),
    (("--ruleset", "ffff0000"), "a fingerprint starting 'ffff0000'"),
    (("--unit", "ST1"), "no sample of unit 'ST1' is recorded in this ledger (did you mean 'ST-1'"),
    (("--since", "2026-12-01", "--until", "2026-11-30"), "--since 2026-12-01 is after --until 2026-11-30"),
])
def test_find_refuses_a_filter_no_recorded_rule_set_can_match(db, options, named):
    """A typo in a filter is an error naming what the ledger holds, not "0 sample(s)": an auditor
    would read that as "nothing flagged". The ladder and rule ids are the ledger's own
    (tests/data/ledger/brackwater-v1.db: the default ladder, a rule `water`)."""
    run = run_cli("find", "--db", db, *options)
    assert run.code == 2 and named in run.err and run.out == ""
    assert run_cli("find", "--db", db, "--grade", "alert", "--rule", "water", "--version", "3").code == 0


def test_find_on_a_ledger_with_no_rule_set_yet_lists_nothing_without_refusing(tmp_path):
    db = tmp_path / "new.db"
    open_ledger(db).close()  # a new, empty ledger: nothing to check a filter against
    found = run_cli("find", "--db", db, "--rule", "any-rule-id")
    assert found.code == 0 and found.out.startswith("0 sample(s)\n"), found.err


def test_a_file_whose_every_row_is_rejected_is_recorded_with_its_rejects(tmp_path):
    """A nightly export in a changed layout can be refused row by row; the auditor must still find
    that import, its rows and why (issue 13: rejected rows are recorded with reason and origin)."""
    samples = tmp_path / "all-rejected.csv"
    samples.write_text("sample_id,unit_id,class,lubricant,sampled_on,oil_hours,kv40\n"
                       "BP-1,ST-1,steam-turbine,TURB-46-M,2026-01-05,100,abc\n")
    db = tmp_path / "ledger.db"
    assert run_cli("grade", samples, "--rules", ROOT / "rules" / "steam-turbine.yaml", "--db", db).code == 0
    found = [json.loads(line) for line in run_cli("find", "--db", db, "--rejects", "--format", "jsonl").out.splitlines()]
    assert [(r["source"], r["row"], r["sample_id"], r["field"], r["code"]) for r in found] == [
        (str(samples), 1, "BP-1", "kv40", "D004")]
    assert run_cli("replay", "--db", db).code == 0
    again = run_cli("grade", samples, "--rules", ROOT / "rules" / "steam-turbine.yaml", "--db", db)
    assert again.code == 0 and "nothing new" in again.err  # the same refusals are not recorded twice
    assert run_cli("find", "--db", db, "--rejects").out.endswith("1 rejected row(s)\n")
