"""Data-driven grading cases: each file under tests/data/cases/ holds a small rule set, the samples
and what must come of each (grade, the rules that fired and at which grade, caps, caveats, rules
not evaluated, derived values). Each file names the outside source its cases check.

A case's sample is the file's `base` row updated with the case's own values; `expect` keys:
grade; fired {rule: grade}; capped {rule: grade it was capped from}; caveats [ids];
not_evaluated [rule ids]; measured {measure: value} (the derived value, compared to 1e-9).
"""

from __future__ import annotations

import math

import pandas as pd
import pytest
import yaml
from conftest import DATA

from sumpwise import grade, load_ruleset

CASE_FILES = sorted((DATA / "cases").glob("*.yaml"))


def _cases():
    for path in CASE_FILES:
        doc = yaml.safe_load(path.read_text(encoding="utf-8"))
        for k, case in enumerate(doc["cases"]):
            yield pytest.param(path, k, id=f"{path.stem}: {case['name']}")


@pytest.fixture(scope="module")
def rulesets(tmp_path_factory):
    loaded = {}
    folder = tmp_path_factory.mktemp("cases")
    for path in CASE_FILES:
        doc = yaml.safe_load(path.read_text(encoding="utf-8"))
        written = folder / f"{path.stem}.rules.yaml"
        written.write_text(yaml.safe_dump(doc["ruleset"], sort_keys=False), encoding="utf-8")
        loaded[path] = (load_ruleset(written), doc)
    return loaded


def test_every_case_file_names_its_source():
    for path in CASE_FILES:
        head = path.read_text(encoding="utf-8").split("\nruleset:")[0]
        assert "Source" in head or "source" in head, path.name


@pytest.mark.parametrize("path, k", list(_cases()))
def test_case(rulesets, path, k):
    ruleset, doc = rulesets[path]
    case = doc["cases"][k]
    sample = {"sample_id": f"case-{k}", **doc.get("base", {}), **case["sample"]}
    graded = grade(pd.DataFrame([sample]), ruleset)
    assert graded.counts()["rejected"] == 0, graded.rejects
    result = graded.result(0)
    expect = case["expect"]
    assert result.grade == expect["grade"]
    assert {r.rule: r.grade for r in result.reasons} == expect.get("fired", {})
    if "capped" in expect:
        assert {r.rule: r.capped_from for r in result.reasons if r.capped_from} == expect["capped"]
    if "caveats" in expect:
        assert [c.caveat for c in result.caveats] == expect["caveats"]
    if "not_evaluated" in expect:
        assert sorted(g.rule for g in result.not_evaluated) == sorted(expect["not_evaluated"])
    for measure, value in expect.get("measured", {}).items():
        assert math.isclose(float(graded.measured[measure].iloc[0]), value, abs_tol=1e-9), measure
