"""When will it cross? A straight-line forecast of each unit's current oil charge to a rule's next limit.

For every ladder rule on a measure that builds up over an oil charge, and every unit whose
class has the rule, the unit's latest unbroken run of samples (one oil charge, one method,
one lab: trends.trend_run) is fitted by ordinary least squares, value against oil hours. A
forecast is made only with at least MIN_SAMPLES samples and a slope towards the limit that the
fit supports (one-sided t test at SLOPE_CONFIDENCE). The crossing is where the fitted line
meets the limit of the next grade above the latest sample's; its band is where the standard
OLS prediction interval for a new sample (PREDICTION_LEVEL, two-sided) meets it. Nothing is
extrapolated beyond the horizon: no further ahead than the fitted samples reach back
(HORIZON_SPANS times their span of oil hours). Dates follow from the charge's own pace (days
per oil hour between its first and last dated samples).

The sums are taken for all units of a rule at once (np.bincount over the run ids); only the
few quantiles of Student's t are computed per distinct degree of freedom.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
import pandas as pd

from sumpwise.derive.trends import SLIP_COLUMN, unit_keys
from sumpwise.ruleset.model import LadderRule, RuleSet
from sumpwise.vocabulary.measures import MEASURES, TREND_MEASURES, measure_unit, trend_base

MIN_SAMPLES = 3
SLOPE_CONFIDENCE = 0.95
PREDICTION_LEVEL = 0.95
HORIZON_SPANS = 1.0

METHOD = ("ordinary least squares of the value on oil hours over the current oil charge's samples "
          f"(at least {MIN_SAMPLES}, one method and lab); made only when the slope towards the limit is above zero "
          f"by a one-sided t test at {SLOPE_CONFIDENCE:.0%}; crossing where the fitted line meets the next grade's "
          f"limit, band where the {PREDICTION_LEVEL:.0%} OLS prediction interval for a new sample meets it; "
          f"not extrapolated further ahead than {HORIZON_SPANS:g} x the fitted samples' span of oil hours; "
          "dates at the charge's own pace of days per oil hour; limits before any caveat's cap")


@dataclass(frozen=True)
class Forecast:
    """When one unit's current oil charge is expected to reach one rule's next limit.

    Hours are oil hours on the charge; `*_low`/`*_high` bound the crossing by the prediction
    interval and are None where that bound lies beyond the horizon (or never comes).
    """

    unit_id: str
    sample_id: str  # the latest sample of the charge: the forecast is made from it
    rule: str
    measure: str
    unit: str
    grade: str
    test: str
    limit: float
    samples: int
    oil_hours: float
    value: float
    slope_per_1000h: float
    slope_t: float
    at_hours: float
    at_hours_low: float | None
    at_hours_high: float | None
    horizon_hours: float
    on: str | None = None
    on_low: str | None = None
    on_high: str | None = None
    method: str = METHOD

    @property
    def hours_to_go(self) -> float:
        return self.at_hours - self.oil_hours

    def to_record(self) -> dict:
        return {"unit_id": self.unit_id, "sample_id": self.sample_id, "rule": self.rule, "measure": self.measure,
                "unit": self.unit, "grade": self.grade, "test": self.test, "limit": self.limit,
                "samples": self.samples, "oil_hours": self.oil_hours, "value": self.value,
                "slope_per_1000h": self.slope_per_1000h, "slope_t": self.slope_t,
                "at_hours": self.at_hours, "at_hours_low": self.at_hours_low, "at_hours_high": self.at_hours_high,
                "horizon_hours": self.horizon_hours, "on": self.on, "on_low": self.on_low, "on_high": self.on_high,
                "method": self.method}


def forecastable(measure: str) -> bool:
    """A measure that builds up over a charge: not a step, a rate or a run count, nor oil hours."""
    if measure == "oil_hours" or measure in TREND_MEASURES or measure.endswith("_per_1000h"):
        return False
    return trend_base(measure) is None or measure in MEASURES


# -- Student's t, exact for whole degrees of freedom ------------------------------------------

def _t_two_sided(t: float, df: int) -> float:
    """P(|T| <= t) for Student's t with df degrees of freedom (the finite series for whole df)."""
    theta = math.atan(t / math.sqrt(df))
    c2, s = math.cos(theta) ** 2, math.sin(theta)
    if df % 2:
        total, term = 0.0, 1.0
        for k in range(1, (df - 1) // 2 + 1):
            total += term
            term *= c2 * (2 * k) / (2 * k + 1)
        return (2 / math.pi) * (theta + s * math.cos(theta) * total) if df > 1 else 2 * theta / math.pi
    total, term = 0.0, 1.0
    for k in range(1, df // 2 + 1):
        total += term
        term *= c2 * (2 * k - 1) / (2 * k)
    return s * total


@lru_cache(maxsize=None)
def t_quantile(p: float, df: int) -> float:
    """The p quantile (p > 0.5) of Student's t with df degrees of freedom, by bisection."""
    target = 2 * p - 1
    low, high = 0.0, 1.0
    while _t_two_sided(high, df) < target:
        high *= 2
    for _ in range(200):
        mid = (low + high) / 2
        if _t_two_sided(mid, df) < target:
            low = mid
        else:
            high = mid
        if high - low <= 1e-12 * high:
            break
    return (low + high) / 2


# -- the fit -----------------------------------------------------------------------------------

def _days(dates: np.ndarray) -> np.ndarray:
    """Day numbers (days since 1970-01-01) of ISO dates, NaN where missing or unreadable; each
    distinct date is parsed once."""
    codes, uniques = pd.factorize(dates)
    parsed = pd.to_datetime(pd.Series(uniques, dtype=object), errors="coerce", format="ISO8601")
    days = parsed.to_numpy(dtype="datetime64[ns]").astype("datetime64[D]").astype(float)
    days[parsed.isna().to_numpy()] = np.nan
    return np.append(days, np.nan)[codes]  # factorize's -1 (no date) takes the NaN


def _dates(days: np.ndarray) -> list:
    """ISO dates of day numbers (days since 1970-01-01), None where not finite."""
    finite = np.isfinite(days)
    whole = np.floor(np.where(finite, days, 0)).astype("int64")
    codes, uniques = pd.factorize(whole)
    text = uniques.astype("datetime64[D]").astype(str).astype(object)[codes]
    text[~finite] = None
    return text.tolist()


def forecast(measured: pd.DataFrame, ruleset: RuleSet) -> tuple[Forecast, ...]:
    """Every forecast the batch supports, by unit, then rule (the order of the rule set)."""
    if "trend_run" not in measured.columns or not len(measured):
        return ()
    run = measured["trend_run"].to_numpy(dtype=np.int64)
    position = measured["trend_position"].to_numpy(dtype=np.int64)
    runs = int(run.max()) + 1
    last_position = np.full(runs, -1, dtype=np.int64)
    np.maximum.at(last_position, run, position)
    last_row = np.full(runs, -1, dtype=np.int64)
    is_last = position == last_position[run]
    last_row[run[is_last]] = np.flatnonzero(is_last)
    # The latest run of each unit: the run holding the unit's latest sample in trend order.
    unit_codes = unit_keys(measured["unit_id"].to_numpy(dtype=object))  # a unit under any spelling of its id
    unit_last = np.full(unit_codes.max(initial=-1) + 1, -1, dtype=np.int64)
    known_unit = unit_codes >= 0
    np.maximum.at(unit_last, unit_codes[known_unit], position[known_unit])
    current = known_unit.copy()
    current[known_unit] = last_position[run[known_unit]] == unit_last[unit_codes[known_unit]]

    hours = measured["oil_hours"].to_numpy(dtype=float)
    if SLIP_COLUMN in measured.columns:  # a slip in one reading is no point on the charge's line
        hours = np.where(measured[SLIP_COLUMN].to_numpy(dtype=bool), np.nan, hours)
    days = _days(measured["sampled_on"].to_numpy(dtype=object))
    class_codes, class_names = pd.factorize(measured["class"].to_numpy(dtype=object))
    class_of = {name: k for k, name in enumerate(class_names)}  # compared as codes, not as text a row
    names = (measured["unit_id"].to_numpy(dtype=object), measured["sample_id"].to_numpy(dtype=object))
    declared = json.loads(ruleset.canonical).get("measures", {}) if ruleset.measures and ruleset.canonical else {}
    found = []
    for class_name in ruleset.classes:
        in_class = current & (class_codes == class_of.get(class_name, -2))
        if not in_class.any():
            continue
        for rule in ruleset.rules_for(class_name):
            if not isinstance(rule, LadderRule) or not forecastable(rule.measure) or rule.measure not in measured:
                continue
            values = measured[rule.measure].to_numpy(dtype=float)
            use = in_class & np.isfinite(values) & np.isfinite(hours)
            unit = measure_unit(rule.measure) or declared.get(rule.measure, {}).get("unit", "")
            found.extend(_fit_rule(rule, unit, names, run, runs, use, hours, values, days, last_row, ruleset))
    found.sort(key=lambda f: (f.unit_id, f.rule))
    return tuple(found)


def _fit_rule(rule, unit, names, run, runs, use, x, y, days, last_row, ruleset) -> list[Forecast]:
    """The forecasts of one rule for every run that `use` selects: all runs at once, Forecast
    records built only for the runs that pass every test."""
    r = run[use]
    xs, ys = x[use], y[use]
    n = np.bincount(r, minlength=runs).astype(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean_x = np.bincount(r, xs, runs) / n
        mean_y = np.bincount(r, ys, runs) / n
        dx, dy = xs - mean_x[r], ys - mean_y[r]
        sxx = np.bincount(r, dx * dx, runs)
        slope = np.bincount(r, dx * dy, runs) / sxx
        intercept = mean_y - slope * mean_x
        residual = ys - (intercept[r] + slope[r] * xs)
        s2 = np.maximum(np.bincount(r, residual * residual, runs) / (n - 2), 0.0)
    first_x = np.full(runs, np.inf)
    np.minimum.at(first_x, r, xs)
    has_last = last_row >= 0
    latest_used = np.zeros(runs, dtype=bool)
    latest_used[has_last] = use[last_row[has_last]]  # the latest sample has the value: forecast from it
    g = np.flatnonzero(latest_used & (n >= MIN_SAMPLES) & (sxx > 0))
    if not len(g):
        return []

    # In the direction the limit lies (outside: the way the fit moves), every test is "above".
    if rule.test == "outside":
        direction = np.where(slope[g] < 0, -1.0, 1.0)
    else:
        direction = np.full(len(g), -1.0 if rule.test == "below" else 1.0)
    b, a = direction * slope[g], direction * intercept[g]
    x_now, y_now = x[last_row[g]], direction * y[last_row[g]]
    levels = np.array([level for level, _ in rule.steps])
    limits = np.stack([_limit_toward(limit, direction, rule.test) for _, limit in rule.steps], axis=1)
    below_limit = ~(y_now[:, None] > limits)  # the ladder is monotone: the crossed steps come first
    if rule.test == "outside":  # a step crossed on the other side counts too: the next grade is above the latest's
        below_limit &= ~np.stack([_outside(y[last_row[g]], limit) for _, limit in rule.steps], axis=1)
    has_next = below_limit.any(axis=1)
    k = np.argmax(below_limit, axis=1)
    limit = limits[np.arange(len(g)), k]
    df = n[g] - 2
    with np.errstate(invalid="ignore", divide="ignore"):
        t_stat = np.where(s2[g] > 0, b / np.sqrt(s2[g] / sxx[g]), np.inf)
        degrees, at = np.unique(df, return_inverse=True)
        t_needed = np.array([t_quantile(SLOPE_CONFIDENCE, int(d)) for d in degrees])[at.ravel()]
        x_cross = np.maximum((limit - a) / b, x_now)
    horizon = HORIZON_SPANS * (x_now - first_x[g])
    keep = np.flatnonzero(has_next & (b > 0) & (t_stat > t_needed) & (x_cross <= x_now + horizon))
    if not len(keep):
        return []
    g, k, a, b, limit, x_now, horizon = g[keep], k[keep], a[keep], b[keep], limit[keep], x_now[keep], horizon[keep]
    direction, t_stat, df = direction[keep], t_stat[keep], df[keep]
    rows = last_row[g]
    x_cross = np.maximum((limit - a) / b, x_now)
    degrees, at = np.unique(df, return_inverse=True)
    t_band = np.array([t_quantile(0.5 + PREDICTION_LEVEL / 2, int(d)) for d in degrees])[at.ravel()]
    low, high = _band(a, b, limit, n[g], mean_x[g], sxx[g], s2[g], t_band)
    end = x_now + horizon
    low = np.maximum(low, x_now)
    high = np.where(high > end, np.nan, np.maximum(high, x_now))
    wanted = np.zeros(runs, dtype=bool)
    wanted[g] = True
    inside = wanted[r]  # the pace of the runs forecast only: a sort of their samples, not of all the rule's
    per_hour = _pace(days[use][inside], r[inside], xs[inside], runs)[g]

    def dated(hours):
        return _dates(days[rows] + (hours - x_now) * per_hour)

    def hours_or_none(values):
        return [None if np.isnan(v) else v for v in np.round(values, 3).tolist()]

    columns = zip(names[0][rows].tolist(), names[1][rows].tolist(), levels[k].tolist(),
                  (direction * limit).tolist(), n[g].astype(int).tolist(), x_now.tolist(), y[rows].tolist(),
                  np.round(slope[g] * 1000.0, 9).tolist(), np.round(t_stat, 6).tolist(),
                  np.round(x_cross, 3).tolist(), hours_or_none(low), hours_or_none(high), np.round(end, 3).tolist(),
                  dated(x_cross), dated(low), dated(high))
    return [Forecast(str(unit_id), str(sample_id), rule.id, rule.measure, unit, ruleset.grades[level], rule.test,
                     lim, samples, hours, value, rate, t, at_h, at_low, at_high, horizon_h, on, on_low, on_high)
            for (unit_id, sample_id, level, lim, samples, hours, value, rate, t, at_h, at_low, at_high, horizon_h,
                 on, on_low, on_high) in columns]


def _limit_toward(limit, direction: np.ndarray, test: str) -> np.ndarray:
    """A step's limit, signed by the direction, on the side the trend moves to."""
    if test == "outside":
        low, high = limit if isinstance(limit, tuple) else (-limit, limit)
        return direction * np.where(direction > 0, high, low)
    return direction * limit


def _outside(values: np.ndarray, limit) -> np.ndarray:
    """Whether each value crosses an `outside` step on either side: |value| > limit, or outside [low, high]."""
    low, high = limit if isinstance(limit, tuple) else (-limit, limit)
    return (values < low) | (values > high)


def _pace(d, r, xs, runs) -> np.ndarray:
    """Days per oil hour of each run, between its dated samples of fewest and most oil hours."""
    dated = np.isfinite(d)
    pace = np.full(runs, np.nan)
    if not dated.any():
        return pace
    rr, hh, dd = r[dated], xs[dated], d[dated]
    order = np.lexsort((hh, rr))
    rr, hh, dd = rr[order], hh[order], dd[order]
    starts = np.flatnonzero(np.r_[True, rr[1:] != rr[:-1]])
    ends = np.r_[starts[1:], len(rr)] - 1
    span_h, span_d = hh[ends] - hh[starts], dd[ends] - dd[starts]
    with np.errstate(invalid="ignore", divide="ignore"):
        pace[rr[starts]] = np.where((span_h > 0) & (span_d > 0), span_d / span_h, np.nan)
    return pace


def _band(a, b, limit, n, mean_x, sxx, s2, t) -> tuple[np.ndarray, np.ndarray]:
    """Where the prediction interval a + b x +- t s sqrt(1 + 1/n + (x - mean)^2 / sxx) meets `limit`.

    Squaring gives a quadratic in x; its smaller root is where the upper edge reaches the limit,
    the larger where the lower edge does (b > 0 throughout). When the band widens as fast as
    the line climbs (t s / sqrt(sxx) >= b), the lower edge never reaches the limit (NaN) and
    the upper edge is above it from the larger root on (from the start, -inf, without one).
    """
    k = t * t * s2
    u = limit - a
    qa = b * b - k / sxx
    qb = -2 * b * u + 2 * k * mean_x / sxx
    qc = u * u - k * (1 + 1 / n) - k * mean_x ** 2 / sxx
    disc = qb * qb - 4 * qa * qc
    with np.errstate(invalid="ignore", divide="ignore"):
        root = np.sqrt(np.maximum(disc, 0.0))
        outrun = qa > 0
        low = np.where(outrun, (-qb - root) / (2 * qa), np.where(disc < 0, -np.inf, (-qb - root) / (2 * qa)))
        low = np.where(qa == 0, np.where(qb != 0, -qc / qb, -np.inf), low)
        high = np.where(outrun, (-qb + root) / (2 * qa), np.nan)
        exact = k == 0  # no scatter at all: the band is the line
        low = np.where(exact, u / b, low)
        high = np.where(exact, u / b, high)
    return low, high
