"""Propose ladder limits for one measure of one equipment class from a site's own results.

The approach follows ASTM D7720 as far as it is known here: statistical process
control limits (mean + k standard deviations) for data that are normally
distributed and in control (§1.2), and cumulative-distribution percentiles of
the sorted data for data that are not (§1.3). The standard's own multipliers,
percentile levels and minimum counts were not found, so every default below is
"common practice, no source" and says so in its output.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import yaml

from sumpwise.vocabulary.cautions import CAUTIONS

LEVELS_COMMON_PRACTICE = "common practice, no source"
LEVELS_FROM_CALLER = "supplied by the caller"

# Defaults, common practice, no source: the first n entries serve an n-grade ladder, so the
# first level flags no more than about 5 % of in-control samples (2 SD: 2.3 % of a normal
# population, one-sided; the 95th percentile: 5 %).
DEFAULT_SD_MULTIPLIERS = (2.0, 2.5, 3.0)
DEFAULT_PERCENTILES = (95.0, 97.5, 99.0)

# A percentile limit needs results beyond it: with TAIL_RESULTS results past the
# highest level, a 98th percentile needs 250 results and a 99th 500, matching the
# common-practice "a few hundred for a 98th percentile" (common practice, no source).
TAIL_RESULTS = 5

# "auto" calls the data non-normal when the Jarque-Bera test rejects at this level
# (a conventional significance level, common practice, no source).
NORMALITY_ALPHA = 0.05

PROPOSAL_CAUTIONS = ("Proposed limits. " + CAUTIONS[0], *CAUTIONS[1:])


class NotEnoughData(ValueError):
    """Too few results to propose limits by the chosen method; never a limit instead."""

    def __init__(self, method: str, found: int, needed: int, why: str):
        self.method, self.found, self.needed = method, found, needed
        super().__init__(
            f"not enough data for {method} limits: {found} results found, "
            f"at least {needed} needed ({why})"
        )


@dataclass(frozen=True)
class Proposal:
    """Proposed limits for one measure, with the statistics and the record of how they were made.

    `levels` are the SD multipliers (spc) or the coverage percentiles (percentile) per
    grade; `percentiles` are the percentiles of the data actually taken (for
    "below", 100 - coverage), empty for spc.
    """

    method: str
    direction: str
    grades: tuple[str, ...]
    limits: tuple[float, ...]
    levels: tuple[float, ...]
    percentiles: tuple[float, ...]
    levels_source: str
    count: int
    dropped_missing: int
    needed: int
    mean: float
    sd: float
    skewness: float
    excess_kurtosis: float
    normality_p: float
    source: str
    censored: int = 0  # results that are a bound (`<50`), counted and ranked, never taken as numbers

    def ladder(self) -> dict[str, float]:
        """Grade -> limit, lowest grade first, as a ladder rule writes it."""
        return dict(zip(self.grades, self.limits))


def moments(values: np.ndarray) -> tuple[float, float, float, float]:
    """Mean, sample SD (ddof=1), skewness g1 and excess kurtosis g2 (biased moments).

    Computed on the values divided by their largest size, so one huge outlier (1e200)
    cannot overflow the squares and cubes into inf or nan; the shape figures do not
    depend on the scale, the mean and SD are scaled back.
    """
    scale = float(np.max(np.abs(values))) if values.size else 0.0
    scale = scale if scale > 0 and np.isfinite(scale) else 1.0
    scaled = values / scale
    mean = float(np.mean(scaled))
    deviations = scaled - mean
    m2 = float(np.mean(deviations**2))
    sd = float(np.std(scaled, ddof=1))
    if m2 == 0.0:
        return mean * scale, sd * scale, 0.0, 0.0
    skewness = float(np.mean(deviations**3)) / m2**1.5
    excess_kurtosis = float(np.mean(deviations**4)) / m2**2 - 3.0
    return mean * scale, sd * scale, skewness, excess_kurtosis


def jarque_bera_p(count: int, skewness: float, excess_kurtosis: float) -> float:
    """Jarque-Bera p-value: JB = n/6 (g1^2 + g2^2/4), chi-square with 2 df, so p = exp(-JB/2).

    Chosen because it tests both skew and heavy tails (outliers from a few failing
    machines), and its p-value needs only numpy. It is conservative in small samples.
    """
    statistic = count / 6.0 * (skewness**2 + excess_kurtosis**2 / 4.0)
    return math.exp(-statistic / 2.0)


def _clean(values) -> tuple[np.ndarray, int]:
    try:
        array = np.asarray(values, dtype=float)
    except (TypeError, ValueError) as error:
        raise ValueError(f"values: expected numbers, got {values!r:.80}") from error
    if array.ndim != 1:
        raise ValueError(f"values: expected a 1-D array of one measure, got shape {array.shape}")
    missing = np.isnan(array)
    infinite = np.flatnonzero(np.isinf(array))
    if infinite.size:
        raise ValueError(
            f"values: {infinite.size} infinite entries (positions {infinite[:10].tolist()}); "
            "remove or correct them"
        )
    return array[~missing], int(missing.sum())


def _check_ladder(grades, direction: str, method: str) -> tuple[str, ...]:
    if direction not in ("above", "below"):
        raise ValueError(f"direction: expected 'above' or 'below', got {direction!r}")
    if method not in ("auto", "spc", "percentile"):
        raise ValueError(f"method: expected 'auto', 'spc' or 'percentile', got {method!r}")
    grades = tuple(grades)
    if not grades or not all(isinstance(g, str) and g for g in grades):
        raise ValueError(f"grades: expected one or more grade names, got {grades!r}")
    if len(set(grades)) != len(grades):
        raise ValueError(f"grades: names repeat in {grades!r}")
    return grades


def _levels(method: str, levels, grades: tuple[str, ...]) -> tuple[tuple[float, ...], str]:
    defaults = DEFAULT_SD_MULTIPLIERS if method == "spc" else DEFAULT_PERCENTILES
    if levels is None:
        if len(grades) > len(defaults):
            raise ValueError(
                f"levels: no default {method} levels for {len(grades)} grades "
                f"(defaults cover up to {len(defaults)}); pass levels="
            )
        return defaults[:len(grades)], LEVELS_COMMON_PRACTICE
    chosen = tuple(float(level) for level in levels)
    if len(chosen) != len(grades):
        raise ValueError(f"levels: {len(chosen)} given for {len(grades)} grades {grades!r}")
    if any(b <= a for a, b in zip(chosen, chosen[1:])):
        raise ValueError(f"levels: must increase along the ladder, got {chosen!r}")
    if method == "spc" and chosen[0] <= 0:
        raise ValueError(f"levels: SD multipliers must be positive, got {chosen!r}")
    if method == "percentile" and not (50.0 < chosen[0] and chosen[-1] < 100.0):
        raise ValueError(f"levels: coverage percentiles must lie in (50, 100), got {chosen!r}")
    return chosen, LEVELS_FROM_CALLER


def _needed(method: str, levels: tuple[float, ...], min_count: int) -> int:
    if method == "spc":
        return min_count
    tail_share = 1.0 - levels[-1] / 100.0
    return max(min_count, math.ceil(TAIL_RESULTS / tail_share - 1e-9))


def _bounds_of(censored) -> tuple[np.ndarray, np.ndarray]:
    """The (low, high) ends of the censored results, as float arrays of one length (±inf where open-ended)."""
    if censored is None:
        return np.empty(0), np.empty(0)
    low, high = (np.asarray(end, dtype=float).ravel() for end in censored)
    if low.shape != high.shape or np.isnan(low).any() or np.isnan(high).any() or np.any(low > high):
        raise ValueError("censored: expected (low, high) arrays of one length, low <= high, no NaN")
    return low, high


def censored_percentiles(data: np.ndarray, low: np.ndarray, high: np.ndarray, percentiles) -> np.ndarray:
    """numpy.percentile of the numbers and the censored results together, when the censored ones
    cannot move it; ValueError naming the percentile when they can.

    A censored result (`<50`) is only known to lie in [low, high]. The percentile is computed twice,
    every censored result at its low end and then at its high end (an open end at a value beyond
    every number); the two agree exactly when the order statistics it interpolates are numbers that
    lie beyond every censored result, and then that is the percentile of the true values.
    """
    finite = np.concatenate([data, low[np.isfinite(low)], high[np.isfinite(high)]])
    reach = float(np.max(np.abs(finite))) * 2.0 + 1.0 if finite.size else 1.0
    at_low = np.percentile(np.concatenate([data, np.where(np.isfinite(low), low, -reach)]), percentiles)
    at_high = np.percentile(np.concatenate([data, np.where(np.isfinite(high), high, reach)]), percentiles)
    apart = at_low != at_high
    if np.any(apart):
        which = ", ".join(f"the {p:g}th" for p, differ in zip(np.atleast_1d(percentiles), np.atleast_1d(apart))
                          if differ)
        raise ValueError(
            f"{which} percentile falls among the {low.size} censored results (a bound such as <50, not a "
            "number), so these results cannot tell where it lies; a limit there would rest on the bound as if "
            "it were a reading. Use higher levels, a lab with a lower reporting limit, or more results"
        )
    return at_low


def _source(method, count, dropped, levels, percentiles, levels_source, direction, auto_note, censored=0):
    if method == "spc":
        sign = "+" if direction == "above" else "-"
        how = "SPC limits, mean " + ", ".join(f"{sign} {k:g} SD" for k in levels)
        clause = "ASTM D7720 approach (§1.2 SPC)"
    else:
        how = "percentiles " + ", ".join(f"{p:g}" for p in percentiles) + " of the sorted data"
        clause = "ASTM D7720 approach (§1.3 percentiles)"
    notes = ([f"{censored} censored, ranked by their bounds"] if censored else []) + \
        ([f"{dropped} missing dropped"] if dropped else [])
    dropped_note = f" ({'; '.join(notes)})" if notes else ""
    return (
        f"Proposed from {count} results{dropped_note}: {how}{auto_note}. "
        f"{clause}; levels: {levels_source}."
    )


def propose_ladder(values, grades, direction, method="auto", levels=None, min_count=30,
                   censored=None) -> Proposal:
    """Propose one limit per grade of a ladder from one measure's results for one class.

    method "spc": mean +/- k * sample SD, for roughly normal, in-control data (D7720 §1.2).
    method "percentile": numpy.percentile (linear interpolation) of the data, for skewed
    data (D7720 §1.3); levels are coverage, so "below" takes the (100 - p)th percentile.
    method "auto": Jarque-Bera normality test (see jarque_bera_p); p < NORMALITY_ALPHA
    -> percentile, else spc. It is run on at least min_count results.

    `censored` is (low, high): the results that are a bound, not a number (`<50` is [0, 50)).
    They count and take their place in the ranking (censored_percentiles), but never as numbers:
    SPC refuses them (a mean and SD without them would be those of the other results alone),
    "auto" takes percentiles, and a percentile they could move is refused. The moments and the
    normality test are those of the numbers.

    NaNs are dropped and counted. Too few results raise NotEnoughData: min_count (30,
    common practice, no source) for spc and for auto's test, and for percentiles enough
    that TAIL_RESULTS results lie beyond the highest level. Limits rise along the ladder
    for "above" and fall for "below"; limits that coincide raise ValueError.
    """
    grades = _check_ladder(grades, direction, method)
    data, dropped = _clean(values)
    censored_low, censored_high = _bounds_of(censored)
    count = int(data.size + censored_low.size)
    if count < max(min_count, 2):
        raise NotEnoughData(method, count, max(min_count, 2), f"min_count; {LEVELS_COMMON_PRACTICE}")
    if data.size >= 2:  # the numbers' own figures; the censored results have none
        mean, sd, skewness, excess_kurtosis = moments(data)
        normality_p = jarque_bera_p(int(data.size), skewness, excess_kurtosis)
    else:
        mean = sd = skewness = excess_kurtosis = normality_p = math.nan
    auto_note = ""
    if censored_low.size and method == "spc":
        raise ValueError(
            f"{censored_low.size} of the {count} results are censored (a bound such as <50, not a number): "
            "SPC limits need every result as a number, and a mean and SD of the others alone would be those of "
            "a different population; use --method percentile"
        )
    if censored_low.size and method == "auto":
        method = "percentile"
        auto_note = (f"; percentiles because {censored_low.size} results are censored (bounds, not numbers), "
                     "which a mean and SD cannot take")
    if method == "auto":
        method = "percentile" if normality_p < NORMALITY_ALPHA else "spc"
        verdict = "<" if method == "percentile" else ">="
        auto_note = (
            f"; chosen by Jarque-Bera normality test, p = {normality_p:.3g} "
            f"{verdict} {NORMALITY_ALPHA:g} (skewness {skewness:.3g})"
        )
    chosen, levels_source = _levels(method, levels, grades)
    needed = _needed(method, chosen, min_count)
    if count < needed:
        why = (
            f"{TAIL_RESULTS} results beyond the {chosen[-1]:g}th percentile"
            if method == "percentile" else "min_count"
        ) + auto_note
        raise NotEnoughData(method, count, needed, f"{why}; {LEVELS_COMMON_PRACTICE}")
    sign = 1.0 if direction == "above" else -1.0
    if method == "spc":
        percentiles: tuple[float, ...] = ()
        limits = mean + sign * sd * np.array(chosen)
    else:
        percentiles = chosen if direction == "above" else tuple(100.0 - p for p in chosen)
        limits = censored_percentiles(data, censored_low, censored_high, percentiles)
    steps = sign * np.diff(limits)
    if np.any(steps <= 0):
        raise ValueError(
            f"limits coincide along the ladder ({dict(zip(grades, limits.tolist()))}): "
            "the data have too little spread or too coarse a resolution for these levels"
        )
    return Proposal(
        method=method,
        direction=direction,
        grades=grades,
        limits=tuple(float(x) for x in limits),
        levels=chosen,
        percentiles=tuple(float(p) for p in percentiles),
        levels_source=levels_source,
        count=count,
        dropped_missing=dropped,
        needed=needed,
        mean=mean,
        sd=sd,
        skewness=skewness,
        excess_kurtosis=excess_kurtosis,
        normality_p=normality_p,
        source=_source(method, count, dropped, chosen, percentiles, levels_source, direction, auto_note,
                       censored_low.size),
        censored=int(censored_low.size),
    )


def round_significant(value: float, figures: int) -> float:
    """value rounded to `figures` significant figures (a float that prints as written)."""
    return float(f"{value:.{figures}g}")


def proposal_yaml(proposal: Proposal, rule_id: str, measure: str, message: str,
                  significant: int = 4) -> str:
    """A ladder-rule YAML snippet (rule-language.md) for the proposal, ready to paste under `rules:`.

    Limits are rounded to `significant` significant figures (4, as kinematic viscosity
    is reported, ISO 3104); if rounding would merge two limits, ValueError asks for
    more figures. The cautions go in leading YAML comments.
    """
    for name, text in (("rule_id", rule_id), ("measure", measure), ("message", message)):
        if not isinstance(text, str) or not text.strip():
            raise ValueError(f"{name}: expected a non-empty string, got {text!r}")
    rounded = [round_significant(limit, significant) for limit in proposal.limits]
    sign = 1.0 if proposal.direction == "above" else -1.0
    if any(sign * (b - a) <= 0 for a, b in zip(rounded, rounded[1:])):
        raise ValueError(
            f"rounding to {significant} significant figures merges limits {rounded}; "
            "pass a larger `significant`"
        )
    rule = {
        "id": rule_id,
        "measure": measure,
        proposal.direction: dict(zip(proposal.grades, rounded)),
        "message": message,
        "source": proposal.source + f" Limits rounded to {significant} significant figures.",
    }
    header = "".join(f"# {line}\n" for line in PROPOSAL_CAUTIONS)
    body = yaml.safe_dump([rule], sort_keys=False, default_flow_style=None,
                          allow_unicode=True, width=88)
    return header + body
