"""When will it cross? The straight-line forecast against general-purpose reference libraries.

Checked against scipy.stats (linregress for the least-squares slope, intercept and slope
standard error; t.ppf for Student's t quantiles) and the standard OLS prediction interval for a
new observation, y0 +- t(1 - a/2, n - 2) s sqrt(1 + 1/n + (x0 - mean x)^2 / Sxx) (any regression
text, e.g. NIST/SEMATECH e-Handbook of Statistical Methods, section 4.2: "from memory" as to
the section number). The synthetic trends are invented, with known slope and noise.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import sumpwise
from sumpwise.derive.forecast import METHOD, SLOPE_CONFIDENCE, t_quantile
from tests.conftest import DATA

RULES = DATA / "trends" / "rules.yaml"


def _samples(unit, hours, iron, start="2026-01-01", days_per_hour=1 / 24, by_order=False, **extra):
    """Samples of one unit; dated at one oil hour a calendar hour, or a week apart `by_order`."""
    offsets = np.arange(len(hours)) * 7.0 if by_order else np.asarray(hours) * days_per_hour
    dates = pd.Timestamp(start) + pd.to_timedelta(offsets, unit="D")
    frame = pd.DataFrame({"sample_id": [f"{unit}-{k:02d}" for k in range(len(hours))], "unit_id": unit,
                          "class": "hydraulic", "lubricant": "TEST-46",
                          "sampled_on": dates.strftime("%Y-%m-%d"), "oil_hours": np.asarray(hours, dtype=float),
                          "iron": np.asarray(iron, dtype=float)})
    for name, values in extra.items():
        frame[name] = values
    return frame


def _graded(frame):
    return sumpwise.grade(frame, sumpwise.load_ruleset(RULES))


def _one(graded, rule="iron"):
    found = [f for f in graded.forecasts if f.rule == rule]
    assert len(found) <= 1
    return found[0] if found else None


@pytest.mark.parametrize("df", list(range(1, 41)) + [60, 120, 500])
@pytest.mark.parametrize("p", [SLOPE_CONFIDENCE, 0.975])
def test_t_quantiles_match_scipy(p, df):
    assert t_quantile(p, df) == pytest.approx(stats.t.ppf(p, df), rel=1e-9)


def _prediction_edges(x, y, x0, level=0.95):
    """Upper and lower edges of the OLS prediction interval at x0, written from the textbook formula."""
    fit = stats.linregress(x, y)
    n = len(x)
    s = math.sqrt(np.sum((y - (fit.intercept + fit.slope * x)) ** 2) / (n - 2))
    sxx = np.sum((x - x.mean()) ** 2)
    half = stats.t.ppf(0.5 + level / 2, n - 2) * s * math.sqrt(1 + 1 / n + (x0 - x.mean()) ** 2 / sxx)
    y0 = fit.intercept + fit.slope * x0
    return y0 + half, y0 - half


@pytest.mark.parametrize("seed", [1, 2, 3, 4, 5])
def test_fit_crossing_and_band_match_scipy_on_known_trends(seed):
    # Iron climbing 6 ppm per 1000 h from 5 ppm, noise sd 1.5 ppm, 12 samples every 500 h.
    rng = np.random.default_rng(seed)
    hours = np.arange(1, 13) * 500.0
    iron = 5.0 + 0.006 * hours + rng.normal(0, 1.5, len(hours))
    f = _one(_graded(_samples("HPU-9", hours, iron)))
    fit = stats.linregress(hours, iron)
    assert f is not None and f.method == METHOD
    assert f.samples == 12 and f.grade == "watch" and f.limit == 50.0
    assert f.slope_per_1000h == pytest.approx(fit.slope * 1000, rel=1e-9)
    assert f.slope_t == pytest.approx(fit.slope / fit.stderr, rel=1e-6)
    assert f.at_hours == pytest.approx((50.0 - fit.intercept) / fit.slope, abs=1e-3)
    # The known slope lies within 3 standard errors of the estimate (noise is known, seeds fixed).
    assert abs(fit.slope - 0.006) < 3 * fit.stderr
    # Band ends: the upper edge meets the limit at the earliest hour, the lower edge at the latest.
    # (Hours are rounded to 0.001 h, a few 1e-6 ppm here.)
    upper, _ = _prediction_edges(hours, iron, f.at_hours_low)
    assert f.at_hours_low > f.oil_hours and upper == pytest.approx(50.0, abs=1e-4)
    if f.at_hours_high is not None:
        _, lower = _prediction_edges(hours, iron, f.at_hours_high)
        assert lower == pytest.approx(50.0, abs=1e-4)
        assert f.at_hours_low < f.at_hours < f.at_hours_high <= f.horizon_hours
    assert f.horizon_hours == 6000.0 + (6000.0 - 500.0)  # no further ahead than the data reach back
    # Dates at the charge's pace: one oil hour a calendar hour here.
    expected = pd.Timestamp("2026-01-01") + pd.Timedelta(days=f.at_hours / 24)
    assert abs((pd.Timestamp(f.on) - expected).days) <= 1


def test_no_forecast_from_two_samples_or_a_slope_the_fit_does_not_support():
    assert _one(_graded(_samples("U", [500.0, 1000.0], [20.0, 40.0]))) is None
    # Flat iron with noise: the one-sided p value of the slope (scipy) is above 5 %: no forecast.
    rng = np.random.default_rng(7)
    hours = np.arange(1, 9) * 500.0
    iron = 30.0 + rng.normal(0, 3.0, len(hours))
    fit = stats.linregress(hours, iron, alternative="greater")
    assert fit.pvalue > 1 - SLOPE_CONFIDENCE
    assert _one(_graded(_samples("U", hours, iron))) is None


def test_no_forecast_beyond_the_horizon_or_on_a_falling_trend():
    hours = np.array([500.0, 1000.0, 1500.0, 2000.0])
    slow = _one(_graded(_samples("U", hours, [10.0, 11.0, 12.1, 13.0])))  # 50 ppm is ~37,000 h away
    assert slow is None
    falling = _one(_graded(_samples("U", hours, [40.0, 35.0, 30.2, 25.0])))
    assert falling is None


def test_only_the_current_oil_charge_is_fitted():
    hours = [1000.0, 2000.0, 3000.0, 200.0, 700.0, 1200.0, 1700.0]  # hours fall: an oil change
    iron = [40.0, 45.0, 49.0, 5.0, 15.0, 24.0, 35.5]
    f = _one(_graded(_samples("U", hours, iron, by_order=True)))
    fit = stats.linregress(hours[3:], iron[3:])
    assert f.samples == 4 and f.slope_per_1000h == pytest.approx(fit.slope * 1000, rel=1e-9)
    assert f.sample_id == "U-06" and f.oil_hours == 1700.0


def test_a_falling_base_number_is_forecast_to_its_below_limit():
    hours = np.arange(1, 7) * 400.0
    bn = np.array([7.6, 7.0, 6.5, 6.1, 5.5, 5.0])
    frame = _samples("DG-9", hours, np.full(6, 10.0), bn=bn)
    f = _one(_graded(frame), "bn-low")
    fit = stats.linregress(hours, bn)
    assert f.test == "below" and f.grade == "watch" and f.limit == 4.0
    assert f.at_hours == pytest.approx((4.0 - fit.intercept) / fit.slope, abs=1e-3)
    assert f.slope_per_1000h < 0


def test_forecast_records_say_their_method_and_units():
    hours = np.arange(1, 13) * 500.0
    iron = 12.0 + 0.006 * hours
    record = _one(_graded(_samples("U", hours, iron))).to_record()
    assert record["rule"] == "iron" and record["measure"] == "iron" and record["method"] == METHOD
    assert record["unit"] == "ppm"  # the declared measure's unit, from the rule set
    assert record["at_hours"] == pytest.approx((50.0 - 12.0) / 0.006, abs=1e-3)
    assert record["at_hours_low"] == record["at_hours_high"] == record["at_hours"]  # no noise, no band
