"""Turn a resolved rule-set document into a compiled RuleSet, checking what a schema cannot.

Semantic checks: names of measures, fields and grades; ladders monotone along the
grade ladder; each rule a ladder rule or a condition rule, not a mix. Limits are
converted to canonical units here, once, using the `units:` of the file that wrote
them. The canonical form is itself a valid one-file rule set, so an auditor can
reload exactly what a sample was graded with.
"""

from __future__ import annotations

import difflib
import hashlib
import json
import math
import os
from dataclasses import dataclass, replace
from pathlib import Path

from sumpwise.vocabulary.measures import (DERIVED_MEASURES, INPUT_MEASURES, ISO4406_SIZES, KNOWN_FIELDS, MEASURES,
                                         TRENDED, declared_trend_measures, domain_of, measure_unit, read_iso4406,
                                         trend_base, unit_key)
from sumpwise.vocabulary.problems import InvalidFile, Problem, json_path
from sumpwise.ruleset.model import (AllOf, AnyOf, Cap, Caveat, ConditionRule, Example, FieldTest, LadderRule, Lubricant,
                      MeasureTest, MissingTest, NextStep, Not, Origin, RuleSet)
from sumpwise.ruleset.resolve import Placed, Resolved, resolve_with_problems
from sumpwise.vocabulary.measures import UNIT_FAMILY, canonical_method
from sumpwise.vocabulary.base_stocks import FAMILIES as BASE_STOCK_FAMILIES, BaseStockError, canonical_base_stock
from sumpwise.vocabulary.cautions import DEFAULT_NOTICE
from sumpwise.vocabulary.limit_tests import LADDER_TESTS, LIMIT_TESTS
from sumpwise.vocabulary.units import FACTORS, factor_to_canonical


_LADDER_TESTS = LADDER_TESTS
_MEASURE_TESTS = (*LIMIT_TESTS, "missing")
_COMBINERS = ("all", "any", "not")


def load_ruleset(path) -> RuleSet:
    """Load, resolve, validate and compile a rule set; raise InvalidFile listing every problem."""
    checked = check_ruleset(path)
    if checked.errors or checked.ruleset is None:
        raise InvalidFile(list(checked.problems))
    return checked.ruleset


@dataclass(frozen=True)
class RulesetCheck:
    """Everything one run finds in a rule-set chain: schema, resolution and meaning together.

    `ruleset` is the compiled rule set when there is no error; with errors it is `partial`,
    built from the pieces that compiled cleanly (no fingerprint), so lint can still run on
    them; None when the top file cannot be read as a rule set at all.
    """

    ruleset: RuleSet | None
    problems: tuple
    partial: bool

    @property
    def errors(self) -> tuple:
        return tuple(p for p in self.problems if p.severity == "error")


def check_ruleset(path) -> RulesetCheck:
    """Resolve and compile a rule set, keeping on past problems so one run reports them all."""
    resolved, problems = resolve_with_problems(Path(path))
    if resolved is None:
        first = min(problems, key=_order)
        hidden = Problem(first.file, first.line, first.column, "this file could not be read as a rule set, so "
                         "nothing in it (or in the files it extends) was checked", code="R009", severity="note",
                         hint="fix the error reported here; the next run checks the rest")
        return RulesetCheck(None, tuple(sorted(problems + [hidden], key=_order)), True)
    compiler = _Compiler(resolved)
    ruleset = compiler.build()
    problems = problems + compiler.problems
    partial = any(p.severity == "error" for p in problems)
    if partial:
        ruleset = replace(ruleset, canonical="", sha256="")
    return RulesetCheck(ruleset, tuple(sorted(problems, key=_order)), partial)


SEVERITY_RANK = {"error": 0, "warning": 1, "note": 2}


def _order(problem: Problem) -> tuple:
    """By file, line and column; at one place errors first, then warnings, then notes."""
    return problem.file, problem.line, problem.column, SEVERITY_RANK.get(problem.severity, 3), problem.code, \
        problem.message


class _Compiler:
    def __init__(self, resolved: Resolved):
        self.r = resolved
        self.grades = resolved.grades
        self.problems: list[Problem] = []
        self.measures = set(INPUT_MEASURES) | set(DERIVED_MEASURES) | set(resolved.measures)
        self.measures |= set(declared_trend_measures(resolved.measures))
        self.fields = set(KNOWN_FIELDS) | set(resolved.fields)

    def run(self) -> RuleSet:
        ruleset = self.build()
        if self.problems:
            raise InvalidFile(self.problems)
        return ruleset

    def build(self) -> RuleSet:
        """The rule set from every piece that compiles cleanly; problems are collected, not raised."""
        r = self.r
        if "unrated" in self.grades:  # a finding would read, and be counted, as a sample not graded
            at = ("grades", self.grades.index("unrated")) if "grades" in r.top.data else ("ruleset",)
            self.problems.append(r.top.problem(
                at, "'unrated' cannot be a grade: it is what a sample the engine could not grade is called, so a "
                    "finding at that grade would read and count as a sample that was not graded", code="C016",
                hint="name the grade otherwise, e.g. 'caution'"))
        for name, placed in sorted(r.measures.items()):
            self._check_declared(name, placed)
        for name, placed in sorted(r.fields.items()):
            self._check_field(name, placed)
        lubricants = {code: self._lubricant(code, placed) for code, placed in sorted(r.lubricants.items())}
        classes = {name: self._rules(rules.values()) for name, rules in sorted(r.classes.items())}
        common = self._rules(r.rules.values())
        margins = {name: self._noise_margin(name, placed) for name, placed in sorted(r.noise_margins.items())}
        caveats = self._clean(self._caveat, r.caveats.values(), "caveat")
        examples = tuple(self._example(p) for p in r.examples)
        header = r.header
        name = header.get("ruleset", "(no id)")
        ruleset = RuleSet(
            id=name, version=header.get("version", "(no version)"), title=header.get("title", name),
            grades=tuple(self.grades), notice=header.get("notice", DEFAULT_NOTICE).strip(),
            lubricants=lubricants, classes=classes, rules=common, caveats=caveats,
            measures=tuple(sorted(r.measures)), fields=tuple(sorted(r.fields)), files=tuple(r.files),
            canonical="", examples=examples, class_origins=self._class_origins(), file_units=self._file_units(),
            measure_units={m: (p.data.get("unit") or "") for m, p in sorted(r.measures.items())},
            lubricant_origins={code: self._origin(entries[-1]) for code, entries in r.lubricants.items()},
            noise_margins=margins,
            class_drops={name: tuple(sorted(ids)) for name, ids in sorted(r.class_drops.items())
                         if ids and name in r.classes},
        )
        self._check_overrides()
        if any(p.severity == "error" for p in self.problems):
            return ruleset
        canonical = canonical_json(ruleset, {name: p.data for name, p in r.measures.items()})
        digest = hashlib.sha256(canonical.encode("utf-8")).hexdigest()
        return replace(ruleset, canonical=canonical, sha256=digest)

    def _clean(self, compile_one, places, what: str) -> tuple:
        """Compile each piece; one with a problem is left out, and its problems name its id."""
        out = []
        for placed in places:
            before = len(self.problems)
            item = compile_one(placed)
            found = self.problems[before:]
            if found:
                ident = placed.data.get("id")
                self.problems[before:] = [p if f"'{ident}'" in p.message else
                                          replace(p, message=f"{what} '{ident}': {p.message}") for p in found]
            else:
                out.extend(piece for piece in (item if isinstance(item, list) else [item]) if piece is not None)
        return tuple(out)

    # -- pieces --------------------------------------------------------------------------

    def _origin(self, placed: Placed) -> Origin:
        mark = placed.doc.mark(placed.path)
        return Origin(placed.doc.file, mark.line, mark.column, json_path(placed.path))

    def _class_origins(self) -> dict:
        origins = {}
        for name, placed in self.r.class_places.items():
            mark = placed.doc.mark(placed.path, key=True)
            origins[name] = Origin(placed.doc.file, mark.line, mark.column, json_path(placed.path))
        return origins

    def _file_units(self) -> dict:
        places = [*self.r.class_places.values(), *self.r.rules.values(), *self.r.caveats.values(), *self.r.examples]
        places += [p for rules in self.r.classes.values() for p in rules.values()]
        return {placed.doc.file: dict(placed.units) for placed in places}

    def _scale(self, placed: Placed, measure: str) -> float:
        self._check_declared_unit(placed, measure)
        key = unit_key(measure)
        if key not in UNIT_FAMILY:
            return 1.0
        family = UNIT_FAMILY[key]
        unit = placed.units.get(key)
        return factor_to_canonical(family, unit) if unit else 1.0

    def _top_grade(self, data: dict) -> int | None:
        """The highest ladder level a rule as written can give (None when it names no known grade)."""
        if "grade" in data:
            written = [data["grade"]]
        else:
            written = [grade for key in (*_LADDER_TESTS, "iso4406") if isinstance(data.get(key), dict)
                       for grade in data[key]]
        levels = [self.grades.index(g) for g in written if g in self.grades]
        return max(levels) if levels else None

    def _check_overrides(self) -> None:
        """Warnings where an override by id quietly takes a grade away: a top-level rule every class
        overrides with its own rule of that id (it applies nowhere), and a rule that replaces an
        inherited one and gives less than it could (a child restating one limit, `above: {watch:
        100}`, loses the parent's higher grades for that measure)."""
        for ident, placed in self.r.rules.items():
            owners = [name for name, rules in self.r.classes.items()
                      if ident in rules or ident in self.r.class_drops.get(name, ())]
            if owners and len(owners) == len(self.r.classes):
                self.problems.append(placed.problem(
                    f"top-level rule '{ident}' applies to no class: every class ({', '.join(sorted(owners))}) has its "
                    f"own rule '{ident}', which wins over it, or drops it", ("id",), code="W002", severity="warning",
                    hint=f"to change '{ident}' for a class, write it under that class (same id)"))
        in_force = {id(p) for p in self.r.rules.values()} | {id(p) for rules in self.r.classes.values()
                                                               for p in rules.values()}
        for new, old in self.r.replaced:
            if id(new) not in in_force:
                continue
            # the class it was written in changes it; a class built on that one keeps the old rule (a class
            # that overrides a rule it took from its base is not such a change: the base keeps its own)
            written_in = old.path[1] if old.path[0] == "classes" else None
            holders = sorted(name for name, rules in self.r.classes.items()
                             if name != written_in and any(p is old for p in rules.values()))
            if holders and new.path[:2] == ("classes", written_in):
                mark = old.doc.mark(old.path)
                self.problems.append(new.problem(
                    f"rule '{new.data['id']}' replaces the rule of the same id at {old.doc.file}:{mark.line}, but "
                    f"class {', '.join(repr(h) for h in holders)} still grades with that one (a class that extends "
                    f"another takes its rules as they were when it was declared)", ("id",), code="W017",
                    severity="warning", hint=f"write the rule under {', '.join(holders)} too, if it is meant there"))
            now, before = self._top_grade(new.data), self._top_grade(old.data)
            if now is None or before is None or now >= before:
                continue
            mark = old.doc.mark(old.path)
            self.problems.append(new.problem(
                f"rule '{new.data['id']}' replaces the rule of the same id at {old.doc.file}:{mark.line}, which "
                f"could give {self.grades[before]}; this one gives at most {self.grades[now]}, so a sample that "
                f"rule graded {self.grades[before]} is now {self.grades[now]} at most", ("id",), code="W016",
                severity="warning",
                hint=f"a rule replaces its parent's whole: restate every grade you keep "
                     f"(up to {self.grades[before]}), or give the new limit another id to add to the parent's"))

    def _check_declared(self, name: str, placed: Placed) -> None:
        """`measures:` declares measures the engine does not know. Declaring `water: {unit: '%'}` does
        not make water read in %: its limits stay in ppm (0.05 would be 0.05 ppm), so it is an error."""
        if name not in MEASURES:
            return
        key = unit_key(name)
        family = UNIT_FAMILY.get(key)
        self.problems.append(placed.problem(
            f"'{name}' is a measure the engine already knows (in {measure_unit(name) or 'its own unit'}); "
            f"`measures:` declares only measures it does not know, so this one cannot change how {name} is read",
            (), key=True, code="C019",
            hint=(f"to write {name} limits in {' or '.join(u for u in FACTORS[family] if u != measure_unit(name))}, "
                  f"say so under `units:` ({key}: ...), and remove it from `measures:`" if family else
                  f"remove it from `measures:`; its limits are written in {measure_unit(name) or 'its own unit'}")))

    def _check_field(self, name: str, placed: Placed) -> None:
        """A field is text; a measure is a number, read and compared as one. `fields: [water]` with
        `{field: water, in: [0]}` compared '0' with the reading's text and never matched."""
        if name not in MEASURES and name not in self.r.measures:
            return
        self.problems.append(placed.problem(
            f"'{name}' is a measure (a number), so it cannot be listed under `fields:`, which are text columns "
            f"compared as text", (), code="C019",
            hint=f"test it as a measure: {{measure: {name}, below: x}}, {{measure: {name}, between: [lo, hi]}} or "
                 f"{{measure: {name}, missing: true}}"))

    def _check_declared_unit(self, placed: Placed, measure: str) -> None:
        """A limit on a declared measure is written in the unit its own file (or that file's parents)
        declares; the engine does not convert declared units, so a child that declares the measure
        in another unit leaves that limit read against data in the child's unit."""
        base = measure if measure in self.r.measures else trend_base(measure)
        if base not in self.r.measures or measure.endswith("_rising"):  # a run count has no unit
            return
        final = self.r.measures[base]
        written = self.r.declared_units.get(placed.doc.file, {}).get(base)
        if written == final.data.get("unit"):
            return
        mark = final.doc.mark(final.path, key=True)
        self.problems.append(placed.problem(
            f"this limit on {measure} is written in {written or 'no unit'}, as {placed.doc.file} declares "
            f"{base}, but the rule set declares {base} in {final.data.get('unit') or 'no unit'} "
            f"({final.doc.file}:{mark.line}); declared units are not converted, so the limit would be read "
            f"against data in the other unit", code="C017",
            hint=f"give the rule again, same id, with limits in {final.data.get('unit')} (or drop it) where {base} "
                 f"is declared anew, or keep one unit for {base} across the chain"))

    def _level(self, placed: Placed, sub: tuple, grade: str, key: bool = False) -> int | None:
        if grade not in self.grades:
            close = difflib.get_close_matches(grade, self.grades, n=1)
            self.problems.append(placed.problem(
                f"grade '{grade}' is not on the grade ladder [{', '.join(self.grades)}]", sub, key=key,
                hint=f"did you mean '{close[0]}'?" if close else "", code="C001"))
            return None
        level = self.grades.index(grade)
        if level == 0:
            self.problems.append(placed.problem(
                f"'{grade}' is the lowest grade: a limit or rule for it can never raise a sample's grade",
                sub, key=key, hint="give limits for the grades above it only", code="C002"))
            return None
        return level

    def _check_measure(self, placed: Placed, sub: tuple, measure: str) -> None:
        if measure not in self.measures:
            close = difflib.get_close_matches(measure, sorted(self.measures), n=1)
            self.problems.append(placed.problem(
                f"unknown measure '{measure}'; a measure is a lab value the engine knows, a derived measure, "
                f"or one declared under `measures:`", sub,
                hint=f"did you mean '{close[0]}'?" if close else "declare it under the top-level `measures:`", code="C003"))

    def _base_stock(self, placed: Placed, sub: tuple, text) -> str:
        """The canonical base stock (sumpwise.vocabulary.base_stocks), or a problem at its line."""
        try:
            return canonical_base_stock(str(text))
        except BaseStockError as exc:
            self.problems.append(placed.problem(str(exc), sub, code="C013"))
            return str(text)

    def _method(self, placed: Placed, sub: tuple, text) -> str:
        """The canonical FTIR method, as intake reads a row's `method`: a rule's `differential` then
        meets a row's `differential` (both read as subtraction) instead of never matching it."""
        try:
            return canonical_method(text)
        except ValueError as exc:
            self.problems.append(placed.problem(str(exc), sub, code="C018"))
            return str(text)

    def _lubricant(self, code: str, entries: tuple) -> Lubricant:
        """A lubricant merged field by field over the files of the chain that give its code.

        A child giving its own new-oil sample's acid number keeps the parent's base stock and
        viscosities (replacing the whole entry lost them, and an ester lost its caveat's cap);
        each value is read in the units of the file that wrote it. An entry that names another
        base stock is another oil: nothing of the earlier entries carries over to it.
        """
        data: dict = {}
        for placed in entries:
            own = dict(placed.data)
            if "oxidation" in own:
                own["oxidation"] = in_canonical_unit(own["oxidation"], self._scale(placed, "oxidation"))
            if "base_stock" in own:
                own["base_stock"] = self._base_stock(placed, ("base_stock",), own["base_stock"])
                if own["base_stock"] != data.get("base_stock", own["base_stock"]):
                    data = {}
            spectrum = own.get("reference_spectrum")
            if spectrum is not None:
                own["reference_spectrum"] = str((Path(placed.doc.file).parent / spectrum).resolve())
            data.update(own)
        return Lubricant(code=code, **data)

    def _rules(self, places) -> tuple:
        """The compiled rules of a list; an `iso4406` rule becomes one ladder rule per size it limits."""
        return self._clean(self._rule_pieces, places, "rule")

    def _rule_pieces(self, placed: Placed) -> list:
        return self._iso4406_rules(placed) if "iso4406" in placed.data else [self._rule(placed)]

    def _iso4406_rules(self, placed: Placed) -> list:
        """`iso4406: {watch: 17/15/12, alert: 19/17/14}`: a code above the grade's code at any size
        gives that grade. Compiled as ladder rules `<id>-4um`, `<id>-6um`, `<id>-14um` on the scale
        numbers, one per size that some grade limits ('-' or '*' leaves a size unlimited)."""
        data = placed.data
        if "measure" in data or "when" in data or "grade" in data or any(k in data for k in _LADDER_TESTS):
            self.problems.append(placed.problem(
                f"rule '{data['id']}' has `iso4406` limits: it takes no `measure`, `when`, `grade` or "
                f"{'/'.join(_LADDER_TESTS)}", ("id",), code="C004"))
            return []
        per_size: dict[int, list] = {k: [] for k in range(len(ISO4406_SIZES))}
        for grade, code in data["iso4406"].items():
            level = self._level(placed, ("iso4406", grade), grade, key=True)
            try:
                numbers = read_iso4406(code)
            except ValueError as error:
                self.problems.append(placed.problem(str(error), ("iso4406", grade), code="C015"))
                continue
            if level is None:
                continue
            for k, number in enumerate(numbers):
                if number is not None:
                    per_size[k].append((level, float(number)))
        rules = []
        for k, steps in per_size.items():
            if not steps:
                continue
            steps.sort(key=lambda s: s[0])
            written = {self.grades[level]: int(limit) for level, limit in steps}
            self._check_monotone(placed, "above", steps, written)
            size = ISO4406_SIZES[k]
            rules.append(LadderRule(f"{data['id']}-{size}", f"iso4406_{size}", "above", tuple(steps),
                                    data["message"].strip(), self._source(placed), self._origin(placed),
                                    _next_step(data)))
        return rules

    def _noise_margin(self, name: str, placed: Placed) -> float | None:
        if name not in TRENDED and (name not in self.r.measures or name in MEASURES):
            known = ", ".join(list(TRENDED) + sorted(self.r.measures))
            self.problems.append(placed.problem(
                f"noise margin for '{name}', which has no trend measures; trended measures are: {known}",
                (), key=True, code="C014"))
            return None
        return in_canonical_unit(placed.data, self._scale(placed, name))

    def _rule(self, placed: Placed):
        data = placed.data
        ladder_keys = [k for k in _LADDER_TESTS if k in data]
        origin = self._origin(placed)
        if "when" in data or "grade" in data:
            if ladder_keys or "measure" in data:
                self.problems.append(placed.problem(
                    f"rule '{data['id']}' mixes a condition (`when`/`grade`) with a ladder "
                    f"(`measure` with {'/'.join(_LADDER_TESTS)}); a rule is one or the other", ("id",), code="C004"))
                return None
            if "when" not in data or "grade" not in data:
                missing = "when" if "when" not in data else "grade"
                self.problems.append(placed.problem(f"condition rule '{data['id']}' needs `{missing}` too", ("id",), code="C004"))
                return None
            when = self._condition(placed, ("when",), data["when"])
            level = self._level(placed, ("grade",), data["grade"])
            return ConditionRule(data["id"], when, level, data["message"].strip(), self._source(placed), origin,
                                 _next_step(data))
        if "measure" not in data or len(ladder_keys) != 1:
            band = {"above", "below"} <= set(ladder_keys)
            self.problems.append(placed.problem(
                f"rule '{data['id']}' needs either `measure` with exactly one of above/below/outside "
                f"(a ladder rule) or `when` with `grade` (a condition rule)", ("id",), code="C004",
                hint="for a band, write one ladder of pairs, `outside: {watch: [low, high], alert: [low, high]}`, "
                     "or two rules, one `above` and one `below`" if band else ""))
            return None
        measure, test = data["measure"], ladder_keys[0]
        self._check_measure(placed, ("measure",), measure)
        scale = self._scale(placed, measure)
        steps = []
        for grade, limit in data[test].items():
            level = self._level(placed, (test, grade), grade, key=True)
            if level is None:
                continue
            if isinstance(limit, list):
                if limit[0] >= limit[1]:
                    self.problems.append(placed.problem(
                        f"the pair [{limit[0]}, {limit[1]}] for '{grade}' must be written [low, high] "
                        f"with low below high", (test, grade), code="C005"))
                self._check_domain(placed, (test, grade), measure, limit, scale, f"'{grade}' limit")
                limit = (in_canonical_unit(limit[0], scale), in_canonical_unit(limit[1], scale))
            else:
                if test != "outside":  # |value| > x: a size, checked by lint
                    self._check_domain(placed, (test, grade), measure, [limit], scale, f"'{grade}' limit")
                limit = in_canonical_unit(limit, scale)
            steps.append((level, limit))
        steps.sort(key=lambda s: s[0])
        self._check_monotone(placed, test, steps, data[test])
        return LadderRule(data["id"], measure, test, tuple(steps), data["message"].strip(), self._source(placed),
                          origin, _next_step(data))

    def _check_monotone(self, placed: Placed, test: str, steps: list, written: dict) -> None:
        order = LIMIT_TESTS[test]
        for (lo_level, lo), (hi_level, hi) in zip(steps, steps[1:]):
            if not order.stricter(lo, hi):
                lower, higher = self.grades[lo_level], self.grades[hi_level]
                self.problems.append(placed.problem(
                    f"the '{test}' limits are not in ladder order: the limit for '{higher}' must be "
                    f"{order.stricter_word} than the limit for '{lower}' ({written[higher]!r} vs {written[lower]!r})",
                    (test, higher), key=True, code="C006"))

    def _check_domain(self, placed: Placed, sub: tuple, measure: str, written: list, scale: float, what: str) -> None:
        """A limit no value of the measure can reach or pass is impossible: an error, not a warning."""
        domain = domain_of(measure)
        low, high = domain[0].low, domain[-1].high
        if low == -math.inf and high == math.inf:
            return
        bad = [w for w in written if not (low <= w * scale <= high)]
        if not bad:
            return
        unit_key_ = unit_key(measure)
        written_unit = placed.units.get(unit_key_) if unit_key_ in UNIT_FAMILY else None
        unit = written_unit or measure_unit(measure)
        self.problems.append(placed.problem(
            f"{what} {', '.join(_plain(w) for w in bad)}{_unit_words(unit)} lies outside what {measure} can take "
            f"({domain_words(domain, measure_unit(measure))})", sub, key=False,
            hint=("this file writes it in " + written_unit + "; was the limit written in another unit?"
                  if written_unit and written_unit != measure_unit(measure) else
                  "a limit there can never be crossed, or is crossed by every sample"), code="C011"))

    def _source(self, placed: Placed) -> str:
        source = (placed.data.get("source") or "").strip()
        if not source:
            self.problems.append(placed.problem(
                "`source` must say where this limit comes from: a standard and its clause, the manufacturer's "
                "manual, 'site practice', or 'common practice, no source'", ("source",), code="C007"))
        return source

    def _condition(self, placed: Placed, sub: tuple, data: dict):
        combiners = [k for k in _COMBINERS if k in data]
        if combiners:
            if len(data) != 1:
                self.problems.append(placed.problem(
                    f"`{combiners[0]}` must stand alone in its mapping; put other tests inside it", sub, code="C008"))
                return None
            name = combiners[0]
            if name == "not":
                return Not(self._condition(placed, sub + ("not",), data["not"]))
            parts = tuple(self._condition(placed, sub + (name, i), part) for i, part in enumerate(data[name]))
            return AllOf(parts) if name == "all" else AnyOf(parts)
        if "measure" in data:
            tests = [k for k in _MEASURE_TESTS if k in data]
            extra = sorted(set(data) - {"measure"} - set(_MEASURE_TESTS))
            if len(tests) != 1 or extra:
                self.problems.append(placed.problem(
                    "a measure condition needs exactly one of above, below, outside, between, missing "
                    f"(found: {', '.join(tests + extra) or 'none'}); combine tests with `all`", sub, code="C008"))
                return None
            measure, test = data["measure"], tests[0]
            self._check_measure(placed, sub + ("measure",), measure)
            if test == "missing":
                return MissingTest(measure, data["missing"])
            scale = self._scale(placed, measure)
            limit = data[test]
            if test != "outside" or isinstance(limit, list):
                self._check_domain(placed, sub + (test,), measure, limit if isinstance(limit, list) else [limit],
                                   scale, f"'{test}' limit")
            if isinstance(limit, list):
                if limit[0] > limit[1] or (test == "outside" and limit[0] == limit[1]):
                    self.problems.append(placed.problem(
                        f"the pair [{limit[0]}, {limit[1]}] must be written [low, high]", sub + (test,), code="C005"))
                limit = (in_canonical_unit(limit[0], scale), in_canonical_unit(limit[1], scale))
            else:
                limit = in_canonical_unit(limit, scale)
            return MeasureTest(measure, test, limit)
        if "field" in data:
            tests = [k for k in ("in", "equals") if k in data]
            extra = sorted(set(data) - {"field", "in", "equals"})
            if len(tests) != 1 or extra:
                self.problems.append(placed.problem(
                    f"a field condition needs exactly one of in, equals (found: {', '.join(tests + extra) or 'none'})",
                    sub, code="C008"))
                return None
            name = data["field"]
            if name not in self.fields:
                close = difflib.get_close_matches(name, sorted(self.fields), n=1)
                self.problems.append(placed.problem(
                    f"unknown field '{name}'; known fields are {', '.join(sorted(self.fields))}, or declare it "
                    f"under the top-level `fields:`", sub + ("field",),
                    hint=f"did you mean '{close[0]}'?" if close else "", code="C009"))
            at = [sub + ("in", i) for i in range(len(data["in"]))] if tests[0] == "in" else [sub + ("equals",)]
            values = data["in"] if tests[0] == "in" else [data["equals"]]
            # a field is text: `equals: 1.50` is compared as "1.50", as written, not as the float's "1.5"
            values = [placed.doc.written.get(placed.path + path, _as_text(v)) if isinstance(v, float) else _as_text(v)
                      for v, path in zip(values, at)]
            if name == "base_stock":
                values = [self._base_stock(placed, sub + (tests[0],), v) for v in values]
            elif name == "method":
                values = [self._method(placed, sub + (tests[0],), v) for v in values]
            elif name == "base_stock_family":
                for v in values:
                    if not set(v.split("+")) <= set(BASE_STOCK_FAMILIES):
                        self.problems.append(placed.problem(
                            f"unknown base stock family {v!r}: expected {', '.join(BASE_STOCK_FAMILIES)}",
                            sub + (tests[0],), code="C013"))
            return FieldTest(name, tests[0], tuple(values))
        self.problems.append(placed.problem(
            "a condition needs `measure`, `field`, `all`, `any` or `not`", sub, code="C008"))
        return None

    def _caveat(self, placed: Placed) -> Caveat:
        data = placed.data
        when = self._condition(placed, ("when",), data["when"])
        cap = None
        if "cap" in data:
            spec = data["cap"]
            for i, measure in enumerate(spec["measures"]):
                self._check_measure(placed, ("cap", "measures", i), measure)
            unless = self._condition(placed, ("cap", "unless"), spec["unless"]) if "unless" in spec else None
            if spec["grade"] == self.grades[0]:
                self.problems.append(placed.problem(
                    f"a cap at '{spec['grade']}', the lowest grade, would hide every finding on "
                    f"{', '.join(spec['measures'])} for these samples: a finding must keep a grade above the lowest",
                    ("cap", "grade"), code="C002",
                    hint=f"cap at '{self.grades[1]}' (the finding stays visible at the first grade), or drop the rules "
                         f"on those measures where they do not apply"))
                level = None
            else:
                level = self._level(placed, ("cap", "grade"), spec["grade"])
            cap = Cap(frozenset(spec["measures"]), level, unless)
        return Caveat(data["id"], when, cap, data["message"].strip(), (data.get("source") or "").strip(),
                      self._origin(placed), _next_step(data))

    def _example(self, placed: Placed) -> Example:
        data = placed.data
        grade = data["expect"].get("grade")
        if grade is not None and grade not in self.grades and grade != "unrated":
            close = difflib.get_close_matches(grade.strip().lower(), [*self.grades, "unrated"], n=1)
            self.problems.append(placed.problem(
                f"expected grade '{grade}' is not on the grade ladder [{', '.join(self.grades)}] nor 'unrated'",
                ("expect", "grade"), code="C010", hint=f"did you mean '{close[0]}'?" if close else ""))
        self._check_example_ids(placed)
        return Example(data["name"], dict(data["sample"]), dict(data["expect"]), self._origin(placed))

    def _check_example_ids(self, placed: Placed) -> None:
        """A misspelt id in `fires` or `quiet` is caught here, with the ids it may have meant."""
        class_name = placed.data["sample"].get("class")
        if not isinstance(class_name, str) or class_name not in self.r.classes:
            return  # an unknown class leaves the sample unrated; running the example says so
        rules = set()
        for ident, rule in {**self.r.rules, **self.r.classes[class_name]}.items():
            # an `iso4406` rule compiles to one rule per size: `<id>-4um`, `<id>-6um`, `<id>-14um`
            rules |= {f"{ident}-{size}" for size in ISO4406_SIZES} if "iso4406" in rule.data else {ident}
        # `caveats` may name one the engine raises itself (unknown-lubricant, ...), which this stage
        # cannot know: running the example checks those ids (sumpwise.authoring.examples)
        known = {"fires": rules, "quiet": rules}
        for key, ids in known.items():
            for i, ident in enumerate(placed.data["expect"].get(key, [])):
                if ident in ids:
                    continue
                close = difflib.get_close_matches(ident, sorted(ids), n=1)
                what = "caveat" if key == "caveats" else f"rule of class '{class_name}'"
                self.problems.append(placed.problem(
                    f"example '{placed.data['name']}': `{key}` names '{ident}', but there is no such {what}",
                    ("expect", key, i), hint=f"did you mean '{close[0]}'?" if close else "", code="C012"))


def in_canonical_unit(value, scale: float) -> float:
    """A limit or reference value written in a file's unit, in the canonical unit, to the 12
    significant digits the canonical form keeps: 0.29 abs/0.1mm is 29 abs/cm, not the
    28.999999999999996 a bare product gives (which a reading of exactly 29 is above), and the
    rule set grades as its canonical form reloaded does."""
    return float(f"{value * scale:.12g}")


def _plain(value) -> str:
    value = float(value)
    return f"{int(value):,}" if value.is_integer() and abs(value) < 1e15 else f"{value:g}"


def _unit_words(unit: str) -> str:
    return "" if not unit else ("%" if unit == "%" else f" {unit}")


def domain_words(domain: tuple, unit: str) -> str:
    """What a measure can take, in words: 'not negative', 'from 0 to 1e+06 ppm', 'above -100%'."""
    low, high = domain[0], domain[-1]
    if high.high == math.inf:
        if low.low == 0:
            return "not negative" if low.low_in else "above 0"
        return f"{'at least' if low.low_in else 'above'} {_plain(low.low)}{_unit_words(unit)}"
    return f"from {_plain(low.low)} to {_plain(high.high)}{_unit_words(unit)}"


def _next_step(data: dict) -> NextStep | None:
    """`next_step:` as written (text, or task with within_days); the schema has checked its shape."""
    step = data.get("next_step")
    if step is None:
        return None
    if isinstance(step, str):
        return NextStep(" ".join(step.split()))
    return NextStep(" ".join(step["task"].split()), step.get("within_days"))


def next_step_doc(step: NextStep) -> dict:
    doc = {"task": step.task}
    if step.within_days is not None:
        doc["within_days"] = step.within_days
    return doc


def _as_text(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    return str(value)


# -- canonical form ---------------------------------------------------------------------------

def _number(value: float):
    """Limits are stored with 12 significant digits: unit conversion must not change the fingerprint."""
    rounded = float(f"{value:.12g}")
    return int(rounded) if rounded.is_integer() and abs(rounded) < 1e15 else rounded


def _limit_doc(limit):
    return [_number(limit[0]), _number(limit[1])] if isinstance(limit, tuple) else _number(limit)


def condition_doc(condition) -> dict:
    """A compiled condition written back in the rule-set language, limits in canonical units."""
    if isinstance(condition, MeasureTest):
        return {"measure": condition.measure, condition.test: _limit_doc(condition.limit)}
    if isinstance(condition, MissingTest):
        return {"measure": condition.measure, "missing": condition.missing}
    if isinstance(condition, FieldTest):
        if condition.test == "equals":
            return {"field": condition.field, "equals": condition.values[0]}
        return {"field": condition.field, "in": list(condition.values)}
    if isinstance(condition, AllOf):
        return {"all": [condition_doc(p) for p in condition.parts]}
    if isinstance(condition, AnyOf):
        return {"any": [condition_doc(p) for p in condition.parts]}
    return {"not": condition_doc(condition.part)}


def rule_doc(rule, grades: tuple) -> dict:
    if isinstance(rule, LadderRule):
        doc = {"id": rule.id, "measure": rule.measure,
               rule.test: {grades[level]: _limit_doc(limit) for level, limit in rule.steps}}
    else:
        doc = {"id": rule.id, "when": condition_doc(rule.when), "grade": grades[rule.level]}
    doc.update(message=rule.message, source=rule.source)
    if rule.next_step is not None:
        doc["next_step"] = next_step_doc(rule.next_step)
    return doc


def canonical_document(ruleset: RuleSet, measure_specs: dict) -> dict:
    """The resolved rule set as one self-contained document in canonical units."""
    doc = {
        "ruleset": ruleset.id, "version": ruleset.version, "title": ruleset.title,
        "grades": list(ruleset.grades), "notice": ruleset.notice,
        "units": {key: FACTORS_CANONICAL[family] for key, family in sorted(UNIT_FAMILY.items())},
        "lubricants": {code: _lubricant_doc(lub, Path(ruleset.files[-1]).resolve().parent)
                       for code, lub in ruleset.lubricants.items()},
        "classes": {name: {"rules": [rule_doc(r, ruleset.grades) for r in rules],
                           **({"drop": list(ruleset.class_drops[name])} if name in ruleset.class_drops else {})}
                    for name, rules in ruleset.classes.items()},
        "rules": [rule_doc(r, ruleset.grades) for r in ruleset.rules],
        "caveats": [caveat_doc(c, ruleset.grades) for c in ruleset.caveats],
    }
    if measure_specs:
        doc["measures"] = {name: dict(spec) for name, spec in sorted(measure_specs.items())}
    if ruleset.noise_margins:
        doc["noise_margins"] = {name: _number(margin) for name, margin in sorted(ruleset.noise_margins.items())}
    if ruleset.fields:
        doc["fields"] = list(ruleset.fields)
    return doc


FACTORS_CANONICAL = {family: next(u for u, f in units.items() if f == 1.0) for family, units in FACTORS.items()}


def _lubricant_doc(lub: Lubricant, top_folder: Path) -> dict:
    """A lubricant in canonical form; a reference spectrum's path is written relative to the top
    rule-set file, as an author would, so the fingerprint does not depend on where the files sit."""
    doc = {}
    for name in ("description", "base_stock", "iso_vg", "kv40", "kv100", "an", "bn", "oxidation", "rpvot",
                 "reference_spectrum"):
        value = getattr(lub, name)
        if name == "reference_spectrum" and value is not None:
            value = Path(os.path.relpath(value, top_folder)).as_posix()
        if value is not None:
            doc[name] = _number(value) if isinstance(value, (int, float)) and not isinstance(value, bool) else value
    return doc


def caveat_doc(caveat: Caveat, grades: tuple) -> dict:
    doc = {"id": caveat.id, "when": condition_doc(caveat.when)}
    if caveat.cap is not None:
        cap = {"measures": sorted(caveat.cap.measures), "grade": grades[caveat.cap.level]}
        if caveat.cap.unless is not None:
            cap["unless"] = condition_doc(caveat.cap.unless)
        doc["cap"] = cap
    doc["message"] = caveat.message
    if caveat.source:
        doc["source"] = caveat.source
    if caveat.next_step is not None:
        doc["next_step"] = next_step_doc(caveat.next_step)
    return doc


def canonical_json(ruleset: RuleSet, measure_specs: dict) -> str:
    """Same rule set, same bytes: sorted keys, no whitespace, UTF-8 text."""
    return json.dumps(canonical_document(ruleset, measure_specs), sort_keys=True, separators=(",", ":"),
                      ensure_ascii=False)

