"""A graded sample's facts, apart from its texts: what a ledger stores and what replay compares.

A result's facts are its grade and level, each reason's rule, measure or clauses, value,
test, limit, grade and caps, the caveats raised (with what an unchecked `unless` lacked),
what was not evaluated and why. Messages, sources and the notice are not facts: they live
once in the fingerprinted rule set and are put back by `result_from_facts`.

Facts come in two parts. The *shape* is everything two samples can share (which rules
fired at which grade, which caveats, which gaps), as compact JSON in which each per-sample
value is a numbered slot, `{"$": k}`; a batch of a million samples has a few hundred
shapes. The *values* are a JSON array holding, in slot order, the values the shape leaves
open (a reason's measured value, a clause's value, an engine caveat's message). Sample
identity and input values are not part of either: the ledger keeps them with the sample.

`batch_facts` finds the distinct shapes of a graded batch from its outcome arrays, builds
each shape once, and fills the values column by column; `result_facts` does the same for
one SampleResult (a stored record being migrated, or a test's oracle); both give the same
text for the same result. The values array ends with the record's own values (its input
measures with their conventions), in the order of names the caller keeps once a batch; a
value the sample's stored inputs hold exactly is left out and read back from them.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from itertools import repeat
from json.encoder import encode_basestring

import numpy as np
import pandas as pd

from sumpwise.derive.row_measures import LUBRICANT_CAVEATS
from sumpwise.derive.trends import TREND_CAVEATS
from sumpwise.evaluation.evaluator import BOUND_CAVEATS, COVERAGE_CAVEATS
from sumpwise.intake.censored import WRITTEN_SUFFIX
from sumpwise.intake.sample_spectra import SPECTRUM_CAVEATS
from sumpwise.results.records import (CaveatNote, Clause, GradedBatch, NotEvaluated, RateInterval, Reason, SampleResult,
                                      build_result, condition_inputs, rule_inputs, undecided_from_record)
from sumpwise.ruleset.model import RuleSet

# Every caveat the engine raises itself, in the order a graded batch's caveat columns hold them.
ENGINE_CAVEAT_ORDER = TREND_CAVEATS + SPECTRUM_CAVEATS + LUBRICANT_CAVEATS + COVERAGE_CAVEATS + BOUND_CAVEATS
ENGINE_CAVEATS = {c.id: c for c in ENGINE_CAVEAT_ORDER}
SLOT = "$"  # the key of a per-sample value's place in a shape


@dataclass(frozen=True)
class BatchFacts:
    """The facts of every row of a graded batch: its shape (an index into `shapes`) and values."""

    shapes: tuple  # distinct shape texts
    shape_of: np.ndarray  # int, per row
    values: np.ndarray  # object (str), per row: a JSON array
    grades: np.ndarray  # object (str), per row
    levels: np.ndarray  # int, per row; -1 for unrated


class _Slot:
    """A per-sample value's place: `kind` says how to spell it, `name` which column it reads."""

    def __init__(self, kind: str, name: str):
        self.kind, self.name = kind, name


class _Slots:
    """Stands in for a row's values while build_result makes a shape's template."""

    def number(self, name: str, i: int) -> _Slot:
        return _Slot("number", name)

    def text(self, name: str, i: int) -> _Slot:
        return _Slot("text", name)

    def flag(self, name: str, i: int) -> _Slot:
        return _Slot("flag", name)

    def row(self, i: int) -> _Slot:  # not a fact: the ledger keeps no row of a graded sample
        return _Slot("row", "row")


class _Value:
    """A real per-sample value, marked so it lands in the values array, not in the shape."""

    def __init__(self, value):
        self.value = value


def _shape(result: SampleResult, value) -> dict:
    """A result's facts without its texts; `value` wraps each per-sample value."""
    reasons = []
    for r in result.reasons:
        reason: dict = {"rule": r.rule, "grade": r.grade}
        if r.measure is not None:
            reason.update(measure=r.measure, value=value(r.value), unit=r.unit, test=r.test, limit=r.limit)
        if r.capped_from is not None:
            reason.update(capped_from=r.capped_from, capped_by=r.capped_by)
        if r.clauses:
            reason["clauses"] = [{"measure": c.measure, "field": c.field, "value": value(c.value), "test": c.test,
                                  "limit": c.limit, "held": c.held} for c in r.clauses]
        reasons.append(reason)
    caveats = []
    for c in result.caveats:
        caveat: dict = {"caveat": c.caveat}
        if c.caveat in ENGINE_CAVEATS:
            caveat["message"] = value(c.message)
        if c.unless_missing:
            caveat["unless_missing"] = list(c.unless_missing)
        caveats.append(caveat)
    def reading(shown):  # a censored reading's text, or each number of a rate's interval
        if not isinstance(shown, RateInterval):
            return value(shown)
        return {key: [value(v) for v in item] if isinstance(item, list) else value(item)
                for key, item in shown.to_record().items()}

    shape = {"grade": result.grade, "level": result.level, "reasons": reasons, "caveats": caveats,
             "not_evaluated": [[n.rule, list(n.missing)] + ([[[name, reading(shown)] for name, shown in n.undecided]]
                                                            if n.undecided else [])
                               for n in result.not_evaluated]}
    if result.unrated_because is not None:
        shape["unrated_because"] = result.unrated_because
    return shape


def _as_placed(item):
    """In a template, a value the row supplies is a slot; any other (None: not known) is a constant."""
    return item if isinstance(item, _Slot) else _Value(item)


def _dump(shape: dict) -> tuple[str, list]:
    """The shape's text, and the per-sample values (or slots) in the order of their places."""
    placed: list = []

    def place(item):
        placed.append(item)
        return {SLOT: len(placed) - 1}

    text = json.dumps(shape, ensure_ascii=False, separators=(",", ":"), allow_nan=False, default=place)
    return text, placed


def values_text(values: list) -> str:
    return json.dumps(values, ensure_ascii=False, separators=(",", ":"), allow_nan=False)


def record_names(batch: GradedBatch, from_content=()) -> dict:
    """The names a batch's records carry beyond the shape: kept once a batch by the ledger.

    `from_content` names the record values the ledger reads back from the sample's stored
    input values instead of storing them again (see same_as_stored): each value once."""
    names = {"values": list(batch.value_columns), "derived": list(batch.derived_columns), "oil_changed": True}
    if from_content:
        names["from_content"] = [name for name in batch.value_columns if name in from_content]
    return names


def _tail_values(names: dict) -> list[str]:
    """The record values a values array holds: those not read back from the sample's stored values."""
    in_content = set(names.get("from_content", ()))
    return [name for name in names.get("values", ()) if name not in in_content]


def same_as_stored(batch: GradedBatch, frame: pd.DataFrame, name: str) -> np.ndarray:
    """Each row's record value of `name` is exactly the number the sample's stored input values
    hold (frame: the samples as the ledger stores them, row for row with the batch): no censored
    spelling, no -0.0 (a record says 0.0), not a value derived from a spectrum. Where every row
    holds, the ledger need not store the value twice; replay checks it holds again."""
    n = len(batch)
    numbers = batch.columns.number(name)
    numbers = np.full(n, np.nan) if numbers is None else numbers
    if name in frame.columns:
        column = frame[name]
        if column.dtype.kind not in "fiu" and pd.api.types.infer_dtype(column, skipna=True) not in (
                "floating", "integer", "mixed-integer-float", "empty"):
            return np.zeros(n, dtype=bool)  # text or flags: stored as such, not as the record's number
        stored = pd.to_numeric(column, errors="coerce").to_numpy(dtype=float, na_value=np.nan)
    else:
        stored = np.full(n, np.nan)
    finite = np.isfinite(stored)
    same = np.where(finite, stored == numbers, ~np.isfinite(numbers))  # missing and infinite: null in both
    same &= ~(finite & (stored == 0) & np.signbit(stored))
    written = batch.columns.written(name)
    if written is not None:
        same &= pd.isna(written)
    return same


def _tail(names: dict, values: dict, derived: dict, oil_changed: bool) -> list:
    tail = [_plain(values.get(name)) for name in _tail_values(names)]
    tail += [_plain(derived.get(name)) for name in names.get("derived", ())]
    return tail + ([bool(oil_changed)] if names.get("oil_changed") else [])


def result_facts(result: SampleResult, names: dict) -> tuple[str, str]:
    """(shape text, values text) of one result: the per-result counterpart of batch_facts."""
    text, placed = _dump(_shape(result, _Value))
    return text, values_text([_plain(item.value) for item in placed]
                             + _tail(names, dict(result.values), dict(result.derived), result.oil_changed))


def _plain(value):
    if isinstance(value, float) and not np.isfinite(value):
        return None
    return value


def _shape_groups(batch: GradedBatch) -> tuple[np.ndarray, np.ndarray]:
    """(representative row of each distinct shape, shape group of each row), from the outcome arrays.

    Rows fall in one group when everything their shape says is the same: each rule's raw and
    final level, caveats and caps, each condition leaf's truth, which inputs are missing or
    censored (for gaps and unchecked exceptions) and the class (the unrated sentence names it).
    """
    out, measured = batch.outcome, batch.measured
    n = len(measured)
    parts = [out.final, out.raw, out.caveats.astype(np.int8), out.capping.astype(np.int8),
             out.unchecked.astype(np.int8), out.known_class.astype(np.int8).reshape(n, 1)]
    classes = pd.factorize(measured["class"].to_numpy(dtype=object), use_na_sentinel=True)[0]
    parts.append(classes.astype(np.int32).view(np.int8).reshape(n, 4))
    for j, (members, found) in sorted(out.leaves.items()):
        for truth, known in found:
            code = np.zeros(n, dtype=np.int8)
            code[members] = truth.astype(np.int8) + 2 * known.astype(np.int8)
            parts.append(code.reshape(n, 1))
    names = {name for slot in out.slots for name in rule_inputs(slot.rule)}
    names |= {name for caveat in batch.ruleset.caveats if caveat.cap is not None and caveat.cap.unless is not None
              for name in condition_inputs(caveat.cap.unless)}
    for name in sorted(names):
        if name in measured.columns:
            parts.append(measured[name].isna().to_numpy().astype(np.int8).reshape(n, 1))
    # A censored reading (undecided) and a missing one both leave the number empty; what the
    # lab wrote tells them apart. Last, so a batch's shapes keep their order otherwise.
    for name in sorted(names):
        if name + WRITTEN_SUFFIX in measured.columns:
            parts.append(measured[name + WRITTEN_SUFFIX].notna().to_numpy().astype(np.int8).reshape(n, 1))
    return distinct_rows(np.concatenate(parts, axis=1).astype(np.int8))


def distinct_rows(matrix: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(first row of each distinct row of an int8 matrix, group of each row): what np.unique of
    the rows' bytes gives (its order of groups is the order of a batch's shapes, and of the
    JSON Lines writer's pieces), in half its time.

    A row's cells are the digits of a mixed-radix key (factorized again whenever the next
    digit would overflow an int64) and the keys are hashed; only the distinct rows are sorted.
    """
    key, size = np.zeros(len(matrix), dtype=np.int64), 1
    for column in np.ascontiguousarray(matrix.T):  # a column's cells side by side
        cells = column.astype(np.int64)
        low = cells.min()
        span = int(cells.max() - low) + 1
        if size * span >= 2 ** 62:
            key, distinct = pd.factorize(key)
            size = len(distinct)
        key, size = key * span + (cells - low), size * span
    codes = pd.factorize(key)[0]  # numbered in order of first appearance
    seen = np.maximum.accumulate(codes)
    first = np.flatnonzero(np.r_[True, seen[1:] > seen[:-1]])  # where each code first appears
    rows = np.ascontiguousarray(matrix[first])
    rank = np.argsort(rows.view(np.dtype((np.void, rows.shape[1]))).ravel(), kind="stable")
    group = np.empty(len(rank), dtype=np.intp)
    group[rank] = np.arange(len(rank))
    return first[rank], group[codes]


def _number_literals(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(codes, texts): each row's JSON literal is texts[code]; each distinct value is spelled once.
    Factorized by bit pattern, so -0.0 keeps its own spelling; missing and infinite are null."""
    codes, uniques = pd.factorize(np.ascontiguousarray(values, dtype=float).view(np.int64))
    uniques = uniques.view(float)
    texts = np.array(list(map(repr, uniques.tolist())), dtype=object)
    texts[~np.isfinite(uniques)] = "null"
    return codes, texts


def _flag_literals(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """true where the column holds 1 (as RowValues.flag reads it), false elsewhere."""
    return (values == 1.0).astype(np.intp), np.array(["false", "true"], dtype=object)


def _text_literals(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """As _number_literals; encode_basestring is what json.dumps does to a str without ensure_ascii."""
    codes, uniques = pd.factorize(values, use_na_sentinel=True)
    return codes, np.array(list(map(encode_basestring, map(str, uniques.tolist()))) + ["null"], dtype=object)


def _reading_literals(values: np.ndarray, written: np.ndarray | None) -> tuple[np.ndarray, np.ndarray]:
    """A number column's literals, a censored reading spelled as the lab wrote it (`<50`)."""
    codes, texts = _number_literals(values)
    if written is not None:
        here = pd.notna(written)
        shown, more = _text_literals(written[here])
        codes[here] = len(texts) + shown
        texts = np.concatenate([texts, more])
    return codes, texts


def batch_facts(batch: GradedBatch, names: dict | None = None) -> BatchFacts:
    """Every row's shape and values, one template a shape, values spelled a column at a time.

    Each column is spelled once for the whole batch, not once a shape. A row's values text is
    its head ("[", then the literals its shape places, each followed by a comma when the
    record's values follow) and its tail (the record's values, which every row has, each
    with its comma before it but the first), put together in one join a row. The values
    array ends with the record's own values, derived values and oil-changed flag, of `names`
    (default: record_names(batch); replay passes what a stored batch recorded).
    """
    n = len(batch)
    names = record_names(batch) if names is None else names
    tail = [_Slot("number", name) for name in _tail_values(names) + list(names.get("derived", ()))]
    tail += [_Slot("flag", "oil_changed")] if names.get("oil_changed") else []
    first, group = _shape_groups(batch) if n else (np.zeros(0, dtype=np.intp), np.zeros(0, dtype=np.intp))
    spelled: dict = {}  # (kind, name) -> (codes, texts): a column's literal in row i is texts[codes[i]]
    led: dict = {}  # (kind, name, lead) -> texts, each with `lead` before it

    def literals(slot: _Slot, rows: slice | np.ndarray, lead: str = "") -> list:
        """The JSON literals of a column in `rows`, each with `lead` before it."""
        key = slot.kind, slot.name
        if key not in spelled:
            present = slot.name in batch.measured.columns
            if slot.kind == "text":
                spelled[key] = _text_literals(batch.measured[slot.name].to_numpy(dtype=object) if present
                                              else np.full(n, None, dtype=object))
            else:
                numbers = batch.columns.number(slot.name) if present else np.full(n, np.nan)
                spelled[key] = (_flag_literals(numbers) if slot.kind == "flag"
                                else _reading_literals(numbers, batch.columns.written(slot.name)))
        codes, spelling = spelled[key]
        if lead and key + (lead,) not in led:
            led[key + (lead,)] = lead + spelling
        return (led[key + (lead,)] if lead else spelling)[codes[rows]].tolist()

    texts: dict = {}
    shape_index = np.empty(len(first), dtype=np.int64)
    heads = np.full(n, "[", dtype=object)
    order = np.argsort(group, kind="stable")
    bounds = np.searchsorted(group[order], np.arange(len(first) + 1))
    for g, rep in enumerate(first.tolist()):
        text, placed = _dump(_shape(build_result(batch, rep, _Slots()), _as_placed))
        shape_index[g] = texts.setdefault(text, len(texts))
        if placed:
            rows = order[bounds[g]:bounds[g + 1]]
            pieces = [repeat("[", len(rows))]
            for k, s in enumerate(placed):
                lead = "," if k else ""
                pieces.append(repeat(lead + values_text([_plain(s.value)])[1:-1], len(rows)) if isinstance(s, _Value)
                              else literals(s, rows, lead))
            heads[rows] = _joined(pieces + ([repeat(",", len(rows))] if tail else []), len(rows))
    pieces = [heads.tolist()] + [literals(s, slice(None), "," if k else "") for k, s in enumerate(tail)]
    values = _joined(pieces + [repeat("]", n)], n)
    levels = batch.outcome.level.astype(np.int64)
    names = np.array(list(batch.ruleset.grades) + ["unrated"], dtype=object)
    return BatchFacts(tuple(texts), shape_index[group] if n else np.zeros(0, dtype=np.int64), values,
                      names[levels], levels)


def _joined(pieces: list, n: int) -> np.ndarray:
    """Row i's text: the i-th items of the pieces (lists, or a repeat of one text) joined, in
    one C-level pass over the rows (zip, map, str.join), no Python code a row."""
    return np.fromiter(map("".join, zip(*pieces)), dtype=object, count=n)


def _filled(item, values: list):
    if isinstance(item, dict) and set(item) == {SLOT}:
        return values[item[SLOT]]
    if isinstance(item, dict):  # a rate's interval: each number its slot
        return {key: [_filled(v, values) for v in part] if isinstance(part, list) else _filled(part, values)
                for key, part in item.items()}
    return item


def result_from_facts(shape: dict, values: list, sample: dict, ruleset: RuleSet, engine: str,
                      names: dict, source: str | None = None, method: str | None = None) -> SampleResult:
    """A stored result with its wording put back from the rule set it was graded with.

    `shape` is a parsed shape, `values` its parsed values array (ending with what `names`
    lists, see record_names), `sample` the sample's stored input fields (name -> value),
    `source` the file its batch was read from, `method` the FTIR method the engine read the
    sample in (stored beside it; else the sample's own). What the facts do not hold, the result says so:
    its row is None (a ledger keeps no row of a graded sample) and its forecasts None (none
    are stored; `report --db` re-grades a unit's samples for them).
    """
    kept, derived_names = _tail_values(names), list(names.get("derived", ()))
    oil_changed = bool(values[-1]) if names.get("oil_changed") else False
    end = len(values) - (1 if names.get("oil_changed") else 0)
    start = end - len(kept) - len(derived_names)
    tail = dict(zip(kept, values[start:start + len(kept)]))
    recorded = tuple((name, tail[name] if name in tail else sample.get(name)) for name in names.get("values", ()))
    derived = tuple((name, _number(value)) for name, value in zip(derived_names, values[start + len(kept):end]))
    class_name = sample.get("class")
    rules = {rule.id: rule for rule in ruleset.rules_for(class_name)} if class_name in ruleset.classes else {}
    caveats = {caveat.id: caveat for caveat in ruleset.caveats}
    grades = ruleset.grades
    reasons = []
    for r in shape["reasons"]:
        rule = rules[r["rule"]]
        clauses = tuple(Clause(c["test"], c["limit"], c["held"], _filled(c["value"], values), measure=c["measure"],
                               field=c["field"]) for c in r.get("clauses", ()))
        reasons.append(Reason(r["rule"], r["grade"], grades.index(r["grade"]), rule.message, rule.source,
                              measure=r.get("measure"), value=_filled(r.get("value"), values), unit=r.get("unit"),
                              test=r.get("test"), limit=r.get("limit"), capped_from=r.get("capped_from"),
                              capped_by=r.get("capped_by"), clauses=clauses, next_step=rule.next_step))
    notes = []
    for c in shape["caveats"]:
        if c["caveat"] in ENGINE_CAVEATS:
            notes.append(CaveatNote(c["caveat"], _filled(c["message"], values), ENGINE_CAVEATS[c["caveat"]].source,
                                    by_engine=True))
        else:
            caveat = caveats[c["caveat"]]
            notes.append(CaveatNote(caveat.id, caveat.message, caveat.source, tuple(c.get("unless_missing", ())),
                                    caveat.next_step))
    return SampleResult(
        sample_id=sample.get("sample_id"), unit_id=_text(sample.get("unit_id")), class_name=_text(class_name),
        lubricant=_text(sample.get("lubricant")), sampled_on=_text(sample.get("sampled_on")),
        grade=shape["grade"], level=shape["level"], reasons=tuple(reasons), caveats=tuple(notes),
        not_evaluated=tuple(NotEvaluated(gap[0], tuple(gap[1]),
                                         tuple((name, undecided_from_record(_filled(shown, values)))
                                               for name, shown in gap[2])
                                         if len(gap) > 2 else ()) for gap in shape["not_evaluated"]),
        notice=ruleset.notice, ruleset_id=ruleset.id, ruleset_version=ruleset.version,
        ruleset_sha256=ruleset.sha256, engine=engine, unrated_because=shape.get("unrated_because"),
        values=tuple((name, _number(value)) for name, value in recorded),
        method=method or _text(sample.get("method")), spectrum=_text(sample.get("spectrum")),
        reference_spectrum=_text(sample.get("reference_spectrum")), oil_changed=oil_changed, derived=derived,
        comment=_text(sample.get("comment")), comment_given="comment" in sample, file=source,
        iso4406=_text(sample.get("iso4406")), forecasts=None)


def _text(value):
    return None if value is None else str(value)


def _number(value):
    """A stored number, or a censored reading's text as written."""
    return None if value is None else value if isinstance(value, str) else float(value)


def shape_rules(shape: dict) -> list[tuple[str, str]]:
    """(rule, grade) of each reason in a shape: what queries by rule fired read."""
    return [(r["rule"], r["grade"]) for r in shape["reasons"]]
