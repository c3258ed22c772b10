"""A `units:` entry the schema refuses leaves out the limits written in it, instead of reading them in ppm.

Up to engine 0.8.0 `units: {water: percent}` was refused (S004) and then every water limit of the
file, written in %, was checked as ppm: three warnings (W009) told the lead that 0.05 "ppm" looked
like the wrong unit and that "this file writes water in ppm", which it does not. The unit's error
is the one thing to fix; the limits written in it cannot be read until it is. 1 % = 10,000 ppm.
"""

from __future__ import annotations

import pytest
from grade_runs import graded_run

from sumpwise.authoring.lint import lint_ruleset
from sumpwise.ruleset.compiler import check_ruleset

RULES = """\
ruleset: brackwater-units
version: 1
units: UNITS
lubricants:
  TURB-46-M: {base_stock: mineral, kv40: 45.9, an: 0.07, oxidation: 0.014}
classes:
  steam-turbine:
    rules:
      - id: water
        measure: water
        above: {watch: 0.02, alert: 0.05}
        message: Water in the oil
        source: common practice, no source
      - id: acid-rise
        measure: an_rise
        above: {watch: 0.1, alert: 0.2}
        message: Acid number has risen above new oil
        source: site practice
      - id: wet-and-acid
        when:
          all:
            - {measure: water, above: 0.01}
            - {measure: an_rise, above: 0.05}
        grade: watch
        message: Water with a rising acid number
        source: site practice
"""


@pytest.mark.parametrize("units, error", [('{water: percent, oxidation: abs/0.1mm}', (3, "S004")),
                                          ("[ppm]", (3, "S003"))])
def test_a_refused_unit_is_the_only_thing_said_about_the_limits_written_in_it(tmp_path, units, error):
    path = tmp_path / "site.yaml"
    path.write_text(RULES.replace("UNITS", units), encoding="utf-8")
    checked = check_ruleset(path)
    said = list(checked.problems) + list(lint_ruleset(checked.ruleset, partial=checked.partial))
    assert [(p.line, p.code) for p in said if p.severity != "note"] == [error]
    assert "acid-rise" in {rule.id for rule in checked.ruleset.rules_for("steam-turbine")}  # still checked


def test_with_the_unit_right_the_same_limits_are_read_in_percent(tmp_path):
    path = tmp_path / "site.yaml"
    path.write_text(RULES.replace("UNITS", '{water: "%", oxidation: abs/0.1mm}'), encoding="utf-8")
    checked = check_ruleset(path)
    assert not checked.errors
    water = {rule.id: rule for rule in checked.ruleset.rules_for("steam-turbine")}["water"]
    assert water.steps == ((1, 200.0), (2, 500.0))  # ppm
    assert checked.ruleset.lubricants["TURB-46-M"].oxidation == 1.4  # abs/cm


DECLARED = """\
ruleset: brackwater-declared
version: 1
measures:
  water: {unit: "%"}
classes:
  steam-turbine:
    rules:
      - id: water
        measure: water
        above: {watch: 0.02, alert: 0.05}
        message: Water in the oil
        source: common practice, no source
"""


def test_declaring_a_known_measure_in_another_unit_is_an_error_not_a_ppm_limit(tmp_path):
    """Up to engine 0.8.0 this passed `check` with one warning and graded 300 ppm alert (300 > 0.05
    "ppm"); the lead meant 0.05 % (500 ppm), so watch. Now it is refused at the declaration."""
    path = tmp_path / "site.yaml"
    path.write_text(DECLARED, encoding="utf-8")
    (problem,) = check_ruleset(path).errors
    assert (problem.code, problem.line, problem.column, problem.path) == ("C019", 4, 3, "$.measures.water")
    assert "under `units:` (water: ...)" in problem.hint


def test_the_fix_the_error_gives_grades_300_ppm_watch(tmp_path):
    path = tmp_path / "site.yaml"
    path.write_text(DECLARED.replace('measures:\n  water: {unit: "%"}', 'units: {water: "%"}'), encoding="utf-8")
    records, _ = graded_run("-", "--rules", str(path), stdin=(
        "sample_id,unit_id,class,lubricant,sampled_on,water\nBP-0601,ST-1,steam-turbine,TURB-46-M,2026-06-01,300\n"))
    assert records["BP-0601"]["grade"] == "watch"


def test_a_measure_listed_as_a_text_field_is_an_error(tmp_path):
    """Up to engine 0.8.0 `fields: [water]` passed, and `{field: water, in: [0]}` compared '0' with the
    reading's text ('0.0') and never fired on a reading of 0 ppm: a silent never-true rule."""
    path = tmp_path / "site.yaml"
    path.write_text("ruleset: bw\nversion: 1\nfields: [site_area, water]\nclasses:\n  steam-turbine:\n"
                    "    rules:\n      - id: water-zero\n        when: {field: water, in: [0]}\n        grade: watch\n"
                    "        message: A water reading of zero is suspect\n        source: site practice\n",
                    encoding="utf-8")
    (problem,) = check_ruleset(path).errors
    assert (problem.code, problem.line, problem.path) == ("C019", 3, "$.fields[1]")
    assert "{measure: water, below: x}" in problem.hint


def test_a_refused_unit_beside_pieces_of_the_wrong_shape_is_still_a_list_of_problems(tmp_path):
    path = tmp_path / "site.yaml"
    path.write_text("ruleset: bw\nversion: 1\nunits: {water: percent}\nclasses: [gearbox]\nrules: {a: 1}\n"
                    "lubricants: [x]\nnoise_margins: {water: 3}\ncaveats: 5\n", encoding="utf-8")
    assert [(p.line, p.code) for p in check_ruleset(path).errors] == [
        (3, "S004"), (4, "S003"), (5, "S003"), (6, "S003"), (8, "S003")]
