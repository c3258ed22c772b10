"""sumpwise.authoring.limit_statistics: limits checked against numpy and scipy computed independently here.

Method sources: ASTM D7720 §1.2 (SPC limits for normal, in-control data) and §1.3
(cumulative-distribution percentiles for data that are not), as the fact sheet
reports them. The level choices (2/2.5/3 SD; 95th/97.5th/99th percentile, so the first level
flags no more than about 5 % of in-control samples) and the
minimum counts are common practice, no source. The samples are seeded random data.
"""

from __future__ import annotations

import numpy as np
import pytest
import yaml
from scipy import stats

from sumpwise.authoring.limit_statistics import (
    PROPOSAL_CAUTIONS,
    NotEnoughData,
    jarque_bera_p,
    moments,
    proposal_yaml,
    propose_ladder,
)

LADDER = ["watch", "alert", "urgent"]


@pytest.fixture
def normal_sample():
    # Acid-number rise like values, mg KOH/g: seeded normal, 600 results.
    return np.random.default_rng(20240601).normal(0.10, 0.03, 600)


@pytest.fixture
def lognormal_sample():
    # Water-in-oil like values, ppm: seeded lognormal (skewed), 600 results.
    return np.random.default_rng(20240602).lognormal(np.log(120.0), 0.6, 600)


def test_spc_limits_equal_numpy_mean_and_sd(normal_sample):
    # ASTM D7720 §1.2 SPC approach: mean + k*SD; k = 2, 2.5, 3 is common practice, no source.
    p = propose_ladder(normal_sample, LADDER, "above", method="spc")
    mean, sd = np.mean(normal_sample), np.std(normal_sample, ddof=1)
    np.testing.assert_allclose(p.limits, [mean + 2 * sd, mean + 2.5 * sd, mean + 3 * sd], rtol=1e-12)
    assert p.method == "spc" and p.levels == (2.0, 2.5, 3.0) and p.percentiles == ()
    assert p.mean == pytest.approx(mean, rel=1e-12) and p.sd == pytest.approx(sd, rel=1e-12)
    assert p.count == 600 and p.dropped_missing == 0
    assert p.ladder() == dict(zip(LADDER, p.limits))


def test_percentile_limits_equal_numpy_percentile(lognormal_sample):
    # ASTM D7720 §1.3 percentile approach: 95th/97.5th/99th is common practice, no source.
    p = propose_ladder(lognormal_sample, LADDER, "above", method="percentile")
    expected = np.percentile(lognormal_sample, [95, 97.5, 99])
    np.testing.assert_allclose(p.limits, expected, rtol=1e-12)
    assert p.method == "percentile" and p.percentiles == (95.0, 97.5, 99.0)


def test_auto_picks_percentile_for_lognormal_and_spc_for_normal(normal_sample, lognormal_sample):
    # §1.2 for normal data, §1.3 for data that are not; the test is Jarque-Bera.
    spc = propose_ladder(normal_sample, LADDER, "above")
    pct = propose_ladder(lognormal_sample, LADDER, "above")
    assert spc.method == "spc" and pct.method == "percentile"
    # The decision rests on scipy's Jarque-Bera p-value too, computed independently.
    assert stats.jarque_bera(normal_sample).pvalue >= 0.05
    assert stats.jarque_bera(lognormal_sample).pvalue < 0.05
    assert "Jarque-Bera" in spc.source and "Jarque-Bera" in pct.source


def test_moments_and_normality_match_scipy(lognormal_sample):
    # Reference: scipy.stats.skew / kurtosis (biased, Fisher) and jarque_bera.
    mean, sd, skewness, excess = moments(lognormal_sample)
    assert skewness == pytest.approx(stats.skew(lognormal_sample), rel=1e-10)
    assert excess == pytest.approx(stats.kurtosis(lognormal_sample), rel=1e-10)
    expected_p = stats.jarque_bera(lognormal_sample[:40]).pvalue
    _, _, s40, k40 = moments(lognormal_sample[:40])
    assert jarque_bera_p(40, s40, k40) == pytest.approx(expected_p, rel=1e-9)


def test_below_direction_gives_descending_limits(normal_sample, lognormal_sample):
    # §1.2: mean - k*SD; §1.3: the 5th/2.5th/1st percentiles (levels common practice, no source).
    spc = propose_ladder(normal_sample, LADDER, "below", method="spc")
    mean, sd = np.mean(normal_sample), np.std(normal_sample, ddof=1)
    np.testing.assert_allclose(spc.limits, [mean - 2 * sd, mean - 2.5 * sd, mean - 3 * sd], rtol=1e-12)
    pct = propose_ladder(lognormal_sample, LADDER, "below", method="percentile")
    np.testing.assert_allclose(pct.limits, np.percentile(lognormal_sample, [5, 2.5, 1]), rtol=1e-12)
    assert pct.percentiles == (5.0, 2.5, 1.0)
    for p in (spc, pct):
        assert all(b < a for a, b in zip(p.limits, p.limits[1:]))


def test_above_limits_rise_along_the_ladder(normal_sample, lognormal_sample):
    for p in (propose_ladder(normal_sample, LADDER, "above"),
              propose_ladder(lognormal_sample, LADDER, "above")):
        assert all(b > a for a, b in zip(p.limits, p.limits[1:]))


def test_missing_values_dropped_and_counted(normal_sample):
    values = normal_sample.copy()
    values[[3, 50, 77]] = np.nan
    p = propose_ladder(values, LADDER, "above", method="spc")
    kept = values[~np.isnan(values)]
    assert p.count == 597 and p.dropped_missing == 3
    assert p.mean == pytest.approx(np.mean(kept), rel=1e-12)
    assert "3 missing dropped" in p.source


def test_too_little_data_refused_spc():
    # 30 results for SD limits: common practice, no source.
    values = np.random.default_rng(1).normal(5.0, 1.0, 29)
    with pytest.raises(NotEnoughData, match="29 results found, at least 30 needed") as info:
        propose_ladder(values, LADDER, "above", method="spc")
    assert (info.value.found, info.value.needed) == (29, 30)


def test_too_little_data_refused_percentile(lognormal_sample):
    # A 99th percentile needs 5 results beyond it, so 500 (common practice "a few
    # hundred", no source); a 90th alone needs 50.
    with pytest.raises(NotEnoughData, match="499 results found, at least 500 needed"):
        propose_ladder(lognormal_sample[:499], LADDER, "above", method="percentile")
    assert propose_ladder(lognormal_sample[:500], LADDER, "above", method="percentile").needed == 500
    with pytest.raises(NotEnoughData, match="at least 50 needed"):
        propose_ladder(lognormal_sample[:49], ["watch"], "above", method="percentile", levels=[90])


def test_nans_do_not_count_toward_the_minimum():
    values = np.concatenate([np.random.default_rng(2).normal(1.0, 0.1, 25), np.full(10, np.nan)])
    with pytest.raises(NotEnoughData, match="25 results found"):
        propose_ladder(values, LADDER, "above")


def test_default_levels_marked_and_overridable(normal_sample):
    default = propose_ladder(normal_sample, ["watch", "alert"], "above", method="spc")
    assert default.levels == (2.0, 2.5)
    assert default.levels_source == "common practice, no source"
    assert "ASTM D7720 approach" in default.source
    assert "levels: common practice, no source" in default.source
    chosen = propose_ladder(normal_sample, ["watch", "alert"], "above", method="spc", levels=[1.5, 2.5])
    mean, sd = np.mean(normal_sample), np.std(normal_sample, ddof=1)
    np.testing.assert_allclose(chosen.limits, [mean + 1.5 * sd, mean + 2.5 * sd], rtol=1e-12)
    assert chosen.levels_source == "supplied by the caller"
    assert "common practice" not in chosen.source


@pytest.mark.parametrize(
    "kwargs, match",
    [
        ({"direction": "outside"}, "direction"),
        ({"method": "sigma"}, "method"),
        ({"levels": [3, 2, 1]}, "increase"),
        ({"levels": [1, 2]}, "2 given for 3 grades"),
        ({"grades": ["watch", "watch"]}, "repeat"),
        ({"grades": ["a", "b", "c", "d"]}, "no default"),
    ],
)
def test_bad_arguments_are_clear_errors(normal_sample, kwargs, match):
    args = {"grades": LADDER, "direction": "above", "method": "spc"} | kwargs
    with pytest.raises(ValueError, match=match):
        propose_ladder(normal_sample, **args)


def test_infinite_values_rejected_with_positions(normal_sample):
    values = normal_sample.copy()
    values[7] = np.inf
    with pytest.raises(ValueError, match=r"positions \[7\]"):
        propose_ladder(values, LADDER, "above")


def test_coinciding_limits_refused():
    # Coarse lab resolution: 95th and 98th percentiles of mostly-equal values coincide.
    values = np.concatenate([np.zeros(300), np.full(40, 10.0)])
    with pytest.raises(ValueError, match="coincide"):
        propose_ladder(values, ["alert", "urgent"], "above", method="percentile")


@pytest.mark.parametrize("direction", ["above", "below"])
def test_yaml_round_trips(lognormal_sample, direction):
    p = propose_ladder(lognormal_sample, LADDER, direction)
    text = proposal_yaml(p, "water-high", "water", "Water: above the site's usual spread")
    assert all(f"# {line}" in text for line in PROPOSAL_CAUTIONS)
    rules = yaml.safe_load(text)
    assert isinstance(rules, list) and len(rules) == 1
    rule = rules[0]
    assert list(rule) == ["id", "measure", direction, "message", "source"]
    assert rule["id"] == "water-high" and rule["measure"] == "water"
    assert rule["message"] == "Water: above the site's usual spread"
    assert list(rule[direction]) == LADDER
    expected = [float(f"{x:.4g}") for x in p.limits]   # 4 significant figures
    assert list(rule[direction].values()) == expected
    np.testing.assert_allclose(expected, p.limits, rtol=5e-4)
    assert rule["source"].startswith(p.source)


def test_yaml_small_and_large_numbers_round_trip(normal_sample):
    for scale in (1e-6, 1e6):
        p = propose_ladder(normal_sample * scale, LADDER, "above", method="spc")
        rule = yaml.safe_load(proposal_yaml(p, "r", "m", "msg", significant=5))[0]
        assert list(rule["above"].values()) == [float(f"{x:.5g}") for x in p.limits]
        assert all(isinstance(v, float) for v in rule["above"].values())


def test_yaml_refuses_rounding_that_merges_limits():
    values = 1000.0 + np.random.default_rng(3).normal(0.0, 0.001, 100)
    p = propose_ladder(values, LADDER, "above", method="spc")
    with pytest.raises(ValueError, match="significant"):
        proposal_yaml(p, "r", "m", "msg", significant=4)
    rule = yaml.safe_load(proposal_yaml(p, "r", "m", "msg", significant=9))[0]
    assert list(rule["above"].values()) == [float(f"{x:.9g}") for x in p.limits]


def test_auto_says_why_it_needs_more_data(lognormal_sample):
    # 100 skewed results: auto picks percentiles, which need 500 for the 99th.
    with pytest.raises(NotEnoughData, match="100 results found, at least 500 needed") as info:
        propose_ladder(lognormal_sample[:100], LADDER, "above")
    assert info.value.method == "percentile" and "Jarque-Bera" in str(info.value)
