"""The examples of the rule-language draft (../shared/rule-language.md) load and behave as written.

The draft is the contract with the people who write limits; these are its own examples,
copied into tests/data/rulesets/draft.yaml.
"""

import json

from conftest import DATA, run_cli

from sumpwise import grade, load_ruleset, read_samples
from sumpwise.ruleset.model import ConditionRule, LadderRule

DRAFT = DATA / "rulesets" / "draft.yaml"


def test_draft_top_level_loads_as_written():
    rs = load_ruleset(DRAFT)
    assert rs.id == "brackwater-site" and rs.version == 4
    assert rs.grades == ("normal", "watch", "alert", "urgent")
    assert rs.notice.startswith("Screening guidance only.")
    assert rs.lubricants["COMP-68-DE"].base_stock == "ester"
    assert rs.lubricants["TURB-46-M"].oxidation == 1.4
    assert len(rs.sha256) == 64


def test_draft_ladder_and_condition_rules_compile():
    rs = load_ruleset(DRAFT)
    rules = {r.id: r for r in rs.rules_for("steam-turbine")}
    assert isinstance(rules["acid-rise"], LadderRule)
    assert rules["acid-rise"].steps == ((1, 0.1), (2, 0.2), (3, 0.4))
    assert rules["visc-drift"].test == "outside"
    young = rules["young-oil-oxidising"]
    assert isinstance(young, ConditionRule) and rs.grades[young.level] == "alert"


def test_draft_drop_removes_the_inherited_rule():
    rs = load_ruleset(DRAFT)
    assert "oil-age" not in {r.id for r in rs.rules_for("screw-compressor")}
    parent = load_ruleset(DATA / "rulesets" / "draft-parent.yaml")
    assert "oil-age" in {r.id for r in parent.rules_for("screw-compressor")}


def test_draft_result_record_example_comes_out_as_written():
    """The draft's BP-0412 record: acid-rise watch, carbonyl-rise and young-oil-oxidising capped
    from alert to watch by the ester caveat, visc-drift not evaluated for lack of kv40."""
    rs = load_ruleset(DRAFT)
    graded = grade(read_samples(DATA / "samples" / "draft-record.csv"), rs)
    record = graded.result(0).to_record()
    assert record["sample_id"] == "BP-0412" and record["unit_id"] == "AC-3"
    assert record["class"] == "screw-compressor"
    assert record["grade"] == "watch" and record["level"] == 1
    reasons = {r["rule"]: r for r in record["reasons"]}
    assert set(reasons) == {"acid-rise", "carbonyl-rise", "young-oil-oxidising"}
    acid = reasons["acid-rise"]
    assert (acid["measure"], acid["value"], acid["test"], acid["limit"], acid["grade"]) == \
        ("an_rise", 0.15, "above", 0.1, "watch")
    assert "capped_from" not in acid
    carbonyl = reasons["carbonyl-rise"]
    assert (carbonyl["value"], carbonyl["limit"], carbonyl["grade"], carbonyl["capped_from"]) == \
        (19.0, 15, "watch", "alert")
    young = reasons["young-oil-oxidising"]
    assert young["grade"] == "watch" and young["capped_from"] == "alert"
    assert young["clauses"] == [
        {"measure": "oil_hours", "value": 1500.0, "test": "below", "limit": 2000, "held": True},
        {"measure": "oxidation_rise", "value": 19.0, "test": "above", "limit": 10, "held": True}]
    assert record["caveats"][0]["caveat"] == "ester-carbonyl"
    assert record["not_evaluated"] == [{"rule": "visc-drift", "missing": ["kv40"]}]
    assert record["notice"].startswith("Screening guidance only.")
    assert record["ruleset"] == {"id": "brackwater-site", "version": 4, "sha256": rs.sha256}
    assert record["engine"].startswith("sumpwise ")


def test_draft_acid_number_lifts_the_ester_cap():
    rs = load_ruleset(DRAFT)
    csv = ("sample_id,unit_id,class,lubricant,oil_hours,an,oxidation\n"
           "S-1,AC-3,screw-compressor,COMP-68-DE,1500,0.35,199.0\n")
    import io
    result = grade(read_samples(io.StringIO(csv)), rs).result(0)
    carbonyl = next(r for r in result.reasons if r.rule == "carbonyl-rise")
    assert carbonyl.grade == "alert" and carbonyl.capped_from is None
    assert result.grade == "alert"


def test_draft_pair_outside_and_units():
    """`outside: {watch: [-5, 8], alert: [-10, 15]}` and limits written in abs/0.1mm and %."""
    rs = load_ruleset(DATA / "rulesets" / "outside-pair.yaml")
    rules = {r.id: r for r in rs.rules_for("hydraulic")}
    assert rules["visc-band"].steps == ((1, (-5, 8)), (2, (-10, 15)))
    assert rules["wet"].steps == ((1, 200.0), (2, 500.0))  # 1 % = 10 000 ppm
    assert rules["carbonyl"].steps == ((1, 10.0), (2, 20.0))  # 1 abs/0.1mm = 100 abs/cm (ASTM D7412 §12)
    assert rs.lubricants["HYD-46-M"].oxidation == 2.0
    csv = ("sample_id,class,lubricant,kv40,water,oxidation\n"
           "low,hydraulic,HYD-46-M,43.0,,\n"      # -6.5 %: below -5, inside -10
           "high,hydraulic,HYD-46-M,50.0,,\n"     # +8.7 %: above 8
           "ok,hydraulic,HYD-46-M,49.0,150,\n"    # +6.7 %: inside [-5, 8]
           "wet,hydraulic,HYD-46-M,46.0,600,\n")
    import io
    graded = grade(read_samples(io.StringIO(csv)), rs)
    assert graded.grades() == ["watch", "watch", "normal", "alert"]


def test_draft_result_record_through_the_command_line():
    run = run_cli("grade", DATA / "samples" / "draft-record.csv", "--rules", DRAFT)
    assert run.code == 0, run.err
    record = json.loads(run.out)
    assert record["grade"] == "watch"
    assert "read 1 row(s): 1 graded, 0 unrated, 0 rejected" in run.err
