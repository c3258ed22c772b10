"""sumpwise.authoring.lint: each warning on a fixture written to trigger it, with its file and line.

The semantics the checks reason about are the rule-language contract
(../shared/rule-language.md): `above` is value > limit, `below` value < limit,
`between` inclusive, `outside` |value| > limit; the highest grade crossed fires.
Unit facts: 1 % = 10 000 ppm (by definition); absorbance A = -log10(T), so A = 5
lets 10^-5 of the light through (the definition of absorbance).
"""

from __future__ import annotations

from pathlib import Path

import pytest

from sumpwise.ruleset.compiler import load_ruleset
from sumpwise.authoring.lint import lint_ruleset, never_true, region, shadows, unit_trouble, vague_source
from sumpwise.vocabulary.intervals import EVERYTHING, can_hold, covered
from sumpwise.ruleset.model import AllOf, AnyOf, ConditionRule, FieldTest, LadderRule, MeasureTest, MissingTest, Origin

DATA = Path(__file__).resolve().parents[1] / "data" / "authoring"
HERE = Origin("test", 1, 1, "$")


def warnings_of(name: str) -> list[tuple[str, int, str]]:
    problems = lint_ruleset(load_ruleset(DATA / name))
    assert all(p.severity == "warning" and p.hint and "\n" not in p.hint for p in problems)
    return [(Path(p.file).name, p.line, p.message) for p in problems]


def test_clean_fixture_has_no_warnings():
    assert warnings_of("clean.yaml") == []


def test_shadowed_rule_is_named_with_the_rule_that_shadows_it():
    # acid-high: an_rise > 0.5 (and hours) -> alert; acid-rise already gives alert above 0.4.
    [(file, line, message)] = warnings_of("lint-shadowed.yaml")
    assert (file, line) == ("lint-shadowed.yaml", 8)
    assert "'acid-high' is always shadowed by rule 'acid-rise'" in message and "clean.yaml:12" in message


def test_condition_that_can_never_be_true():
    [(file, line, message)] = warnings_of("lint-never-true.yaml")
    assert (file, line) == ("lint-never-true.yaml", 8)
    assert "'impossible-water' can never fire" in message and "water above 10 and water below 5" in message


def test_class_or_lubricant_the_rule_set_lacks_is_named_with_the_nearest():
    # `pumps` for class `pump`, `PUMP-46-EE` for `PUMP-46-E`: the rule never fires on a graded sample.
    # Field tests ignore case (rule-language draft: compared as text; the evaluator folds case),
    # so `pump-46-m` and `PUMP` name what the rule set has.
    found = warnings_of("lint-unknown-names.yaml")
    assert [(line, message.split(",")[0]) for _, line, message in found] == [
        (8, "rule 'pumps-only' tests class 'pumps'"),
        (13, "rule 'ester-fill-wet' tests lubricant 'PUMP-46-EE'"),
    ]
    hints = [p.hint for p in lint_ruleset(load_ruleset(DATA / "lint-unknown-names.yaml"))]
    assert hints == ["did you mean 'pump'?", "did you mean 'PUMP-46-E'?"]


def test_ladder_gap_unreachable_step_and_unreached_grade():
    found = warnings_of("lint-ladder.yaml")
    assert [(line, message.split(":")[0]) for _, line, message in found] == [
        (7, "no rule of class 'pump' can give alert"),
        (9, "rule 'water' has a gap in its ladder"),
        (14, "rule 'acid-low'"),
    ]
    assert "limits for watch, urgent but none for alert" in found[1][2]
    assert "no value reaches its 'alert' limit (kv100_change_pct below -100" in found[2][2]


def test_class_without_acid_viscosity_or_oxidation_rules():
    found = warnings_of("lint-coverage.yaml")
    assert {(line, message.split(" (")[0]) for _, line, message in found} == {
        (5, "class 'fan' has no rule on acid number"),
        (5, "class 'fan' has no rule on viscosity"),
        (5, "class 'fan' has no rule on oxidation"),
    }


def test_limits_in_the_wrong_unit():
    found = warnings_of("lint-units.yaml")
    assert [line for _, line, _ in found] == [9, 14, 19]
    water, oxidation, viscosity = (message for _, _, message in found)
    # 0.00005 % is 0.5 ppm (1 % = 10 000 ppm), below what a Karl Fischer titration reports.
    # (A water limit above 100 % is impossible, an error: tests/ruleset/test_one_pass.py.)
    assert "water limit(s) 5e-05, 8e-05 %" in water and "below 1 ppm" in water
    # 8 abs/0.1mm = 800 abs/cm: absorbance 8 through 0.1 mm, 10^-8 of the light.
    assert "oxidation limit(s) 8, 15 abs/0.1mm" in oxidation
    assert "kv100_change_pct limit(s) 460 %" in viscosity


def test_vague_sources():
    found = warnings_of("lint-sources.yaml")
    assert [(line, message.split(":")[0]) for _, line, message in found] == [
        (8, "rule 'water'"), (13, "rule 'oil-age'"), (18, "rule 'soot'")]
    assert "'tbd' is a placeholder" in found[0][2]
    assert "'see manual' is a placeholder" in found[1][2]
    assert "names no standard, manual" in found[2][2]


@pytest.mark.parametrize("source, vague", [
    ("tbd", True), ("N/A", True), ("see manual", True), ("practice", True), ("Bob said so", True),
    ("site practice", False), ("common practice, no source", False), ("ASTM D4378 Table 3 (from memory)", False),
    ("compressor manufacturer's manual, section 7.2", False), ("editable default, no source", False),
])
def test_vague_source_words(source, vague):
    assert (vague_source(source) is not None) == vague


def _test(measure, test, limit):
    return MeasureTest(measure, test, limit)


@pytest.mark.parametrize("condition, impossible", [
    (AllOf((_test("water", "above", 10.0), _test("water", "below", 5.0))), True),
    (AllOf((_test("water", "above", 5.0), _test("water", "below", 10.0))), False),
    # between is inclusive, above is strict: [1, 2] and > 2 share no value; [1, 2] and >= ... 1.9 do.
    (AllOf((_test("vi", "between", (1.0, 2.0)), _test("vi", "above", 2.0))), True),
    (AllOf((_test("vi", "between", (1.0, 2.0)), _test("vi", "above", 1.9))), False),
    # |v| > 5 and -5 <= v <= 5 share no value; |v| > 5 and -6 <= v <= 5 share [-6, -5).
    (AllOf((_test("vi", "outside", 5.0), _test("vi", "between", (-5.0, 5.0)))), True),
    (AllOf((_test("vi", "outside", 5.0), _test("vi", "between", (-6.0, 5.0)))), False),
    # an acid number is never negative (a sample with one is rejected).
    (_test("an", "below", 0.0), True),
    (_test("an", "below", 0.01), False),
    (AnyOf((_test("an", "below", 0.0), _test("an", "above", 1.0))), False),
    (AnyOf((_test("an", "below", 0.0), _test("water", "below", -1.0))), True),
    # a test on a value that is missing is unknown, never true.
    (AllOf((MissingTest("an", True), _test("an", "above", 1.0))), True),
    (AllOf((FieldTest("base_stock", "in", ("ester",)), FieldTest("base_stock", "equals", ("PAO",)))), True),
    (AllOf((FieldTest("base_stock", "in", ("ester", "pao")), FieldTest("base_stock", "equals", ("PAO",)))), False),
    (AllOf((AllOf((_test("water", "above", 10.0),)), _test("water", "below", 10.0))), True),
])
def test_never_true(condition, impossible):
    assert (never_true(condition) is not None) == impossible


def _ladder(rule_id, measure, test, steps):
    return LadderRule(rule_id, measure, test, tuple(steps), "m", "site practice", HERE)


def test_shadowing_between_ladders_is_one_sided_and_exact_at_the_limits():
    tight = _ladder("tight", "an_rise", "above", [(1, 0.1), (2, 0.2)])
    loose = _ladder("loose", "an_rise", "above", [(1, 0.2), (2, 0.3)])
    assert shadows(tight, loose) and not shadows(loose, tight)
    same = _ladder("same", "an_rise", "above", [(1, 0.1), (2, 0.2)])
    assert shadows(tight, same) and shadows(same, tight)
    # A rise of 0.18 gets watch from `tight` but alert from `higher`: not shadowed.
    higher = _ladder("higher", "an_rise", "above", [(2, 0.15)])
    assert not shadows(tight, higher)
    other = _ladder("other", "an", "above", [(1, 0.2), (2, 0.3)])
    assert not shadows(tight, other)


def test_outside_pairs_shadowing():
    wide = _ladder("wide", "kv40_change_pct", "outside", [(1, 5.0), (2, 10.0)])
    skew = _ladder("skew", "kv40_change_pct", "outside", [(1, (-8.0, 6.0))])
    assert shadows(wide, skew)  # |v| > 5 whenever v < -8 or v > 6
    inner = _ladder("inner", "kv40_change_pct", "outside", [(1, (-4.0, 6.0))])
    assert not shadows(wide, inner)  # v = -4.5 fires inner but not wide


def test_condition_rule_shadowed_only_through_a_part_that_implies_the_grade():
    ladder = _ladder("acid", "an_rise", "above", [(1, 0.2), (2, 0.4)])
    both = ConditionRule("both", AllOf((_test("an_rise", "above", 0.4), _test("oil_hours", "above", 10.0))), 2,
                         "m", "site practice", HERE)
    either = ConditionRule("either", AnyOf((_test("an_rise", "above", 0.4), _test("oil_hours", "above", 10.0))), 2,
                           "m", "site practice", HERE)
    assert shadows(ladder, both) and not shadows(ladder, either) and not shadows(both, ladder)


def test_interval_helpers():
    assert can_hold(region("above", 1.0), region("below", 1.0 + 1e-9))
    assert not can_hold(region("above", 1.0), region("below", 1.0))
    assert covered(region("above", 2.0), region("above", 1.0), EVERYTHING)
    assert not covered(region("above", 1.0), region("above", 2.0), EVERYTHING)  # 1.5 is in one, not the other
    assert covered(region("below", 0.0), region("above", 5.0), region("above", 0.0))  # nothing below 0 here


@pytest.mark.parametrize("measure, limit, troubled", [
    ("water", 1_000_000.0, False), ("water", 0.5, True), ("water", 200.0, False),
    ("oxidation", 800.0, True), ("oxidation", 180.0, False), ("oxidation_rise", 1500.0, True),
    ("kv40_change_pct", 150.0, True), ("kv40_change_pct", -10.0, False),
    ("rpvot_retained_pct", 0.5, True), ("rpvot_retained_pct", 25.0, False), ("an_rise", 900.0, False),
])
def test_unit_trouble_thresholds(measure, limit, troubled):
    assert (unit_trouble(measure, limit) is not None) == troubled


@pytest.mark.parametrize("iso_vg, kv40, warned, words", [
    (46, 45.9, False, None),                   # ISO 3448: VG 46 is 41.4 to 50.6 mm2/s
    (46, 80.0, True, "outside ISO VG 46's band 41.4 to 50.6"),
    (45, 80.0, True, "45 is not an ISO 3448 grade; its kv40 80 mm2/s fits no ISO VG band"),  # 68: 61.2-74.8
    (45, 44.0, True, "fits ISO VG 46"),
    (68, 74.8, False, None),                   # the band's upper end belongs to it
])
def test_iso_vg_and_kv40_must_agree(tmp_path, iso_vg, kv40, warned, words):
    path = tmp_path / "r.yaml"
    path.write_text(f"ruleset: r\nversion: 1\nlubricants:\n  OIL: {{iso_vg: {iso_vg}, kv40: {kv40}}}\n")
    found = [p for p in lint_ruleset(load_ruleset(path)) if p.code == "W012"]
    assert bool(found) == warned
    if words:
        assert words in found[0].message and found[0].line == 4


@pytest.mark.parametrize("rule, warned", [
    ("measure: kv40, outside: {watch: 5}", True),        # |kv40| > 5: every oil above VG 5
    ("measure: kv40, above: {watch: 1.5}", True),        # below ISO VG 2's lowest kv40, 1.98
    ("measure: kv40, outside: {watch: [41.4, 50.6]}", False),
    ("measure: kv40_change_pct, outside: {watch: 5}", False),
])
def test_raw_viscosity_limits_every_oil_crosses(tmp_path, rule, warned):
    path = tmp_path / "r.yaml"
    path.write_text(f"ruleset: r\nversion: 1\nclasses:\n  pump:\n    rules:\n"
                    f"      - {{id: v, {rule}, message: m, source: site practice}}\n")
    assert ("W011" in [p.code for p in lint_ruleset(load_ruleset(path))]) == warned
