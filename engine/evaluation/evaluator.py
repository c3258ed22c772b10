"""Evaluate a compiled rule set over a batch of derived measures, as array operations.

No I/O and no per-row Python: each rule is a few numpy comparisons over the rows of
its class. Conditions use three-valued logic (true, false, unknown) so a missing
value is never a pass: a rule whose outcome depends on a missing value is "not
evaluated". The outcome is columnar (one small integer per sample and rule); results
are read from it afterwards.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from sumpwise.ruleset.model import LadderRule, RuleSet
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


def _measure_test(condition, columns: _Columns) -> tuple[np.ndarray, np.ndarray]:
    values = columns.number(condition.measure)
    known = ~np.isnan(values)
    return LIMIT_TESTS[condition.test].crossed(values, condition.limit) & known, known


def _missing_test(condition, columns: _Columns) -> tuple[np.ndarray, np.ndarray]:
    missing = np.isnan(columns.number(condition.measure))
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


def condition_truth(condition, columns: _Columns, leaves: list | None = None) -> tuple[np.ndarray, np.ndarray]:
    """(truth, known) of a condition; `leaves` collects each leaf test's (truth, known) in order."""
    if condition.parts:
        return COMBINED_TRUTH[condition.kind]([condition_truth(p, columns, leaves) for p in condition.parts])
    truth, known = LEAF_TRUTH[condition.kind](condition, columns)
    if leaves is not None:
        leaves.append((truth, known))
    return truth, known


def _ladder_levels(rule: LadderRule, columns: _Columns) -> np.ndarray:
    values = columns.number(rule.measure)
    levels = np.zeros(len(values), dtype=np.int8)
    for level, limit in rule.steps:
        levels[LIMIT_TESTS[rule.test].crossed(values, limit)] = level
    levels[np.isnan(values)] = NOT_EVALUATED
    return levels


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
            if slot.rule.reads & caveat.cap.measures:
                column = final[:, j]
                column[capping & (column > caveat.cap.level)] = caveat.cap.level

    level = final.max(axis=1, initial=NOT_APPLICABLE) if len(slots) else np.full(n, NOT_APPLICABLE)
    level = np.where(level >= 0, level, -1).astype(np.int8)
    return Outcome(slots, raw, final, caveats, capping_all, unchecked, leaves, level, known_class)
