"""`drop:` under a class removes a top-level rule for that class only.

The rule-language draft: "Inside a class, `drop: [rule ids]` removes inherited rules". A top-level
rule is inherited by every class; up to engine 0.8.0 `drop: [water]` on it was refused (R006, "no
extended rule set gives class 'gearbox' a rule with that id"), and the only way to take it off one
class was to replace it there. Brackwater Point's gearboxes sit in a wash-down hall and their water
is judged by their own condition rule, not the site-wide turbine ladder. Water figures: limits.md,
common practice, no source.
"""

from __future__ import annotations

from grade_runs import fired_rules, graded_run

from sumpwise.authoring.compare import ruleset_changes
from sumpwise.ruleset.compiler import check_ruleset, load_ruleset

PARENT = """\
ruleset: brackwater-common
version: 1
lubricants:
  TURB-46-M: {base_stock: mineral, kv40: 45.9, an: 0.07}
  GEAR-320-M: {base_stock: mineral, kv40: 320.0, an: 0.30}
rules:
  - id: water
    measure: water
    above: {watch: 200, alert: 500}
    message: Water in the oil
    source: common practice, no source
classes:
  steam-turbine:
    rules:
      - id: acid-rise
        measure: an_rise
        above: {watch: 0.1, alert: 0.2}
        message: Acid number has risen above new oil
        source: site practice
  gearbox:
    rules:
      - id: acid-rise
        measure: an_rise
        above: {watch: 0.5, alert: 1.0}
        message: Acid number has risen above new oil
        source: site practice
"""

SITE = """\
ruleset: brackwater-site
version: 1
extends: common.yaml
classes:
  gearbox:
    drop: [water]
"""

SAMPLES = ("sample_id,unit_id,class,lubricant,sampled_on,water,an\n"
           "ST-0600,ST-1,steam-turbine,TURB-46-M,2026-06-01,600,0.10\n"
           "GB-0600,GB-1,gearbox,GEAR-320-M,2026-06-01,600,0.50\n")


def _write(tmp_path):
    (tmp_path / "common.yaml").write_text(PARENT, encoding="utf-8")
    (tmp_path / "site.yaml").write_text(SITE, encoding="utf-8")
    return tmp_path / "site.yaml"


def test_a_dropped_top_level_rule_is_gone_for_that_class_only(tmp_path):
    site = _write(tmp_path)
    assert not check_ruleset(site).errors
    records, _ = graded_run("-", "--rules", str(site), stdin=SAMPLES)
    assert records["ST-0600"]["grade"] == "alert" and fired_rules(records["ST-0600"]) == {"water"}
    assert records["GB-0600"]["grade"] == "normal" and fired_rules(records["GB-0600"]) == set()
    assert "water" not in {gap["rule"] for gap in records["GB-0600"]["not_evaluated"]}


def test_the_canonical_form_keeps_the_drop_and_reloads_to_the_same_fingerprint(tmp_path):
    ruleset = load_ruleset(_write(tmp_path))
    assert ruleset.class_drops == {"gearbox": ("water",)}
    again = tmp_path / "canonical.yaml"
    again.write_text(ruleset.canonical, encoding="utf-8")
    reloaded = load_ruleset(again)
    assert reloaded.sha256 == ruleset.sha256 and [r.id for r in reloaded.rules_for("gearbox")] == ["acid-rise"]


def test_compare_lists_the_drop(tmp_path):
    site = _write(tmp_path)
    (change,) = ruleset_changes(load_ruleset(tmp_path / "common.yaml"), load_ruleset(site))
    assert (change.where, change.what, change.before, change.after) == (
        "class gearbox", "drops top-level rules", "(none)", '["water"]')


def test_drop_of_an_id_no_rule_has_is_still_an_error_with_the_nearest(tmp_path):
    _write(tmp_path)
    (tmp_path / "site.yaml").write_text(SITE.replace("drop: [water]", "drop: [acid-rsie]"), encoding="utf-8")
    (problem,) = check_ruleset(tmp_path / "site.yaml").errors
    assert (problem.code, problem.hint) == ("R006", "did you mean 'acid-rise'?")
