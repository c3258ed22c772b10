"""Evaluation: ladder tests, three-valued conditions, caps, unrated samples, and agreement
with an independent per-row evaluator (tests/support/row_evaluator.py) on random data."""

import io

import pandas as pd
import pytest
from conftest import DATA, ROOT
from random_samples import random_samples
from row_evaluator import grade_row

from sumpwise import grade, load_ruleset, read_samples
from sumpwise.evaluation.evaluator import NOT_APPLICABLE, NOT_EVALUATED

DRAFT = DATA / "rulesets" / "draft.yaml"


def _grade_csv(ruleset, text):
    return grade(read_samples(io.StringIO(text)), ruleset)


@pytest.fixture(scope="module")
def draft():
    return load_ruleset(DRAFT)


def test_ladder_gives_the_highest_grade_crossed(draft):
    # an_rise limits: watch 0.1, alert 0.2, urgent 0.4 (the draft); new oil an = 0.07
    graded = _grade_csv(draft, "sample_id,class,lubricant,an\n"
                               "a,steam-turbine,TURB-46-M,0.17\n"    # rise 0.10: not above 0.1
                               "b,steam-turbine,TURB-46-M,0.18\n"    # 0.11: watch
                               "c,steam-turbine,TURB-46-M,0.30\n"    # 0.23: alert
                               "d,steam-turbine,TURB-46-M,0.48\n")   # 0.41: urgent
    assert graded.grades() == ["normal", "watch", "alert", "urgent"]


def test_a_limit_is_not_crossed_by_binary_noise(draft):
    """0.22 - 0.07 is 0.15000000000000002 in binary floating point; it must not exceed 0.15."""
    rs = load_ruleset(DATA / "rulesets" / "draft.yaml")
    graded = _grade_csv(rs, "sample_id,class,lubricant,an\nx,steam-turbine,TURB-46-M,0.17\n")
    assert graded.measured["an_rise"].iat[0] == 0.1
    assert graded.grades() == ["normal"]


def test_outside_is_symmetric_for_a_single_number(draft):
    # visc-drift: outside watch 5, alert 10 (%) around new kv40 45.9
    graded = _grade_csv(draft, "sample_id,class,lubricant,kv40\n"
                               "low,steam-turbine,TURB-46-M,41.0\n"   # -10.7 %
                               "mid,steam-turbine,TURB-46-M,48.5\n"   # +5.7 %
                               "ok,steam-turbine,TURB-46-M,46.5\n")   # +1.3 %
    assert graded.grades() == ["alert", "watch", "normal"]


def test_missing_value_is_not_evaluated_never_a_pass(draft):
    graded = _grade_csv(draft, "sample_id,class,lubricant,an,kv40\nx,steam-turbine,TURB-46-M,0.2,\n")
    result = graded.result(0)
    gaps = {n.rule: n.missing for n in result.not_evaluated}
    assert gaps["visc-drift"] == ("kv40",)
    assert gaps["carbonyl-rise"] == ("oxidation",)
    # young-oil-oxidising: all(oil_hours below, oxidation_rise above), both unknown
    assert "young-oil-oxidising" in gaps


def test_unknown_lubricant_makes_reference_measures_not_evaluated(draft):
    graded = _grade_csv(draft, "sample_id,class,lubricant,an\nx,steam-turbine,NOPE,0.9\n")
    result = graded.result(0)
    assert result.grade == "unrated"
    assert ("acid-rise", ("new_an",)) in [(n.rule, n.missing) for n in result.not_evaluated]


def test_all_is_false_when_one_part_is_known_false(draft):
    # oil_hours 5000 is not below 2000, so `all` is false even though oxidation is missing
    graded = _grade_csv(draft, "sample_id,class,lubricant,oil_hours\nx,steam-turbine,TURB-46-M,5000\n")
    j = [(s.class_name, s.rule.id) for s in graded.outcome.slots].index(("steam-turbine", "young-oil-oxidising"))
    assert graded.outcome.raw[0, j] == 0


def test_kleene_logic_of_any_all_not():
    rs = load_ruleset(DATA / "rulesets" / "logic.yaml")
    # columns: a, b; rules: any(a>1, b>1) watch; all(a>1, b>1) alert; not(a>1) -> watch
    graded = _grade_csv(rs, "sample_id,class,kv40,kv100\n"
                            "tt,x,3,2\n"  # kv100 below kv40, as in any oil (D021)
                            "tn,x,2,\n"
                            "fn,x,0.5,\n"
                            "nn,x,,\n")
    rules = [s.rule.id for s in graded.outcome.slots]
    raw = pd.DataFrame(graded.outcome.raw, columns=rules, index=["tt", "tn", "fn", "nn"])
    assert list(raw["either"]) == [1, 1, NOT_EVALUATED, NOT_EVALUATED]
    assert list(raw["both"]) == [2, NOT_EVALUATED, 0, NOT_EVALUATED]
    assert list(raw["not-high"]) == [0, 0, 1, NOT_EVALUATED]
    assert list(raw["gone"]) == [0, 1, 1, 1]  # missing: true is always known


def test_unknown_class_is_unrated_with_a_reason(draft):
    graded = _grade_csv(draft, "sample_id,class,an\nx,paper-machine,0.9\n")
    result = graded.result(0)
    assert result.grade == "unrated" and result.level is None
    assert "no class 'paper-machine'" in result.unrated_because
    assert (graded.outcome.raw[0] == NOT_APPLICABLE).all()


def test_cap_applies_to_rules_reading_capped_measures_only(draft):
    # ester oil, an rise 0.15 (watch, not capped), oxidation rise 30 (alert, capped to watch)
    graded = _grade_csv(draft, "sample_id,class,lubricant,an,oxidation,oil_hours\n"
                               "x,screw-compressor,COMP-68-DE,0.25,210,5000\n")
    reasons = {r.rule: r for r in graded.result(0).reasons}
    assert reasons["carbonyl-rise"].capped_from == "alert"
    assert reasons["carbonyl-rise"].capped_by == "ester-carbonyl"
    assert reasons["acid-rise"].capped_from is None


def test_a_cap_whose_exception_cannot_be_checked_holds_and_says_what_it_lacked(draft):
    # The draft's cap lifts when an_rise is above 0.2. Row b has no acid number, so the cap
    # holds (a missing value is never a pass) and its note names the missing input; rows a
    # and c have one, so the exception was checked either way.
    graded = _grade_csv(draft, "sample_id,class,lubricant,an,oxidation,oil_hours\n"
                               "a,screw-compressor,COMP-68-DE,0.15,210,5000\n"
                               "b,screw-compressor,COMP-68-DE,,210,5000\n"
                               "c,screw-compressor,COMP-68-DE,0.45,210,5000\n")
    assert graded.outcome.unchecked[:, 0].tolist() == [False, True, False]
    assert graded.outcome.capping[:, 0].tolist() == [True, True, False]
    notes = [result.caveats[0] for result in graded.results()]
    assert [n.unless_missing for n in notes] == [(), ("an",), ()]
    assert notes[1].to_record()["unless_missing"] == ["an"] and "unless_missing" not in notes[0].to_record()
    assert [r.grade for r in graded.results()] == ["watch", "watch", "alert"]


def test_row_base_stock_wins_over_the_lubricants_table(draft):
    graded = _grade_csv(draft, "sample_id,class,lubricant,base_stock,oxidation,oil_hours\n"
                               "x,steam-turbine,TURB-46-M,ester,30,5000\n")
    result = graded.result(0)
    # The cap follows the row; the table calls TURB-46-M mineral, so the sample says the two disagree.
    assert [c.caveat for c in result.caveats] == ["ester-carbonyl", "base-stock-disagrees"]
    assert result.grade == "watch"


@pytest.mark.parametrize("path", [DRAFT, ROOT / "scenarios" / "brackwater" / "site.yaml",
                                  *sorted((ROOT / "rules").glob("*.yaml"))], ids=lambda p: p.name)
def test_engine_agrees_with_the_per_row_oracle(path):
    ruleset = load_ruleset(path)
    frame = random_samples(ruleset, 1500, seed=len(path.name))
    graded = grade(frame, ruleset)
    assert graded.counts()["rejected"] == 0
    rows = frame.to_dict("records")
    for i, result in enumerate(graded.results()):
        level, fired = grade_row(ruleset, rows[i])
        assert result.level == level, (path.name, rows[i], result)
        got = {r.rule: (r.level, ruleset.level_of(r.capped_from) if r.capped_from else r.level)
               for r in result.reasons}
        assert got == fired, (path.name, rows[i])
