"""Lint: a class's rule whose condition asks for another class can never fire.

Up to engine 0.8.0 a rule written under `steam-turbine` but guarded by `{field: class, in:
[gearbox]}` passed `check` without a word, and a gearbox sample with 800 ppm of water graded
watch (its own ladder) instead of the urgent the lead wrote: a class's rules grade only samples
of that class, so the guard is never true there. Water figures: limits.md, common practice,
no source.
"""

from __future__ import annotations

from grade_runs import fired_rules, graded_run

from sumpwise.authoring.lint import lint_ruleset
from sumpwise.ruleset.compiler import check_ruleset


def _rules(data):
    return data / "rulesets_found7" / "class-condition.yaml"


def test_a_class_rule_guarded_by_another_class_is_warned_at_its_line(data):
    checked = check_ruleset(_rules(data))
    assert not checked.errors
    never = [p for p in lint_ruleset(checked.ruleset) if p.code == "W002"]
    assert [(p.line, p.path) for p in never] == [(17, "$.classes.steam-turbine.rules[1]"),
                                                 (25, "$.classes.steam-turbine.rules[2]")]
    assert "class in [gearbox]" in never[0].message and "class not in [Steam-Turbine]" in never[1].message
    assert all(p.severity == "warning" for p in never)


def test_the_warned_rule_indeed_never_fires_on_a_graded_sample(data):
    """What the warning is about: 800 ppm on a gearbox is watch by its own ladder, never gear-wet's urgent."""
    samples = ("sample_id,unit_id,class,lubricant,sampled_on,water,an\n"
               "GB-0800,GB-1,gearbox,GEAR-320-M,2026-03-02,800,0.35\n"
               "ST-0800,ST-1,steam-turbine,TURB-46-M,2026-03-02,800,1.50\n")
    records, _ = graded_run("-", "--rules", str(_rules(data)), stdin=samples)
    assert records["GB-0800"]["grade"] == "watch" and fired_rules(records["GB-0800"]) == {"water"}
    assert fired_rules(records["ST-0800"]) == {"water", "turbine-acid"}  # the two rules lint keeps quiet on


def test_a_child_writing_in_its_parents_units_is_told_that_units_do_not_carry_over(tmp_path):
    """A child with no `units:` over a parent in %: its water limits are ppm (rule-language draft:
    `units` applies to the limits of the file that declares it). 0.05 and 0.1 "ppm" graded every
    gearbox sample alert; up to engine 0.8.0 the warning's hint said "this file writes water in ppm",
    which it does not. Karl Fischer reports from 10 mg/kg (ASTM D6304)."""
    (tmp_path / "parent.yaml").write_text(
        "ruleset: bw-parent\nversion: 1\nunits: {water: '%'}\nclasses:\n  steam-turbine:\n    rules:\n"
        "      - {id: water, measure: water, above: {watch: 0.02, alert: 0.05}, message: Water in the oil, "
        "source: site practice}\n", encoding="utf-8")
    (tmp_path / "site.yaml").write_text(
        "ruleset: bw-site\nversion: 1\nextends: parent.yaml\nclasses:\n  gearbox:\n    rules:\n"
        "      - {id: water, measure: water, above: {watch: 0.05, alert: 0.1}, message: Water in the gear oil, "
        "source: site practice}\n", encoding="utf-8")
    checked = check_ruleset(tmp_path / "site.yaml")
    (warning,) = [p for p in lint_ruleset(checked.ruleset) if p.code == "W009"]
    assert warning.file == str(tmp_path / "site.yaml") and warning.line == 7
    assert "this file gives no `units:` for water, so its limits are read in ppm" in warning.hint
    assert "add `units: {water: '%'}` here" in warning.hint
