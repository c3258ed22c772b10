"""Preview a rule-set change: grade the same samples under the old and the new rule set.

The answer is what a reviewer needs before accepting a change of limits: how many
samples move between grades (a from-to table), which ones, and which rules' findings
changed for each. Grading is the usual vectorized pipeline, run twice; only the
samples that moved are read back one by one.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass

import numpy as np
import pandas as pd

from sumpwise.evaluation.evaluator import NOT_APPLICABLE, NOT_EVALUATED
from sumpwise.results.pipeline import grade_batch
from sumpwise.results.records import UNRATED, GradedBatch
from sumpwise.ruleset.model import RuleSet
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
                      tuple(sorted(rejects, key=lambda r: (r.row, r.field))))


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
    width = max([len(_CORNER)] + [len(g) for g in used])  # no grade at all when every row was rejected
    lines.append(f"{_CORNER:<{width}}  " + "  ".join(f"{g:>8}" for g in used))
    for row in used:
        cells = [c.table.get((row, col), 0) for col in used]
        lines.append(f"{row:<{width}}  " + "  ".join(f"{n or '.':>8}" for n in cells))
    if c.moves:
        lines += ["", "moved:"]
        for move in c.moves:
            why = "; ".join(f"{ch.rule} {ch.before} -> {ch.after}" for ch in move.changes) or "no rule changed"
            lines.append(f"  {move.sample_id} ({move.class_name}): {move.before} -> {move.after}: {why}")
    return lines
