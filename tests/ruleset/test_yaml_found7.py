"""Rule-set YAML as a site lead writes it: merge keys, and every problem of a file in one run.

Up to engine 0.8.0 a merge key that overrides a merged value (`above: {<<: *ladder, alert: 300}`,
the override the YAML merge-key type defines, yaml.org/type/merge) was refused as "key 'alert'
given twice at lines 11 and 18", naming a line of another rule; and a file with one key given
twice, or one number written 0x10 or .inf, was not checked any further, so a misspelt grade
elsewhere in it waited for the next run. Water limits: limits.md, common practice, no source.
"""

from __future__ import annotations

import pytest
from grade_runs import graded_run

from sumpwise.ruleset.compiler import check_ruleset
from sumpwise.ruleset.yaml_source import parse_yaml

# The worked example of the YAML 1.1 merge-key type (yaml.org/type/merge, Example 1): the four
# mappings are equal, so earlier mappings of a merge list win and the mapping's own keys win over all.
SPEC_EXAMPLE = """\
- &CENTER { x: 1, y: 2 }
- &LEFT { x: 0, y: 2 }
- &BIG { r: 10 }
- &SMALL { r: 1 }
- x: 1
  y: 2
  r: 10
  label: center/big
- << : *CENTER
  r: 10
  label: center/big
- << : [ *CENTER, *BIG ]
  label: center/big
- << : [ *BIG, *LEFT, *SMALL ]
  x: 1
  label: center/big
"""


def test_the_merge_key_specification_example_reads_as_published():
    data = parse_yaml(SPEC_EXAMPLE, "merge.yaml").data
    assert data[4] == {"x": 1, "y": 2, "r": 10, "label": "center/big"}
    assert data[5] == data[6] == data[7] == data[4]


def test_a_merged_ladder_with_one_limit_overridden_grades_as_the_lead_meant(data):
    """250 ppm: alert on a turbine (alert above 200), watch on a gearbox (its alert moved to 300)."""
    rules = data / "rulesets_found7" / "merge-override.yaml"
    samples = ("sample_id,unit_id,class,lubricant,sampled_on,water\n"
               "ST-250,ST-1,steam-turbine,TURB-46-M,2026-03-02,250\n"
               "GB-250,GB-1,gearbox,GEAR-320-M,2026-03-02,250\n"
               "GB-350,GB-1,gearbox,GEAR-320-M,2026-04-02,350\n"
               "GB-600,GB-1,gearbox,GEAR-320-M,2026-05-04,600\n")
    records, _ = graded_run("-", "--rules", str(rules), stdin=samples)
    assert {sid: r["grade"] for sid, r in records.items()} == {
        "ST-250": "alert", "GB-250": "watch", "GB-350": "alert", "GB-600": "urgent"}
    (reason,) = records["GB-350"]["reasons"]
    assert (reason["rule"], reason["limit"]) == ("water", 300)


def test_a_key_written_twice_in_the_mapping_itself_is_still_refused_beside_a_merge():
    with pytest.raises(Exception) as caught:
        parse_yaml("a: &a {x: 1}\nb: {<<: *a, y: 2, y: 3}\n", "f.yaml")
    (problem,) = caught.value.problems
    assert (problem.code, problem.line, problem.column, problem.path) == ("Y004", 2, 19, "$.b.y")


@pytest.mark.parametrize("merged", ["[1]", "5"])
def test_a_merge_of_something_other_than_a_mapping_is_refused_with_its_place(merged):
    with pytest.raises(Exception) as caught:
        parse_yaml(f"a: 1\nb: {{<<: {merged}}}\n", "f.yaml")
    (problem,) = caught.value.problems
    assert (problem.code, problem.line) == ("Y005", 2)


SITE = """\
ruleset: brackwater-one-pass
version: 1
classes:
  steam-turbine:
    rules:
      - id: water
        measure: water
        above: {watch: 100, alert: 200, watch: 150}
        message: Water in the oil
        source: common practice, no source
      - id: acid-rise
        measure: an_rise
        above: {watch: 0.1, alret: 0.2}
        message: Acid number has risen
        source: site practice
      - id: carbonyl-rise
        measure: oxidation_rise
        above: {watch: LIMIT, alert: 15}
        message: Carbonyl has risen
        source: site practice
  gearbox:
    rules:
      - id: water
        measure: water
        above: {watch: 300}
        messge: Water in the gear oil
        source: site practice
"""


@pytest.mark.parametrize("limit, code", [("0x10", "Y012"), (".inf", "Y007"), ("1:30", "Y012"), ("010", "Y012")])
def test_check_names_every_problem_of_the_file_in_one_run(tmp_path, limit, code):
    """A key given twice, a misspelt grade, a limit YAML 1.1 reads otherwise and a misspelt key (so
    `message` is missing too): five errors, each at its line."""
    path = tmp_path / "site.yaml"
    path.write_text(SITE.replace("LIMIT", limit), encoding="utf-8")
    found = check_ruleset(path)
    assert [(p.line, p.code) for p in found.errors] == [(8, "Y004"), (13, "C001"), (18, code), (23, "S002"),
                                                        (26, "S001")]
    assert not any(p.code == "R009" for p in found.problems)  # nothing was left unchecked
    assert found.errors[1].hint == "did you mean 'alert'?"


def test_a_value_the_yaml_reading_refused_is_not_reported_again_by_the_schema(tmp_path):
    path = tmp_path / "site.yaml"
    path.write_text("ruleset: bw\nversion: 1\nlubricants:\n  GEAR-320-M: {base_stock: mineral, kv40: -.inf}\n",
                    encoding="utf-8")
    assert [(p.line, p.code) for p in check_ruleset(path).errors] == [(4, "Y007")]


def test_a_rule_missing_two_keys_counts_two_problems(tmp_path):
    path = tmp_path / "site.yaml"
    path.write_text("ruleset: bw\nversion: 1\nrules:\n  - id: water\n    measure: water\n    above: {watch: 200}\n",
                    encoding="utf-8")
    found = check_ruleset(path)
    assert sorted(p.message for p in found.errors) == ["this mapping needs the key 'message'",
                                                       "this mapping needs the key 'source'"]


def test_a_plain_equals_sign_is_text():
    """YAML 1.1 resolves a plain `=` to its "value" type, which the safe loader cannot build: up to
    engine 0.8.0 `equals: =` (a lab's flag column) was refused as a tag that is not plain data."""
    assert parse_yaml("when: {field: flag, equals: =}\n", "f.yaml").data == {"when": {"field": "flag", "equals": "="}}


@pytest.mark.parametrize("text, line, hint", [
    ("ruleset: bw\nversion: 1\n---\nruleset: bw-2\nversion: 2\n", 3, "a rule set is one YAML document"),
    ("ruleset: bw\nversion: 1\nclasses:\n  pump:\n\trules: []\n", 5, "indent with spaces"),
])
def test_a_second_document_or_a_tab_is_refused_with_what_to_do(text, line, hint):
    with pytest.raises(Exception) as caught:
        parse_yaml(text, "site.yaml")
    (problem,) = caught.value.problems
    assert (problem.code, problem.line) == ("Y001", line) and problem.hint.startswith(hint)


def test_an_extends_chain_of_a_thousand_files_is_a_problem_not_a_recursion_error(tmp_path):
    """Up to engine 0.8.0 a chain of 1,500 files ended in a RecursionError traceback (exit 1)."""
    from sumpwise.ruleset.resolve import MAX_EXTENDS_DEPTH
    for i in range(1000):
        parent = f"extends: c{i + 1}.yaml\n" if i < 999 else ""
        (tmp_path / f"c{i}.yaml").write_text(f"ruleset: c{i}\nversion: 1\n{parent}", encoding="utf-8")
    (problem,) = check_ruleset(tmp_path / "c0.yaml").errors
    assert (problem.code, problem.file, problem.line) == ("R010", str(tmp_path / f"c{MAX_EXTENDS_DEPTH - 1}.yaml"), 3)
    shallow = check_ruleset(tmp_path / f"c{1000 - MAX_EXTENDS_DEPTH}.yaml")  # exactly the limit: fine
    assert not shallow.errors


@pytest.mark.parametrize("text", ["units: {water: %}\n", "units:\n  water: %\n"])
def test_an_unquoted_percent_unit_is_refused_with_the_quoting_that_fixes_it(text):
    """`water: %` is how a lead writes it; YAML cannot start a plain value with %."""
    with pytest.raises(Exception) as caught:
        parse_yaml("ruleset: bw\nversion: 1\n" + text, "site.yaml")
    (problem,) = caught.value.problems
    assert problem.code == "Y001" and problem.hint == "a value that starts with % must be quoted in YAML, e.g. {water: '%'}"
    assert parse_yaml("units: {water: '%'}\n", "site.yaml").data == {"units": {"water": "%"}}


@pytest.mark.parametrize("written, same", [("percent", "'%'"), ("mg/kg", "'ppm'")])
def test_another_spelling_of_a_known_unit_is_refused_with_the_one_the_language_keeps(tmp_path, written, same):
    path = tmp_path / "site.yaml"
    path.write_text(f"ruleset: bw\nversion: 1\nunits: {{water: {written}}}\n", encoding="utf-8")
    (problem,) = check_ruleset(path).errors
    assert (problem.code, problem.line) == ("S004", 3) and problem.hint.endswith(f"write {same}")
