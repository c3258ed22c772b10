"""Graded samples as records: the grade, every reason that fired, caveats, what was not evaluated.

A reason is a small record (rule, measure, value, test, limit, grade, source, ...);
sentences are rendered from it later. One builder makes every record, both for the
Python API and for the bulk JSON Lines writer, so the two cannot drift apart.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from sumpwise.version import engine_name
from sumpwise.evaluation.evaluator import NOT_EVALUATED, Outcome
from sumpwise.vocabulary.measures import measure_needs
from sumpwise.ruleset.model import LadderRule, NextStep, RuleSet, leaves

UNRATED = "unrated"


@dataclass(frozen=True)
class Clause:
    """One leaf test of a condition rule and whether it held for this sample."""

    test: str
    limit: object
    held: bool
    value: object = None
    measure: str | None = None
    field: str | None = None

    def to_record(self) -> dict:
        record = {"measure": self.measure} if self.measure else {"field": self.field}
        record.update(value=self.value, test=self.test, limit=self.limit, held=self.held)
        return record


@dataclass(frozen=True)
class Reason:
    """Why a rule fired for a sample; `capped_from` is set when a caveat lowered its grade."""

    rule: str
    grade: str
    level: int
    message: str
    source: str
    measure: str | None = None
    value: object = None
    unit: str | None = None
    test: str | None = None
    limit: object = None
    capped_from: str | None = None
    capped_by: str | None = None
    clauses: tuple = ()
    next_step: NextStep | None = None  # the rule's own `next_step`, named by the rule id

    def to_record(self) -> dict:
        record: dict = {"rule": self.rule}
        if self.measure is not None:
            record.update(measure=self.measure, value=self.value)
            if self.unit:
                record["unit"] = self.unit
            record.update(test=self.test, limit=self.limit)
        record["grade"] = self.grade
        if self.capped_from is not None:
            record.update(capped_from=self.capped_from, capped_by=self.capped_by)
        record.update(message=self.message, source=self.source)
        if self.clauses:
            record["clauses"] = [c.to_record() for c in self.clauses]
        if self.next_step is not None:
            record["next_step"] = next_step_record(self.next_step)
        return record


@dataclass(frozen=True)
class CaveatNote:
    """A caveat raised on a sample. `unless_missing` names what its cap's `unless` lacked
    when the cap held only because that exception could not be checked."""

    caveat: str
    message: str
    source: str = ""
    unless_missing: tuple = ()
    next_step: NextStep | None = None  # the caveat's own `next_step`, named by the caveat id

    def to_record(self) -> dict:
        record = {"caveat": self.caveat, "message": self.message}
        if self.source:
            record["source"] = self.source
        if self.unless_missing:
            record["unless_missing"] = list(self.unless_missing)
        if self.next_step is not None:
            record["next_step"] = next_step_record(self.next_step)
        return record


def next_step_record(step: NextStep) -> dict:
    """A next step in a record: the task and, when the rule set gives one, the days to do it in."""
    record: dict = {"task": step.task}
    if step.within_days is not None:
        record["within_days"] = step.within_days
    return record


def next_step_from_record(record: dict | None) -> NextStep | None:
    """A record's next step back as the rule set's NextStep (for records read from a ledger)."""
    return None if not record else NextStep(record["task"], record.get("within_days"))


@dataclass(frozen=True)
class NotEvaluated:
    rule: str
    missing: tuple

    def to_record(self) -> dict:
        return {"rule": self.rule, "missing": list(self.missing)}


@dataclass(frozen=True)
class SampleResult:
    """Everything the rule-language draft says a graded sample records."""

    sample_id: str
    unit_id: str | None
    class_name: str | None
    lubricant: str | None
    sampled_on: str | None
    grade: str
    level: int | None
    reasons: tuple
    caveats: tuple
    not_evaluated: tuple
    notice: str
    ruleset_id: str
    ruleset_version: object
    ruleset_sha256: str
    engine: str
    row: int | None = None
    unrated_because: str | None = None
    values: tuple = ()  # (name, value) of the lab values the sample came with, in canonical units
    method: str | None = None
    spectrum: str | None = None  # the used-oil spectrum its FTIR measures were read from
    reference_spectrum: str | None = None  # the new-oil spectrum subtracted from it

    def to_record(self) -> dict:
        """The JSON Lines record; key names are the contract, key order is fixed."""
        record = {"sample_id": self.sample_id, "unit_id": self.unit_id, "class": self.class_name,
                  "lubricant": self.lubricant, "sampled_on": self.sampled_on,
                  "values": dict(self.values), "method": self.method,
                  "spectrum": self.spectrum, "reference_spectrum": self.reference_spectrum,
                  "grade": self.grade, "level": self.level,
                  "reasons": [r.to_record() for r in self.reasons],
                  "caveats": [c.to_record() for c in self.caveats],
                  "not_evaluated": [n.to_record() for n in self.not_evaluated]}
        if self.unrated_because is not None:
            record["unrated_because"] = self.unrated_because
        record.update(notice=self.notice,
                      ruleset={"id": self.ruleset_id, "version": self.ruleset_version, "sha256": self.ruleset_sha256},
                      engine=self.engine)
        return record


def _limit_value(limit):
    return [limit[0], limit[1]] if isinstance(limit, tuple) else limit


def rule_inputs(rule) -> list[str]:
    """Columns a rule reads, for saying what a not-evaluated rule lacked."""
    if isinstance(rule, LadderRule):
        return list(dict.fromkeys(measure_needs(rule.measure)))
    return condition_inputs(rule.when)


def condition_inputs(condition) -> list[str]:
    """Columns a condition reads, in the order its tests are written."""
    names: list[str] = []
    for leaf in leaves(condition):
        names.extend([leaf.field] if leaf.kind == "field" else measure_needs(leaf.measure))
    return list(dict.fromkeys(names))


@dataclass(frozen=True)
class GradedBatch:
    """A graded batch: the outcome arrays plus what is needed to read records from them."""

    ruleset: RuleSet
    measured: pd.DataFrame = field(repr=False)
    outcome: Outcome = field(repr=False)
    rejects: tuple = ()
    rows_read: int = 0
    source: str = ""
    value_columns: tuple = ()  # input measures the samples file carried, recorded with each result
    engine_caveats: tuple = ()  # caveats the engine raises itself; their outcome columns follow the rule set's
    forecasts: tuple = ()  # derive.forecast.Forecast: when each unit's current charge reaches a rule's next limit

    def __len__(self) -> int:
        return len(self.measured)

    def grades(self) -> list[str]:
        """The grade of each row, in order (unrated included)."""
        names = np.array(list(self.ruleset.grades) + [UNRATED], dtype=object)
        return list(names[self.outcome.level])

    def counts(self) -> dict:
        """Rows read, graded, unrated and rejected: graded + unrated + rejected == read."""
        unrated = int((self.outcome.level < 0).sum())
        rejected = len({r.row for r in self.rejects})
        return {"read": self.rows_read, "graded": len(self) - unrated, "unrated": unrated, "rejected": rejected}

    def result(self, i: int) -> SampleResult:
        """The record of the i-th accepted row."""
        return build_result(self, i, _RealValues(self.measured))

    def results(self):
        for i in range(len(self)):
            yield self.result(i)

    def find(self, sample_id: str) -> SampleResult | None:
        hits = np.flatnonzero(self.measured["sample_id"].to_numpy(dtype=object) == sample_id)
        return self.result(int(hits[0])) if len(hits) else None


class _RealValues:
    """Values of a row as Python scalars (None for missing)."""

    def __init__(self, measured: pd.DataFrame):
        self.measured = measured

    def number(self, name: str, i: int):
        if name not in self.measured.columns:
            return None
        value = self.measured[name].iat[i]
        return None if pd.isna(value) else float(value)

    def text(self, name: str, i: int):
        if name not in self.measured.columns:
            return None
        value = self.measured[name].iat[i]
        return None if value is None or (isinstance(value, float) and np.isnan(value)) else str(value)


def _is_missing(measured: pd.DataFrame, name: str, i: int) -> bool:
    if name not in measured.columns:
        return True
    value = measured[name].iat[i]
    return value is None or (isinstance(value, float) and np.isnan(value))


def gap_at(batch: GradedBatch, i: int, j: int) -> NotEvaluated:
    """What rule slot j lacked for row i (it was not evaluated)."""
    rule = batch.outcome.slots[j].rule
    missing = [name for name in rule_inputs(rule) if _is_missing(batch.measured, name, i)]
    return NotEvaluated(rule.id, tuple(missing or [getattr(rule, "measure", rule.id)]))


def reason_at(batch: GradedBatch, i: int, j: int, values) -> Reason:
    """Why rule slot j fired for row i (its final level is above 0)."""
    rs, out, measured = batch.ruleset, batch.outcome, batch.measured
    grades = rs.grades
    rule = out.slots[j].rule
    final, raw = int(out.final[i, j]), int(out.raw[i, j])
    capped_from = grades[raw] if raw != final else None
    capped_by = _capped_by(rs, out, i, rule, final) if capped_from else None
    if isinstance(rule, LadderRule):
        limit = dict(rule.steps)[raw]
        return Reason(rule.id, grades[final], final, rule.message, rule.source, measure=rule.measure,
                      value=values.number(rule.measure, i), unit=rs.unit_of(rule.measure) or None,
                      test=rule.test, limit=_limit_value(limit), capped_from=capped_from, capped_by=capped_by,
                      next_step=rule.next_step)
    rows, found = out.leaves[j]
    at = int(np.searchsorted(rows, i))
    clauses = []
    for leaf, (truth, known) in zip(leaves(rule.when), found):
        held = bool(truth[at])
        if leaf.kind == "field":
            value = values.text(leaf.field, i) if known[at] else None
            clauses.append(Clause(leaf.test, list(leaf.values) if leaf.test == "in" else leaf.values[0],
                                  held, value, field=leaf.field))
        elif leaf.kind == "missing":
            value = values.number(leaf.measure, i) if not _is_missing(measured, leaf.measure, i) else None
            clauses.append(Clause("missing", leaf.missing, held, value, measure=leaf.measure))
        else:
            value = values.number(leaf.measure, i) if known[at] else None
            clauses.append(Clause(leaf.test, _limit_value(leaf.limit), held, value, measure=leaf.measure))
    return Reason(rule.id, grades[final], final, rule.message, rule.source,
                  capped_from=capped_from, capped_by=capped_by, clauses=tuple(clauses), next_step=rule.next_step)


def caveat_at(batch: GradedBatch, i: int, k: int, values) -> CaveatNote:
    """Caveat k as noted on row i (it fired there)."""
    rs = batch.ruleset
    if k < len(rs.caveats):
        caveat = rs.caveats[k]
        lacking = ()
        if batch.outcome.unchecked[i, k]:
            needs = condition_inputs(caveat.cap.unless)
            lacking = tuple(name for name in needs if _is_missing(batch.measured, name, i)) or tuple(needs)
        return CaveatNote(caveat.id, caveat.message, caveat.source, lacking, caveat.next_step)
    caveat = batch.engine_caveats[k - len(rs.caveats)]
    return CaveatNote(caveat.id, values.text(caveat.message_column, i), caveat.source)


def build_result(batch: GradedBatch, i: int, values) -> SampleResult:
    """One sample's record; `values` supplies per-row values (real ones, or template slots)."""
    rs, out, measured = batch.ruleset, batch.outcome, batch.measured
    grades = rs.grades
    reasons, not_evaluated = [], []
    for j in range(len(out.slots)):
        final = int(out.final[i, j])
        if final == NOT_EVALUATED:
            not_evaluated.append(gap_at(batch, i, j))
        elif final > 0:
            reasons.append(reason_at(batch, i, j, values))
    order = sorted(range(len(reasons)), key=lambda k: -reasons[k].level)
    reasons = [reasons[k] for k in order]
    caveats = [caveat_at(batch, i, k, values) for k in range(out.caveats.shape[1]) if out.caveats[i, k]]

    level = int(out.level[i])
    class_name = values.text("class", i)
    unrated_because = None
    if level < 0:
        unrated_because = _unrated_because(batch, i, class_name, not_evaluated)
    return SampleResult(
        sample_id=values.text("sample_id", i), unit_id=values.text("unit_id", i), class_name=class_name,
        lubricant=values.text("lubricant", i), sampled_on=values.text("sampled_on", i),
        grade=grades[level] if level >= 0 else UNRATED, level=level if level >= 0 else None,
        reasons=tuple(reasons), caveats=tuple(caveats), not_evaluated=tuple(not_evaluated), notice=rs.notice,
        ruleset_id=rs.id, ruleset_version=rs.version, ruleset_sha256=rs.sha256, engine=engine_name(),
        row=int(measured.index[i]) if measured.index.dtype.kind in "iu" else None,
        unrated_because=unrated_because,
        values=tuple((name, values.number(name, i)) for name in batch.value_columns),
        method=values.text("method", i), spectrum=values.text("spectrum", i),
        reference_spectrum=values.text("reference_spectrum", i))


def _capped_by(rs: RuleSet, out: Outcome, i: int, rule, final: int) -> str | None:
    """The caveat whose cap set this rule's grade (the first, where two caps agree)."""
    for k, caveat in enumerate(rs.caveats):
        cap = caveat.cap
        if cap is not None and out.capping[i, k] and cap.level == final and rule.reads & cap.measures:
            return caveat.id
    return None


def _unrated_because(batch: GradedBatch, i: int, class_name, not_evaluated: list) -> str:
    rs = batch.ruleset
    if not batch.outcome.known_class[i]:
        if _is_missing(batch.measured, "class", i):
            return "the sample has no class, so no rules apply to it"
        return (f"the rule set '{rs.id}' has no class '{batch.measured['class'].iat[i]}'; "
                f"it knows: {', '.join(rs.classes) or 'none'}")
    if not not_evaluated:
        return "the class has no rules"
    lacking = sorted({m for n in not_evaluated for m in n.missing})
    return (f"none of the {len(not_evaluated)} rules of this class could be evaluated; "
            f"values missing: {', '.join(lacking)}")


def record_shape_groups(batch: GradedBatch, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray, list]:
    """Group rows whose records have the same shape (same reasons, caveats, gaps, class).

    Returns (representative row per group, group index per row, signature bytes per group).
    Writers build one template per group instead of one record per row.
    """
    out, measured = batch.outcome, batch.measured
    parts = [out.final[rows], out.raw[rows], out.caveats[rows].astype(np.int8), out.capping[rows].astype(np.int8)]
    classes = pd.factorize(measured["class"].to_numpy(dtype=object), use_na_sentinel=True)[0]
    parts.append(classes[rows].astype(np.int32).view(np.int8).reshape(len(rows), 4))
    leaf_columns = []
    for j, (member_rows, found) in sorted(out.leaves.items()):
        at = np.searchsorted(member_rows, rows)
        if len(member_rows):
            inside = (at < len(member_rows)) & (member_rows[np.minimum(at, len(member_rows) - 1)] == rows)
        else:
            inside = np.zeros(len(rows), dtype=bool)
        for truth, known in found:
            code = np.zeros(len(rows), dtype=np.int8)
            code[inside] = truth[at[inside]].astype(np.int8) + 2 * known[at[inside]].astype(np.int8)
            leaf_columns.append(code)
    gap_names = sorted({name for slot in out.slots for name in rule_inputs(slot.rule) + sorted(slot.rule.reads)})
    for name in gap_names:
        if name not in measured.columns:
            continue
        leaf_columns.append(measured[name].isna().to_numpy()[rows].astype(np.int8))
    if leaf_columns:
        parts.append(np.stack(leaf_columns, axis=1))
    matrix = np.ascontiguousarray(np.concatenate(parts, axis=1).astype(np.int8))
    keys = matrix.view(np.dtype((np.void, matrix.shape[1]))).ravel()
    unique, first, inverse = np.unique(keys, return_index=True, return_inverse=True)
    return rows[first], inverse.ravel(), [bytes(u) for u in unique]
