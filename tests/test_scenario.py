"""The Brackwater Point walkthrough (scenarios/brackwater/README.md) stays true.

Invented demo data: these are regression checks of the walkthrough the README tells,
not checks of oil chemistry (the engine's semantics are checked against outside sources
and the independent oracle elsewhere).
"""

import pytest
from conftest import ROOT

from sumpwise import grade, load_ruleset, read_samples

SCENARIO = ROOT / "scenarios" / "brackwater"


@pytest.fixture(scope="module")
def graded():
    return grade(read_samples(SCENARIO / "samples.csv"), load_ruleset(SCENARIO / "site.yaml"))


def test_the_counts_add_up(graded):
    assert graded.counts() == {"read": 331, "graded": 326, "unrated": 1, "rejected": 4}
    assert [r.row for r in graded.rejects] == [71, 118, 190, 248]


@pytest.mark.parametrize("sample_id, grade_name", [("BP-0001", "normal"), ("BP-0113", "watch"),
                                                    ("BP-0192", "alert"), ("BP-0294", "urgent")])
def test_st1_oil_degrades_through_the_year(graded, sample_id, grade_name):
    result = graded.find(sample_id)
    assert result.unit_id == "ST-1" and result.grade == grade_name


def test_st2_water_ingress_and_oil_change(graded):
    assert graded.find("BP-0160").grade == "urgent"
    assert [r.rule for r in graded.find("BP-0160").reasons] == ["water"]
    after = graded.find("BP-0182")
    assert after.grade == "normal" and "oil-changed" in [c.caveat for c in after.caveats]


def test_ester_cap_holds_then_acid_number_lifts_it(graded):
    held = {r.rule: r for r in graded.find("BP-0013").reasons}
    assert graded.find("BP-0013").grade == "watch"
    assert held["carbonyl-rise"].capped_from == "alert" and held["carbonyl-rise"].capped_by == "ester-carbonyl"
    lifted = {r.rule: r for r in graded.find("BP-0257").reasons}
    assert graded.find("BP-0257").grade == "urgent" and lifted["carbonyl-rise"].capped_from is None


def test_unknown_class_is_unrated(graded):
    result = graded.find("BP-0225")
    assert result.grade == "unrated" and "ro-high-pressure-pump" in result.unrated_because


def test_ftir_walkthrough():
    import json

    from conftest import run_cli
    ftir = SCENARIO / "ftir"
    run = run_cli("grade", ftir / "samples.csv", "--rules", ftir / "site-ftir.yaml",
                  "--reference", f"TURB-46-M={ftir / 'spectra' / 'new-TURB-46-M.jdx'}",
                  "--reference", f"COMP-46-PE={ftir / 'spectra' / 'new-COMP-46-PE.jdx'}")
    assert run.code == 0, run.err
    records = {r["sample_id"]: r for r in map(json.loads, run.out.splitlines())}
    assert records["FT-001"]["method"] == "subtraction"
    # Read by subtraction against its own new-oil spectrum: the subtraction form of the ester caveat.
    assert [c["caveat"] for c in records["FT-007"]["caveats"]] == ["ester-subtracted", "base-stock-inferred"]
    assert "FT-009" not in records and "rejected F001: spectrum" in run.err
    assert records["FT-004"]["grade"] == "alert"
