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
    # Read by subtraction against its own new-oil spectrum: the subtraction form of the ester caveat; the
    # class's direct-trend rules are not evaluated on a differential reading, which its differential rule grades.
    assert [c["caveat"] for c in records["FT-007"]["caveats"]] == ["ester-subtracted", "base-stock-inferred"]
    # Realistic carbonyl heights (issue 11): ST-1's differential reading climbs 2-17 abs/cm over the year.
    assert [records[s]["grade"] for s in ("FT-001", "FT-002", "FT-003", "FT-004")] == ["normal", "watch", "alert",
                                                                                     "alert"]
    assert "FT-009" not in records and "rejected F001: spectrum" in run.err
    assert records["FT-004"]["grade"] == "alert"


def test_swp3_iron_climbs_and_is_forecast_to_reach_watch(graded):
    # scenarios/brackwater/README.md: SWP-3's gear pitting. iron_rising counts steps above the
    # site's 3 ppm noise margin; three in a row from BP-0317.
    climbing = [r.sample_id for r in graded.results() if any(x.rule == "iron-climbing" for x in r.reasons)]
    assert climbing == ["BP-0317", "BP-0330"]
    forecast = [f for f in graded.forecasts if f.unit_id == "SWP-3" and f.rule == "iron"]
    assert len(forecast) == 1
    f = forecast[0]
    assert (f.sample_id, f.grade, f.limit, f.samples) == ("BP-0330", "watch", 100.0, 26)
    assert 19000 < f.at_hours_low < f.at_hours < f.at_hours_high < f.horizon_hours
    assert f.on.startswith("2027-")


def test_hpu2_filter_bypass_is_a_cleanliness_problem(graded):
    # The return filter in bypass from September until the element change of 3 November.
    def cleanliness(sample_id):
        return sorted({x.grade for x in graded.find(sample_id).reasons if x.rule.startswith("cleanliness")})
    assert cleanliness("BP-0223") == []
    assert cleanliness("BP-0236") == ["watch"]
    assert cleanliness("BP-0262") == ["alert"] and graded.find("BP-0262").grade == "alert"
    assert cleanliness("BP-0287") == []
    # HPU-1's lab sends particle counts: the engine computes the code (ISO 4406 table).
    measured = graded.measured.set_index("sample_id")
    assert measured.loc["BP-0004", ["iso4406_4um", "iso4406_6um", "iso4406_14um"]].tolist() == [15, 13, 10]
    # HPU-3's lab writes the two-number form: the 4 um(c) rule is not evaluated, never passed.
    assert "cleanliness-4um" in [n.rule for n in graded.find("BP-0006").not_evaluated]


def test_explain_tells_the_forecast_made_from_the_units_latest_sample():
    from conftest import run_cli
    run = run_cli("explain", "BP-0330", "--samples", SCENARIO / "samples.csv", "--rules", SCENARIO / "site.yaml")
    assert run.code == 0, run.err
    paragraph = run.out[run.out.index("When will it cross?"):run.out.index("Rule set ")]
    assert "iron: iron reaches the watch limit (above 100 ppm)" in paragraph and "Method: ordinary least" in paragraph
    earlier = run_cli("explain", "BP-0317", "--samples", SCENARIO / "samples.csv", "--rules", SCENARIO / "site.yaml")
    assert "When will it cross?" not in earlier.out  # forecasts are made from the latest sample only
