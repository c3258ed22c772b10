"""Derived measures, computed column-wise; new-oil references from the table or the row."""

import io

import numpy as np
import pytest
from conftest import DATA

from sumpwise import load_ruleset, read_samples
from sumpwise.derive.row_measures import derive_measures



@pytest.fixture(scope="module")
def draft():
    return load_ruleset(DATA / "rulesets" / "draft.yaml")


def _derive(ruleset, csv):
    return derive_measures(read_samples(io.StringIO(csv)).frame, ruleset.lubricants)


def test_changes_rises_and_rates(draft):
    m = _derive(draft, "sample_id,class,lubricant,kv40,kv100,an,oxidation,oil_hours\n"
                       "a,steam-turbine,TURB-46-M,50.49,6.85,0.27,9.4,4000\n")
    assert m["kv40_change_pct"].iat[0] == pytest.approx(10.0)        # (50.49 - 45.9) / 45.9 x 100
    assert m["kv100_change_pct"].iat[0] == 0.0
    assert m["an_rise"].iat[0] == 0.2
    assert m["oxidation_rise"].iat[0] == 8.0
    assert m["oxidation_rise_per_1000h"].iat[0] == 2.0
    assert m["an_rise_per_1000h"].iat[0] == 0.05


def test_a_differential_reading_is_its_own_measure_never_the_direct_rise(draft):
    # issue 11: conventions never mix; `differential` is ASTM D7418's word for spectral subtraction
    m = _derive(draft, "sample_id,class,lubricant,oxidation,method\n"
                       "a,steam-turbine,TURB-46-M,3.5,subtraction\n"
                       "b,steam-turbine,TURB-46-M,3.5,direct\n"
                       "c,steam-turbine,TURB-46-M,3.5,\n"
                       "d,steam-turbine,TURB-46-M,3.5,differential\n")
    assert np.isnan(m["oxidation_rise"].iat[0]) and np.isnan(m["oxidation_rise"].iat[3])
    assert list(m["oxidation_rise"].iloc[1:3]) == [2.1, 2.1]
    assert m["oxidation_differential"].iat[0] == 3.5 and m["oxidation_differential"].iat[3] == 3.5
    assert m["oxidation_differential"].iloc[1:3].isna().all()


def test_row_reference_values_win(draft):
    m = _derive(draft, "sample_id,class,lubricant,an,new_an\na,steam-turbine,TURB-46-M,0.5,0.3\n")
    assert m["an_rise"].iat[0] == 0.2


def test_rate_needs_positive_hours(draft):
    m = _derive(draft, "sample_id,class,lubricant,an,oil_hours\na,steam-turbine,TURB-46-M,0.5,0\n")
    assert np.isnan(m["an_rise_per_1000h"].iat[0])


def test_viscosity_index_column_matches_astm_d2270_worked_example(draft):
    # ASTM D2270 §5.1.4 worked example (Procedure A): KV40 73.30, KV100 8.86 -> VI 92
    # ASTM D2270 §6.1.4 (1) worked example (Procedure B): KV40 22.83, KV100 5.05 -> VI 156
    m = _derive(draft, "sample_id,class,kv40,kv100\na,x,73.30,8.86\nb,x,22.83,5.05\n")
    assert list(m["vi"]) == [92.0, 156.0]


def test_retained_percentages(tmp_path):
    path = tmp_path / "r.yaml"
    path.write_text("ruleset: r\nversion: 1\nlubricants:\n  ENG-40: {bn: 10.0, rpvot: 800}\n")
    rs = load_ruleset(path)
    m = _derive(rs, "sample_id,class,lubricant,bn,rpvot\na,x,ENG-40,4.0,200\n")
    assert m["bn_retained_pct"].iat[0] == 40.0
    assert m["rpvot_retained_pct"].iat[0] == 25.0


def test_base_number_against_acid_number(draft):
    # common practice, no source: engine oil base number at or below the acid number is critical;
    # bn_minus_an carries the comparison (2.6 - 2.6 is exactly 0 once binary noise is rounded away)
    m = _derive(draft, "sample_id,class,bn,an\na,x,2.6,2.6\nb,x,2.5,2.6\nc,x,8.0,2.6\n")
    assert list(m["bn_minus_an"]) == [0.0, -0.1, 5.4]
