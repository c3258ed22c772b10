"""The benchmark's peer: the obvious per-row Python script for `sumpwise grade --record compact`.

It reads the samples CSV with the csv module, grades each row with the per-row oracle
(tests/support/row_evaluator.py) and writes each compact record with json.dumps, one row
at a time: what someone would write without sumpwise's column-wise engine. It writes the
same bytes as sumpwise for clean CSV input without trend measures or spectra (the
benchmark's data; bench_grade.py checks that the two outputs are equal), and validates
nothing: bad rows, unit maps, trends, forecasts and spectra are out of its scope. Each record
names its origin (the file as given and the row: the N-th line after the header) and makes
no forecast (`forecasts: []`): the benchmark's samples have no dated oil charge to fit.

    .venv/bin/python benchmarks/peer_per_row.py SAMPLES.csv --rules RULESET --out RESULTS.jsonl
"""

from __future__ import annotations

import argparse
import csv
import difflib
import json
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests" / "support"))

from row_evaluator import _test, _text, derive_row, truth  # noqa: E402

from sumpwise.ruleset.compiler import load_ruleset  # noqa: E402
from sumpwise.ruleset.model import AllOf, AnyOf, FieldTest, LadderRule, MissingTest, Not  # noqa: E402
from sumpwise.version import engine_name  # noqa: E402
from sumpwise.vocabulary.measures import DERIVED_MEASURES, INPUT_MEASURES, TREND_MEASURES, measure_needs  # noqa: E402

PLOTTED = ("kv40_change_pct", "an_rise", "oxidation_rise")
FLAGS = {"true": True, "yes": True, "1": True}


def leaves(condition) -> list:
    if isinstance(condition, (AllOf, AnyOf)):
        return [leaf for part in condition.parts for leaf in leaves(part)]
    if isinstance(condition, Not):
        return leaves(condition.part)
    return [condition]


def inputs(condition) -> list:
    names = []
    for leaf in leaves(condition):
        names.extend([leaf.field] if isinstance(leaf, FieldTest) else measure_needs(leaf.measure))
    return list(dict.fromkeys(names))


def recorded_derived(ruleset) -> list:
    read = set(PLOTTED)
    for rule in list(ruleset.rules) + [r for rules in ruleset.classes.values() for r in rules]:
        read |= rule.reads
    for caveat in ruleset.caveats:
        read |= {leaf.measure for leaf in leaves(caveat.when) if not isinstance(leaf, FieldTest)}
        if caveat.cap is not None and caveat.cap.unless is not None:
            read |= {leaf.measure for leaf in leaves(caveat.cap.unless) if not isinstance(leaf, FieldTest)}
    if read & set(TREND_MEASURES):
        raise SystemExit("peer_per_row: trend measures are out of this script's scope")
    return [name for name in DERIVED_MEASURES if name in read]


def lacking(sample: dict, names: list) -> list:
    """Inputs missing: a measure (or new-oil value) by its number, a text field by its text."""
    numbers, texts = sample["numbers"], sample["texts"]

    def number(name):
        return name in INPUT_MEASURES or name in DERIVED_MEASURES or name.startswith("new_")
    return [n for n in names if (numbers.get(n) if number(n) else texts.get(n)) is None]


def limit_of(limit):
    return list(limit) if isinstance(limit, tuple) else limit


def unit_of(measure: str):
    return DERIVED_MEASURES[measure].unit if measure in DERIVED_MEASURES else INPUT_MEASURES.get(measure)


def with_unit(record: dict, measure: str) -> dict:
    """A clause with its measure's unit after the value, when the measure has one."""
    unit = unit_of(measure)
    if not unit:
        return record
    items = list(record.items())
    at = [key for key, _ in items].index("value") + 1
    return dict(items[:at] + [("unit", unit)] + items[at:])


def clause(leaf, sample: dict) -> dict:
    held = truth(leaf, sample) is True
    if isinstance(leaf, FieldTest):
        value = sample["texts"].get(leaf.field)
        limit = list(leaf.values) if leaf.test == "in" else leaf.values[0]
        return {"field": leaf.field, "value": value, "test": leaf.test, "limit": limit, "held": held}
    value = _plain(sample["numbers"].get(leaf.measure))
    if isinstance(leaf, MissingTest):
        return with_unit({"measure": leaf.measure, "value": value, "test": "missing", "limit": leaf.missing,
                          "held": held}, leaf.measure)
    return with_unit({"measure": leaf.measure, "value": value, "test": leaf.test, "limit": limit_of(leaf.limit),
                      "held": held}, leaf.measure)


def record(ruleset, row: dict, value_names: list, derived_names: list, origin: dict) -> dict:
    sample = derive_row(row, ruleset.lubricants)
    numbers, texts = sample["numbers"], sample["texts"]
    lubricant = ruleset.lubricants.get(texts.get("lubricant"))
    for base in ("kv40", "kv100", "an", "bn", "oxidation", "rpvot"):
        if numbers.get(f"new_{base}") is None and lubricant is not None:
            numbers[f"new_{base}"] = getattr(lubricant, base)
    class_name = texts.get("class")
    caveats, capping = [], []
    for caveat in ruleset.caveats:
        if truth(caveat.when, sample) is not True:
            capping.append(False)
            continue
        note = {"caveat": caveat.id}
        holds = caveat.cap is not None
        if holds and caveat.cap.unless is not None:
            lifted = truth(caveat.cap.unless, sample)
            holds = lifted is not True
            if lifted is None:
                needs = inputs(caveat.cap.unless)
                note["unless_missing"] = lacking(sample, needs) or needs
        capping.append(holds)
        caveats.append(note)
    reasons, gaps, evaluated = [], [], False
    for rule in ruleset.rules_for(class_name) if class_name in ruleset.classes else ():
        if isinstance(rule, LadderRule):
            value = numbers.get(rule.measure)
            if value is None:
                needs = list(dict.fromkeys(measure_needs(rule.measure)))
                gaps.append({"rule": rule.id, "missing": lacking(sample, needs) or [rule.measure]})
                continue
            raw = 0
            for step, limit in rule.steps:
                if _test(rule.test, value, limit):
                    raw = step
        else:
            outcome = truth(rule.when, sample)
            if outcome is None:
                gaps.append({"rule": rule.id, "missing": lacking(sample, inputs(rule.when)) or [rule.id]})
                continue
            raw = rule.level if outcome else 0
        evaluated = True
        final = raw
        for k, caveat in enumerate(ruleset.caveats):
            if capping[k] and rule.reads & caveat.cap.measures:
                final = min(final, caveat.cap.level)
        if final <= 0:
            continue
        reason = {"rule": rule.id}
        if isinstance(rule, LadderRule):
            reason.update(measure=rule.measure, value=_plain(value))
            unit = unit_of(rule.measure)
            if unit:
                reason["unit"] = unit
            reason.update(test=rule.test, limit=limit_of(dict(rule.steps)[raw]))
        reason["grade"] = ruleset.grades[final]
        if raw != final:
            capped_by = next(c.id for k, c in enumerate(ruleset.caveats) if capping[k] and c.cap.level == final
                             and rule.reads & c.cap.measures)
            reason.update(capped_from=ruleset.grades[raw], capped_by=capped_by)
        if not isinstance(rule, LadderRule):
            reason["clauses"] = [clause(leaf, sample) for leaf in leaves(rule.when)]
        reasons.append((-final, len(reasons), reason))
    levels = [-key for key, _, _ in reasons]
    level = max(levels + [0]) if evaluated else None
    caveats.extend(engine_caveats(ruleset, texts.get("lubricant"), class_name, gaps))
    out = {"format": 3, "form": "compact", "sample_id": texts.get("sample_id"), "unit_id": texts.get("unit_id"),
           "class": class_name, "lubricant": texts.get("lubricant"), "sampled_on": texts.get("sampled_on"),
           "origin": origin, "oil_changed": FLAGS.get((texts.get("oil_changed") or "").lower(), False),
           "values": {name: _plain(numbers.get(name)) for name in value_names},
           "iso4406": texts.get("iso4406"),
           "derived": {name: _plain(numbers.get(name)) for name in derived_names},
           "method": texts["method"], "spectrum": texts.get("spectrum"),
           "reference_spectrum": texts.get("reference_spectrum"),
           "grade": ruleset.grades[level] if level is not None else "unrated", "level": level,
           "reasons": [reason for _, _, reason in sorted(reasons, key=lambda item: item[:2])],
           "caveats": caveats, "not_evaluated": gaps, "forecasts": []}
    if level is None:
        out["unrated_because"] = unrated_because(ruleset, class_name, gaps)
    out.update(ruleset={"id": ruleset.id, "version": ruleset.version, "sha256": ruleset.sha256},
               engine=engine_name())
    return out


def engine_caveats(ruleset, lubricant, class_name, gaps: list) -> list:
    """The caveats the engine raises itself on a row: a lubricant code or a class the rule set does not
    know, and a class most of whose rules could not be evaluated (each with its message)."""
    notes = []
    if lubricant is not None and lubricant not in ruleset.lubricants:
        near = difflib.get_close_matches(lubricant, list(ruleset.lubricants), n=3, cutoff=0.5)
        notes.append({"caveat": "unknown-lubricant",
                      "message": f"lubricant code '{lubricant}' is not in the rule set's lubricants table"
                                 + (f" (nearest: {', '.join(near)})" if near else "")
                                 + "; its new-oil values are missing, so rules on change from new oil are not "
                                   "evaluated"})
    if class_name is not None and class_name not in ruleset.classes:
        near = difflib.get_close_matches(class_name, list(ruleset.classes), n=3, cutoff=0.5)
        notes.append({"caveat": "unknown-class",
                      "message": f"class '{class_name}' is not in the rule set '{ruleset.id}'"
                                 + (f" (nearest: {', '.join(near)})" if near else "")
                                 + "; no rules apply, so it is unrated"})
    applicable = len(ruleset.rules_for(class_name)) if class_name in ruleset.classes else 0
    if applicable and 2 * len(gaps) > applicable:
        notes.append({"caveat": "few-rules-evaluated",
                      "message": f"{len(gaps)} of the {applicable} rules of its class could not be evaluated; "
                                 f"the grade rests on the rest"})
    return notes


def _plain(value):
    """A number as sumpwise records it: -0.0 as 0.0."""
    return None if value is None else value + 0.0


def unrated_because(ruleset, class_name, gaps: list) -> str:
    if class_name is None:
        return "the sample has no class, so no rules apply to it"
    if class_name not in ruleset.classes:
        return (f"the rule set '{ruleset.id}' has no class '{class_name}'; "
                f"it knows: {', '.join(ruleset.classes) or 'none'}")
    if not gaps:
        return "the class has no rules"
    missing = sorted({name for gap in gaps for name in gap["missing"]})
    return (f"none of the {len(gaps)} rules of this class could be evaluated; "
            f"values missing: {', '.join(missing)}")


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("samples")
    parser.add_argument("--rules", required=True)
    parser.add_argument("--out", required=True)
    args = parser.parse_args(argv)
    ruleset = load_ruleset(args.rules)
    derived_names = recorded_derived(ruleset)
    with open(args.samples, newline="", encoding="utf-8") as source, \
            open(args.out, "w", encoding="utf-8", newline="") as out:
        reader = csv.DictReader(source)
        value_names = [n for n in list(INPUT_MEASURES) + list(ruleset.measures) if n in reader.fieldnames]
        if "oxidation" in value_names and "method" in reader.fieldnames and "oxidation_differential" not in value_names:
            value_names.append("oxidation_differential")  # a subtraction reading is recorded under its own name
        for row in reader:
            origin = {"file": args.samples, "row": reader.line_num - 1}  # the line after the header
            out.write(json.dumps(record(ruleset, row, value_names, derived_names, origin), ensure_ascii=False,
                                 separators=(", ", ": "), allow_nan=False) + "\n")


if __name__ == "__main__":
    main()
