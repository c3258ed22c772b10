"""Evaluate a compiled rule set over a batch of derived measures, as array operations.

No I/O and no per-row Python: each rule is a few numpy comparisons over the rows of
its class. Conditions use three-valued logic (true, false, unknown) so a missing
value is never a pass: a rule whose outcome depends on a missing value is "not
evaluated". The outcome is columnar (one small integer per sample and rule); results
are read from it afterwards.
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass

import numpy as np
import pandas as pd

from sumpwise.intake.censored import WRITTEN_SUFFIX, Bounds, interval_truth, numbers_text
from sumpwise.derive.trends import MARGIN_SUFFIX
from sumpwise.ruleset.model import LadderRule, RuleSet, leaves
from sumpwise.vocabulary.caveats import EngineCaveat
from sumpwise.vocabulary.limit_tests import LIMIT_TESTS

# Outcome codes in the per-rule matrices; 0 and above are ladder levels.
NOT_APPLICABLE = -2  # the rule is not one of this sample's class
NOT_EVALUATED = -1  # a value the rule needs is missing


@dataclass(frozen=True)
class Slot:
    """One rule as applied to one class: a column of the outcome matrices."""

    class_name: str
    rule: object


@dataclass(frozen=True)
class Outcome:
    """What evaluation found, as arrays aligned with the measured frame's rows.

    `raw` and `final` are int8 [rows, slots]: NOT_APPLICABLE, NOT_EVALUATED, or the
    level the rule gave (0 when it did not fire); `final` is after caps. `leaves`
    maps a slot index to the (truth, known) arrays of its condition's leaf tests.
    `capping` is bool [rows, caveats]: the caveat's cap was in force for the sample;
    `unchecked` marks where it was in force only because its `unless` could not be
    evaluated (a value it needs is missing), which the record must say.
    `level` is the sample's grade level, -1 for unrated.
    """

    slots: tuple
    raw: np.ndarray
    final: np.ndarray
    caveats: np.ndarray
    capping: np.ndarray
    unchecked: np.ndarray
    leaves: dict
    level: np.ndarray
    known_class: np.ndarray


class _Columns:
    """Column access for some rows (or all, when `rows` is None), each column sliced once."""

    def __init__(self, measured: pd.DataFrame, rows: np.ndarray | None):
        self.measured = measured
        self.rows = rows
        self.size = len(measured) if rows is None else len(rows)
        self.cache: dict = {}

    def _take(self, values: np.ndarray) -> np.ndarray:
        return values if self.rows is None else values[self.rows]

    def number(self, name: str) -> np.ndarray:
        if name not in self.cache:
            if name in self.measured.columns:
                self.cache[name] = self._take(self.measured[name].to_numpy(dtype=float, na_value=np.nan))
            else:
                self.cache[name] = np.full(self.size, np.nan)
        return self.cache[name]

    def interval(self, name: str) -> Bounds | None:
        """The censored readings of a measure as intervals (None when it has none): a test on
        one is known only when the whole interval lies inside or outside the test's region."""
        key = ("interval", name)
        if key not in self.cache:
            found = None
            if name + ":low" in self.measured.columns:
                low = self._take(self.measured[name + ":low"].to_numpy(dtype=float, na_value=np.nan))
                found = Bounds(~np.isnan(low), low,
                               self._take(self.measured[name + ":high"].to_numpy(dtype=float, na_value=np.nan)),
                               self._take(self.measured[name + ":low_open"].to_numpy(dtype=bool)),
                               self._take(self.measured[name + ":high_open"].to_numpy(dtype=bool)), np.empty(0))
                found = found if found.censored.any() else None
            self.cache[key] = found
        return self.cache[key]

    def folded(self, name: str) -> tuple[np.ndarray, list]:
        """(code per row, -1 where missing; the distinct values stripped and case-folded).

        Text is compared per distinct value, not per row: a million rows hold a handful of
        classes, lubricants and base stocks.
        """
        key = ("folded", name)
        if key not in self.cache:
            if name in self.measured.columns:
                codes, uniques = pd.factorize(self._take(self.measured[name].to_numpy(dtype=object)))
                folded = [str(u).strip().casefold() for u in uniques]
            else:
                codes, folded = np.full(self.size, -1, dtype=np.intp), []
            self.cache[key] = (codes, folded)
        return self.cache[key]


def _limit_truth(measure: str, test: str, limit, columns: _Columns) -> tuple[np.ndarray, np.ndarray]:
    """(truth, known) of one limit test: numbers compared, censored readings as intervals."""
    values = columns.number(measure)
    known = ~np.isnan(values)
    truth = LIMIT_TESTS[test].crossed(values, limit) & known
    interval = columns.interval(measure)
    if interval is not None:
        rows = interval.censored
        inside, decided = interval_truth(LIMIT_TESTS[test].region(limit), _at(interval, rows))
        # An interval beside a number (a rate from a step within the noise margin, derive.trends):
        # the number not crossing decides, as without the interval; crossing, the whole interval must.
        short = known[rows] & ~truth[rows]
        truth, known = truth.copy(), known.copy()
        truth[rows], known[rows] = inside, decided | short
    return truth, known


def _at(interval: Bounds, rows: np.ndarray) -> Bounds:
    return Bounds(interval.censored[rows], interval.low[rows], interval.high[rows], interval.low_open[rows],
                  interval.high_open[rows], interval.written)


def _measure_test(condition, columns: _Columns) -> tuple[np.ndarray, np.ndarray]:
    return _limit_truth(condition.measure, condition.test, condition.limit, columns)


def _missing_test(condition, columns: _Columns) -> tuple[np.ndarray, np.ndarray]:
    missing = np.isnan(columns.number(condition.measure))
    interval = columns.interval(condition.measure)
    if interval is not None:
        missing &= ~interval.censored  # a censored reading is there, only not as a number
    truth = missing if condition.missing else ~missing
    return truth, np.ones(len(truth), dtype=bool)


def _field_test(condition, columns: _Columns) -> tuple[np.ndarray, np.ndarray]:
    codes, folded = columns.folded(condition.field)
    wanted = {v.strip().casefold() for v in condition.values}
    return np.isin(codes, [k for k, value in enumerate(folded) if value in wanted]), codes >= 0


def _all(parts: list) -> tuple[np.ndarray, np.ndarray]:
    any_false = np.logical_or.reduce([k & ~t for t, k in parts])
    all_true = np.logical_and.reduce([t for t, _ in parts])
    return all_true, all_true | any_false


def _any(parts: list) -> tuple[np.ndarray, np.ndarray]:
    any_true = np.logical_or.reduce([t for t, _ in parts])
    all_false = np.logical_and.reduce([k & ~t for t, k in parts])
    return any_true, any_true | all_false


def _not(parts: list) -> tuple[np.ndarray, np.ndarray]:
    truth, known = parts[0]
    return ~truth & known, known


# Each condition kind's three-valued meaning, as (truth, known) arrays: leaves read columns,
# combinations combine their parts' results (Kleene's strong logic: unknown stays unknown
# unless the known parts decide).
LEAF_TRUTH = {"measure": _measure_test, "missing": _missing_test, "field": _field_test}
COMBINED_TRUTH = {"all": _all, "any": _any, "not": _not}


def condition_truth(condition, columns: _Columns, leaves: list | None = None,
                    masked: dict | None = None) -> tuple[np.ndarray, np.ndarray]:
    """(truth, known) of a condition; `leaves` collects each leaf test's (truth, known) in order.

    `masked` maps a measure to the rows where its limit tests are taken as unknown (a cap keeps
    that measure's values from contributing there), so a condition still known true does not
    rest on them; a `missing:` test reads no value and stays as it is.
    """
    if condition.parts:
        return COMBINED_TRUTH[condition.kind]([condition_truth(p, columns, leaves, masked) for p in condition.parts])
    truth, known = LEAF_TRUTH[condition.kind](condition, columns)
    if leaves is not None:
        leaves.append((truth, known))
    hidden = masked.get(condition.measure) if masked and condition.kind == "measure" else None
    if hidden is not None:
        truth, known = truth & ~hidden, known & ~hidden
    return truth, known


def _ladder_levels(rule: LadderRule, columns: _Columns) -> np.ndarray:
    """The highest step crossed. A censored reading gets the highest step it is known to cross
    (a lower bound when a higher step is undecided); none known and one undecided: not evaluated."""
    values = columns.number(rule.measure)
    levels = np.zeros(len(values), dtype=np.int8)
    interval = columns.interval(rule.measure)
    if interval is None:
        for level, limit in rule.steps:
            levels[LIMIT_TESTS[rule.test].crossed(values, limit)] = level
        levels[np.isnan(values)] = NOT_EVALUATED
        return levels
    undecided = np.zeros(len(values), dtype=bool)
    for level, limit in rule.steps:
        truth, known = _limit_truth(rule.measure, rule.test, limit, columns)
        levels[truth] = level
        undecided |= ~known
    levels[undecided & (levels == 0)] = NOT_EVALUATED
    return levels


def _capped_condition(rule, column: np.ndarray, caps: list, measured: pd.DataFrame) -> np.ndarray:
    """A condition rule's levels under the caps in force (cap, bool rows) on measures it reads.

    A cap limits what its measures can contribute, not what the rule gives for other reasons
    (`any: [water above 1000, oxidation_rise above 30]` fired by its water alone is not an
    oxidation finding). The rule keeps the highest level l, its own or a cap's below it, at
    which it is still known true with the limit tests of every measure capped below l taken as
    unknown; at the lowest cap's level nothing is masked, so a fired rule always has one.
    """
    out = column.copy()
    in_force = np.logical_or.reduce([capping for _, capping in caps])
    todo = np.flatnonzero((column > 0) & in_force)
    if not len(todo):
        return out
    columns = _Columns(measured, todo)
    pending = np.ones(len(todo), dtype=bool)
    lower = sorted({cap.level for cap, _ in caps if cap.level < rule.level}, reverse=True)
    for level in [rule.level] + lower:
        masked: dict = {}
        for cap, capping in caps:
            if cap.level < level:
                for measure in cap.measures:
                    masked[measure] = masked.get(measure, False) | capping[todo]
        holds, _ = condition_truth(rule.when, columns, masked=masked)
        settled = pending & holds
        out[todo[settled]] = level
        pending &= ~settled
    return out


def _caps_on(ruleset: RuleSet, rule, capping: np.ndarray) -> list:
    """(cap, rows where it is in force) of each caveat's cap on a measure the rule reads."""
    return [(caveat.cap, capping[:, k]) for k, caveat in enumerate(ruleset.caveats)
            if caveat.cap is not None and rule.reads & caveat.cap.measures]


def _cap_levels(levels: np.ndarray, caps: list) -> None:
    """A ladder rule's levels held down, in place, to each cap's level where it is in force."""
    for cap, capping in caps:
        levels[capping & (levels > cap.level)] = cap.level


def evaluate(ruleset: RuleSet, measured: pd.DataFrame) -> Outcome:
    """Grade every row of `measured` (the output of derive_measures) under `ruleset`."""
    n = len(measured)
    class_codes, class_names = pd.factorize(measured["class"].to_numpy(dtype=object)) if n else (np.empty(0), [])
    code_of = {str(name): k for k, name in enumerate(class_names)}
    slots = tuple(Slot(name, rule) for name in ruleset.classes for rule in ruleset.rules_for(name))
    # Column-major: each rule writes and caps one contiguous column.
    raw = np.full((n, len(slots)), NOT_APPLICABLE, dtype=np.int8, order="F")
    leaves: dict = {}
    known_class = np.zeros(n, dtype=bool)

    start = 0
    for name in ruleset.classes:
        rules = ruleset.rules_for(name)
        rows = np.flatnonzero(class_codes == code_of[name]) if name in code_of else np.empty(0, dtype=np.intp)
        known_class[rows] = True
        columns = _Columns(measured, rows)
        for offset, rule in enumerate(rules):
            j = start + offset
            if isinstance(rule, LadderRule):
                raw[rows, j] = _ladder_levels(rule, columns)
            else:
                found: list = []
                truth, known = condition_truth(rule.when, columns, found)
                levels = np.where(truth, rule.level, 0).astype(np.int8)
                levels[~known] = NOT_EVALUATED
                raw[rows, j] = levels
                leaves[j] = (rows, found)
        start += len(rules)

    everyone = _Columns(measured, None)
    caveats = np.zeros((n, len(ruleset.caveats)), dtype=bool)
    capping_all = np.zeros_like(caveats)
    unchecked = np.zeros_like(caveats)
    final = raw.copy(order="F")
    for k, caveat in enumerate(ruleset.caveats):
        truth, _ = condition_truth(caveat.when, everyone)
        caveats[:, k] = truth
        if caveat.cap is None:
            continue
        capping = truth
        if caveat.cap.unless is not None:
            lifted, lift_known = condition_truth(caveat.cap.unless, everyone)
            capping = truth & ~lifted
            unchecked[:, k] = truth & ~lift_known
        capping_all[:, k] = capping
    for j, slot in enumerate(slots):
        caps = _caps_on(ruleset, slot.rule, capping_all)
        if not caps:
            continue
        if isinstance(slot.rule, LadderRule):
            _cap_levels(final[:, j], caps)
        else:
            final[:, j] = _capped_condition(slot.rule, raw[:, j], caps, measured)

    level = final.max(axis=1, initial=NOT_APPLICABLE) if len(slots) else np.full(n, NOT_APPLICABLE)
    level = np.where(level >= 0, level, -1).astype(np.int8)
    return Outcome(slots, raw, final, caveats, capping_all, unchecked, leaves, level, known_class)


# No silent pass: a sample whose class the rule set lacks, or on which most of its class's
# rules could not be evaluated, carries a caveat the table, report and summary show.
COVERAGE_CAVEATS = (
    EngineCaveat("unknown-class", "unknown_class_note", "sumpwise engine: the rule set's classes"),
    EngineCaveat("few-rules-evaluated", "few_rules_note",
                 "sumpwise engine: rules of the class not evaluated for missing or undecided values"),
)


def coverage_notes(ruleset: RuleSet, measured: pd.DataFrame, outcome: Outcome) -> dict:
    """The coverage caveats' per-row notes (None where a caveat does not apply)."""
    n = len(measured)
    unknown = np.full(n, None, dtype=object)
    if n:
        classes = measured["class"].to_numpy(dtype=object)
        codes, uniques = pd.factorize(classes, use_na_sentinel=True)
        texts = []
        for name in uniques:
            near = difflib.get_close_matches(str(name), list(ruleset.classes), n=3, cutoff=0.5)
            texts.append(f"class '{name}' is not in the rule set '{ruleset.id}'"
                         + (f" (nearest: {', '.join(near)})" if near else "") + "; no rules apply, so it is unrated")
        unknown = np.array(texts + [None], dtype=object)[codes]
        unknown[outcome.known_class] = None
    applicable = (outcome.raw != NOT_APPLICABLE).sum(axis=1)
    gaps = (outcome.final == NOT_EVALUATED).sum(axis=1)
    most = (applicable > 0) & (2 * gaps > applicable)
    few = np.full(n, None, dtype=object)
    for pair in set(zip(gaps[most].tolist(), applicable[most].tolist())):  # a few distinct counts
        few[most & (gaps == pair[0]) & (applicable == pair[1])] = (
            f"{pair[0]} of the {pair[1]} rules of its class could not be evaluated; the grade rests on the rest")
    return {"unknown_class_note": unknown, "few_rules_note": few}


# A censored reading, or a rate from a step within the noise margin, may leave a limit above the
# sample's grade undecided (water `>500` ppm against an urgent limit of 1000, or `<500` against a
# watch limit of 100; a condition rule on oil hours `>1500` below 2000): the grade is then the
# least the sample can have, and whoever triages by grade must be told so.
BOUND_CAVEATS = (
    EngineCaveat("grade-may-be-higher", "grade_bound_note",
                 "sumpwise engine: censored readings and noisy rates against the rule set's limits"),
)


def bound_notes(ruleset: RuleSet, measured: pd.DataFrame, outcome: Outcome) -> dict:
    """The bound caveat's per-row note: each ladder rule whose undecided step (after the caps in
    force) lies above the sample's grade, with the reading as written, and each condition rule
    left undecided by such readings alone whose level lies above it; None elsewhere."""
    n = len(measured)
    notes = np.full(n, None, dtype=object)
    for j, slot in enumerate(outcome.slots):
        if isinstance(slot.rule, LadderRule):
            _ladder_bound(ruleset, measured, outcome, j, notes)
        else:
            _condition_bound(ruleset, measured, outcome, j, notes)
    return {"grade_bound_note": notes}


def _ladder_bound(ruleset: RuleSet, measured: pd.DataFrame, outcome: Outcome, j: int, notes: np.ndarray) -> None:
    rule = outcome.slots[j].rule
    if rule.measure + ":low" not in measured.columns:
        return
    rows = np.flatnonzero(outcome.raw[:, j] != NOT_APPLICABLE)
    columns = _Columns(measured, rows)
    interval = columns.interval(rule.measure)
    if interval is None:
        return
    possible = np.full(len(rows), -1, dtype=np.int8)  # the highest step whose crossing is undecided
    limit_of = {}
    for level, limit in rule.steps:
        _, known = _limit_truth(rule.measure, rule.test, limit, columns)
        possible[~known & interval.censored] = level  # a missing value is a gap, not a bound
        limit_of[level] = limit
    _cap_levels(possible, _caps_on(ruleset, rule, outcome.capping[rows]))
    higher = possible > outcome.level[rows]
    if not higher.any():
        return
    readings, why = _readings(measured, rule.measure, rows)
    unit = ruleset.unit_of(rule.measure)
    for level in np.unique(possible[higher]).tolist():
        here = higher & (possible == level)
        limit = limit_of[level]
        shown = f"{limit:g}" if isinstance(limit, (int, float)) else str(limit)
        _add_note(notes, rows[here], f"{rule.id}: {rule.measure} " + readings[here]
                  + f" may be {rule.test} its {ruleset.grades[level]} limit ({shown}{' ' + unit if unit else ''}){why}")


def _condition_bound(ruleset: RuleSet, measured: pd.DataFrame, outcome: Outcome, j: int, notes: np.ndarray) -> None:
    """A condition rule not evaluated while every value it reads is there, some only as a bound
    or a rate within the noise margin: the condition may hold, and give the rule's level (held
    down by the caps in force on what it reads). A value missing is a gap, as for a ladder."""
    rule = outcome.slots[j].rule
    rows = np.flatnonzero(outcome.raw[:, j] == NOT_EVALUATED)
    if not len(rows):
        return
    columns = _Columns(measured, rows)
    present = np.ones(len(rows), dtype=bool)
    undecided = {}  # measure -> rows whose reading is an interval
    for leaf in leaves(rule.when):
        if leaf.kind == "field":
            present &= columns.folded(leaf.field)[0] >= 0
            continue
        interval = columns.interval(leaf.measure)
        censored = interval.censored if interval is not None else np.zeros(len(rows), dtype=bool)
        present &= ~np.isnan(columns.number(leaf.measure)) | censored
        if censored.any():
            undecided[leaf.measure] = censored
    bounded = np.zeros(len(rows), dtype=bool)
    for censored in undecided.values():
        bounded |= censored
    possible = np.where(present & bounded, rule.level, -1).astype(np.int8)
    _cap_levels(possible, _caps_on(ruleset, rule, outcome.capping[rows]))
    higher = possible > outcome.level[rows]
    if not higher.any():
        return
    said = np.full(int(higher.sum()), "", dtype=object)
    for measure, censored in undecided.items():
        readings, why = _readings(measured, measure, rows)
        piece = np.where(censored[higher], measure + " " + readings[higher] + why, "").astype(object)
        joiner = np.where((said != "") & (piece != ""), "; ", "").astype(object)
        said = said + joiner + piece
    for level in np.unique(possible[higher]).tolist():
        here = possible[higher] == level
        _add_note(notes, rows[higher][here], f"{rule.id}: its condition may hold (" + said[here]
                  + f"), which gives {ruleset.grades[level]}")


def _readings(measured: pd.DataFrame, measure: str, rows: np.ndarray) -> tuple[np.ndarray, str]:
    """Each row's reading as a note says it (object array), and why it decides nothing: a bound
    as the lab wrote it (`written '<5'`), or a rate's number, its step within the noise margin."""
    if measure + WRITTEN_SUFFIX in measured.columns:  # a censored reading as written
        reading = measured[measure + WRITTEN_SUFFIX].to_numpy(dtype=object)[rows].astype(str).astype(object)
        as_written = np.isin(reading.astype("U1"), ["<", ">", "\u2264", "\u2265"])  # first characters
        reading[as_written] = "written '" + reading[as_written] + "'"  # a derived one says its own source
        return reading, ""
    if measure + MARGIN_SUFFIX in measured.columns:  # the rate's number (the gap gives its interval)
        return numbers_text(measured[measure].to_numpy(dtype=float)[rows]), ", its step being within the noise margin"
    return np.full(len(rows), "None", dtype=object), ""


def _add_note(notes: np.ndarray, at: np.ndarray, text: np.ndarray) -> None:
    """Each row's note, a later rule's after an earlier one's."""
    first = pd.isna(notes[at])
    notes[at[first]] = text[first]
    notes[at[~first]] = notes[at[~first]] + "; " + text[~first]
