"""A child's rule replaces its parent's whole (the rule language); when the replacement gives a
lower top grade, `check` says so (W016) instead of letting the parent's higher grades vanish.

With the shipped hydraulic water rule (watch 200, alert 500, urgent 1000 ppm; limits.md, common
practice, no source) replaced by `{watch: 100, alert: 300}`, 5,000 ppm of water grades alert,
not urgent: the grade follows the rule language, and the warning makes it visible.
"""

import pandas as pd
from conftest import DATA

from sumpwise import grade, load_ruleset
from sumpwise.ruleset.compiler import check_ruleset

FOUND = DATA / "rulesets" / "found2"


def test_a_replacement_that_drops_the_top_grade_is_a_warning_at_its_id():
    checked = check_ruleset(FOUND / "replace-water.yaml")
    found = [(p.file.rsplit("/", 1)[-1], p.line, p.severity) for p in checked.problems if p.code == "W016"]
    assert found == [("replace-water.yaml", 10, "warning")]
    assert checked.errors == () and checked.ruleset.sha256  # a warning: the rule set still grades


def test_the_grade_it_warns_about():
    ruleset = load_ruleset(FOUND / "replace-water.yaml")
    rows = pd.DataFrame([{"sample_id": "H-1", "unit_id": "HPU-2", "class": "hydraulic", "water": 5000},
                         {"sample_id": "H-2", "unit_id": "HPU-2", "class": "hydraulic", "water": 150}])
    fired = [{r.rule: r.grade for r in result.reasons} for result in grade(rows, ruleset).results()]
    assert fired == [{"water": "alert"}, {"water": "watch"}]


def test_a_replacement_that_keeps_the_top_grade_says_nothing(tmp_path):
    path = tmp_path / "site.yaml"
    parent = (FOUND / "replace-water.yaml").resolve().parent / "../../../../rules/hydraulic.yaml"
    path.write_text(f"ruleset: site\nversion: 1\nextends: {parent.resolve()}\nclasses:\n  hydraulic:\n    rules:\n"
                    "      - id: water\n        measure: water\n        above: {watch: 100, alert: 300, urgent: 800}\n"
                    "        message: Water\n        source: site practice\n", encoding="utf-8")
    assert [p for p in check_ruleset(path).problems if p.code == "W016"] == []


def test_a_top_level_rule_every_class_overrides_is_a_warning():
    # the site's 100 ppm watch never applies: 150 ppm stays normal under the shipped 200 ppm rule
    checked = check_ruleset(FOUND / "top-level-water.yaml")
    found = [(p.file.rsplit("/", 1)[-1], p.line, p.severity) for p in checked.problems
             if p.code == "W002" and "top-level" in p.message]
    assert found == [("top-level-water.yaml", 8, "warning")]
    rows = pd.DataFrame([{"sample_id": "H-3", "unit_id": "HPU-2", "class": "hydraulic", "water": 150}])
    assert grade(rows, checked.ruleset).result(0).grade == "normal"


def test_a_class_built_on_a_changed_class_keeps_the_old_rule_and_check_says_so():
    # pump extends hydraulic in the parent; the child tightens hydraulic's water only, so 150 ppm
    # is watch on a hydraulic unit and normal on a pump
    checked = check_ruleset(FOUND / "class-base-child.yaml")
    found = [(p.file.rsplit("/", 1)[-1], p.line, p.severity, "'pump'" in p.message) for p in checked.problems
             if p.code == "W017"]
    assert found == [("class-base-child.yaml", 9, "warning", True)]
    rows = pd.DataFrame([{"sample_id": f"W-{c}", "unit_id": c, "class": c, "water": 150}
                         for c in ("hydraulic", "pump")])
    assert [r.grade for r in grade(rows, checked.ruleset).results()] == ["watch", "normal"]


def test_a_class_overriding_a_rule_it_took_from_its_base_says_nothing(tmp_path):
    # as in the language reference's parent/site example: pump replaces hydraulic's water for
    # pumps only, and hydraulic keeps its own
    (tmp_path / "parent.yaml").write_text((FOUND / "class-base-parent.yaml").read_text(encoding="utf-8"),
                                          encoding="utf-8")
    site = tmp_path / "site.yaml"
    site.write_text("ruleset: site\nversion: 1\nextends: parent.yaml\nclasses:\n  pump:\n    extends: hydraulic\n"
                    "    rules:\n      - id: water\n        measure: water\n"
                    "        above: {watch: 100, alert: 300, urgent: 1000}\n        message: Water in a pump\n"
                    "        source: site practice\n", encoding="utf-8")
    checked = check_ruleset(site)
    assert [p for p in checked.problems if p.code in ("W016", "W017")] == []
    rows = pd.DataFrame([{"sample_id": f"W-{c}", "unit_id": c, "class": c, "water": 150}
                         for c in ("hydraulic", "pump")])
    assert [r.grade for r in grade(rows, checked.ruleset).results()] == ["normal", "watch"]
