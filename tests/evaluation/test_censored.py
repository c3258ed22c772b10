"""Censored readings through the three-valued logic: a test is known true when the whole
interval lies in its region, known false when none of it does, unknown otherwise
(Kleene's strong three-valued logic, as for missing values). Nothing censored is read as
its bound's number."""

import io

import numpy as np
import pandas as pd
import pytest
from conftest import DATA, ROOT

from sumpwise import grade, load_ruleset, read_samples
from sumpwise.evaluation.evaluator import NOT_EVALUATED
from sumpwise.intake.censored import Bounds, interval_truth
from sumpwise.vocabulary.intervals import EVERYTHING, Span, can_hold, covered
from sumpwise.vocabulary.limit_tests import LIMIT_TESTS

SITE = ROOT / "scenarios" / "brackwater" / "site.yaml"


@pytest.fixture(scope="module")
def site():
    return load_ruleset(SITE)


def _water_levels(site, readings):
    # gearbox water ladder of the site rule set: watch above 300, alert above 1000, urgent above 2000 ppm
    text = "sample_id,class,lubricant,water\n" + "".join(
        f"W{k},gearbox,GEAR-320-PAO,{r}\n" for k, r in enumerate(readings))
    graded = grade(read_samples(io.StringIO(text)), site)
    j = [(s.class_name, s.rule.id) for s in graded.outcome.slots].index(("gearbox", "water"))
    return graded.outcome.raw[:, j].tolist(), graded


def test_a_ladder_on_censored_water(site):
    levels, _ = _water_levels(site, ["<50", "<500", ">1500", ">2500", "<=300", ">=300", "ND"])
    # <50: below every step, known normal (issue 12: '<50' is known to pass 'above 200')
    # <500: might be above 300 or not: not evaluated, never a pass
    # >1500: known above 1000, undecided against 2000: the step it is known to reach (alert)
    # >2500: urgent; <=300: not above 300, normal; >=300: could be exactly 300: not evaluated
    # ND without a detection limit: missing, not evaluated
    assert levels == [0, NOT_EVALUATED, 2, 3, 0, NOT_EVALUATED, NOT_EVALUATED]


def test_a_censored_reading_is_never_its_bound(site):
    _, graded = _water_levels(site, ["<500", "500"])
    assert np.isnan(graded.measured["water"].iat[0])
    records = list(graded.results())
    assert dict(records[0].values)["water"] == "<500" and dict(records[1].values)["water"] == 500.0
    assert [dict(n.undecided) for n in records[0].not_evaluated if n.rule == "water"] == [{"water": "<500"}]


def test_a_rise_from_a_censored_acid_number_carries_its_bounds():
    # new-oil an of TURB-46-M in the draft is 0.07: an '<0.05' gives a rise in [-0.07, -0.02)
    draft = load_ruleset(DATA / "rulesets" / "draft.yaml")
    graded = grade(read_samples(io.StringIO("sample_id,class,lubricant,an\nA,steam-turbine,TURB-46-M,<0.05\n")),
                   draft)
    m = graded.measured
    assert (m["an_rise:low"].iat[0], m["an_rise:high"].iat[0], bool(m["an_rise:high_open"].iat[0])) == \
        (-0.07, -0.02, True)
    assert np.isnan(m["an_rise"].iat[0])
    assert graded.grades() == ["normal"]  # below every acid-rise step, known


def test_kleene_all_is_false_when_a_censored_part_is_known_false():
    # young-oil-oxidising: all(oil_hours below 2000, oxidation_rise above 10): '>5000' hours decides it
    draft = load_ruleset(DATA / "rulesets" / "draft.yaml")
    graded = grade(read_samples(io.StringIO("sample_id,class,lubricant,oil_hours\n"
                                            "A,steam-turbine,TURB-46-M,>5000\nB,steam-turbine,TURB-46-M,<1000\n")),
                   draft)
    j = [(s.class_name, s.rule.id) for s in graded.outcome.slots].index(("steam-turbine", "young-oil-oxidising"))
    assert graded.outcome.raw[:, j].tolist() == [0, NOT_EVALUATED]


def _spans(lo, hi, lo_open, hi_open):
    return (Span(lo, hi, not lo_open, not hi_open),)


@pytest.mark.parametrize("seed", range(5))
def test_interval_truth_agrees_with_the_exact_region_reasoning(seed):
    """Cross-check against vocabulary.intervals (covered / can_hold decide by testing points)."""
    rng = np.random.default_rng(seed)
    n = 300
    ends = np.sort(rng.choice([0.0, 1.0, 2.0, 3.0, 5.0, -np.inf, np.inf], (n, 2)), axis=1)
    lo, hi = ends[:, 0], ends[:, 1]
    lo_open, hi_open = rng.random(n) < 0.5, rng.random(n) < 0.5
    lo_open |= ~np.isfinite(lo)
    hi_open |= ~np.isfinite(hi)
    keep = (lo < hi) | ((lo == hi) & ~lo_open & ~hi_open)
    b = Bounds(np.ones(keep.sum(), bool), lo[keep], hi[keep], lo_open[keep], hi_open[keep], np.empty(0))
    for test, limit in (("above", 2.0), ("below", 3.0), ("between", (1.0, 3.0)), ("outside", (1.0, 3.0)),
                        ("outside", 2.0)):
        region = LIMIT_TESTS[test].region(limit)
        truth, known = interval_truth(region, b)
        for k in range(len(b.low)):
            part = _spans(b.low[k], b.high[k], b.low_open[k], b.high_open[k])
            inside = covered(part, region, EVERYTHING)
            apart = not can_hold(part, region)
            assert (bool(truth[k]), bool(known[k])) == (inside, inside or apart), (test, limit, part)


def test_a_censored_reading_on_a_differential_row_is_a_differential_reading(site):
    # FTIR conventions never mix (README): `method: subtraction` moves the reading to oxidation_differential
    graded = grade(read_samples(io.StringIO("sample_id,class,lubricant,method,oxidation\n"
                                            "D1,hydraulic,HYD-46-M,subtraction,<3\nD2,hydraulic,HYD-46-M,direct,<3\n")),
                   site)
    m = graded.measured
    assert m["oxidation_differential:high"].tolist()[0] == 3.0 and np.isnan(m["oxidation_differential:high"].iat[1])
    assert np.isnan(m["oxidation:high"].iat[0]) and m["oxidation:high"].iat[1] == 3.0


def test_a_censored_declared_measure_is_an_interval_not_missing(site):
    # The site declares iron (ppm) and limits it on the gear drives: watch above 100, alert
    # above 200. A lab writes '>100' when iron is over its calibrated range: known above the
    # watch limit, undecided against alert, so watch is the lower bound it is known to reach
    # (the README's ladder rule for censored readings); '<20' is known under every step.
    text = ("sample_id,class,lubricant,iron\n"
            "F1,gearbox,GEAR-320-PAO,>100\nF2,gearbox,GEAR-320-PAO,<20\nF3,gearbox,GEAR-320-PAO,<150\n")
    graded = grade(read_samples(io.StringIO(text), numeric=("iron",)), site)
    j = [(s.class_name, s.rule.id) for s in graded.outcome.slots].index(("gearbox", "iron"))
    assert graded.outcome.raw[:, j].tolist() == [1, 0, NOT_EVALUATED]
    records = list(graded.results())
    assert dict(records[0].values)["iron"] == ">100"
    assert [(r.rule, r.grade) for r in records[0].reasons if r.rule == "iron"] == [("iron", "watch")]
    assert [dict(n.undecided) for n in records[2].not_evaluated if n.rule == "iron"] == [{"iron": "<150"}]


def test_water_above_a_bound_lies_inside_a_band_that_reaches_the_whole_sample(tmp_path):
    # the language reference's `between: [500, 1000000]` (500 ppm up to all water): a Karl Fischer
    # result written >1000 (above the titrator's range) lies in it, since water is at most the whole
    # sample, 1,000,000 ppm. Up to engine 0.3.3 the interval ran to infinity, so the clause was
    # undecided and the sample graded normal with the rule not evaluated. Source: 1 % = 10,000 ppm
    # by definition; limits.md (common practice, no source): water critical above 500-1000 ppm.
    path = tmp_path / "wet.yaml"
    path.write_text("ruleset: wet\nversion: 1\nclasses:\n  steam-turbine:\n    rules:\n      - id: wet\n"
                    "        when: {measure: water, between: [500, 1000000]}\n        grade: watch\n"
                    "        message: Water in the oil\n        source: site practice\n", encoding="utf-8")
    rows = pd.DataFrame([{"sample_id": f"T-{i}", "unit_id": "ST-1", "class": "steam-turbine", "water": w}
                         for i, w in enumerate([">1000", ">=500", "<400", "<600"])])
    results = list(grade(rows, load_ruleset(path)).results())
    assert [r.grade for r in results] == ["watch", "watch", "normal", "unrated"]
    assert [g.rule for g in results[3].not_evaluated] == ["wet"]  # [0, 600) straddles 500
