"""Next steps (`next_step:` on a rule or caveat): validated with the rule set, carried by the reason or
caveat that asks for them, and told by explain, the table and a ledger's explain.

The samples are realistic steam-turbine readings graded by a small rule set written here; which
rule fires is checked against the rule's own limit, so the step is tied to the grade it belongs to.
"""

from __future__ import annotations

import io
import json

import pytest
from conftest import run_cli

from sumpwise import grade, load_ruleset, read_samples
from sumpwise.ledger.audit import result_from_record
from sumpwise.render.narrative import explain_lines
from table_text import table_lines

from sumpwise.ruleset.model import NextStep
from sumpwise.vocabulary.problems import InvalidFile

RULES = """\
ruleset: steps
version: 1
lubricants:
  TURB-46-M: {base_stock: mineral, kv40: 45.9, an: 0.07}
classes:
  steam-turbine:
    rules:
      - id: water
        measure: water
        above: {watch: 100, alert: 300, urgent: 1000}
        message: Water in the oil
        source: site practice
        next_step:
          task: Resample and check the cooler for a tube leak
          within_days: 7
      - id: acid-rise
        measure: an_rise
        above: {watch: 0.1, alert: 0.2, urgent: 0.4}
        message: Acid number has risen above new oil
        source: site practice
caveats:
  - id: split-sample
    when: {field: lab, equals: lab-b}
    message: A split sample read by the second lab
    next_step: Compare with the first lab's result before acting
"""

SAMPLES = """\
sample_id,unit_id,class,lubricant,sampled_on,kv40,an,water,lab
S1,ST-1,steam-turbine,TURB-46-M,2026-03-02,46.1,0.09,150,lab-a
S2,ST-1,steam-turbine,TURB-46-M,2026-03-16,46.0,0.10,60,lab-a
S3,ST-1,steam-turbine,TURB-46-M,2026-03-30,46.2,0.31,45,lab-b
"""


@pytest.fixture
def graded(tmp_path):
    path = tmp_path / "steps.yaml"
    path.write_text(RULES)
    ruleset = load_ruleset(path)
    return ruleset, grade(read_samples(io.StringIO(SAMPLES)), ruleset)


def test_the_step_travels_with_the_rule_that_fired(graded):
    ruleset, batch = graded
    rule = next(r for r in ruleset.classes["steam-turbine"] if r.id == "water")
    assert rule.next_step == NextStep("Resample and check the cooler for a tube leak", 7)
    s1, s2, s3 = batch.results()
    # 150 ppm is above the 100 ppm watch limit of the rule written above: the rule fires, with its step
    (water,) = s1.reasons
    assert (water.rule, water.grade) == ("water", "watch")
    assert water.to_record()["next_step"] == {"task": "Resample and check the cooler for a tube leak",
                                              "within_days": 7}
    # 60 ppm is below every limit: no reason, so no step
    assert s2.reasons == () and s2.grade == "normal"
    # acid-rise fires on S3 (0.31 - 0.07 = 0.24 > 0.2, alert) but has no step; the caveat has one
    assert [(r.rule, r.grade, r.next_step) for r in s3.reasons] == [("acid-rise", "alert", None)]
    assert "next_step" not in s3.reasons[0].to_record()
    split = next(c for c in s3.caveats if c.caveat == "split-sample")
    assert split.to_record()["next_step"] == {"task": "Compare with the first lab's result before acting"}


def test_explain_and_the_table_say_what_to_do(graded):
    ruleset, batch = graded
    s1 = batch.find("S1")
    text = "\n".join(explain_lines(s1, ruleset.grades, width=200))
    assert "Next step: Resample and check the cooler for a tube leak (within 7 days of sampling)" in text
    s3_text = "\n".join(explain_lines(batch.find("S3"), ruleset.grades, width=200))
    assert "Next step: Compare with the first lab's result before acting" in s3_text
    lines = {line.split()[0]: line for line in table_lines(batch, width=200)[2:5]}
    assert "next: Resample and check the cooler for a tube leak (within 7 days of sampling)" in lines["S1"]
    assert "next:" not in lines["S2"]


def test_the_canonical_form_keeps_the_step_and_reloads_to_the_same_fingerprint(graded, tmp_path):
    ruleset, _ = graded
    doc = json.loads(ruleset.canonical)
    water = next(r for r in doc["classes"]["steam-turbine"]["rules"] if r["id"] == "water")
    assert water["next_step"] == {"task": "Resample and check the cooler for a tube leak", "within_days": 7}
    again = tmp_path / "canonical.json"
    again.write_text(ruleset.canonical)
    assert load_ruleset(again).sha256 == ruleset.sha256


def test_a_rule_set_without_steps_keeps_its_fingerprint(tmp_path):
    # adding the key must not move the fingerprint of rule sets that do not use it
    plain = RULES.replace("        next_step:\n          task: Resample and check the cooler for a tube leak\n"
                          "          within_days: 7\n", "").replace(
        "    next_step: Compare with the first lab's result before acting\n", "")
    path = tmp_path / "plain.yaml"
    path.write_text(plain)
    assert "next_step" not in load_ruleset(path).canonical


@pytest.mark.parametrize("step, code, where", [
    ("{task: Resample, within_days: 0}", "S010", "within_days"),
    ("{task: Resample, within_days: 2.5}", "S003", "within_days"),
    ("{task: '   '}", "S005", "next_step.task"),
    ("{within_days: 3}", "S002", "next_step"),
    ("{task: Resample, when: soon}", "S001", "next_step"),
    ("''", "S005", "next_step"),
])
def test_a_malformed_step_is_a_problem_with_its_place(tmp_path, step, code, where):
    path = tmp_path / "bad.yaml"
    path.write_text(RULES.replace("        next_step:\n          task: Resample and check the cooler for a tube "
                                  "leak\n          within_days: 7\n", f"        next_step: {step}\n"))
    with pytest.raises(InvalidFile) as caught:
        load_ruleset(path)
    (problem,) = caught.value.problems
    assert problem.code == code, problem
    assert problem.line == 13 and where in problem.path, problem


def test_a_ledger_tells_the_step_again(tmp_path):
    rules, samples, db = tmp_path / "steps.yaml", tmp_path / "s.csv", tmp_path / "l.db"
    rules.write_text(RULES)
    samples.write_text(SAMPLES)
    assert run_cli("grade", samples, "--rules", rules, "--db", db, "--out", tmp_path / "r.jsonl").code == 0
    told = run_cli("explain", "S1", "--db", db)
    assert told.code == 0, told.err
    assert "Next step: Resample and check the cooler for a tube leak (within 7 days of sampling)" in " ".join(
        told.out.split())
    record = json.loads((tmp_path / "r.jsonl").read_text().splitlines()[0])
    result = result_from_record(record, ("normal", "watch", "alert", "urgent"))
    assert result.reasons[0].next_step == NextStep("Resample and check the cooler for a tube leak", 7)
