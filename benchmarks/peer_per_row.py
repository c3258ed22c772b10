"""The benchmark's peer: the obvious per-row Python script for `sumpwise grade --record compact`.

It reads the samples CSV with the csv module, grades each row with the per-row oracle
(tests/support/row_evaluator.py) and writes each compact record with json.dumps, one row
at a time: what someone would write without sumpwise's column-wise engine. It writes the
same bytes as sumpwise for clean CSV input without trend measures or spectra (the
benchmark's data; bench_grade.py checks that the two outputs are equal), and validates
nothing: bad rows, unit maps, trends and spectra are out of its scope. Each record names its
origin (the file as given and the row: the N-th line after the header). Forecasts are fitted
the long way at the end of the file, unit by unit in plain Python (see `forecasts`), and put
on the record of each unit's latest sample; so the peer keeps every line until the end.

    .venv/bin/python benchmarks/peer_per_row.py SAMPLES.csv --rules RULESET --out RESULTS.jsonl
"""

from __future__ import annotations

import argparse
import csv
import difflib
import json
import math
import sys
from datetime import date, timedelta
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests" / "support"))

from row_evaluator import _test, derive_row, truth  # noqa: E402

from sumpwise.derive.forecast import (HORIZON_SPANS, METHOD, MIN_SAMPLES, PREDICTION_LEVEL,  # noqa: E402
                                      SLOPE_CONFIDENCE, forecastable, t_quantile)
from sumpwise.ruleset.compiler import load_ruleset  # noqa: E402
from sumpwise.ruleset.model import AllOf, AnyOf, FieldTest, LadderRule, MissingTest, Not  # noqa: E402
from sumpwise.version import engine_name  # noqa: E402
from sumpwise.vocabulary.measures import (DERIVED_MEASURES, INPUT_MEASURES, TREND_MEASURES, measure_needs,  # noqa: E402
                                          measure_unit)

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


def clause(leaf, sample: dict) -> dict:
    held = truth(leaf, sample) is True
    if isinstance(leaf, FieldTest):
        value = sample["texts"].get(leaf.field)
        limit = list(leaf.values) if leaf.test == "in" else leaf.values[0]
        return {"field": leaf.field, "value": value, "test": leaf.test, "limit": limit, "held": held}
    value = _plain(sample["numbers"].get(leaf.measure))
    if isinstance(leaf, MissingTest):
        return {"measure": leaf.measure, "value": value, "test": "missing", "limit": leaf.missing, "held": held}
    return {"measure": leaf.measure, "value": value, "test": leaf.test, "limit": limit_of(leaf.limit), "held": held}


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
    caveats.extend(engine_caveats(ruleset, texts.get("lubricant"), class_name, gaps, numbers.get("oxidation"),
                                  sample["new"]["oxidation"]))
    out = {"format": 4, "form": "compact", "sample_id": texts.get("sample_id"), "unit_id": texts.get("unit_id"),
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


def engine_caveats(ruleset, lubricant, class_name, gaps: list, oxidation=None, new_oxidation=None) -> list:
    """The caveats the engine raises itself on a row: a lubricant code or a class the rule set does not
    know, a direct carbonyl reading under half its new oil's, and a class most of whose rules could not
    be evaluated (each with its message)."""
    notes = []
    known = lubricant is None or lubricant in ruleset.lubricants or len(
        [code for code in ruleset.lubricants if code.casefold() == lubricant.casefold()]) == 1
    if not known:
        near = difflib.get_close_matches(lubricant, list(ruleset.lubricants), n=3, cutoff=0.5)
        notes.append({"caveat": "unknown-lubricant",
                      "message": f"lubricant code '{lubricant}' is not in the rule set's lubricants table"
                                 + (f" (nearest: {', '.join(near)})" if near else "")
                                 + "; its new-oil values are missing, so rules on change from new oil are not "
                                   "evaluated"})
    if oxidation is not None and new_oxidation is not None and new_oxidation >= 1.0 and oxidation < new_oxidation / 2:
        code = f" ({lubricant})" if lubricant else ""
        notes.append({"caveat": "oxidation-below-new",
                      "message": f"FTIR oxidation {oxidation:g} abs/cm is under half its new oil's {new_oxidation:g} "
                                 f"abs/cm{code}, and oxidation only adds carbonyl: a reading in abs/0.1 mm taken as "
                                 f"abs/cm reads 100 times low, and so does another oil's new-oil value; its rise "
                                 f"below zero is no sign of health. Check the reading's unit and the lubricant"})
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


def trend_facts(ruleset, row: dict, line: int) -> dict:
    """What a forecast needs of a sample: its place in its unit's trend order and the values of the
    measures of its class's forecastable ladder rules."""
    sample = derive_row(row, ruleset.lubricants)
    numbers, texts = sample["numbers"], sample["texts"]
    class_name = texts.get("class")
    rules = [rule for rule in (ruleset.rules_for(class_name) if class_name in ruleset.classes else ())
             if isinstance(rule, LadderRule) and forecastable(rule.measure)]
    try:
        day = date.fromisoformat(texts.get("sampled_on") or "").toordinal()
    except ValueError:
        day = None
    return {"line": line, "unit": texts.get("unit_id"), "sample_id": texts.get("sample_id"), "class": class_name,
            "day": day, "hours": numbers.get("oil_hours"), "method": texts.get("method"), "lab": texts.get("lab"),
            "changed": FLAGS.get((texts.get("oil_changed") or "").lower(), False),
            "values": {rule.measure: numbers.get(rule.measure) for rule in rules}}


def current_charge(samples: list) -> list:
    """A unit's samples of its current oil charge: in trend order (date, then oil hours, missing
    ones last, then file order), after the last sample that does not continue the one before it
    (undated, oil changed or hours fell, another method, another lab)."""
    ordered = sorted(samples, key=lambda s: (s["day"] is None, s["day"] or 0, s["hours"] is None,
                                             s["hours"] or 0.0, s["line"]))
    start = 0
    for k in range(1, len(ordered)):
        before, now = ordered[k - 1], ordered[k]
        fell = now["hours"] is not None and before["hours"] is not None and now["hours"] < before["hours"]
        continues = (now["day"] is not None and before["day"] is not None and not now["changed"] and not fell
                     and now["method"] == before["method"]
                     and (now["lab"] is None or before["lab"] is None or now["lab"] == before["lab"]))
        if not continues:
            start = k
    return ordered[start:]


def fit_forecast(ruleset, rule, class_name: str, charge: list):
    """One rule's forecast for a unit's current charge, the long way, or None (see derive/forecast.py
    for the method: the same tests, computed here with Python floats in file order)."""
    latest = charge[-1]
    used = sorted((s for s in charge if s["class"] == class_name and s["values"].get(rule.measure) is not None
                   and s["hours"] is not None), key=lambda s: s["line"])
    if latest["class"] != class_name or latest["values"].get(rule.measure) is None or latest["hours"] is None:
        return None
    n = len(used)
    if n < MIN_SAMPLES:
        return None
    xs, ys = [s["hours"] for s in used], [s["values"][rule.measure] for s in used]
    sum_x = sum_y = 0.0
    for x, y in zip(xs, ys):
        sum_x += x
        sum_y += y
    mean_x, mean_y = sum_x / n, sum_y / n
    sxx = sxy = 0.0
    for x, y in zip(xs, ys):
        sxx += (x - mean_x) * (x - mean_x)
        sxy += (x - mean_x) * (y - mean_y)
    if not sxx > 0:
        return None
    slope = sxy / sxx
    intercept = mean_y - slope * mean_x
    squares = 0.0
    for x, y in zip(xs, ys):
        residual = y - (intercept + slope * x)
        squares += residual * residual
    s2 = max(squares / (n - 2), 0.0)
    if rule.test == "outside":
        direction = -1.0 if slope < 0 else 1.0
    else:
        direction = -1.0 if rule.test == "below" else 1.0
    b, a = direction * slope, direction * intercept
    x_now, y_now = latest["hours"], direction * latest["values"][rule.measure]
    steps = []
    value_now = latest["values"][rule.measure]
    for level, limit in rule.steps:
        if rule.test == "outside":
            low, high = limit if isinstance(limit, tuple) else (-limit, limit)
            if value_now < low or value_now > high:  # crossed on the other side: the grade is already this one
                continue
            limit = high if direction > 0 else low
        steps.append((level, direction * limit))
    ahead = [(level, limit) for level, limit in steps if not y_now > limit]
    if not ahead or not b > 0:
        return None
    level, limit = ahead[0]
    t_stat = b / math.sqrt(s2 / sxx) if s2 > 0 else math.inf
    x_cross = max((limit - a) / b, x_now)
    horizon = HORIZON_SPANS * (x_now - min(xs))
    if not (t_stat > t_quantile(SLOPE_CONFIDENCE, n - 2) and x_cross <= x_now + horizon):
        return None
    low, high = band(a, b, limit, n, mean_x, sxx, s2, t_quantile(0.5 + PREDICTION_LEVEL / 2, n - 2))
    end = x_now + horizon
    low = max(low, x_now)
    high = math.nan if high > end else max(high, x_now)
    dated = sorted((s for s in used if s["day"] is not None), key=lambda s: (s["hours"], s["line"]))
    pace = math.nan
    if dated and dated[-1]["hours"] - dated[0]["hours"] > 0 and dated[-1]["day"] - dated[0]["day"] > 0:
        pace = (dated[-1]["day"] - dated[0]["day"]) / (dated[-1]["hours"] - dated[0]["hours"])

    def on(hours):
        if latest["day"] is None or math.isnan(hours) or math.isnan(pace):
            return None
        day = (latest["day"] - date(1970, 1, 1).toordinal()) + (hours - x_now) * pace
        return (date(1970, 1, 1) + timedelta(days=math.floor(day))).isoformat()

    def hours_or_none(value):
        return None if math.isnan(value) else float(np.round(value, 3))

    unit = measure_unit(rule.measure) or ruleset.unit_of(rule.measure)
    return {"unit_id": latest["unit"], "sample_id": latest["sample_id"], "rule": rule.id, "measure": rule.measure,
            "unit": unit, "grade": ruleset.grades[level], "test": rule.test, "limit": direction * limit,
            "samples": n, "oil_hours": x_now, "value": latest["values"][rule.measure],
            "slope_per_1000h": float(np.round(slope * 1000.0, 9)), "slope_t": float(np.round(t_stat, 6)),
            "at_hours": float(np.round(x_cross, 3)), "at_hours_low": hours_or_none(low),
            "at_hours_high": hours_or_none(high), "horizon_hours": float(np.round(end, 3)),
            "on": on(x_cross), "on_low": on(low), "on_high": on(high), "method": METHOD}


def band(a, b, limit, n, mean_x, sxx, s2, t) -> tuple:
    """Where the prediction interval meets the limit (derive/forecast.py's _band, one unit at a time)."""
    k = t * t * s2
    if k == 0:
        return (limit - a) / b, (limit - a) / b
    u = limit - a
    qa = b * b - k / sxx
    qb = -2 * b * u + 2 * k * mean_x / sxx
    qc = u * u - k * (1 + 1 / n) - k * mean_x ** 2 / sxx
    disc = qb * qb - 4 * qa * qc
    root = math.sqrt(max(disc, 0.0))
    if qa == 0:
        return (-qc / qb if qb != 0 else -math.inf), math.nan
    if qa > 0:
        return (-qb - root) / (2 * qa), (-qb + root) / (2 * qa)
    return (-math.inf if disc < 0 else (-qb - root) / (2 * qa)), math.nan


def forecasts(ruleset, samples: list) -> dict:
    """Line -> the forecasts made from that sample: each unit's current charge, each ladder rule of
    the class of its latest sample on a measure that builds up, ordered by rule id."""
    by_unit: dict = {}
    for sample in samples:
        if sample["unit"] is not None:
            by_unit.setdefault(sample["unit"], []).append(sample)
    found: dict = {}
    for unit, mine in sorted(by_unit.items()):
        charge = current_charge(mine)
        class_name = charge[-1]["class"]
        rules = [rule for rule in (ruleset.rules_for(class_name) if class_name in ruleset.classes else ())
                 if isinstance(rule, LadderRule) and forecastable(rule.measure)]
        made = [f for f in (fit_forecast(ruleset, rule, class_name, charge) for rule in rules) if f is not None]
        if made:
            found[charge[-1]["line"]] = sorted(made, key=lambda f: f["rule"])
    return found


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
        lines, samples = [], []
        for row in reader:
            origin = {"file": args.samples, "row": reader.line_num - 1}  # the line after the header
            lines.append(dumps(record(ruleset, row, value_names, derived_names, origin)))
            samples.append(trend_facts(ruleset, row, len(lines) - 1))
        for line, made in forecasts(ruleset, samples).items():  # the latest samples' records get theirs
            lines[line] = dumps(dict(json.loads(lines[line]), forecasts=made))
        out.write("".join(line + "\n" for line in lines))


def dumps(record: dict) -> str:
    return json.dumps(record, ensure_ascii=False, separators=(", ", ": "), allow_nan=False)


if __name__ == "__main__":
    main()
