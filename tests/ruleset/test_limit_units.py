"""Limits written in a lab's units grade a reading exactly at the limit as the test says.

`above` and `below` are strict and `between` includes its ends (the rule language). Up to
engine 0.3.3 a limit was converted to the canonical unit by a bare float product, so 0.29
abs/0.1mm became 28.999999999999996 abs/cm and a reading of exactly 0.29 abs/0.1mm (29 abs/cm)
fired `above 0.29`; 0.07 % became 700.0000000000001 ppm, so exactly 0.07 % fell outside
`between [0.07, 0.14]` and exactly 0.07 abs/0.1mm fired `below 0.07`. Unit relations: 1
abs/0.1mm = 100 abs/cm (ASTM D7412 §12.1-12.2, via the project's FTIR fact sheet); 1 % =
10,000 ppm by definition.
"""

import json

import pandas as pd
import pytest
from conftest import DATA

from sumpwise import grade, load_ruleset, read_samples
from sumpwise.intake.column_map import load_column_map

FOUND = DATA / "rulesets" / "found2"
RULES = FOUND / "limits-in-lab-units.yaml"


@pytest.fixture(scope="module")
def ruleset():
    return load_ruleset(RULES)


@pytest.fixture(scope="module")
def export(ruleset):
    """The lab's export, read through its column map (per 0.1 mm and per cent, as it writes them)."""
    columns = load_column_map(FOUND / "limits-in-lab-units.columns.yaml")
    graded = grade(read_samples(FOUND / "limits-in-lab-units.csv", columns=columns), ruleset)
    assert graded.counts()["rejected"] == 0
    return {r.sample_id: r for r in graded.results()}


def _fired(result):
    return {r.rule: r.grade for r in result.reasons}


def test_readings_exactly_at_the_limits(export):
    # BP-D-101: oxidation 0.29, antiwear 0.07, water 0.07 %: none is above/below its limit;
    # water sits on the inclusive lower end of the band; the rise (0.29 - 0.07 = 0.22) is watch
    assert _fired(export["BP-D-101"]) == {"carbonyl-rise": "watch", "water-band": "watch"}


def test_readings_just_inside_and_just_past(export):
    assert _fired(export["BP-D-102"]) == {"carbonyl-rise": "watch"}                  # 0.28, 0.08, 0.06 %
    assert _fired(export["BP-D-103"]) == {"carbonyl": "watch", "carbonyl-rise": "watch",
                                          "antiwear-depleted": "watch", "water": "watch",
                                          "water-band": "watch"}                     # 0.30, 0.06, 0.08 %


def test_the_upper_limits_exactly(export):
    # oxidation 0.57 is not above the 0.57 alert limit; water 0.14 % is not above 0.14 but is
    # inside the band [0.07, 0.14]; the rise 0.50 is above 0.28
    assert _fired(export["BP-D-104"]) == {"carbonyl": "watch", "carbonyl-rise": "alert", "water": "watch",
                                          "water-band": "watch"}
    assert _fired(export["BP-D-105"]) == {"water": "alert"}  # rise 0.21 - 0.07 = 0.14, not above; 0.15 %


def test_records_carry_the_limits_in_canonical_units_without_float_noise(export):
    limits = {r.rule: r.limit for r in export["BP-D-103"].reasons}
    assert limits == {"carbonyl": 29.0, "carbonyl-rise": 14.0, "antiwear-depleted": 7.0, "water": 700.0,
                      "water-band": None}


def test_the_canonical_form_reloaded_grades_the_same(ruleset, export, tmp_path):
    # the fingerprinted form is what a ledger replays: it must give the same grades at the limits
    path = tmp_path / "canonical.json"
    path.write_text(ruleset.canonical, encoding="utf-8")
    again = load_ruleset(path)
    assert again.sha256 == ruleset.sha256
    rows = pd.DataFrame([{"sample_id": f"s{i}", "class": "diesel-engine", "lubricant": "ENG-15W40-M",
                          "oxidation": ox, "antiwear": aw, "water": w}
                         for i, (ox, aw, w) in enumerate([(29.0, 7.0, 700), (57.0, 7.0, 1400),
                                                          (28.0, 6.9, 699)])])
    first, second = grade(rows, ruleset), grade(rows, again)
    for a, b in zip(first.results(), second.results()):
        assert json.dumps(a.to_record()["reasons"]) == json.dumps(b.to_record()["reasons"])
    assert [r.grade for r in first.results()] == ["watch", "alert", "watch"]


@pytest.mark.parametrize("written, scale, canonical", [
    (0.29, 100.0, 29.0), (0.57, 100.0, 57.0), (0.07, 100.0, 7.0), (1.15, 100.0, 115.0),
    (0.07, 10_000.0, 700.0), (0.14, 10_000.0, 1400.0), (0.0007, 10_000.0, 7.0), (0.1, 1.0, 0.1)])
def test_conversion_lands_on_the_decimal_value(written, scale, canonical):
    # by the unit relations above: the decimal product, exactly
    from sumpwise.ruleset.compiler import in_canonical_unit
    assert in_canonical_unit(written, scale) == canonical
