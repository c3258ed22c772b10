"""A ladder cannot name a grade `unrated`, the engine's word for a sample it could not grade.

Up to engine 0.3.3 `grades: [normal, unrated, alert]` was accepted: 300 ppm of water past a
200 ppm limit (limits.md, common practice, no source: water caution above 200 ppm) was graded
`unrated`, and the summary counted it twice over with the samples that were not graded.
"""

import pytest

from sumpwise import load_ruleset
from sumpwise.ruleset.compiler import check_ruleset
from sumpwise.vocabulary.problems import InvalidFile

LADDER = """\
ruleset: pumps
version: 1
grades: [normal, unrated, alert]
classes:
  pump:
    rules:
      - id: water
        measure: water
        above: {unrated: 200, alert: 500}
        message: Water in the oil
        source: common practice, no source
"""


def test_unrated_on_the_ladder_is_an_error_at_its_place(tmp_path):
    path = tmp_path / "pumps.yaml"
    path.write_text(LADDER, encoding="utf-8")
    problems = [p for p in check_ruleset(path).problems if p.code == "C016"]
    assert [(p.line, p.column, p.severity) for p in problems] == [(3, 18, "error")]
    with pytest.raises(InvalidFile):
        load_ruleset(path)


def test_a_child_of_such_a_ladder_is_refused_too(tmp_path):
    (tmp_path / "pumps.yaml").write_text(LADDER, encoding="utf-8")
    child = tmp_path / "site.yaml"
    child.write_text("ruleset: site\nversion: 1\nextends: pumps.yaml\ngrades: [normal, unrated, alert]\n",
                     encoding="utf-8")
    assert [(p.file, p.line) for p in check_ruleset(child).problems if p.code == "C016"] == [(str(child), 4)]
