"""sumpwise.authoring.examples: examples inside a rule set pass and fail as written, with a readable diff.

The ester-caveat examples are checked against the rule-language contract
(../shared/rule-language.md, "Caveats"): a cap lowers what rules reading the listed
measures can give, unless `unless` holds, and the reason keeps `capped_from`.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest

from sumpwise.ruleset.compiler import load_ruleset
from sumpwise.authoring.examples import check_examples
from sumpwise.results.pipeline import grade

ROOT = Path(__file__).resolve().parents[2]
DATA = Path(__file__).resolve().parents[1] / "data" / "authoring"
SHIPPED = sorted((ROOT / "rules").glob("*.yaml")) + [ROOT / "scenarios" / "brackwater" / "site.yaml"]


def test_clean_fixture_examples_hold():
    ruleset = load_ruleset(DATA / "clean.yaml")
    assert len(ruleset.examples) == 2 and check_examples(ruleset) == ()


def test_failing_examples_say_where_and_what_differs():
    failures = {f.name: f for f in check_examples(load_ruleset(DATA / "examples-fail.yaml"))}
    assert set(failures) == {"wrong grade and a rule that fired", "a rule that lacks a value",
                             "cap not raised on mineral oil", "a sample that cannot be read"}
    wrong = failures["wrong grade and a rule that fired"]
    assert (Path(wrong.file).name, wrong.line) == ("examples-fail.yaml", 9)
    # an 0.45 - new 0.10 = 0.35: above the 0.2 watch limit, not above the 0.4 alert limit.
    assert wrong.differences == ("grade: expected normal, got watch",
                                 "quiet: expected acid-rise to stay quiet, but it fired (watch)")
    assert wrong.actual == "grade watch; fired: acid-rise (watch)"
    text = wrong.render().splitlines()
    assert text[0].endswith("examples-fail.yaml:9:5: error E001: example 'wrong grade and a rule that fired' does not hold")
    assert text[1:] == ["    - grade: expected normal, got watch",
                        "    - quiet: expected acid-rise to stay quiet, but it fired (watch)",
                        "    actual: grade watch; fired: acid-rise (watch)"]
    assert failures["a rule that lacks a value"].differences == (
        "fires: expected visc-drift to fire, but it could not be evaluated (missing kv40)",)
    assert "caveats: expected caveat ester-carbonyl on the sample, but it was not raised" in \
        failures["cap not raised on mineral oil"].differences
    assert failures["a sample that cannot be read"].differences == (
        "the sample cannot be read: an: cannot be negative, found -1",)


def test_an_example_breaks_when_the_limit_it_pins_moves(tmp_path):
    text = (DATA / "clean.yaml").read_text(encoding="utf-8")
    moved = text.replace("above: {watch: 8, alert: 15}", "above: {watch: 8, alert: 30}")
    assert moved != text
    (tmp_path / "moved.yaml").write_text(moved, encoding="utf-8")
    [failure] = check_examples(load_ruleset(tmp_path / "moved.yaml"))
    # rise 190 - 170 = 20 is below the new alert limit: the lifted cap now leaves watch.
    assert failure.name == "acid number lifts the cap"
    assert failure.differences == ("grade: expected alert, got watch",)


@pytest.mark.parametrize("path", SHIPPED, ids=lambda p: p.name)
def test_shipped_rule_set_examples_all_hold(path):
    ruleset = load_ruleset(path)
    assert ruleset.examples, f"{path.name} carries no examples"
    assert [f.render() for f in check_examples(ruleset)] == []


@pytest.mark.parametrize("path", ["rules/hydraulic.yaml", "rules/screw-compressor.yaml",
                                  "scenarios/brackwater/site.yaml"])
def test_shipped_ester_examples_show_the_cap_and_its_lift(path):
    ruleset = load_ruleset(ROOT / path)
    by_name = {e.name: e for e in ruleset.examples}
    capped = next(e for name, e in by_name.items() if "caps" in name)
    lifted = next(e for name, e in by_name.items() if "lifts" in name)
    capped_result = grade(pd.DataFrame([{"sample_id": "c"} | capped.sample]), ruleset).result(0)
    lifted_result = grade(pd.DataFrame([{"sample_id": "l"} | lifted.sample]), ruleset).result(0)
    carbonyl = {r.rule: r for r in capped_result.reasons}["carbonyl-rise"]
    assert (carbonyl.grade, carbonyl.capped_from, carbonyl.capped_by) == ("watch", "alert", "ester-carbonyl")
    assert capped_result.grade == "watch"
    lifted_carbonyl = {r.rule: r for r in lifted_result.reasons}["carbonyl-rise"]
    assert lifted_carbonyl.grade == "alert" and lifted_carbonyl.capped_from is None
    assert "acid-rise" in {r.rule for r in lifted_result.reasons}


def test_a_sample_without_a_class_is_a_failure_not_a_crash(tmp_path):
    text = (DATA / "clean.yaml").read_text(encoding="utf-8")
    broken = text.replace("sample: {class: pump, lubricant: PUMP-46-E, oxidation: 190.0, an: 0.2}",
                          "sample: {lubricant: PUMP-46-E, oxidation: 190.0, an: 0.2}")
    assert broken != text
    (tmp_path / "noclass.yaml").write_text(broken, encoding="utf-8")
    [failure] = check_examples(load_ruleset(tmp_path / "noclass.yaml"))
    assert failure.name == "ester cap holds carbonyl at watch"
    assert failure.differences[0].startswith("the sample cannot be read: missing required column(s) class")
