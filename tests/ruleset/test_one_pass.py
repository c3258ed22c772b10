"""`check` finds every problem of every file of a chain in one run (issue: errors came in rounds).

The fixture tests/data/rulesets/one-pass/child.yaml holds one mistake of each kind on purpose;
its parents are one good file, one that does not exist and one that is not valid YAML.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from conftest import ROOT, run_cli
from sumpwise.ruleset.compiler import check_ruleset, load_ruleset
from sumpwise.vocabulary.problems import InvalidFile

FOLDER = ROOT / "tests" / "data" / "rulesets" / "one-pass"
CHILD = FOLDER / "child.yaml"


def _found(path=CHILD):
    checked = check_ruleset(path)
    return checked, [(Path(p.file).name, p.line, p.code, p.severity) for p in checked.problems]


def test_every_mistake_of_the_chain_in_one_run():
    checked, found = _found()
    assert checked.partial and checked.ruleset is not None
    assert found == [
        ("broken.yaml", 4, "Y001", "error"),        # a parent that is not YAML
        ("child.yaml", 4, "R003", "error"),         # a parent that does not exist
        ("child.yaml", 4, "R009", "note"),          # ... and what the unreadable parent hides
        ("child.yaml", 12, "S002", "error"),        # schema: `message` missing (misspelt)
        ("child.yaml", 15, "S001", "error"),        # schema: unknown key `mesage`
        ("child.yaml", 19, "C011", "error"),        # water 500 % (impossible: above 100 %)
        ("child.yaml", 19, "C011", "error"),
        ("child.yaml", 19, "C011", "error"),
        ("child.yaml", 23, "C003", "error"),        # unknown measure
        ("child.yaml", 29, "C006", "error"),        # ladder out of order
        ("child.yaml", 32, "R004", "error"),        # id used twice
        ("child.yaml", 39, "C001", "error"),        # a grade not on the ladder
        ("child.yaml", 50, "C012", "error"),        # a misspelt rule id in an example
    ]


def test_each_problem_names_its_rule_and_gives_did_you_mean():
    checked, _ = _found()
    by_code = {}
    for problem in checked.problems:
        by_code.setdefault(problem.code, problem)
    assert "rule 'acid-order'" in by_code["C006"].message          # the ladder-order error names the rule
    assert "rule 'iron'" in by_code["C003"].message
    assert "rule 'old-oil'" in by_code["C001"].message
    assert "rule 'water-high'" in by_code["C011"].message and "500%" in by_code["C011"].message
    assert by_code["C012"].hint == "did you mean 'water-high'?"
    assert by_code["S001"].hint == "did you mean 'message'?"


def test_lint_runs_beside_the_errors_and_examples_wait(tmp_path):
    run = run_cli("check", CHILD)
    out, err = run.out, run.err
    assert run.code == 2
    codes = [line.split(" ")[2].rstrip(":") for line in err.splitlines() if not line.startswith(" ")]
    # The warnings come in the same run: a raw viscosity every oil crosses, an ISO VG that is not a grade.
    assert "W011" in codes and "W012" in codes
    # The examples cannot run on a rule set with errors, and the output says so.
    assert "E002" in codes
    lines = [line for line in err.splitlines() if not line.startswith(" ")]
    keys = [(line.split(":")[0], int(line.split(":")[1])) for line in lines]
    assert keys == sorted(keys)  # sorted by file and line
    assert "nothing was fingerprinted" in out


def test_load_ruleset_raises_with_every_error_at_once():
    with pytest.raises(InvalidFile) as caught:
        load_ruleset(CHILD)
    assert len([p for p in caught.value.problems if p.severity == "error"]) == 12


def test_a_schema_error_leaves_the_rest_of_the_file_checked(tmp_path):
    path = tmp_path / "r.yaml"
    path.write_text("ruleset: r\nversion: 1\nbogus: 1\nclasses:\n  pump:\n    rules:\n"
                    "      - {id: a, measure: an, above: {watch: -1}, message: m, source: site practice}\n")
    _, found = _found(path)
    assert [(line, code) for _, line, code, _ in found] == [(3, "S001"), (7, "C011")]


@pytest.mark.parametrize("limits, measure, units, bad", [
    ("above: {watch: 500}", "water", "{water: '%'}", True),       # 500 % of water: more water than sample
    ("above: {watch: 100}", "water", "{water: '%'}", False),      # 100 %: free water, possible
    ("below: {watch: -0.1}", "an", "{}", True),                   # a negative acid number
    ("above: {watch: 0.05}", "an", "{}", False),
    ("below: {watch: -120}", "kv40_change_pct", "{}", True),      # a viscosity cannot fall by more than itself
    ("above: {watch: 120}", "rpvot_retained_pct", "{}", False),   # above 100 % is possible (scatter, top-ups)
])
def test_limits_outside_the_measure_domain_are_errors(tmp_path, limits, measure, units, bad):
    path = tmp_path / "r.yaml"
    path.write_text(f"ruleset: r\nversion: 1\nunits: {units}\nclasses:\n  pump:\n    rules:\n"
                    f"      - {{id: a, measure: {measure}, {limits}, message: m, source: site practice}}\n")
    _, found = _found(path)
    assert ("C011" in [code for _, _, code, _ in found]) == bad


def test_an_unreadable_top_file_says_that_nothing_else_was_checked(tmp_path):
    path = tmp_path / "r.yaml"
    path.write_text("ruleset: r\nversion: 1\nclasses: {a: [\n")
    checked, found = _found(path)
    assert checked.ruleset is None
    assert [(code, severity) for _, _, code, severity in found] == [("Y001", "error"), ("R009", "note")]
    run = run_cli("check", path)
    assert run.code == 2 and "nothing in it (or in the files it extends) was checked" in run.err
