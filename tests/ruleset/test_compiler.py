"""Semantic checks the schema cannot make, unit conversion of limits, and the fingerprint."""

import json

import pytest
from conftest import DATA

from sumpwise.ruleset.compiler import load_ruleset
from sumpwise.vocabulary.problems import InvalidFile

HEAD = "ruleset: t\nversion: 1\nclasses:\n  pump:\n    rules:\n"


def _problems(tmp_path, rules_yaml, head=HEAD):
    path = tmp_path / "t.yaml"
    path.write_text(head + rules_yaml)
    with pytest.raises(InvalidFile) as caught:
        load_ruleset(path)
    return caught.value.problems


def test_unknown_measure_with_hint(tmp_path):
    (p,) = _problems(tmp_path, "      - {id: r, measure: an_rize, above: {watch: 1}, message: m, source: s}\n")
    assert "unknown measure 'an_rize'" in p.message and p.hint == "did you mean 'an_rise'?"
    assert p.line == 6


def test_unknown_field_and_grade(tmp_path):
    problems = _problems(tmp_path, (
        "      - id: r\n"
        "        when: {field: colour, in: [red]}\n"
        "        grade: severe\n"
        "        message: m\n        source: s\n"))
    messages = [p.message for p in problems]
    assert any("unknown field 'colour'" in m for m in messages)
    assert any("grade 'severe' is not on the grade ladder" in m for m in messages)


def test_ladder_must_be_monotone(tmp_path):
    (p,) = _problems(tmp_path, "      - {id: r, measure: an_rise, above: {watch: 0.4, alert: 0.2}, "
                               "message: m, source: s}\n")
    assert "not in ladder order" in p.message and "'alert' must be higher" in p.message


def test_below_ladder_must_descend(tmp_path):
    (p,) = _problems(tmp_path, "      - {id: r, measure: rpvot_retained_pct, below: {watch: 25, alert: 50}, "
                               "message: m, source: s}\n")
    assert "'alert' must be lower" in p.message


def test_outside_pairs_must_widen(tmp_path):
    (p,) = _problems(tmp_path, "      - {id: r, measure: kv40_change_pct, outside: {watch: [-10, 15], "
                               "alert: [-5, 8]}, message: m, source: s}\n")
    assert "'alert' must be wider" in p.message


def test_rule_must_be_ladder_or_condition(tmp_path):
    problems = _problems(tmp_path, (
        "      - {id: mixed, measure: an, above: {watch: 1}, grade: watch, message: m, source: s}\n"
        "      - {id: neither, message: m, source: s}\n"))
    assert "mixes a condition" in problems[0].message
    assert "needs either `measure`" in problems[1].message


def test_empty_source_is_an_error_and_lowest_grade_takes_no_limit(tmp_path):
    problems = _problems(tmp_path, "      - {id: r, measure: an, above: {normal: 1, watch: 2}, message: m, "
                                   "source: ''}\n")
    messages = " | ".join(p.message for p in problems)
    assert "lowest grade" in messages and "`source` must say where" in messages


def test_condition_measure_needs_exactly_one_test(tmp_path):
    (p,) = _problems(tmp_path, "      - {id: r, when: {measure: an, above: 1, below: 3}, grade: watch, "
                               "message: m, source: s}\n")
    assert "exactly one of above, below" in p.message


def test_all_errors_are_reported_at_once_sorted(tmp_path):
    problems = _problems(tmp_path, (
        "      - {id: a, measure: nope1, above: {watch: 1}, message: m, source: s}\n"
        "      - {id: b, measure: nope2, above: {watch: 1}, message: m, source: s}\n"))
    assert [p.line for p in problems] == [6, 7]


def test_fingerprint_ignores_layout_and_changes_with_a_limit(tmp_path):
    a = tmp_path / "a.yaml"
    a.write_text(HEAD + "      - {id: r, measure: an_rise, above: {watch: 0.2}, message: m, source: s}\n")
    b = tmp_path / "b.yaml"
    b.write_text("# comment\nversion: 1\nruleset: t\nclasses:\n  pump:\n    rules:\n"
                 "      - id: r\n        source: s\n        message: m\n        measure: an_rise\n"
                 "        above:\n          watch: 0.2\n")
    c = tmp_path / "c.yaml"
    c.write_text(HEAD + "      - {id: r, measure: an_rise, above: {watch: 0.25}, message: m, source: s}\n")
    assert load_ruleset(a).sha256 == load_ruleset(b).sha256
    assert load_ruleset(a).sha256 != load_ruleset(c).sha256


def test_fingerprint_is_the_same_for_the_same_limit_in_another_unit(tmp_path):
    cm = tmp_path / "cm.yaml"
    cm.write_text("ruleset: t\nversion: 1\nunits: {oxidation: abs/cm}\n" + HEAD.split("\n", 2)[2]
                  + "      - {id: r, measure: oxidation_rise, above: {watch: 25}, message: m, source: s}\n")
    mm = tmp_path / "mm.yaml"
    mm.write_text("ruleset: t\nversion: 1\nunits: {oxidation: abs/0.1mm}\n" + HEAD.split("\n", 2)[2]
                  + "      - {id: r, measure: oxidation_rise, above: {watch: 0.25}, message: m, source: s}\n")
    assert load_ruleset(cm).sha256 == load_ruleset(mm).sha256


def test_canonical_form_reloads_to_the_same_fingerprint(tmp_path):
    rs = load_ruleset(DATA / "rulesets" / "draft.yaml")
    again = tmp_path / "canonical.json"
    again.write_text(rs.canonical)
    reloaded = load_ruleset(again)
    assert reloaded.sha256 == rs.sha256
    assert json.loads(rs.canonical)["units"] == {"antiwear": "abs/cm", "nitration": "abs/cm",
                                                 "oxidation": "abs/cm", "soot": "abs/cm",
                                                 "sulfation": "abs/cm", "water": "ppm"}


def test_top_level_rules_apply_to_every_class_unless_overridden(tmp_path):
    path = tmp_path / "t.yaml"
    path.write_text("ruleset: t\nversion: 1\n"
                    "rules:\n  - {id: wet, measure: water, above: {watch: 500}, message: m, source: s}\n"
                    "classes:\n  a: {}\n  b:\n    rules:\n"
                    "      - {id: wet, measure: water, above: {watch: 200}, message: m, source: s}\n")
    rs = load_ruleset(path)
    assert rs.rules_for("a")[0].steps == ((1, 500.0),)
    assert rs.rules_for("b")[0].steps == ((1, 200.0),) and len(rs.rules_for("b")) == 1
