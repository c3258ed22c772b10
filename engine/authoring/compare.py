"""Preview a rule-set change: grade the same samples under the old and the new rule set.

The answer is what a reviewer needs before accepting a change of limits: how many
samples move between grades (a from-to table), which ones, and which rules' findings
changed for each. Grading is the usual vectorized pipeline, run twice; only the
samples that moved are read back one by one. Beside the samples, every limit, rule,
caveat, new-oil value and noise margin that differs between the two compiled rule sets
is listed, so a change no sample crosses yet is not reported as "nothing moved" alone.
"""

from __future__ import annotations

import json
from collections import Counter
from dataclasses import dataclass, fields

import numpy as np
import pandas as pd

from sumpwise.evaluation.evaluator import NOT_APPLICABLE, NOT_EVALUATED
from sumpwise.results.pipeline import grade_batch
from sumpwise.results.records import UNRATED, GradedBatch
from sumpwise.ruleset.compiler import caveat_doc, rule_doc
from sumpwise.ruleset.model import Lubricant, RuleSet
from sumpwise.vocabulary.limit_tests import LADDER_TESTS
from sumpwise.intake.samples import SampleBatch

_ABSENT = NOT_APPLICABLE  # a rule the sample's class does not have in that rule set
_CORNER = "old \\ new"


@dataclass(frozen=True)
class RuleChange:
    """One rule's finding for one sample, before and after ("not evaluated", "absent" or a grade)."""

    rule: str
    before: str
    after: str


@dataclass(frozen=True)
class Move:
    sample_id: str
    class_name: str | None
    before: str
    after: str
    changes: tuple  # RuleChange records, the rules whose finding changed


@dataclass(frozen=True)
class RuleSetChange:
    """One difference between the two compiled rule sets (limits in canonical units).

    `where` names the piece ("class pump, rule acid-rise", "caveat ester-carbonyl", "lubricant
    PUMP-46-M"), `what` the part of it that changed ("watch above", "when", "new-oil an"); an
    absent piece or part reads "(none)"."""

    where: str
    what: str
    before: str
    after: str


@dataclass(frozen=True)
class Comparison:
    """Samples graded under both rule sets: the from-to counts and the samples that moved."""

    old: RuleSet
    new: RuleSet
    graded: int
    rejected: int
    table: dict  # (from grade, to grade) -> number of samples
    grades: tuple  # row and column order of the table
    moves: tuple
    rejects: tuple = ()  # the rows not graded, each with its reason (intake.samples.Reject)
    changes: tuple = ()  # RuleSetChange records: what differs between the rule sets themselves

    @property
    def moved(self) -> int:
        return len(self.moves)


def compare_rulesets(old: RuleSet, new: RuleSet, batch: SampleBatch) -> Comparison:
    """Grade `batch` under both rule sets and say what moved and why."""
    before, after = grade_batch(batch, old), grade_batch(batch, new)
    old_grades, new_grades = np.array(before.grades(), dtype=object), np.array(after.grades(), dtype=object)
    table = Counter(zip(old_grades.tolist(), new_grades.tolist()))
    order = tuple(dict.fromkeys([*old.grades, *new.grades, UNRATED]))
    old_rules, new_rules = _rule_levels(before), _rule_levels(after)
    moved_rows = np.flatnonzero(old_grades != new_grades)
    # The graded rows, not the batch's: grading may refuse a row the reader kept (an ISO 4406
    # code that cannot be read), and positions in the batch would then name the wrong sample.
    ids = before.measured["sample_id"].to_numpy(dtype=object)
    classes = before.measured["class"].to_numpy(dtype=object)
    moves = tuple(
        Move(str(ids[i]), classes[i], old_grades[i], new_grades[i],
             _changes(old_rules.iloc[i], new_rules.iloc[i], old.grades, new.grades))
        for i in moved_rows)
    rejects = tuple({(r.row, r.field, r.code): r for r in before.rejects + after.rejects}.values())
    return Comparison(old, new, len(before), len({r.row for r in rejects}), dict(table), order, moves,
                      tuple(sorted(rejects, key=lambda r: (r.row, r.field))), ruleset_changes(old, new))


_NONE = "(none)"


def ruleset_changes(old: RuleSet, new: RuleSet) -> tuple:
    """Every limit, rule, caveat, new-oil value, declared unit and noise margin that differs, piece by piece.

    Read from the compiled rule sets, so a limit rewritten in another unit (0.08 abs/0.1mm for
    8 abs/cm) is no change, and a limit a child file changes through `extends` is one."""
    changes = []
    if old.grades != new.grades:
        changes.append(RuleSetChange("rule set", "grades", _shown(list(old.grades)), _shown(list(new.grades))))
    if old.notice != new.notice:  # on every result: an auditor reads it
        changes.append(RuleSetChange("rule set", "notice", old.notice, new.notice))
    scopes = [(f"class {name}", old.classes.get(name, ()), new.classes.get(name, ()))
              for name in sorted(set(old.classes) | set(new.classes))]
    scopes.append(("every class", old.rules, new.rules))
    for name in sorted(set(old.class_drops) | set(new.class_drops)):
        was, now = old.class_drops.get(name, ()), new.class_drops.get(name, ())
        if was != now:
            changes.append(RuleSetChange(f"class {name}", "drops top-level rules", _shown(list(was)) if was else _NONE,
                                         _shown(list(now)) if now else _NONE))
    for scope, old_rules, new_rules in scopes:
        before = {rule.id: rule_doc(rule, old.grades) for rule in old_rules}
        after = {rule.id: rule_doc(rule, new.grades) for rule in new_rules}
        for ident in dict.fromkeys([*before, *after]):
            changes += _piece_changes(f"{scope}, rule {ident}", before.get(ident), after.get(ident),
                                      units=(old.unit_of, new.unit_of))
    before = {c.id: caveat_doc(c, old.grades) for c in old.caveats}
    after = {c.id: caveat_doc(c, new.grades) for c in new.caveats}
    for ident in dict.fromkeys([*before, *after]):
        changes += _piece_changes(f"caveat {ident}", before.get(ident), after.get(ident))
    for code in sorted(set(old.lubricants) | set(new.lubricants)):
        changes += _piece_changes(f"lubricant {code}", _lubricant_values(old.lubricants.get(code)),
                                  _lubricant_values(new.lubricants.get(code)), prefix="new-oil ")
    for name in sorted(set(old.measure_units) | set(new.measure_units)):  # a declared measure's unit is the lab's
        was, now = old.measure_units.get(name), new.measure_units.get(name)
        if was != now:
            changes.append(RuleSetChange(f"declared measure {name}", "unit" if was is not None and now is not None
                                         else "added" if was is None else "removed", _shown(was), _shown(now)))
    for name in sorted(set(old.noise_margins) | set(new.noise_margins)):
        was, now = old.noise_margins.get(name), new.noise_margins.get(name)
        if was != now:
            changes.append(RuleSetChange(f"noise margin {name}", "margin", _shown(was), _shown(now)))
    return tuple(changes)


def _lubricant_values(lubricant: Lubricant | None) -> dict | None:
    if lubricant is None:
        return None
    return {f.name: getattr(lubricant, f.name) for f in fields(lubricant)
            if f.name != "code" and getattr(lubricant, f.name) is not None}


def _piece_changes(where: str, before: dict | None, after: dict | None, prefix: str = "", units=None) -> list:
    """A piece added or removed is one change; a piece in both, one change per part that differs,
    and one per grade of a ladder whose measure and test stayed (`watch above 0.2 -> 0.25`), each
    limit with its unit in its own rule set (a declared measure's unit may differ between them)."""
    if before == after:
        return []
    if before is None or after is None:
        return [RuleSetChange(where, "added" if before is None else "removed",
                              _NONE if before is None else _summary(before),
                              _NONE if after is None else _summary(after))]
    changes = []
    same_ladder = before.get("measure") == after.get("measure") and \
        [k for k in LADDER_TESTS if k in before] == [k for k in LADDER_TESTS if k in after]
    measure = after.get("measure", "")
    old_unit, new_unit = (units[0](measure), units[1](measure)) if units else ("", "")
    for key in dict.fromkeys([*before, *after]):
        was, now = before.get(key, _NONE), after.get(key, _NONE)
        if was == now:
            continue
        if same_ladder and key in LADDER_TESTS:
            for grade in dict.fromkeys([*was, *now]):
                if was.get(grade) != now.get(grade):
                    changes.append(RuleSetChange(where, f"{grade} {key}", _shown(was.get(grade), old_unit),
                                                 _shown(now.get(grade), new_unit)))
        else:
            changes.append(RuleSetChange(where, f"{prefix}{key}", _shown(was), _shown(now)))
    return changes


def _summary(doc: dict) -> str:
    """A rule or caveat in one line: its ladder or its condition and grade, without the texts."""
    shown = {k: v for k, v in doc.items() if k not in ("id", "message", "source", "next_step")}
    return _shown(shown)


def _shown(value, unit: str = "") -> str:
    if value is None or value == _NONE:
        return _NONE
    if isinstance(value, str):
        return value
    text = json.dumps(value, ensure_ascii=False, separators=(", ", ": "))
    return f"{text} {unit}" if unit and isinstance(value, (int, float, list)) else text


def _rule_levels(graded: GradedBatch) -> pd.DataFrame:
    """Each sample's final level per rule id (a rule is one slot per class; the sample's class wins)."""
    final = graded.outcome.final
    columns = {}
    for j, slot in enumerate(graded.outcome.slots):
        column = final[:, j]
        columns[slot.rule.id] = np.maximum(columns[slot.rule.id], column) if slot.rule.id in columns else column
    return pd.DataFrame(columns, index=graded.measured.index)


def _label(level, grades: tuple) -> str:
    if pd.isna(level) or level == _ABSENT:
        return "absent"
    if level == NOT_EVALUATED:
        return "not evaluated"
    return "quiet" if level == 0 else grades[int(level)]


def _changes(before: pd.Series, after: pd.Series, old_grades: tuple, new_grades: tuple) -> tuple:
    changes = []
    for rule in dict.fromkeys([*before.index, *after.index]):
        was = _label(before.get(rule, _ABSENT), old_grades)
        now = _label(after.get(rule, _ABSENT), new_grades)
        if was != now:
            changes.append(RuleChange(rule, was, now))
    return tuple(changes)


def same_name_differs(old: RuleSet, new: RuleSet) -> str | None:
    """Two rule sets with one id and version but different content: results would name them alike."""
    if (old.id, str(old.version)) != (new.id, str(new.version)) or old.sha256 == new.sha256:
        return None
    return (f"warning W013: both rule sets are '{old.id}' version {old.version}, but their content differs "
            f"(sha256 {old.sha256[:12]} vs {new.sha256[:12]}); results record the id and version, so raise the "
            f"new one's `version` before grading with it")


def comparison_lines(comparison: Comparison, old_name: str, new_name: str) -> list[str]:
    """The report: the counts, the from-to table, then each sample that moved and the rules behind it."""
    c = comparison
    lines = [f"old: {old_name} (rule set {c.old.id} version {c.old.version}, sha256 {c.old.sha256[:12]})",
             f"new: {new_name} (rule set {c.new.id} version {c.new.version}, sha256 {c.new.sha256[:12]})",
             f"{c.graded} sample(s) graded under both ({c.rejected} row(s) rejected); "
             f"{c.moved} moved to another grade", ""]
    used = [g for g in c.grades if any(g in pair for pair, n in c.table.items() if n)]
    width = max(len(_CORNER), *(len(g) for g in used))
    lines.append(f"{_CORNER:<{width}}  " + "  ".join(f"{g:>8}" for g in used))
    for row in used:
        cells = [c.table.get((row, col), 0) for col in used]
        lines.append(f"{row:<{width}}  " + "  ".join(f"{n or '.':>8}" for n in cells))
    if c.moves:
        lines += ["", "moved:"]
        for move in c.moves:
            why = "; ".join(f"{ch.rule} {ch.before} -> {ch.after}" for ch in move.changes) or "no rule changed"
            lines.append(f"  {move.sample_id} ({move.class_name}): {move.before} -> {move.after}: {why}")
    lines += ["", f"rule-set changes: {len(c.changes)} (limits in the engine's units: water ppm, FTIR abs/cm)"
                  if c.changes else "rule-set changes: none (the two rule sets grade alike)"]
    lines += [f"  {ch.where}: {ch.what}: {ch.before} -> {ch.after}" for ch in c.changes]
    return lines
