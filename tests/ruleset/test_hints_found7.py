"""Refusals a site lead meets, with the reason and the fix at the place: YAML's exponent rule, a
unit written beside a limit, a cap at the lowest grade, and other slips.

Up to engine 0.8.0 `1e3` was "expected a number here, found text" with no why (YAML 1.1 reads a
float only with a dot and a signed exponent: its float resolver, yaml.org/type/float); a cap at
`normal` was refused as "a limit or rule for it can never raise a sample's grade", which is not
what a cap does. Water figures: limits.md, common practice, no source.
"""

from __future__ import annotations

import pytest

from sumpwise.ruleset.compiler import check_ruleset
from sumpwise.ruleset.yaml_source import parse_yaml

LADDER = """\
ruleset: brackwater-hints
version: 1
classes:
  steam-turbine:
    rules:
      - id: water
        measure: water
        above: {watch: WATCH, alert: 1000}
        message: Water in the oil
        source: common practice, no source
"""


@pytest.mark.parametrize("written, fix, value", [("2e3", "2.0e+3", 2000.0), ("2.0e3", "2.0e+3", 2000.0),
                                                 ("2E-1", "2.0E-1", 0.2)])
def test_an_exponent_yaml_reads_as_text_is_refused_with_the_spelling_it_reads(tmp_path, written, fix, value):
    path = tmp_path / "site.yaml"
    path.write_text(LADDER.replace("WATCH", written), encoding="utf-8")
    (problem,) = check_ruleset(path).errors
    assert (problem.code, problem.line, problem.path) == ("S003", 8, "$.classes.steam-turbine.rules[0].above.watch")
    assert f"write {fix}," in problem.hint
    assert parse_yaml(f"a: {fix}\n", "f.yaml").data["a"] == value  # the fix it gives reads as that number


@pytest.mark.parametrize("written", ["200 ppm", "0.02%", "200ppm"])
def test_a_unit_beside_a_limit_is_refused_with_where_units_go(tmp_path, written):
    path = tmp_path / "site.yaml"
    path.write_text(LADDER.replace("WATCH", written), encoding="utf-8")
    (problem,) = check_ruleset(path).errors
    assert problem.code == "S003" and problem.hint.startswith(f"write the number alone ({written[:-3].strip()}")


def test_a_cap_at_the_lowest_grade_is_refused_for_what_it_would_do(tmp_path):
    path = tmp_path / "site.yaml"
    path.write_text(LADDER.replace("WATCH", "200") + (
        "caveats:\n  - id: wet-sample-point\n    when: {field: class, equals: steam-turbine}\n"
        "    cap: {measures: [water], grade: normal}\n    message: The sample point collects condensate\n"),
        encoding="utf-8")
    (problem,) = check_ruleset(path).errors
    assert (problem.code, problem.line, problem.path) == ("C002", 14, "$.caveats[0].cap.grade")
    assert "would hide every finding on water" in problem.message and "cap at 'watch'" in problem.hint


CLEANLINESS = """\
ruleset: brackwater-cleanliness
version: 1
classes:
  hydraulic:
    rules:
      - id: cleanliness
        iso4406: {watch: CODE, alert: 20/18/15}
        message: Particle count above the target cleanliness code
        source: site practice
"""


def test_an_iso_4406_code_starting_with_a_star_is_refused_with_the_quoting_that_fixes_it(tmp_path):
    """ISO 4406 lets a size go unreported (`*/16/13`, or `-`); unquoted, YAML reads `*` as an alias."""
    path = tmp_path / "site.yaml"
    path.write_text(CLEANLINESS.replace("CODE", "*/16/13"), encoding="utf-8")
    first = check_ruleset(path).errors[0]
    assert (first.code, first.line) == ("Y001", 7)
    assert "quote it, e.g. {watch: '*/16/13'}" in first.hint
    path.write_text(CLEANLINESS.replace("CODE", "'*/16/13'"), encoding="utf-8")
    quoted = check_ruleset(path)
    assert not quoted.errors
    watch = {rule.id: rule.steps for rule in quoted.ruleset.rules_for("hydraulic")}
    assert watch["cleanliness-6um"] == ((1, 16.0), (2, 18.0)) and watch["cleanliness-4um"] == ((2, 20.0),)


def test_a_ladder_with_above_and_below_is_refused_with_the_band_spelling(tmp_path):
    path = tmp_path / "site.yaml"
    path.write_text(LADDER.replace("above: {watch: WATCH, alert: 1000}", "above: {watch: 8}\n        below: {watch: -5}")
                    .replace("measure: water", "measure: kv40_change_pct"), encoding="utf-8")
    (problem,) = check_ruleset(path).errors
    assert (problem.code, problem.line) == ("C004", 6)
    assert "outside: {watch: [low, high]" in problem.hint


@pytest.mark.parametrize("written, meant", [("wacth", "watch"), ("Alert", "alert"), ("unrate", "unrated")])
def test_a_misspelt_expected_grade_of_an_example_gets_the_nearest(tmp_path, written, meant):
    path = tmp_path / "site.yaml"
    path.write_text(LADDER.replace("WATCH", "200") + (
        "examples:\n  - name: wet\n    sample: {class: steam-turbine, water: 300}\n"
        f"    expect: {{grade: {written}}}\n"), encoding="utf-8")
    (problem,) = check_ruleset(path).errors
    assert (problem.code, problem.line, problem.hint) == ("C010", 14, f"did you mean '{meant}'?")


def test_a_column_map_given_as_the_rule_set_is_one_error_that_says_so(tmp_path):
    """Up to engine 0.8.0 it was fourteen errors, one per column (`unknown key 'kv40'`), and two more for
    the missing `ruleset` and `version`."""
    path = tmp_path / "columns.yaml"
    path.write_text("sample_id: Sample No\nunit_id: Asset\nclass: Equipment class\nlubricant: Oil\n"
                    "sampled_on: {column: Date sampled, format: '%d/%m/%Y'}\nkv40: V40\nan: TAN\n"
                    "water: {column: Water KF, unit: ppm}\n", encoding="utf-8")
    (problem,) = check_ruleset(path).errors
    assert (problem.code, problem.line) == ("R001", 1)
    assert "--columns" in problem.hint


def test_drop_of_a_misspelt_class_rule_gets_the_nearest_id(tmp_path):
    (tmp_path / "parent.yaml").write_text(
        "ruleset: bw-parent\nversion: 1\nclasses:\n  gearbox:\n    rules:\n"
        "      - {id: iron-climbing, when: {measure: iron_rising, above: 2}, grade: watch, message: Iron keeps rising,"
        " source: site practice}\nmeasures:\n  iron: {unit: ppm}\n", encoding="utf-8")
    (tmp_path / "site.yaml").write_text("ruleset: bw-site\nversion: 1\nextends: parent.yaml\nclasses:\n"
                                        "  gearbox:\n    drop: [iron-rising]\n", encoding="utf-8")
    (problem,) = check_ruleset(tmp_path / "site.yaml").errors
    assert (problem.code, problem.line, problem.hint) == ("R006", 6, "did you mean 'iron-climbing'?")


def test_a_message_of_spaces_only_is_refused(tmp_path):
    """A result's reason shows the rule's message: up to engine 0.8.0 `message: " "` passed and the
    record carried an empty message."""
    path = tmp_path / "site.yaml"
    path.write_text(LADDER.replace("WATCH", "200").replace("message: Water in the oil", 'message: " "'),
                    encoding="utf-8")
    (problem,) = check_ruleset(path).errors
    assert (problem.code, problem.line, problem.path) == ("S005", 9, "$.classes.steam-turbine.rules[0].message")


@pytest.mark.parametrize("written, hint", [
    ("1,000", "write 1.000 for a decimal comma, 1000 for a thousands separator"),
    ("0,2", "write 0.2 for a decimal comma"),
])
def test_a_comma_in_a_block_limit_is_refused_with_both_readings(tmp_path, written, hint):
    path = tmp_path / "site.yaml"
    path.write_text(LADDER.replace("above: {watch: WATCH, alert: 1000}", f"above:\n          watch: {written}"),
                    encoding="utf-8")
    (problem,) = check_ruleset(path).errors
    assert problem.code == "S003" and problem.hint.endswith(hint)


@pytest.mark.parametrize("ladder, codes", [("{watch: 0,2, alert: 0,4}", ["S003", "S003"]),
                                           ("{watch: 1,000, alert: 5,000}", ["Y012", "Y004", "Y012"])])
def test_a_comma_inside_braces_splits_the_number_and_each_problem_says_so(tmp_path, ladder, codes):
    """`{watch: 0,2}` is {watch: 0, 2: null} to YAML: a limit of 0 would otherwise be what was read."""
    path = tmp_path / "site.yaml"
    path.write_text(LADDER.replace("{watch: WATCH, alert: 1000}", ladder), encoding="utf-8")
    errors = check_ruleset(path).errors
    assert [p.code for p in errors] == codes
    assert all("a comma separates entries" in p.hint for p in errors if p.code != "Y004")


def test_extends_without_the_yaml_ending_names_the_file_it_meant(tmp_path):
    (tmp_path / "turbines.yaml").write_text("ruleset: bw-turbines\nversion: 1\n", encoding="utf-8")
    (tmp_path / "site.yaml").write_text("ruleset: bw-site\nversion: 1\nextends: [turbines]\n", encoding="utf-8")
    (problem,) = check_ruleset(tmp_path / "site.yaml").errors
    assert (problem.code, problem.line) == ("R003", 3) and problem.hint.startswith("did you mean 'turbines.yaml'?")
