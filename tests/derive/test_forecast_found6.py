"""Forecasts on a realistic site history, every unit recomputed independently with numpy.polyfit and scipy.

A fleet of 30 hydraulic units sampled in one interleaved batch (dates across units, as a lab export lists
them), each with an oil change part-way, some with iron climbing, some flat, some falling, some with only
two samples on the current charge. For each unit the expected forecast is recomputed from the unit's own
current-charge samples with numpy.polyfit (slope, intercept) and scipy.stats.linregress(alternative=
"greater") (the one-sided slope test), and the crossing with the engine's stated rule: the next limit above
the latest value, no further ahead than the samples reach back. Invented data, Brackwater Point style.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import sumpwise
from sumpwise.derive.forecast import MIN_SAMPLES, SLOPE_CONFIDENCE
from tests.conftest import DATA

RULES = DATA / "trends" / "rules.yaml"
LIMITS = (50.0, 100.0)  # the test rule set's iron ladder: watch above 50, alert above 100


def _fleet(seed=6):
    rng = np.random.default_rng(seed)
    rows, current = [], {}
    for u in range(30):
        unit = f"HPU-{u + 1:02d}"
        old = rng.integers(3, 7)  # samples on the previous charge
        new = [2, 3, 4, 6, 9][u % 5]  # samples on the current charge
        slope = [0.012, 0.0, -0.004, 0.006, 0.02][(u // 5) % 5]  # ppm per oil hour
        step = rng.uniform(300, 700)
        start = pd.Timestamp("2025-01-01") + pd.Timedelta(days=int(rng.integers(0, 20)))
        hours_old = np.arange(1, old + 1) * step
        hours_new = np.arange(1, new + 1) * step
        iron_old = 20.0 + 0.01 * hours_old + rng.normal(0, 2.0, old)
        iron_new = 8.0 + slope * hours_new + rng.normal(0, 2.0, new)
        for k, (h, fe) in enumerate(zip(np.r_[hours_old, hours_new], np.r_[iron_old, iron_new])):
            rows.append({"sample_id": f"{unit}-{k:02d}", "unit_id": unit, "class": "hydraulic",
                         "lubricant": "TEST-46", "sampled_on": (start + pd.Timedelta(days=21 * k)).strftime("%Y-%m-%d"),
                         "oil_hours": float(h), "iron": round(float(fe), 1)})
        current[unit] = (hours_new, np.round(iron_new, 1))
    frame = pd.DataFrame(rows).sort_values(["sampled_on", "unit_id"], kind="stable").reset_index(drop=True)
    return frame, current


def _expected(hours, iron):
    """(limit, crossing hours) of the stated method, or None, from scipy and numpy alone."""
    if len(hours) < MIN_SAMPLES:
        return None
    fit = stats.linregress(hours, iron, alternative="greater")
    if not (fit.slope > 0 and fit.pvalue < 1 - SLOPE_CONFIDENCE):
        return None
    slope, intercept = np.polyfit(hours, iron, 1)
    above = [limit for limit in LIMITS if not iron[-1] > limit]
    if not above:
        return None
    limit = above[0]
    at = max((limit - intercept) / slope, hours[-1])
    if at > hours[-1] + (hours[-1] - hours[0]):  # no further ahead than the fitted samples reach back
        return None
    return limit, at, slope


@pytest.mark.parametrize("seed", [6, 7, 8])
def test_every_unit_of_an_interleaved_fleet_matches_its_own_recomputed_fit(seed):
    frame, current = _fleet(seed)
    graded = sumpwise.grade(frame, sumpwise.load_ruleset(RULES))
    got = {f.unit_id: f for f in graded.forecasts if f.rule == "iron"}
    expected = {unit: e for unit, (h, fe) in current.items() if (e := _expected(h, fe)) is not None}
    assert set(got) == set(expected)
    assert len(expected) >= 5  # the fleet holds forecasts to check, not only refusals
    for unit, (limit, at, slope) in expected.items():
        f = got[unit]
        assert f.samples == len(current[unit][0]) and f.limit == limit
        assert f.slope_per_1000h == pytest.approx(slope * 1000.0, rel=1e-9)
        assert f.at_hours == pytest.approx(at, abs=2e-3)  # records round hours to 0.001 h


VISCOSITY_RULES = """ruleset: found6-forecast-outside
version: 1
lubricants:
  HYD-46-M: {base_stock: mineral, kv40: 46.0, an: 0.1}
classes:
  hydraulic:
    rules:
      - id: visc-drift
        measure: kv40_change_pct
        outside: {watch: 5, alert: 10}
        message: Viscosity has moved from new
        source: common practice, no source
"""


def _viscosity(tmp_path, changes):
    path = tmp_path / "rules.yaml"
    path.write_text(VISCOSITY_RULES, encoding="utf-8")
    kv40 = np.round(46.0 * (1 + np.asarray(changes) / 100.0), 2)
    frame = pd.DataFrame({"sample_id": [f"H-{k}" for k in range(len(kv40))], "unit_id": "HPU-1",
                          "class": "hydraulic", "lubricant": "HYD-46-M",
                          "sampled_on": ["2026-01-01", "2026-01-22", "2026-02-12"],
                          "oil_hours": [500.0, 1000.0, 1500.0], "kv40": kv40})
    graded = sumpwise.grade(frame, sumpwise.load_ruleset(path))
    return graded, frame


def test_an_outside_ladder_forecasts_the_grade_above_the_latest_samples_own(tmp_path):
    # kv40 7 % below new (watch on the low side) and climbing back: the module's rule is the next grade
    # above the latest sample's, alert at +10 %. Engines up to 0.7.0 forecast "watch at +5 %" for a sample
    # already at watch (the low side's crossing was not counted).
    graded, frame = _viscosity(tmp_path, [-25.0, -15.8, -7.1])
    assert graded.grades()[-1] == "watch"
    [f] = [f for f in graded.forecasts if f.rule == "visc-drift"]
    change = (frame["kv40"].to_numpy() - 46.0) / 46.0 * 100.0
    slope, intercept = np.polyfit(frame["oil_hours"].to_numpy(), change, 1)  # numpy, on the change itself
    assert (f.grade, f.limit) == ("alert", 10.0)
    assert f.at_hours == pytest.approx((10.0 - intercept) / slope, abs=0.05)  # change rounded as the engine does
    # Slower: +10 % lies beyond the horizon, and no forecast of the grade it already has is made.
    slow, _ = _viscosity(tmp_path, [-20.0, -13.4, -7.1])
    assert [f for f in slow.forecasts if f.rule == "visc-drift"] == []
