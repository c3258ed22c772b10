"""Graded samples as records: the grade, every reason that fired, caveats, what was not evaluated.

A reason is a small record (rule, measure, value, test, limit, grade, source, ...);
sentences are rendered from it later. One builder makes every record, both for the
Python API and for the bulk JSON Lines writer, so the two cannot drift apart.

A record comes in two forms of one format (FORMAT): `full`, self-contained, with every
message, source and the notice; and `compact`, every fact with the texts left to the
fingerprinted rule set it names. (The ledger stores facts, not record text: ledgers of the
record before formats are migrated to facts.)

Format 3 added `origin` (the file and row a sample came from, spelt as the rejects file
spells them), `iso4406` (the cleanliness code as the lab wrote it, or null) and `forecasts`
(the engine's forecasts made from this sample: see `forecast_rows`).
A reader of records takes format 2 records too: they lack those keys.

Format 4 gives a rate left undecided by a step within its noise margin as numbers (its rate,
the interval the two readings allow, the step, the margin and the hours: RateInterval)
where format 3 gave a sentence; a censored reading stays the text the lab wrote.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property

import numpy as np
import pandas as pd

from sumpwise.version import engine_name
from sumpwise.intake.censored import WRITTEN_SUFFIX
from sumpwise.derive.trends import MARGIN_SUFFIX
from sumpwise.evaluation.evaluator import NOT_EVALUATED, Outcome
from sumpwise.vocabulary.measures import DERIVED_MEASURES, KNOWN_FIELDS, measure_needs
from sumpwise.ruleset.model import LadderRule, NextStep, RuleSet, condition_measures, leaves

UNRATED = "unrated"

FORMAT = 4  # the record's format version; it grows when a record gains or loses a key, or a value its type
FULL, COMPACT = "full", "compact"
FORMS = (FULL, COMPACT)

# Derived values every record carries, graded or not: the ones the HTML report plots.
PLOTTED_DERIVED = ("kv40_change_pct", "an_rise", "oxidation_rise")


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

    def to_record(self, form: str = FULL) -> dict:
        record: dict = {"rule": self.rule}
        if self.measure is not None:
            record.update(measure=self.measure, value=self.value)
            if self.unit:
                record["unit"] = self.unit
            record.update(test=self.test, limit=self.limit)
        record["grade"] = self.grade
        if self.capped_from is not None:
            record.update(capped_from=self.capped_from, capped_by=self.capped_by)
        if form != COMPACT:
            record.update(message=self.message, source=self.source)
        if self.clauses:
            record["clauses"] = [c.to_record() for c in self.clauses]
        if self.next_step is not None and form == FULL:  # the rule set's text: by reference in compact
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
    by_engine: bool = False  # raised by the engine itself: its message is this sample's facts, not the rule set's

    def to_record(self, form: str = FULL) -> dict:
        record = {"caveat": self.caveat}
        if form != COMPACT or self.by_engine:
            record["message"] = self.message
        if self.source and form != COMPACT:
            record["source"] = self.source
        if self.unless_missing:
            record["unless_missing"] = list(self.unless_missing)
        if self.next_step is not None and form == FULL:  # the rule set's text: by reference in compact
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
class RateInterval:
    """A rate whose step lies within its measure's noise margin (derive.trends): the rate, the
    interval of rates the two readings allow (step -/+ margin over the hours), and what that
    interval comes from. A limit inside the interval is undecided by it."""

    rate: object
    low: object
    high: object
    step: object
    margin: object
    hours: object

    def to_record(self) -> dict:
        return {"rate": self.rate, "interval": [self.low, self.high], "step": self.step, "margin": self.margin,
                "hours": self.hours}

    @classmethod
    def from_record(cls, record: dict) -> "RateInterval":
        low, high = record["interval"]
        return cls(record["rate"], low, high, record["step"], record["margin"], record["hours"])


def undecided_from_record(shown):
    """An undecided reading as a record holds it: a censored reading's text, or a rate's interval."""
    return RateInterval.from_record(shown) if isinstance(shown, dict) else shown


@dataclass(frozen=True)
class NotEvaluated:
    """A rule not evaluated: the inputs it had no number for, and the readings that did not
    decide it: a censored reading as written (`<50` against `above 20`), or a rate from a step
    within the noise margin whose interval holds the limit (a RateInterval)."""

    rule: str
    missing: tuple
    undecided: tuple = ()  # (measure, reading as written or RateInterval)

    def to_record(self, form: str = FULL) -> dict:
        record = {"rule": self.rule, "missing": list(self.missing)}
        if self.undecided:
            record["undecided"] = {name: shown.to_record() if isinstance(shown, RateInterval) else shown
                                   for name, shown in self.undecided}
        return record


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
    oil_changed: bool = False  # the sample's `oil_changed` flag as read (False when the file has none)
    derived: tuple = ()  # (name, value) of derived measures, as the engine computed and graded them
    comment: str | None = None  # the lab's free-text remark, when the samples file has a comment column
    comment_given: bool = False
    file: str | None = None  # the file the sample came from, as the rejects name it (`row` is its row there)
    iso4406: str | None = None  # the ISO 4406 cleanliness code as the lab wrote it (18/16/13)
    forecasts: tuple | None = ()  # derive.forecast.Forecast made from this sample; None: no forecasts were made

    def to_record(self, form: str = FULL) -> dict:
        """The JSON Lines record; key names are the contract, key order is fixed per form."""
        if form not in FORMS:
            raise ValueError(f"no record form {form!r}; expected one of {', '.join(FORMS)}")
        record: dict = {"format": FORMAT, "form": form, "sample_id": self.sample_id, "unit_id": self.unit_id}
        record["class"] = self.class_name
        record.update(lubricant=self.lubricant, sampled_on=self.sampled_on,
                      origin={"file": self.file, "row": self.row}, oil_changed=self.oil_changed,
                      values=dict(self.values), iso4406=self.iso4406, derived=dict(self.derived))
        record.update(method=self.method, spectrum=self.spectrum, reference_spectrum=self.reference_spectrum,
                      grade=self.grade, level=self.level,
                      reasons=[r.to_record(form) for r in self.reasons],
                      caveats=[c.to_record(form) for c in self.caveats],
                      not_evaluated=[n.to_record(form) for n in self.not_evaluated],
                      forecasts=None if self.forecasts is None else [f.to_record() for f in self.forecasts])
        if self.unrated_because is not None:
            record["unrated_because"] = self.unrated_because
        if self.comment_given:
            record["comment"] = self.comment
        if form != COMPACT:
            record["notice"] = self.notice
        record.update(ruleset={"id": self.ruleset_id, "version": self.ruleset_version, "sha256": self.ruleset_sha256},
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
    derived_columns: tuple = ()  # derived measures recorded with each result (see recorded_derived)
    forecasts_made: bool = True  # False: no forecasts were made (a file graded in several chunks); records say null
    columns: "ColumnArrays" = field(init=False, repr=False, compare=False)

    def __post_init__(self):
        object.__setattr__(self, "columns", ColumnArrays(self.measured))

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
        return build_result(self, i, RowValues(self.columns))

    def results(self):
        values = BlockValues(self.columns)
        for i in range(len(self)):
            yield build_result(self, i, values)

    @cached_property
    def forecast_rows(self) -> dict:
        """Row -> the forecasts made from that row's sample. A forecast is made from its unit's
        latest sample of the batch (Forecast.sample_id), so that record carries it; sample ids
        are unique within a batch (intake rejects a repeated one)."""
        if not self.forecasts:
            return {}
        rows = dict(zip(self.columns.text("sample_id").tolist(), range(len(self))))
        found: dict = {}
        for f in self.forecasts:
            found.setdefault(rows[f.sample_id], []).append(f)
        return {row: tuple(items) for row, items in found.items()}

    def find(self, sample_id: str) -> SampleResult | None:
        hits = np.flatnonzero(self.columns.text("sample_id") == sample_id)
        return self.result(int(hits[0])) if len(hits) else None


def recorded_derived(ruleset: RuleSet, measured: pd.DataFrame) -> tuple:
    """The derived measures a batch's records carry: those the rule set's rules and caveats read,
    and those the report plots, in vocabulary order. One list per rule set, so one record shape."""
    read = set(PLOTTED_DERIVED)
    for rule in list(ruleset.rules) + [rule for rules in ruleset.classes.values() for rule in rules]:
        read |= rule.reads
    for caveat in ruleset.caveats:
        read |= set(condition_measures(caveat.when))
        if caveat.cap is not None and caveat.cap.unless is not None:
            read |= set(condition_measures(caveat.cap.unless))
    return tuple(name for name in DERIVED_MEASURES if name in read and name in measured.columns)


class ColumnArrays:
    """Each column of a measured frame as a numpy array, converted once on first use.

    Reading records cell by cell from pandas cost about 0.3 ms a sample; every record reader
    (the per-record API and the bulk writers) takes its values from here instead.
    """

    def __init__(self, measured: pd.DataFrame):
        self.measured = measured
        self._numbers: dict = {}
        self._texts: dict = {}
        self._missing: dict = {}
        self.index = measured.index.to_numpy() if measured.index.dtype.kind in "iu" else None

    def number(self, name: str) -> np.ndarray | None:
        """float64 values, NaN where missing; None when the frame has no such column."""
        if name not in self._numbers:
            self._numbers[name] = (self.measured[name].to_numpy(dtype=float, na_value=np.nan)
                                   if name in self.measured.columns else None)
        return self._numbers[name]

    def text(self, name: str) -> np.ndarray | None:
        """str-or-None values; None when the frame has no such column."""
        if name not in self._texts:
            if name in self.measured.columns:
                values = self.measured[name].to_numpy(dtype=object).copy()
                values[self.missing(name)] = None
                self._texts[name] = values
            else:
                self._texts[name] = None
        return self._texts[name]

    def written(self, name: str) -> np.ndarray | None:
        """Censored readings of a measure as the lab wrote them (`<50`), None in other rows; None
        when the measure has no censored reading (intake.censored keeps them in `<name>:written`)."""
        return self.text(name + ":written")

    def missing(self, name: str) -> np.ndarray:
        """Each row's missing cell of a column (all missing when the column is absent)."""
        if name not in self._missing:
            self._missing[name] = (self.measured[name].isna().to_numpy() if name in self.measured.columns
                                   else np.ones(len(self.measured), dtype=bool))
        return self._missing[name]


class RowValues:
    """Values of a row as Python scalars (None for missing), read from the cached column arrays."""

    def __init__(self, columns: ColumnArrays):
        self.columns = columns

    def number(self, name: str, i: int):
        values = self.columns.number(name)
        if values is None:
            return None
        value = values[i]
        if value != value:  # a censored reading is shown as the lab wrote it, never as its bound
            written = self.columns.written(name)
            return None if written is None else written[i]
        return float(value) + 0.0  # -0.0 is recorded as 0.0

    def text(self, name: str, i: int):
        values = self.columns.text(name)
        if values is None:
            return None
        value = values[i]
        return None if value is None else str(value)

    def flag(self, name: str, i: int) -> bool:
        values = self.columns.number(name)
        return bool(values is not None and values[i] == 1.0)

    def row(self, i: int) -> int | None:
        """The sample's row in its file (the rejects' numbering), None when the frame has no row index."""
        index = self.columns.index
        return None if index is None else int(index[i])


class BlockValues(RowValues):
    """RowValues for rows read in order: each column's values for a block of rows become one
    Python list at a time, so a row's value is a list index, not a numpy scalar conversion."""

    BLOCK = 4096

    def __init__(self, columns: ColumnArrays):
        super().__init__(columns)
        self.start = -1
        self.lists: dict = {}

    def _value(self, kind: str, name: str, i: int):
        start = i - i % self.BLOCK
        if start != self.start:
            self.start, self.lists = start, {}
        values = self.lists.get((kind, name))
        if values is None:
            values = self.lists[kind, name] = self._block(kind, name, start, start + self.BLOCK)
        return values[i - start]

    def _block(self, kind: str, name: str, start: int, stop: int) -> list:
        if kind == "text":
            values = self.columns.text(name)
            return [None] * (stop - start) if values is None else values[start:stop].tolist()
        values = self.columns.number(name)
        if values is None:
            return [False if kind == "flag" else None] * (stop - start)
        part = values[start:stop]
        if kind == "flag":
            return (part == 1.0).tolist()
        listed = (part + 0.0).astype(object)
        listed[np.isnan(part)] = None
        written = self.columns.written(name)
        if written is not None:  # censored readings, as the lab wrote them
            shown = written[start:stop]
            here = shown != None  # noqa: E711 (elementwise on an object array)
            listed[here] = shown[here]
        return listed.tolist()

    def number(self, name: str, i: int):
        return self._value("number", name, i)

    def text(self, name: str, i: int):
        value = self._value("text", name, i)
        return None if value is None else str(value)

    def flag(self, name: str, i: int) -> bool:
        return self._value("flag", name, i)


def _is_missing(batch: GradedBatch, name: str, i: int) -> bool:
    return bool(batch.columns.missing(name)[i])


def gap_at(batch: GradedBatch, i: int, j: int, values=None) -> NotEvaluated:
    """What rule slot j lacked for row i (it was not evaluated)."""
    rule = batch.outcome.slots[j].rule
    values = RowValues(batch.columns) if values is None else values
    undecided = tuple((name, values.text(name + WRITTEN_SUFFIX, i) if name in KNOWN_FIELDS  # a code with `>=`
                       else values.number(name, i))  # a number's censored spelling
                      for name in rule_inputs(rule)
                      if (written := batch.columns.written(name)) is not None and written[i] is not None)
    undecided += tuple((name, _rate_interval(name, i, values)) for name in _noisy(batch, rule)
                       if _within_noise(batch, name)[i])
    missing = [name for name in rule_inputs(rule) if _is_missing(batch, name, i)]
    if not missing and not undecided:  # every input is there: a measure derived from them is undefined (VI of kv100 below 2)
        missing = ([rule.measure] if isinstance(rule, LadderRule) else
                   [name for name in _condition_measures(rule) if _is_missing(batch, name, i)] or [rule.id])
    return NotEvaluated(rule.id, tuple(missing), undecided)


def _noisy(batch: GradedBatch, rule) -> list[str]:
    """The measures the rule tests that may carry an interval beside their number (a rate from a
    step within the noise margin, derive.trends): undecided by it, the record says why."""
    tested = [rule.measure] if isinstance(rule, LadderRule) else _condition_measures(rule)
    return [name for name in tested if batch.columns.number(name + MARGIN_SUFFIX) is not None]


def _within_noise(batch: GradedBatch, name: str) -> np.ndarray:
    """The rows whose rate `name` comes from a step within the noise margin (it has a margin)."""
    return ~np.isnan(batch.columns.number(name + MARGIN_SUFFIX))


def _rate_interval(name: str, i: int, values) -> RateInterval:
    base = name[: -len("_step_per_1000h")]
    return RateInterval(*(values.number(column, i) for column in (name, name + ":low", name + ":high", base + "_step",
                                                                  name + MARGIN_SUFFIX, "hours_since_previous")))


def _condition_measures(rule) -> list[str]:
    """The measures a condition rule tests (not the inputs they are derived from), once each."""
    return [] if isinstance(rule, LadderRule) else list(dict.fromkeys(condition_measures(rule.when)))


def gap_states(batch: GradedBatch, j: int, rows: np.ndarray) -> list[np.ndarray]:
    """What decides the shape of gap_at's record for rule slot j at these rows (rows of one
    state share it): each input missing or not, and each censored input's spelling present
    or not (`<50` that did not decide the rule, against a cell that was empty)."""
    rule = batch.outcome.slots[j].rule
    names = rule_inputs(rule)
    columns = [batch.columns.missing(name)[rows] for name in names + _condition_measures(rule)]
    columns += [pd.notna(written[rows]) for name in names if (written := batch.columns.written(name)) is not None]
    columns += [_within_noise(batch, name)[rows] for name in _noisy(batch, rule)]
    return columns or [np.zeros(len(rows), dtype=bool)]


def reason_at(batch: GradedBatch, i: int, j: int, values) -> Reason:
    """Why rule slot j fired for row i (its final level is above 0)."""
    rs, out = batch.ruleset, batch.outcome
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
            value = values.number(leaf.measure, i) if not _is_missing(batch, leaf.measure, i) else None
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
            lacking = tuple(name for name in needs if _is_missing(batch, name, i)) or tuple(needs)
        return CaveatNote(caveat.id, caveat.message, caveat.source, lacking, caveat.next_step)
    caveat = batch.engine_caveats[k - len(rs.caveats)]
    return CaveatNote(caveat.id, values.text(caveat.message_column, i), caveat.source, by_engine=True)


def build_result(batch: GradedBatch, i: int, values) -> SampleResult:
    """One sample's record; `values` supplies per-row values (real ones, or template slots)."""
    rs, out = batch.ruleset, batch.outcome
    grades = rs.grades
    finals = out.final[i]
    not_evaluated = [gap_at(batch, i, int(j), values) for j in np.flatnonzero(finals == NOT_EVALUATED)]
    reasons = [reason_at(batch, i, int(j), values) for j in np.flatnonzero(finals > 0)]
    reasons.sort(key=lambda reason: -reason.level)  # stable: rule order within a grade
    caveats = [caveat_at(batch, i, int(k), values) for k in np.flatnonzero(out.caveats[i])]

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
        row=values.row(i), file=batch.source, unrated_because=unrated_because,
        values=tuple((name, values.number(name, i)) for name in batch.value_columns),
        method=values.text("method", i), spectrum=values.text("spectrum", i),
        reference_spectrum=values.text("reference_spectrum", i), oil_changed=values.flag("oil_changed", i),
        derived=tuple((name, values.number(name, i)) for name in batch.derived_columns),
        comment=values.text("comment", i) if "comment" in batch.measured.columns else None,
        comment_given="comment" in batch.measured.columns, iso4406=values.text("iso4406", i),
        forecasts=batch.forecast_rows.get(i, ()) if batch.forecasts_made else None)


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
        if _is_missing(batch, "class", i):
            return "the sample has no class, so no rules apply to it"
        return (f"the rule set '{rs.id}' has no class '{batch.columns.text('class')[i]}'; "
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
        written = batch.columns.written(name)  # a censored reading that left a rule undecided, or none
        if written is not None:
            leaf_columns.append(pd.notna(written[rows]).astype(np.int8))
    if leaf_columns:
        parts.append(np.stack(leaf_columns, axis=1))
    matrix = np.ascontiguousarray(np.concatenate(parts, axis=1).astype(np.int8))
    keys = matrix.view(np.dtype((np.void, matrix.shape[1]))).ravel()
    unique, first, inverse = np.unique(keys, return_index=True, return_inverse=True)
    return rows[first], inverse.ravel(), [bytes(u) for u in unique]
