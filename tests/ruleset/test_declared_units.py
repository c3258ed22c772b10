"""A limit on a declared measure is read in the unit its own file declares, never in another.

Declared measures (`measures: {iron: {unit: ppm}}`) are not converted: the unit is the lab's.
Up to engine 0.3.3 a child that declared iron in ppb kept its parent's limits written in ppm,
so 150 ppb of iron (0.15 ppm, nothing) fired the parent's 100 ppm watch limit, and 150 ppm
written as 150,000 ppb would fire watch where the parent meant alert past 200 ppm; `check` said
ok. Unit relation: 1 ppm = 1,000 ppb by definition; iron by ICP per ASTM D5185 (reported in
mg/kg); the limits are site practice.
"""

import pandas as pd
from conftest import DATA

from sumpwise import grade, load_ruleset
from sumpwise.ruleset.compiler import check_ruleset

FOUND = DATA / "rulesets" / "found2"


def test_parent_limits_against_a_child_declared_in_another_unit_are_refused():
    checked = check_ruleset(FOUND / "declared-child.yaml")
    found = sorted((p.file.rsplit("/", 1)[-1], p.line, p.code) for p in checked.errors)
    # the two ladders and the noise margin the parent wrote in ppm
    assert found == [("declared-parent.yaml", 7, "C017"), ("declared-parent.yaml", 11, "C017"),
                     ("declared-parent.yaml", 16, "C017")]
    assert checked.ruleset.sha256 == ""  # nothing fingerprinted, nothing graded


def test_restated_in_the_childs_unit_the_chain_grades_as_the_parent_meant():
    ruleset = load_ruleset(FOUND / "declared-child-restated.yaml")
    parent = load_ruleset(FOUND / "declared-parent.yaml")
    ppb = pd.DataFrame([{"sample_id": f"g{i}", "unit_id": "GB-2", "class": "gearbox", "sampled_on": day,
                         "iron": value} for i, (day, value) in enumerate([("2026-09-01", 150), ("2026-10-01", 150_000),
                                                                         ("2026-11-01", 210_000)])])
    ppm = ppb.assign(iron=ppb["iron"] / 1000)
    assert [r.grade for r in grade(ppb, ruleset).results()] == ["normal", "watch", "alert"]
    assert [r.grade for r in grade(ppm, parent).results()] == ["normal", "watch", "alert"]
    fired = {r.rule: r.grade for r in grade(ppb, ruleset).result(2).reasons}
    assert fired == {"iron-high": "alert", "iron-climbing": "watch"}  # 210 ppm, up 60 ppm


def test_a_file_that_declares_the_unit_it_writes_in_is_clean():
    assert check_ruleset(FOUND / "declared-parent.yaml").errors == ()
