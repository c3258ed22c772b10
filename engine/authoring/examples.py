"""Examples written inside a rule set: a sample's values and what must come of them.

An example is a specification by example: `sumpwise check` grades each one's sample
with the rule set it sits in and fails, with a readable difference, when the grade,
the rules that fire, the rules that stay quiet or the caveats are not as written.
A sample is read like a row of a samples file: canonical units (water ppm, FTIR
abs/cm), whatever the rule set's `units:` says about its limits.
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass

import pandas as pd

from sumpwise.intake.column_map import MAPPABLE_FIELDS
from sumpwise.intake.samples import NUMERIC_COLUMNS
from sumpwise.results.facts import ENGINE_CAVEATS
from sumpwise.results.pipeline import grade
from sumpwise.vocabulary.problems import InputError
from sumpwise.results.records import UNRATED, SampleResult
from sumpwise.ruleset.model import Example, RuleSet
from sumpwise.vocabulary.measures import UNIT_FAMILY, unit_key
from sumpwise.vocabulary.units import CANONICAL


@dataclass(frozen=True)
class ExampleFailure:
    """An example that does not hold: where it is written, what differs, what happened instead."""

    name: str
    file: str
    line: int
    column: int
    differences: tuple  # one sentence each
    actual: str
    code: str = "E001"

    def render(self) -> str:
        lines = [f"{self.file}:{self.line}:{self.column}: error {self.code}: example '{self.name}' does not hold"]
        lines += [f"    - {difference}" for difference in self.differences]
        lines.append(f"    actual: {self.actual}")
        return "\n".join(lines)


def check_examples(ruleset: RuleSet) -> tuple[ExampleFailure, ...]:
    """Grade every example of the rule set; the ones that do not hold, in the order written."""
    return tuple(failure for example in ruleset.examples
                 if (failure := check_example(ruleset, example)) is not None)


def check_example(ruleset: RuleSet, example: Example) -> ExampleFailure | None:
    sample = {"sample_id": f"example: {example.name}"} | dict(example.sample)
    try:
        graded = grade(pd.DataFrame([sample]), ruleset)
    except InputError as exc:
        reason = str(exc).replace("<DataFrame>: ", "", 1)
        return _failure(example, (f"the sample cannot be read: {reason}",), "nothing was graded")
    if graded.rejects:
        reasons = tuple(f"the sample cannot be read: {r.field}: {r.reason}" for r in graded.rejects)
        return _failure(example, reasons + _units_note(ruleset, example), "the sample was rejected, nothing was graded")
    result = graded.result(0)
    differences = _unread_keys(ruleset, example) + _differences(ruleset, example, result)
    return _failure(example, differences + _units_note(ruleset, example), describe(result)) if differences else None


def _failure(example: Example, differences: tuple, actual: str) -> ExampleFailure:
    origin = example.origin
    return ExampleFailure(example.name, origin.file, origin.line, origin.column, tuple(differences), actual)


def _units_note(ruleset: RuleSet, example: Example) -> tuple:
    """A failed example whose file writes its limits in other units than the engine's: its sample
    values are read in the engine's units, so `water: 0.03` meant as % is 0.03 ppm. Said beside the
    failure, since the lead who wrote `units: {water: '%'}` would write the sample in % too."""
    declared = ruleset.file_units.get(example.origin.file, {})
    other = {key: unit for key, unit in declared.items() if unit_key(key) in UNIT_FAMILY
             and unit != CANONICAL[UNIT_FAMILY[unit_key(key)]]}
    given = sorted({unit_key(str(name)) for name in example.sample} & set(other))
    if not given:
        return ()
    return (f"note: the sample's values are read in the engine's units ("
            f"{', '.join(f'{key} in {CANONICAL[UNIT_FAMILY[key]]}' for key in given)}), not in this file's "
            f"`units:` ({', '.join(f'{key} in {other[key]}' for key in given)}), as a samples file's are",)


def _unread_keys(ruleset: RuleSet, example: Example) -> tuple:
    """A sample key the engine does not read: a misspelt `wter: 5000` would leave the example holding while
    it tests nothing about water (a samples file only notes such a column; an example is a specification)."""
    known = {*MAPPABLE_FIELDS, *NUMERIC_COLUMNS, *ruleset.measures, *ruleset.fields}
    return tuple(f"sample: '{key}' is not a value the engine reads{_did_you_mean(str(key), known)} "
                 f"(so the example says nothing about it)" for key in example.sample if key not in known)


def _differences(ruleset: RuleSet, example: Example, result: SampleResult) -> tuple:
    expect = example.expect
    fired = {reason.rule: reason for reason in result.reasons}
    lacking = {gap.rule: gap.missing for gap in result.not_evaluated}
    known_rules = {rule.id for rule in ruleset.rules_for(result.class_name or "")}
    differences = []
    wanted = expect.get("grade")
    if wanted is not None and wanted != result.grade:
        why = f" ({result.unrated_because})" if result.grade == UNRATED else ""
        differences.append(f"grade: expected {wanted}, got {result.grade}{why}")
    for rule in expect.get("fires", []):
        if rule not in known_rules:
            differences.append(_unknown_rule(rule, result, "fires", known_rules))
        elif rule in lacking:
            differences.append(f"fires: expected {rule} to fire, but it could not be evaluated "
                               f"(missing {', '.join(lacking[rule])})")
        elif rule not in fired:
            differences.append(f"fires: expected {rule} to fire, but it stayed quiet")
    for rule in expect.get("quiet", []):
        if rule not in known_rules:
            differences.append(_unknown_rule(rule, result, "quiet", known_rules))
        elif rule in lacking:
            differences.append(f"quiet: expected {rule} to be evaluated and stay quiet, but it could not be "
                               f"evaluated (missing {', '.join(lacking[rule])})")
        elif rule in fired:
            differences.append(f"quiet: expected {rule} to stay quiet, but it fired ({_reason_text(fired[rule])})")
    raised = {note.caveat for note in result.caveats}
    known_caveats = {caveat.id for caveat in ruleset.caveats} | set(ENGINE_CAVEATS)
    for caveat in expect.get("caveats", []):
        if caveat not in known_caveats:
            own = sorted(c.id for c in ruleset.caveats)
            differences.append(f"caveats: neither the rule set nor the engine has a caveat '{caveat}'"
                               f"{_did_you_mean(caveat, known_caveats)} (the rule set has: {', '.join(own) or 'none'})")
        elif caveat not in raised:
            differences.append(f"caveats: expected caveat {caveat} on the sample, but it was not raised")
    return tuple(differences)


def _unknown_rule(rule: str, result: SampleResult, key: str, known: set) -> str:
    """A misspelt id would make `quiet` hold for ever: name it as a difference instead."""
    return f"{key}: class '{result.class_name}' has no rule '{rule}'{_did_you_mean(rule, known)}"


def _did_you_mean(ident: str, known) -> str:
    close = difflib.get_close_matches(ident, sorted(known), n=1)
    return f"; did you mean '{close[0]}'?" if close else ""


def _reason_text(reason) -> str:
    if reason.capped_from:
        return f"{reason.grade}, capped from {reason.capped_from} by {reason.capped_by}"
    return reason.grade


def describe(result: SampleResult) -> str:
    """One line: the grade, each rule that fired and its grade, the caveats raised."""
    fired = ", ".join(f"{r.rule} ({_reason_text(r)})" for r in result.reasons) or "none"
    text = f"grade {result.grade}; fired: {fired}"
    if result.caveats:
        text += f"; caveats: {', '.join(note.caveat for note in result.caveats)}"
    return text
