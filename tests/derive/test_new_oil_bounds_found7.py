"""A row's own new-oil value written as a bound is that row's new-oil value, never a gap for the
rule set's lubricants table to fill.

Found in a turbine-oil export: new oils whose acid number is under the lab's reporting limit come
back as `<0.05` in `new_an`, and an RPVOT run stopped at the lab's cut-off as `>1200` in
`new_rpvot`. The engine read such a cell as no value and took the table's (0.10 mg KOH/g, 1100 min):
an acid rise of more than 0.25 was graded 0.2 (watch, not alert against 0.2), an RPVOT under 24 % of
new was graded 26 % (normal, not alert against 25 %). The row's value wins over the table (the rule
language: "where present they win"), and a bound carries into the derived measure as a censored
reading does. Limits: site practice and ASTM D4378's 25 % of new RPVOT (from memory).
"""

from __future__ import annotations

import pytest
from conftest import DATA, run_cli

from support.grade_runs import counts_said, graded_run

HERE = DATA / "derive_found7"


@pytest.fixture(scope="module")
def run():
    return graded_run(HERE / "new-oil-bounds-export.csv", "--rules", HERE / "new-oil-bounds-rules.yaml",
                      "--record", "full")


@pytest.mark.parametrize("sample, grade, rule, value", [
    ("NB-01", "alert", "acid-rise", "(0.25, 0.3] from new_an '<0.05'"),  # 0.30 - [0, 0.05): above 0.2
    ("NB-02", "alert", "acid-rise", 0.25),  # the same oil, its new AN written as a number
    ("NB-03", "watch", "acid-rise", 0.2),  # no new AN in the row: the table's 0.10
    ("NB-04", "alert", "rpvot-left", "(0, 24.166666667) from new_rpvot '>1200'"),  # 290 / (>1200) under 25 %
])
def test_a_new_oil_bound_in_the_row_is_graded_as_the_interval_it_gives(run, sample, grade, rule, value):
    record = run[0][sample]
    assert record["grade"] == grade
    assert {r["rule"]: r["value"] for r in record["reasons"]} == {rule: value}


def test_the_table_fills_only_a_row_that_gives_no_new_oil_value(run):
    record = run[0]["NB-05"]  # 290 / 1100 min is 26.4 %: not below 25
    assert record["grade"] == "normal" and record["reasons"] == []
    assert record["derived"]["rpvot_retained_pct"] == pytest.approx(290 / 1100 * 100, abs=1e-9)


def test_a_bound_that_cannot_decide_the_limit_leaves_the_rule_undecided(run):
    """0.12 - [0, 0.05) is (0.07, 0.12]: above 0.1 or not cannot be known, so the rule is not
    evaluated and says which reading left it undecided (the table's 0.10 graded it normal)."""
    records, err = run
    record = records["NB-06"]
    assert record["grade"] == "unrated"
    assert [(n["rule"], n.get("undecided")) for n in record["not_evaluated"] if n["rule"] == "acid-rise"] == [
        ("acid-rise", {"new_an": "<0.05"})]
    assert counts_said(err) == (6, 5, 1, 0)


def test_a_new_oil_base_number_of_0_or_none_leaves_the_share_ungraded(tmp_path):
    """bn / new bn x 100 has no value over a new BN of 0 (a row's typo, or an oil with no
    reserve) and none without a new BN: the rule is not evaluated, and `explain` says why, never
    a pass and never a share of infinity."""
    rules = tmp_path / "engine.yaml"
    rules.write_text("ruleset: derive-found7-bn\nversion: 1\nlubricants:\n  DSL-40-M: {base_stock: mineral, bn: 10.2}\n"
                     "  DSL-40-X: {base_stock: mineral}\nclasses:\n  diesel-engine:\n    rules:\n"
                     "      - {id: bn-left, measure: bn_retained_pct, below: {alert: 50}, message: Base number "
                     "depleted, source: site practice}\n", encoding="utf-8")
    samples = tmp_path / "engines.csv"
    samples.write_text("sample_id,unit_id,class,lubricant,sampled_on,oil_hours,bn,new_bn\n"
                       "BN-01,GEN-1,diesel-engine,DSL-40-M,2026-03-02,250,4.1,0\n"
                       "BN-02,GEN-2,diesel-engine,DSL-40-X,2026-03-02,250,4.1,\n"
                       "BN-03,GEN-3,diesel-engine,DSL-40-M,2026-03-02,250,4.1,\n", encoding="utf-8")
    records, err = graded_run(samples, "--rules", rules, "--record", "full")
    assert [records[s]["grade"] for s in ("BN-01", "BN-02", "BN-03")] == ["unrated", "unrated", "alert"]
    assert records["BN-01"]["not_evaluated"] == [{"rule": "bn-left", "missing": ["bn_retained_pct"]}]
    assert records["BN-02"]["not_evaluated"] == [{"rule": "bn-left", "missing": ["new_bn"]}]
    told = run_cli("explain", "BN-01", "--samples", samples, "--rules", rules)
    assert "the new oil's base number is 0" in " ".join(told.out.split())
