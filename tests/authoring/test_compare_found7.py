"""`compare` lists every limit that changed between two versions, not only the samples that moved.

Up to engine 0.8.0 `compare` said only which samples moved: a reviewer comparing version 4 of
the Brackwater Point turbine limits with version 5 on two samples read "0 moved to another
grade" and exit 0, while version 5 had dropped the urgent acid step and the oil-age rule, moved
the alert acid limit and the young-oil condition, added a viscosity rule and re-measured the
new oil's acid number. Version 5 is written in abs/0.1mm and % where version 4 used abs/cm and
ppm: the same limits in other units (1 abs/0.1mm = 100 abs/cm, path length ratio, ASTM E2412;
1 % = 10,000 ppm by definition) are no change, so they must not be listed.
"""

from __future__ import annotations

from conftest import run_cli

from sumpwise.authoring.compare import ruleset_changes
from sumpwise.ruleset.compiler import load_ruleset


def _pair(data):
    folder = data / "rulesets_found7"
    return folder / "compare-v4.yaml", folder / "compare-v5.yaml", folder / "compare-samples.csv"


EXPECTED = [
    ("class steam-turbine, rule acid-rise", "alert above", "0.2 mg KOH/g", "0.25 mg KOH/g"),
    ("class steam-turbine, rule acid-rise", "urgent above", "0.4 mg KOH/g", "(none)"),
    ("class steam-turbine, rule oil-age", "removed", '{"measure": "oil_hours", "above": {"watch": 40000}}', "(none)"),
    ("class steam-turbine, rule young-oil-oxidising", "when",
     '{"all": [{"measure": "oil_hours", "below": 2000}, {"measure": "oxidation_rise", "above": 10}]}',
     '{"all": [{"measure": "oil_hours", "below": 3000}, {"measure": "oxidation_rise", "above": 10}]}'),
    ("class steam-turbine, rule visc-drift", "added", "(none)",
     '{"measure": "kv40_change_pct", "outside": {"watch": 5, "alert": 10}}'),
    ("lubricant TURB-46-M", "new-oil an", "0.07", "0.09"),
]


def test_every_changed_limit_is_listed_and_a_unit_rewrite_is_not_a_change(data):
    old, new, _ = _pair(data)
    changes = ruleset_changes(load_ruleset(old), load_ruleset(new))
    assert [(c.where, c.what, c.before, c.after) for c in changes] == EXPECTED


def test_a_rule_set_against_itself_has_no_change(data):
    old, _, _ = _pair(data)
    assert ruleset_changes(load_ruleset(old), load_ruleset(old)) == ()


def test_the_reverse_comparison_lists_the_same_changes_the_other_way(data):
    old, new, _ = _pair(data)
    backwards = ruleset_changes(load_ruleset(new), load_ruleset(old))
    swap = {"added": "removed", "removed": "added"}
    assert {(c.where, swap.get(c.what, c.what), c.after, c.before) for c in backwards} == set(EXPECTED)
    assert len(backwards) == len(EXPECTED)


def test_compare_prints_the_changes_when_no_sample_moves(data):
    old, new, samples = _pair(data)
    run = run_cli("compare", old, new, "--samples", samples)
    assert run.code == 0, run.err  # exit 3 stays for a sample that moved
    assert "0 moved to another grade" in run.out
    assert "rule-set changes: 6 (limits in the engine's units: water ppm, FTIR abs/cm)" in run.out
    assert "  class steam-turbine, rule acid-rise: urgent above: 0.4 mg KOH/g -> (none)" in run.out
    assert "  lubricant TURB-46-M: new-oil an: 0.07 -> 0.09" in run.out
    assert "Screening aid only" in run.out
    same = run_cli("compare", old, old, "--samples", samples)
    assert "rule-set changes: none (the two rule sets grade alike)" in same.out


def test_a_declared_measures_unit_change_is_listed_with_each_limit_in_its_own_unit(data):
    """A child declaring iron in ppb over a parent in ppm (1 ppm = 1000 ppb) and restating the limits:
    the same limits, but every number differs, so each is shown in the unit its rule set reads it in."""
    folder = data / "rulesets" / "found2"
    changes = ruleset_changes(load_ruleset(folder / "declared-parent.yaml"),
                              load_ruleset(folder / "declared-child-restated.yaml"))
    shown = {(c.where, c.what): (c.before, c.after) for c in changes}
    assert shown[("class gearbox, rule iron-high", "watch above")] == ("100 ppm", "100000 ppb")
    assert shown[("declared measure iron", "unit")] == ("ppm", "ppb")


def test_a_changed_notice_is_listed(tmp_path, data):
    old, _, _ = _pair(data)
    new = tmp_path / "v4-notice.yaml"
    new.write_text(old.read_text(encoding="utf-8").replace(
        "version: 4\n", "version: 4\nnotice: Screening aid only. Manufacturer limits and site procedures come first.\n"),
        encoding="utf-8")
    (change,) = ruleset_changes(load_ruleset(old), load_ruleset(new))
    assert (change.where, change.what) == ("rule set", "notice")
    assert change.after == "Screening aid only. Manufacturer limits and site procedures come first."
