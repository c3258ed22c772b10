"""Limits from a site's own results: pick one class's (and lubricant's) values of one measure,
propose a ladder with sumpwise.authoring.limit_statistics, and record in the rule's source how it was derived.

The statistics live in sumpwise.authoring.limit_statistics (ASTM D7720's two approaches as the fact sheet
gives them: SPC limits for normal, in-control data, percentiles for data that are
not). Here: which rows were used (class, lubricant, units, dates), the checks a
proposal must pass before anyone pastes it (one oil per pool, ASTM E2412 Annex A3;
steps at least the test's repeatability; every limit finite and inside what the
measure can take), and the figures a reviewer needs, including the share of in-control
samples each level would flag. D7720's own minimum counts and levels were not found;
the defaults are common practice, no source, and the output says so.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd

from sumpwise.authoring.limit_statistics import NORMALITY_ALPHA, NotEnoughData, Proposal, proposal_yaml, propose_ladder
from sumpwise.authoring.repeatability import REPEATABILITY
from sumpwise.derive.row_measures import derive_measures
from sumpwise.derive.trends import add_trend_measures, read_oil_changes
from sumpwise.intake.samples import SampleBatch
from sumpwise.ruleset.model import RuleSet
from sumpwise.ruleset.resolve import DEFAULT_GRADES
from sumpwise.vocabulary.intervals import can_hold
from sumpwise.vocabulary.limit_tests import LIMIT_TESTS
from sumpwise.vocabulary.measures import (MEASURES, REFERENCE_VALUES, TREND_MEASURES, UNIT_FAMILY, domain_of,
                                          measure_unit, unit_key)
from sumpwise.vocabulary.problems import InputError
from sumpwise.vocabulary.texts import lubricant_key
from sumpwise.vocabulary.units import CANONICAL, FACTORS

SIGNIFICANT = 4  # limits are written with 4 significant figures, as kinematic viscosity is reported (ISO 3104)

E2412_POOL = ("ASTM E2412 Annex A3 derives alarm limits from the distribution of results for the same oil in "
              "the same kind of equipment, so a pool of several oils gives limits that fit none of them")


class Refused(ValueError):
    """A proposal that must not be pasted: the reason says what is wrong and what would help."""


@dataclass(frozen=True)
class Filters:
    """Which results a proposal is drawn from, besides the class."""

    lubricant: str | None = None
    units: tuple = ()
    since: str | None = None
    until: str | None = None
    pool_lubricants: bool = False

    def words(self, only: str | None = None) -> str:
        """The filters in words; `only` is the one lubricant the results hold when none was asked for."""
        if self.lubricant:
            parts = [f"lubricant {self.lubricant}"]
        elif only is not None:
            parts = [f"lubricant {only} (the only one whose results have a value)"]
        else:
            parts = ["every lubricant (pooled on request)"]
        if self.units:
            parts.append(f"unit(s) {', '.join(self.units)}")
        if self.since or self.until:
            parts.append(f"sampled {self.since or 'any time'} to {self.until or 'now'}")
        return ", ".join(parts)


@dataclass(frozen=True)
class DataProposal:
    """A proposal, the data it came from, and what a reviewer must know about it."""

    proposal: Proposal
    class_name: str
    lubricant: str | None
    measure: str
    unit: str
    first_sampled: str | None
    last_sampled: str | None
    undated: int
    source_name: str
    filters: Filters = Filters()
    expected_share: tuple = ()  # per level: share of in-control samples flagged (the method's model)
    observed_share: tuple = ()  # per level: share of these results beyond it
    notes: tuple = ()
    only_lubricant: str | None = None  # the one lubricant of the results, when none was asked for
    paste_unit: tuple | None = None  # (file, unit, canonical per unit) when the class's file reads the measure
                                     # in another unit than the engine's: the snippet's limits are written in it


def propose_from_samples(batch: SampleBatch, class_name: str, measure: str, lubricant: str | None = None,
                         ruleset: RuleSet | None = None, direction: str | None = None, method: str = "auto",
                         grades=None, filters: Filters | None = None) -> DataProposal:
    """Propose limits for `measure` from the rows of `class_name` that pass `filters`.

    Derived measures take new-oil values from `ruleset`'s lubricants or the rows' own
    `new_*` columns; trend measures compare each sample with its unit's previous one.
    Raises NotEnoughData when there are too few results and Refused when a proposal would
    mislead (several oils pooled, a limit outside the measure's domain or not finite).
    """
    filters = filters or Filters(lubricant=lubricant)
    extra = ruleset.measures if ruleset else ()
    if measure not in MEASURES and measure not in extra:
        raise InputError(f"unknown measure '{measure}'; expected one of: {', '.join([*MEASURES, *extra])}")
    measured = _measured(batch, measure, ruleset)
    chosen = _chosen(measured, class_name, filters)
    values = measured[measure].to_numpy(dtype=float, na_value=np.nan)[chosen]
    low, high, censored = _censored(measured, measure, chosen)
    present = ~np.isnan(values) | censored
    oils = _oils(measured, chosen, present)
    _refuse_mixed_oils(oils, class_name, filters)
    only = oils.index[0] if len(oils) == 1 and filters.lubricant is None else None
    if chosen.any() and not present.any():
        raise Refused(_nothing_computed(measured, chosen, measure, ruleset))
    grades = tuple(grades) if grades else tuple((ruleset.grades if ruleset else DEFAULT_GRADES)[1:])
    known = MEASURES.get(measure)
    direction = direction or ("below" if known and known.low_is_bad else "above")
    try:
        proposal = propose_ladder(values[~censored], grades, direction, method=method,
                                  censored=(low[censored], high[censored]))
    except NotEnoughData:
        raise
    except ValueError as exc:  # limits that coincide, or a ladder the defaults do not cover
        raise Refused(str(exc)) from None

    data = values[~np.isnan(values)]
    limits, notes = _spaced(proposal, measure, measured, chosen)
    widened = any(" widened from " in note for note in notes)
    notes += _busy_unit(measured, chosen, present)
    notes += _oils_without_values(measured, chosen, present, measure)
    if batch.rejects:
        notes.append(f"{batch.rejected_rows} row(s) of {batch.source} were rejected when read (each listed on "
                     f"standard error with its reason) and are not in these results: a reading rejected for its "
                     f"value or unit takes its part of the spread with it; correct them and propose again")
    _refuse_impossible(measure, direction, limits, data)
    _refuse_fresh_oil_flagged(measure, direction, proposal.grades, limits, measured, chosen, present)
    proposal = replace(proposal, limits=limits)
    expected, observed = _shares(proposal, data, (low[censored], high[censored]))

    dates = measured["sampled_on"].to_numpy(dtype=object)[chosen][present]
    dated = sorted(str(d) for d in dates if d is not None and not pd.isna(d))
    first, last = (dated[0], dated[-1]) if dated else (None, None)
    who = f"class {class_name}, {filters.words(only)}"
    when = f"sampled {first} to {last}" if dated else "no sampling dates"
    spacing = " Steps widened to at least the test's repeatability." if widened else ""
    rejected = f" ({batch.rejected_rows} rejected rows not in them)" if batch.rejects else ""
    source = f"{proposal.source}{spacing} Data: {batch.source}{rejected}, {who}, {when}."
    unit = measure_unit(measure) or (ruleset.unit_of(measure) if ruleset else "")
    return DataProposal(replace(proposal, source=source), class_name, filters.lubricant, measure, unit, first, last,
                        len(dates) - len(dated), batch.source, filters, expected, observed, tuple(notes), only,
                        _paste_unit(ruleset, class_name, measure))


def _paste_unit(ruleset: RuleSet | None, class_name: str, measure: str) -> tuple | None:
    """The unit the class's own rule-set file reads this measure's limits in, when not the engine's: a snippet
    in abs/cm pasted under `units: {oxidation: abs/0.1mm}` would be read a hundred times too high, one in ppm
    under `water: '%'` ten thousand times (no error below 100 %)."""
    key = unit_key(measure)
    family = UNIT_FAMILY.get(key) if key else None
    if ruleset is None or family is None:
        return None
    origin = ruleset.class_origins.get(class_name)
    file = origin.file if origin is not None else ruleset.files[-1]
    unit = ruleset.file_units.get(file, {}).get(key)
    if unit is None or unit == CANONICAL[family]:
        return None
    return file, unit, FACTORS[family][unit]


def _measured(batch: SampleBatch, measure: str, ruleset: RuleSet | None) -> pd.DataFrame:
    batch = read_oil_changes(batch)
    measured = derive_measures(batch.frame, ruleset.lubricants if ruleset else {}, ruleset.measures if ruleset else (),
                               ruleset.fields if ruleset else ())
    if measure in TREND_MEASURES:
        base = TREND_MEASURES[measure].needs[0]
        measured = add_trend_measures(measured, batch.frame.get("oil_changed"), None, (base,))
    return measured


def _column(measured: pd.DataFrame, name: str) -> np.ndarray:
    if name not in measured.columns:
        return np.full(len(measured), None, dtype=object)
    return measured[name].to_numpy(dtype=object)


def _chosen(measured: pd.DataFrame, class_name: str, filters: Filters) -> np.ndarray:
    chosen = _column(measured, "class") == class_name
    if filters.lubricant is not None:  # compared as grading compares codes: `gear-320-m` is GEAR-320-M
        chosen &= _lubricant_keys(measured) == lubricant_key(filters.lubricant)
    if filters.units:
        chosen &= np.isin(_column(measured, "unit_id"), list(filters.units))
    if filters.since or filters.until:
        dates = pd.to_datetime(pd.Series(_column(measured, "sampled_on")), errors="coerce").to_numpy()
        if filters.since:
            chosen &= dates >= np.datetime64(filters.since)
        if filters.until:  # the whole day: a sample taken at 10:30 on it is "on or before" it
            chosen &= dates < np.datetime64(filters.until, "D") + np.timedelta64(1, "D")
    return np.asarray(chosen, dtype=bool)


def _censored(measured: pd.DataFrame, measure: str, chosen: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The interval ends of the chosen results and which of them are censored (a bound such as `<50`,
    kept by derivation as `<measure>:low`/`:high`; the number column holds no value there)."""
    rows = int(chosen.sum())
    if measure + ":low" not in measured.columns:
        return np.full(rows, np.nan), np.full(rows, np.nan), np.zeros(rows, dtype=bool)
    low = measured[measure + ":low"].to_numpy(dtype=float, na_value=np.nan)[chosen]
    high = measured[measure + ":high"].to_numpy(dtype=float, na_value=np.nan)[chosen]
    return low, high, ~np.isnan(low) & ~np.isnan(high)


def _oils_without_values(measured, chosen, present, measure: str) -> list[str]:
    """A note naming the lubricants of the class whose results all lack a value: the limits are not theirs
    (a derived measure lacks its new-oil value for them, most often)."""
    keys = _lubricant_keys(measured)[chosen]
    lacking = ~present & ~np.isin(keys, keys[present])  # every result of that lubricant lacks a value
    codes = _column(measured, "lubricant")[chosen][lacking]
    absent = pd.Series(["(none)" if c is None or pd.isna(c) else str(c) for c in codes], dtype=object).value_counts()
    if absent.empty:
        return []
    needs = [name for name in (MEASURES[measure].needs if measure in MEASURES else ()) if name.startswith("new_")]
    why = (f": {', '.join(needs)} is not known for them (from --rules or the samples' own column)" if needs else "")
    return [f"lubricant(s) {', '.join(f'{code} ({n} results)' for code, n in absent.items())} of this class have no "
            f"{measure} value in any result{why}; these limits are not theirs"]


# A pool where one unit gives more than this share of the results describes that unit more than the
# fleet (common practice, no source).
BUSY_UNIT_SHARE = 0.5


def _busy_unit(measured, chosen, present) -> list[str]:
    """A note when one unit gives most of the results: its own spread then sets the fleet's limits."""
    units = pd.Series(_column(measured, "unit_id")[chosen][present], dtype=object).dropna().value_counts()
    if len(units) < 2 or units.iloc[0] <= BUSY_UNIT_SHARE * units.sum():
        return []
    return [f"unit {units.index[0]} gives {units.iloc[0]} of these {units.sum()} results "
            f"({units.iloc[0] / units.sum():.0%}): the limits describe that unit more than the other "
            f"{len(units) - 1}; ASTM D7720 sets limits for a fleet or for a single machine (§1.4-1.5): "
            f"try --unit {units.index[0]}, and the others without it (more than {BUSY_UNIT_SHARE:.0%}: "
            f"common practice, no source)"]


def _lubricant_keys(measured: pd.DataFrame) -> np.ndarray:
    """Each row's lubricant code as grading compares it (vocabulary.texts.lubricant_key), None where missing."""
    codes = _column(measured, "lubricant")
    found, uniques = pd.factorize(codes)  # each distinct code keyed once
    keys = np.array([lubricant_key(code) for code in uniques] + [None], dtype=object)
    return keys[found]


def _oils(measured, chosen, present) -> pd.Series:
    """How many of the results with a value (a number or a censored reading) are on each lubricant, codes
    compared as grading compares them and each named as first written."""
    codes = _column(measured, "lubricant")[chosen][present]
    keys = _lubricant_keys(measured)[chosen][present]
    named = pd.Series(codes, dtype=object).groupby(pd.Series(keys, dtype=object), sort=False).first()
    counted = pd.Series(keys, dtype=object).value_counts()
    missing = int(pd.isna(keys).sum()) if len(keys) else 0
    oils = pd.Series(counted.to_numpy(), index=[str(named[key]) for key in counted.index], dtype=int)
    return pd.concat([oils, pd.Series([missing], index=["(none)"])]) if missing else oils


def _refuse_mixed_oils(counts: pd.Series, class_name: str, filters: Filters) -> None:
    if filters.lubricant is not None or filters.pool_lubricants:
        return
    if len(counts) > 1:
        mix = ", ".join(f"{code} {n}" for code, n in counts.items())
        raise Refused(f"the results of class {class_name} mix {len(counts)} lubricants ({mix}); {E2412_POOL}. "
                      f"Give --lubricant CODE (one proposal per oil), or --pool-lubricants to pool them on purpose")


def _nothing_computed(measured, chosen, measure: str, ruleset) -> str:
    """Say which inputs of a derived or trend measure the chosen rows lack, instead of '0 results'."""
    needs = MEASURES[measure].needs if measure in MEASURES else (measure,)
    lacking = [name for name in needs if name in measured.columns
               and pd.isna(measured[name].to_numpy(dtype=object)[chosen]).all()]
    lacking += [name for name in needs if name not in measured.columns]
    rows = int(chosen.sum())
    text = (f"{measure} could not be computed for any of the {rows} chosen result(s): it is computed from "
            f"{', '.join(needs)}, and none of them has {', '.join(lacking) or 'all of these'}")
    new_oil = [name for name in lacking if name.startswith("new_")]
    if new_oil:
        where = "no --rules was given" if ruleset is None else f"rule set {ruleset.id} has no such value for their lubricant"
        text += (f". New-oil values come from --rules (the `lubricants` table, by each sample's lubricant code) or "
                 f"from {', '.join(new_oil)} column(s) in the samples; {where}")
    if any(name.startswith("previous_") or name == "hours_since_previous" for name in lacking):
        text += (". A trend measure needs each unit's previous sample of the same oil charge (the first sample of "
                 "a unit, or the first after an oil change, has none)")
    return text


def _round_away(value: float, sign: float) -> float:
    """value rounded to SIGNIFICANT figures, away from the ladder's lower levels (never narrower)."""
    if value == 0 or not math.isfinite(value):
        return value
    quantum = 10.0 ** (math.floor(math.log10(abs(value))) - SIGNIFICANT + 1)
    steps = math.ceil(value / quantum - 1e-9) if sign > 0 else math.floor(value / quantum + 1e-9)
    return float(f"{steps * quantum:.{SIGNIFICANT}g}")


def step_floor(measure: str, level: float, measured: pd.DataFrame, chosen: np.ndarray):
    """The test's repeatability at this limit, in the measure's own terms, and where it comes from; None when
    no published figure applies (rates per 1000 h, counts of rises, FTIR, viscosity index, ...)."""
    if measure in REPEATABILITY:
        rep = REPEATABILITY[measure]
        return rep.at(level), rep.words(level, rep.at(level), measure_unit(measure))
    for suffix in ("_rise", "_step", "_change_pct"):
        base = measure.removesuffix(suffix)
        if base == measure or base not in REPEATABILITY:
            continue
        rep, unit = REPEATABILITY[base], measure_unit(base)
        if suffix == "_step":  # a difference of two results: exactly what r bounds
            at = float(np.nanmedian(measured[base].to_numpy(dtype=float)[chosen]))
            return rep.at(at), rep.words(at, rep.at(at), unit)
        new = float(np.nanmedian(measured[f"new_{base}"].to_numpy(dtype=float)[chosen]))
        if not math.isfinite(new):
            return None
        if suffix == "_rise":
            return rep.at(level + new), rep.words(level + new, rep.at(level + new), unit)
        at = new * (1 + level / 100.0)
        return rep.at(at) / new * 100.0, rep.words(at, rep.at(at), unit) + f" = {rep.at(at) / new * 100:.3g} % of new"
    return None


def _spaced(proposal: Proposal, measure: str, measured, chosen) -> tuple[tuple, list]:
    """The limits rounded for writing, each step widened to at least the repeatability where one is published."""
    sign = 1.0 if proposal.direction == "above" else -1.0
    limits = [float(f"{proposal.limits[0]:.{SIGNIFICANT}g}")]
    notes = []
    for grade, previous_grade, raw in zip(proposal.grades[1:], proposal.grades, proposal.limits[1:]):
        limit = float(f"{raw:.{SIGNIFICANT}g}")
        floor = step_floor(measure, limit, measured, chosen)
        if floor is not None and sign * (limit - limits[-1]) < floor[0]:
            # r grows with the level, so the widened limit is the one that keeps r measured at itself.
            widened = limit
            for _ in range(50):
                floor = step_floor(measure, widened, measured, chosen)
                target = _round_away(limits[-1] + sign * floor[0], sign)
                if sign * (target - widened) <= 0:
                    break
                widened = target
            notes.append(f"{grade} widened from {limit:.{SIGNIFICANT}g} to {widened:.{SIGNIFICANT}g}: the step from "
                         f"{previous_grade} was narrower than the test's repeatability, {floor[1]}")
            limit = widened
        limits.append(limit)
    if len(proposal.grades) > 1 and step_floor(measure, limits[0], measured, chosen) is None:
        notes.append(f"no published repeatability applies to {measure}; steps are as the statistics give them")
    return tuple(limits), notes


def _refuse_impossible(measure: str, direction: str, limits: tuple, data: np.ndarray) -> None:
    """Never a limit that is not a finite number, or one the measure can never cross."""
    if not all(math.isfinite(limit) for limit in limits):
        biggest = float(np.max(np.abs(data))) if data.size else float("nan")
        raise Refused(f"the proposed limits are not finite numbers ({', '.join(f'{x:g}' for x in limits)}); "
                      f"the largest result is {biggest:g}: correct or remove it, or use --method percentile")
    domain = domain_of(measure)
    for limit in limits:
        if not can_hold(LIMIT_TESTS[direction].region(limit), domain):
            raise Refused(f"a limit '{direction} {limit:g}' can never be crossed: {measure} never takes such a value "
                          f"(the spread of these results reaches past what {measure} can take); try --method "
                          f"percentile, or fewer grades")


# Measures of the change from new: the value a fresh charge of the oil has, by construction.
FRESH_VALUE = {"an_rise": 0.0, "oxidation_rise": 0.0, "kv40_change_pct": 0.0, "kv100_change_pct": 0.0,
               "bn_retained_pct": 100.0, "rpvot_retained_pct": 100.0}


def _refuse_fresh_oil_flagged(measure: str, direction: str, grades, limits: tuple, measured, chosen, present) -> None:
    """Never a limit the new oil itself is at or beyond: every fresh charge would be flagged. An oil whose
    reading falls in service (an anti-wear oil's acid number as its additive is used up) puts the site's
    spread on the far side of the new oil, and limits from that spread below it."""
    sign = 1.0 if direction == "above" else -1.0
    if measure in FRESH_VALUE:
        fresh = {f"a fresh charge ({measure} {FRESH_VALUE[measure]:g})": FRESH_VALUE[measure]}
    elif measure in REFERENCE_VALUES and f"new_{measure}" in measured.columns:
        new = measured[f"new_{measure}"].to_numpy(dtype=float, na_value=np.nan)[chosen][present]
        codes = _column(measured, "lubricant")[chosen][present]
        known = np.isfinite(new)
        fresh = {f"the new oil {code} ({measure} {value:g})": float(value)
                 for code, value in zip(codes[known].tolist(), new[known].tolist())}
    else:
        return
    crossed = [(grade, limit, words) for grade, limit in zip(grades, limits)
               for words, value in fresh.items() if sign * (value - limit) >= 0]
    if crossed:
        grade, limit, words = crossed[0]
        other = "below" if direction == "above" else "above"
        raise Refused(f"the {grade} limit '{direction} {limit:g}' is already crossed by {words}: every fresh charge "
                      f"would be flagged {grade} or higher ({len(crossed)} level(s) so). These results lie on the "
                      f"other side of the new oil, so {measure} moves the other way in service here: give "
                      f"--direction {other} for limits on that movement, or write the limits by hand from the new "
                      f"oil's value")


def _shares(proposal: Proposal, data: np.ndarray, censored=(np.empty(0), np.empty(0))) -> tuple[tuple, tuple]:
    """Per level: the share of in-control samples it would flag (normal model for SPC, the data's own
    distribution for percentiles), and the share of these very results beyond it (a censored result
    counts as beyond only where its whole interval is)."""
    sign = 1.0 if proposal.direction == "above" else -1.0
    near = censored[0] if sign > 0 else censored[1]  # the end of each interval nearest the limit's side
    total = data.size + near.size
    observed = tuple(float((np.sum(sign * (data - limit) > 0) + np.sum(sign * (near - limit) > 0)) / total)
                     for limit in proposal.limits)
    if proposal.method == "spc" and proposal.sd > 0:
        expected = tuple(0.5 * math.erfc(sign * (limit - proposal.mean) / proposal.sd / math.sqrt(2.0))
                         for limit in proposal.limits)
    else:
        expected = observed
    return expected, observed


def figure_lines(found: DataProposal) -> list[str]:
    """The figures the limits rest on, for a reviewer to check."""
    p = found.proposal
    unit = f" {found.unit}" if found.unit else ""
    lines = [f"data: {found.source_name}: class {found.class_name}, {found.filters.words(found.only_lubricant)}, "
             f"measure {found.measure}{unit}",
             f"count: {p.count} result(s) used, {p.dropped_missing} without a value dropped "
             f"(at least {p.needed} needed for this method; minimum counts: common practice, no source)"
             + (f"; {p.censored} of them censored (a bound such as <50): ranked by their bounds, never taken "
                f"as numbers, and not in the mean, SD and shape figures below" if p.censored else ""),
             f"dates: {found.first_sampled or '-'} to {found.last_sampled or '-'}"
             + (f" ({found.undated} result(s) undated)" if found.undated else ""),
             f"mean {p.mean:.6g}, SD {p.sd:.6g}, skewness {p.skewness:.3g}, excess kurtosis "
             f"{p.excess_kurtosis:.3g}, Jarque-Bera normality p = {p.normality_p:.3g}"]
    if p.method == "spc":
        how = ", ".join(f"{g} mean {'+' if p.direction == 'above' else '-'} {k:g} SD" for g, k in zip(p.grades, p.levels))
        lines.append(f"method: SPC limits (ASTM D7720 §1.2 approach, for normal, in-control data): {how}")
        if p.normality_p < NORMALITY_ALPHA:
            lines.append(f"note: the normality test rejects normal data (p = {p.normality_p:.3g} < "
                         f"{NORMALITY_ALPHA:g}); for data that are not normal D7720 §1.3 takes percentiles "
                         f"(--method percentile or auto)")
    else:
        how = ", ".join(f"{g} {q:g}th percentile" for g, q in zip(p.grades, p.percentiles))
        lines.append(f"method: percentiles of the sorted data (ASTM D7720 §1.3 approach, for data that are not "
                     f"normal): {how}")
    lines.append(f"levels: {p.levels_source}; the defaults keep the first level to about 5 % of in-control "
                 f"samples or fewer (common practice, no source)")
    model = "normal model" if p.method == "spc" else "these results' own distribution"
    lines.append("limits: " + ", ".join(f"{g} {p.direction} {limit:.6g}" for g, limit in p.ladder().items()))
    lines.append(f"flags ({model}; share of these results): " + ", ".join(
        f"{g} {e * 100:.2g} % ({o * 100:.2g} %)" for g, e, o in zip(p.grades, found.expected_share,
                                                                     found.observed_share)))
    lines += [f"note: {note}" for note in found.notes]
    return lines


def snippet(found: DataProposal, rule_id: str | None = None, message: str | None = None) -> str:
    """The figures as YAML comments, then the ladder rule ready to paste under a class's `rules:`."""
    rule_id = rule_id or f"{found.measure.replace('_', '-')}-from-data"
    message = message or (f"{found.measure} is {found.proposal.direction} the usual spread of this site's "
                          f"{found.class_name} results")
    lines = figure_lines(found)
    proposal = found.proposal
    if found.paste_unit is not None:
        file, unit, per_unit = found.paste_unit
        proposal = replace(proposal, limits=tuple(float(f"{limit / per_unit:.12g}") for limit in proposal.limits))
        lines.append(f"written in {unit}: {file} reads {unit_key(found.measure)} limits in {unit} (its `units:`); "
                     f"the figures above are in {found.unit}, the engine's unit")
    elif UNIT_FAMILY.get(unit_key(found.measure) or ""):
        lines.append(f"written in {found.unit}, the engine's unit: a file whose `units:` reads "
                     f"{unit_key(found.measure)} in another unit needs them converted (or give --rules that file)")
    header = "".join(f"# {line}\n" for line in lines)
    return header + proposal_yaml(proposal, rule_id, found.measure, message, significant=SIGNIFICANT)
