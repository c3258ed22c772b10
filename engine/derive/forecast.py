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

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
import pandas as pd

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
    parsed = pd.to_datetime(pd.Series(dates, dtype=object), errors="coerce", format="ISO8601")
    days = parsed.to_numpy(dtype="datetime64[ns]").astype("datetime64[D]").astype(float)
    days[parsed.isna().to_numpy()] = np.nan
    return days


def _date(day: float | None) -> str | None:
    if day is None or not np.isfinite(day):
        return None
    return str(np.datetime64(int(math.floor(day)), "D"))


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
    unit_codes, _ = pd.factorize(measured["unit_id"].to_numpy(dtype=object))
    unit_last = np.full(unit_codes.max(initial=-1) + 1, -1, dtype=np.int64)
    known_unit = unit_codes >= 0
    np.maximum.at(unit_last, unit_codes[known_unit], position[known_unit])
    current = known_unit.copy()
    current[known_unit] = last_position[run[known_unit]] == unit_last[unit_codes[known_unit]]

    hours = measured["oil_hours"].to_numpy(dtype=float)
    days = _days(measured["sampled_on"].to_numpy(dtype=object))
    classes = measured["class"].to_numpy(dtype=object)
    found = []
    for class_name in ruleset.classes:
        in_class = current & (classes == class_name)
        if not in_class.any():
            continue
        for rule in ruleset.rules_for(class_name):
            if not isinstance(rule, LadderRule) or not forecastable(rule.measure) or rule.measure not in measured:
                continue
            values = measured[rule.measure].to_numpy(dtype=float)
            use = in_class & np.isfinite(values) & np.isfinite(hours)
            found.extend(_fit_rule(rule, measured, run, runs, use, hours, values, days, last_row, ruleset))
    found.sort(key=lambda f: (f.unit_id, f.rule))
    return tuple(found)


def _fit_rule(rule, measured, run, runs, use, x, y, days, last_row, ruleset) -> list[Forecast]:
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
    has_next = below_limit.any(axis=1)
    k = np.argmax(below_limit, axis=1)
    limit = limits[np.arange(len(g)), k]
    df = n[g] - 2
    with np.errstate(invalid="ignore", divide="ignore"):
        t_stat = np.where(s2[g] > 0, b / np.sqrt(s2[g] / sxx[g]), np.inf)
        t_needed = np.array([t_quantile(SLOPE_CONFIDENCE, int(d)) for d in df])
        x_cross = np.maximum((limit - a) / b, x_now)
    horizon = HORIZON_SPANS * (x_now - first_x[g])
    keep = np.flatnonzero(has_next & (b > 0) & (t_stat > t_needed) & (x_cross <= x_now + horizon))
    if not len(keep):
        return []
    pace = _pace(days[use], r, xs, runs)
    out = []
    for i in keep:
        run_id, row = g[i], last_row[g[i]]
        t_band = t_quantile(0.5 + PREDICTION_LEVEL / 2, int(df[i]))
        low, high = _band(a[i], b[i], limit[i], n[run_id], mean_x[run_id], sxx[run_id], s2[run_id], t_band)
        end = x_now[i] + horizon[i]
        low = None if low is None else max(low, x_now[i])
        high = None if high is None or high > end else max(high, x_now[i])

        def dated(hours, day=days[row], per_hour=pace[run_id], now=x_now[i]):
            return None if hours is None or not np.isfinite(per_hour) else _date(day + (hours - now) * per_hour)

        out.append(Forecast(
            unit_id=str(measured["unit_id"].iat[row]), sample_id=str(measured["sample_id"].iat[row]),
            rule=rule.id, measure=rule.measure, unit=measure_unit(rule.measure), grade=ruleset.grades[levels[k[i]]],
            test=rule.test, limit=float(direction[i] * limit[i]), samples=int(n[run_id]), oil_hours=float(x_now[i]),
            value=float(y[row]), slope_per_1000h=round(float(slope[run_id]) * 1000.0, 9),
            slope_t=round(float(t_stat[i]), 6), at_hours=round(float(x_cross[i]), 3),
            at_hours_low=None if low is None else round(float(low), 3),
            at_hours_high=None if high is None else round(float(high), 3), horizon_hours=round(float(end), 3),
            on=dated(float(x_cross[i])), on_low=dated(low), on_high=dated(high)))
    return out


def _limit_toward(limit, direction: np.ndarray, test: str) -> np.ndarray:
    """A step's limit, signed by the direction, on the side the trend moves to."""
    if test == "outside":
        low, high = limit if isinstance(limit, tuple) else (-limit, limit)
        return direction * np.where(direction > 0, high, low)
    return direction * limit


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


def _band(a, b, limit, n, mean_x, sxx, s2, t) -> tuple[float | None, float | None]:
    """Where the prediction interval a + b x +- t s sqrt(1 + 1/n + (x - mean)^2 / sxx) meets `limit`.

    Squaring gives a quadratic in x; its smaller root is where the upper edge reaches the limit,
    the larger where the lower edge does. Without a real larger root the lower edge never does.
    """
    k = t * t * s2
    u = limit - a
    if k == 0:
        return u / b, u / b
    qa = b * b - k / sxx
    qb = -2 * b * u + 2 * k * mean_x / sxx
    qc = u * u - k * (1 + 1 / n) - k * mean_x ** 2 / sxx
    disc = qb * qb - 4 * qa * qc
    if qa > 0:  # the line outruns the band: both edges cross, around the fitted crossing
        root = math.sqrt(disc)
        return (-qb - root) / (2 * qa), (-qb + root) / (2 * qa)
    # The band widens as fast as the line climbs: its lower edge never reaches the limit, and
    # the upper edge is above it from the larger root on (from the start, without a real root).
    if qa == 0:
        return (-qc / qb if qb else -math.inf), None
    if disc < 0:
        return -math.inf, None
    return (-qb - math.sqrt(disc)) / (2 * qa), None
