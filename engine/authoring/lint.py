"""Lint: rule sets that are valid but probably not what their author meant.

Each check is small and says why it warns: a rule another rule always shadows, a
condition or a ladder step no value can satisfy, a ladder that skips a grade, a
grade no rule of a class can give, a class with no rule on acid number, viscosity
or oxidation, a limit whose size disagrees with the unit it is written in, and a
source too vague for an auditor. Warnings are Problem records (severity
"warning") with the file and line of the rule and a one-line hint.

Value sets are unions of intervals (sumpwise.vocabulary.intervals); where a test holds
and what a measure can take come from the vocabulary's limit-test and measure tables.
"""

from __future__ import annotations

import difflib
import re
from dataclasses import dataclass

from sumpwise.derive.viscosity import ISO_VG_GRADES, iso_vg_of
from sumpwise.vocabulary.intervals import can_hold, covered
from sumpwise.vocabulary.limit_tests import LIMIT_TESTS
from sumpwise.vocabulary.base_stocks import family_of
from sumpwise.vocabulary.measures import domain_of, measure_needs, measure_unit, unit_key
from sumpwise.vocabulary.problems import Problem
from sumpwise.ruleset.model import (AllOf, AnyOf, ConditionRule, FieldTest, LadderRule, MeasureTest, MissingTest,
                                    Not, Origin, RuleSet, leaves)
from sumpwise.vocabulary.measures import UNIT_FAMILY
from sumpwise.vocabulary.units import CANONICAL, FACTORS

# A class's rules should watch the three signs of oil ageing, each through one of these.
COVERAGE = {
    "acid number": ("an", "an_rise", "an_rise_per_1000h"),
    "viscosity": ("kv40", "kv100", "kv40_change_pct", "kv100_change_pct", "vi"),
    "oxidation": ("oxidation", "oxidation_rise", "oxidation_rise_per_1000h", "rpvot", "rpvot_retained_pct"),
}


def region(test: str, limit) -> tuple:
    """The values for which `value <test> limit` holds, as intervals."""
    return LIMIT_TESTS[test].region(limit)


# -- conditions that can never be true ------------------------------------------------------------

def _conjuncts(condition) -> list:
    """The parts that must all hold for the condition to hold (nested `all` flattened)."""
    if isinstance(condition, AllOf):
        return [leaf for part in condition.parts for leaf in _conjuncts(part)]
    return [condition]


def _describe(test) -> str:
    if isinstance(test, MeasureTest):
        limit = list(test.limit) if isinstance(test.limit, tuple) else test.limit
        return f"{test.measure} {test.test} {_num(limit)}"
    return f"{test.measure} missing: {str(test.missing).lower()}"


def never_true(condition) -> str | None:
    """Why no sample can make the condition true, or None when some sample can."""
    if condition is None:
        return None
    if isinstance(condition, AnyOf):
        reasons = [never_true(part) for part in condition.parts]
        return "; ".join(reasons) if all(reasons) else None
    if isinstance(condition, MeasureTest):
        spans = region(condition.test, condition.limit)
        if not can_hold(spans, domain_of(condition.measure)):
            return f"{_describe(condition)}: {condition.measure} never takes such a value"
        return None
    parts = _conjuncts(condition)
    if len(parts) == 1:
        return None  # a single field, missing or `not` test: some sample can make it true
    by_measure: dict = {}
    for part in parts:
        inner = never_true(part) if isinstance(part, (MeasureTest, AnyOf)) else None
        if inner:
            return inner
        if isinstance(part, (MeasureTest, MissingTest)):
            by_measure.setdefault(part.measure, []).append(part)
    for measure, tests in by_measure.items():
        missing = {t.missing for t in tests if isinstance(t, MissingTest)}
        values = [t for t in tests if isinstance(t, MeasureTest)]
        if len(missing) == 2 or (True in missing and values):
            return f"{' and '.join(_describe(t) for t in tests)} under `all`: a value cannot be both"
        spans = [region(t.test, t.limit) for t in values]
        if len(values) > 1 and not can_hold(*spans, domain_of(measure)):
            return f"{' and '.join(_describe(t) for t in values)} under `all`: no value satisfies them all"
    by_field: dict = {}
    for part in parts:
        if isinstance(part, FieldTest):
            by_field.setdefault(part.field, []).append({v.strip().casefold() for v in part.values})
    for name, value_sets in by_field.items():
        if len(value_sets) > 1 and not set.intersection(*value_sets):
            return f"{name} must take values from lists that share none, under `all`"
    return None


def _other_class_only(condition, name: str, classes) -> str | None:
    """What a class rule's condition asks of `class` that a sample of class `name` never has
    (`{field: class, in: [gearbox]}` under `steam-turbine`), or None. A class name the rule set
    lacks is W018's, with its nearest name."""
    wanted = name.strip().casefold()
    known = {c.strip().casefold() for c in classes}
    for part in _conjuncts(condition):
        negated = isinstance(part, Not)
        test = part.part if negated else part
        if not (isinstance(test, FieldTest) and test.field == "class"):
            continue
        values = {v.strip().casefold() for v in test.values}
        if values <= known and (wanted in values) == negated:
            return f"class {'not ' if negated else ''}in [{', '.join(test.values)}]"
    return None


# -- what a rule gives, for shadowing -------------------------------------------------------------

@dataclass(frozen=True)
class _Gives:
    """A rule reading one measure: the region of values where it gives at least each level."""

    measure: str
    steps: tuple  # ((level, spans), ...)

    def at_least(self, level: int) -> tuple:
        return tuple(span for step_level, spans in self.steps if step_level >= level for span in spans)


def _single_measure(rule) -> _Gives | None:
    if isinstance(rule, LadderRule):
        return _Gives(rule.measure, tuple((level, region(rule.test, limit)) for level, limit in rule.steps))
    if isinstance(rule.when, MeasureTest):
        return _Gives(rule.when.measure, ((rule.level, region(rule.when.test, rule.when.limit)),))
    return None


def shadows(strong, weak) -> bool:
    """Whenever `weak` gives a grade, `strong` gives that grade or higher (caps treat both alike).

    `strong` reads one measure, which `weak` reads too, so a cap on it caps both and a
    missing value silences both.
    """
    gives = _single_measure(strong)
    if gives is None or strong is weak:
        return False
    domain = domain_of(gives.measure)
    if isinstance(weak, LadderRule):
        if weak.measure != gives.measure:
            return False
        return all(covered(region(weak.test, limit), gives.at_least(level), domain) for level, limit in weak.steps)
    needed = [p for p in _conjuncts(weak.when) if isinstance(p, MeasureTest) and p.measure == gives.measure]
    return any(covered(region(p.test, p.limit), gives.at_least(weak.level), domain) for p in needed)


# -- the checks -----------------------------------------------------------------------------------

def lint_ruleset(ruleset: RuleSet, partial: bool = False) -> tuple[Problem, ...]:
    """Every warning for a compiled rule set, by file and line.

    `partial`: the rule set lacks the pieces that had errors, so the checks on a class as a
    whole (grades it cannot give, signs it does not watch) would only echo those errors.
    """
    found: dict = {}
    checks = [_shadowed, _impossible, _ladders, _units, _raw_viscosity, _viscosity_grades, _vague_sources,
              _ester_caps, _unknown_names]
    if not partial:
        checks += [_unreached_grades, _coverage]
    for check in checks:
        for problem in check(ruleset):
            found.setdefault(problem, None)
    return tuple(sorted(found, key=lambda p: (p.file, p.line, p.column, p.message)))


def _warning(code: str, origin: Origin, message: str, hint: str) -> Problem:
    return Problem(origin.file, origin.line, origin.column, message, origin.path, severity="warning", hint=hint,
                   code=code)


def _where(origin: Origin) -> str:
    return f"{origin.file}:{origin.line}"


def _all_rules(ruleset: RuleSet) -> list:
    seen, rules = set(), []
    for name in ruleset.classes:
        for rule in ruleset.rules_for(name):
            if id(rule) not in seen:
                seen.add(id(rule))
                rules.append(rule)
    return rules + [rule for rule in ruleset.rules if id(rule) not in seen]


def _shadowed(ruleset: RuleSet):
    for name in ruleset.classes:
        rules = ruleset.rules_for(name)
        for i, weak in enumerate(rules):
            for j, strong in enumerate(rules):
                if i == j or not shadows(strong, weak):
                    continue
                if j > i and shadows(weak, strong):
                    continue  # two rules that give the same: report the later one only
                yield _warning("W001",
                    weak.origin,
                    f"in class '{name}', rule '{weak.id}' is always shadowed by rule '{strong.id}' "
                    f"({_where(strong.origin)}): whenever it fires, '{strong.id}' gives the same grade or higher, "
                    f"so it never changes a sample's grade",
                    f"remove '{weak.id}', or change its limits so it gives a grade '{strong.id}' does not")
                break


def _impossible(ruleset: RuleSet):
    for rule in _all_rules(ruleset):
        if isinstance(rule, ConditionRule) and (why := never_true(rule.when)):
            yield _warning("W002", rule.origin, f"rule '{rule.id}' can never fire: its condition can never be true ({why})",
                           "check the limits and the units; perhaps `any` or `between` was meant")
    for name, rules in ruleset.classes.items():
        for rule in rules:
            if isinstance(rule, ConditionRule) and (why := _other_class_only(rule.when, name, ruleset.classes)):
                yield _warning("W002", rule.origin,
                               f"rule '{rule.id}' can never fire: it is a rule of class '{name}', which grades only "
                               f"samples of that class, but its condition needs {why}",
                               f"move it under the class it is meant for, or to the top-level `rules:` to apply it "
                               f"to every class")
    for caveat in ruleset.caveats:
        if why := never_true(caveat.when):
            yield _warning("W003", caveat.origin, f"caveat '{caveat.id}' can never apply: its `when` can never be true "
                                          f"({why})", "check the limits and the field values")
        if caveat.cap is not None and (why := never_true(caveat.cap.unless)):
            yield _warning("W004", caveat.origin, f"caveat '{caveat.id}': its `unless` can never be true ({why}), so the "
                                          f"cap is never lifted", "check the limits, or remove `unless`")


def _ladders(ruleset: RuleSet):
    grades = ruleset.grades
    for rule in _all_rules(ruleset):
        if not isinstance(rule, LadderRule):
            continue
        domain = domain_of(rule.measure)
        for level, limit in rule.steps:
            if not can_hold(region(rule.test, limit), domain):
                yield _warning("W005", rule.origin,
                               f"rule '{rule.id}': no value reaches its '{grades[level]}' limit "
                               f"({rule.measure} {rule.test} {_num(limit)}; {rule.measure} never takes such a value)",
                               f"give '{grades[level]}' a limit {rule.measure} can cross")
        levels = [level for level, _ in rule.steps]
        skipped = [grades[level] for level in range(min(levels), max(levels)) if level not in levels]
        if skipped:
            yield _warning("W006", rule.origin,
                           f"rule '{rule.id}' has a gap in its ladder: limits for "
                           f"{', '.join(grades[level] for level in levels)} but none for {', '.join(skipped)}",
                           f"add a limit for {', '.join(skipped)} between its neighbours, or say in `source` why "
                           f"the step is skipped")


def _reachable_levels(rule) -> set:
    if isinstance(rule, LadderRule):
        domain = domain_of(rule.measure)
        return {level for level, limit in rule.steps if can_hold(region(rule.test, limit), domain)}
    return set() if never_true(rule.when) else {rule.level}


def _unreached_grades(ruleset: RuleSet):
    for name, origin in _class_origins(ruleset):
        reached = set().union(*(_reachable_levels(rule) for rule in ruleset.rules_for(name)))
        missing = [grade for level, grade in enumerate(ruleset.grades) if level > 0 and level not in reached]
        if missing and reached:
            yield _warning("W007", origin, f"no rule of class '{name}' can give {', '.join(missing)}: "
                                   f"those grades of the ladder are never reached for this class",
                           f"give a rule a limit for {missing[-1]}, or accept that the class tops out below it")


def _class_origins(ruleset: RuleSet):
    for name in ruleset.classes:
        origin = ruleset.class_origins.get(name)
        if origin is None:
            rules = ruleset.rules_for(name)
            origin = rules[0].origin if rules else Origin(ruleset.files[-1], 0, 0, f"$.classes.{name}")
        yield name, origin


def _coverage(ruleset: RuleSet):
    for name, origin in _class_origins(ruleset):
        read = set().union(*(rule.reads for rule in ruleset.rules_for(name)))
        for sign, measures in COVERAGE.items():
            if not read & set(measures):
                yield _warning("W008", origin, f"class '{name}' has no rule on {sign} (none of its rules reads "
                                       f"{', '.join(measures)})",
                               f"add a rule on {sign}, e.g. a ladder on {measures[1]}")


# -- units ----------------------------------------------------------------------------------------

def _written(ruleset: RuleSet, origin: Origin, measure: str, value: float) -> tuple[float, str]:
    """A canonical limit as its file wrote it, with that file's unit for the measure."""
    key = unit_key(measure)
    family = UNIT_FAMILY.get(key) if key else None
    if family is None:
        return value, ""
    unit = ruleset.file_units.get(origin.file, {}).get(key, CANONICAL[family])
    return value / FACTORS[family][unit], unit


def unit_trouble(measure: str, canonical: float) -> str | None:
    """Why a limit of this size (canonical units) looks written in the wrong unit, if it does."""
    key = unit_key(measure)
    if measure == "water" and 0 < canonical < 1:  # above 100 % is impossible: a compile error (C011)
        return "below 1 ppm, smaller than any Karl Fischer result"
    if UNIT_FAMILY.get(key) == "absorbance" and measure == key and abs(canonical) > 500:
        return ("above 500 abs/cm, which is 5 absorbance units through a 0.1 mm cell: 0.001 % of the light "
                "through, beyond any FTIR reading")
    if UNIT_FAMILY.get(key) == "absorbance" and measure != key and abs(canonical) > 150:
        # rises, steps and differential readings: what the oil gained, per convention (README, FTIR conventions)
        return ("above 150 abs/cm, a gain of 1.5 absorbance through a 0.1 mm cell: beyond the saturation threshold "
                "of a reading, so no rise, step or differential reading gets there")
    if measure in ("kv40_change_pct", "kv100_change_pct") and abs(canonical) > 100:
        return "a change of more than 100 % means the viscosity doubled; a viscosity in mm2/s written here?"
    if measure in ("kv40_change_pct", "kv100_change_pct") and 0 < abs(canonical) < 1:
        # ISO 3104 §14.2: repeatability 0.26 % of the value for formulated oils at 40 and 100 C
        return ("this measure is a percent of new (10 means 10 %), and a change under 1 % is within a few "
                "repeatabilities of the test (0.26 % of the value, ISO 3104), so noise alone crosses it: a "
                "fraction (0.1 for 10 %) written?")
    if measure in ("bn_retained_pct", "rpvot_retained_pct") and 0 < canonical <= 1:
        return "this measure is a percent of new (50 means half), not a fraction"
    return None


def _limits(rule) -> list[tuple[str, float]]:
    if isinstance(rule, LadderRule):
        return [(rule.measure, end) for _, limit in rule.steps for end in _ends(limit)]
    return _condition_limits(rule.when)


def _condition_limits(condition) -> list[tuple[str, float]]:
    return [(leaf.measure, end) for leaf in leaves(condition) if leaf.kind == "measure" for end in _ends(leaf.limit)]


def _ends(limit) -> tuple:
    return limit if isinstance(limit, tuple) else (limit,)


def _units(ruleset: RuleSet):
    owners = [(rule, "rule", _limits(rule)) for rule in _all_rules(ruleset)]
    for caveat in ruleset.caveats:
        limits = _condition_limits(caveat.when)
        if caveat.cap is not None and caveat.cap.unless is not None:  # a cap without `unless` has no limits
            limits += _condition_limits(caveat.cap.unless)
        owners.append((caveat, "caveat", limits))
    for owner, kind, limits in owners:
        troubled: dict = {}
        for measure, limit in limits:
            why = unit_trouble(measure, limit)
            if why:
                troubled.setdefault((measure, why), []).append(_written(ruleset, owner.origin, measure, limit))
        for (measure, why), written in troubled.items():
            unit = written[0][1] or measure_unit(measure)
            values = ", ".join(_num(value) for value, _ in written)
            key = unit_key(measure)
            own = ruleset.file_units.get(owner.origin.file, {})
            declared = (f"this file writes {key} in {unit}; " if key in own else "")
            elsewhere = sorted({(file, units[key]) for file, units in ruleset.file_units.items()
                                if file != owner.origin.file and units.get(key) not in (None, unit)})
            yield _warning("W009", owner.origin, f"{kind} '{owner.id}': {measure} limit(s) {values} {unit} look written "
                                         f"in the wrong unit: {why}",
                           f"{declared}write the limit in that unit, or change `units:` to the unit it was written in"
                           if declared else
                           f"this file gives no `units:` for {key}, so its limits are read in {unit}; another file's "
                           f"`units:` ({elsewhere[0][0]}: {key} in {elsewhere[0][1]}) applies to that file's limits "
                           f"only: add `units: {{{key}: '{elsewhere[0][1]}'}}` here if the limit is in "
                           f"{elsewhere[0][1]}" if elsewhere else f"write the limit in {unit}")


# -- implausible viscosity ------------------------------------------------------------------------

# The lowest kv40 of any ISO 3448 grade (VG 2: 1.98 mm2/s): a raw kv40 limit below it is crossed by every oil.
_LOWEST_KV40 = 1.98
_RAW_VISCOSITY = {"kv40": "kv40_change_pct", "kv100": "kv100_change_pct"}


def _viscosity_tests(rule) -> list:
    if isinstance(rule, LadderRule):
        return [(rule.test, limit) for _, limit in rule.steps] if rule.measure in _RAW_VISCOSITY else []
    return [(leaf.test, leaf.limit) for leaf in leaves(rule.when)
            if leaf.kind == "measure" and leaf.measure in _RAW_VISCOSITY]


def _raw_viscosity(ruleset: RuleSet):
    """`kv40 outside 5` reads |kv40| > 5, true for every oil: a change limit written on the raw viscosity."""
    for rule in _all_rules(ruleset):
        for test, limit in _viscosity_tests(rule):
            symmetric = test == "outside" and not isinstance(limit, tuple)
            tiny = test == "above" and limit < _LOWEST_KV40
            if symmetric or tiny:
                measure = rule.measure if isinstance(rule, LadderRule) else next(
                    leaf.measure for leaf in leaves(rule.when) if leaf.kind == "measure" and leaf.measure in _RAW_VISCOSITY)
                written = f"{measure} {test} {_num(limit)}"
                why = (f"{measure} is a viscosity in mm2/s, never negative, so `outside {_num(limit)}` means above "
                       f"{_num(limit)} mm2/s" if symmetric else
                       f"every lubricating oil has {measure} above {_num(limit)} mm2/s (ISO 3448's lowest grade, "
                       f"VG 2, starts at {_LOWEST_KV40})")
                yield _warning("W011", rule.origin, f"rule '{rule.id}': {written} is crossed by every oil: {why}",
                               f"for a change from new use {_RAW_VISCOSITY[measure]} (e.g. outside {{watch: 5}}); for "
                               f"a band in mm2/s write a pair [low, high]")
                break


def _viscosity_grades(ruleset: RuleSet):
    """A lubricant's ISO VG and its new-oil kv40 must agree within the grade's ISO 3448 band (midpoint +/-10 %)."""
    for code, lub in ruleset.lubricants.items():
        origin = ruleset.lubricant_origins.get(code)
        if lub.iso_vg is None or origin is None:
            continue
        band = ISO_VG_GRADES.get(int(lub.iso_vg)) if float(lub.iso_vg).is_integer() else None
        grade_of_kv40 = iso_vg_of([lub.kv40])[0] if lub.kv40 is not None else float("nan")
        fits = [] if grade_of_kv40 != grade_of_kv40 else [int(grade_of_kv40)]
        if band is None:
            near = min(ISO_VG_GRADES, key=lambda g: abs(g - lub.iso_vg))
            kv40 = "" if lub.kv40 is None else (f"; its kv40 {_num(lub.kv40)} mm2/s fits ISO VG {fits[0]}" if fits
                                                else f"; its kv40 {_num(lub.kv40)} mm2/s fits no ISO VG band")
            yield _warning("W012", origin, f"lubricant '{code}': iso_vg {_num(lub.iso_vg)} is not an ISO 3448 grade"
                                           f"{kv40}",
                           f"did you mean {near}? (grades: {', '.join(str(g) for g in ISO_VG_GRADES)})")
        elif lub.kv40 is not None and not band.minimum <= lub.kv40 <= band.maximum:
            yield _warning("W012", origin,
                           f"lubricant '{code}': kv40 {_num(lub.kv40)} mm2/s lies outside ISO VG {int(lub.iso_vg)}'s "
                           f"band {_num(band.minimum)} to {_num(band.maximum)} mm2/s (ISO 3448: midpoint +/-10 %)",
                           f"check both values; kv40 {_num(lub.kv40)} fits ISO VG {fits[0]}" if fits else
                           "check both values against the supplier's data sheet")


# -- sources --------------------------------------------------------------------------------------

_PLACEHOLDERS = {"tbd", "tbc", "todo", "n/a", "na", "none", "unknown", "?", "-", "see manual", "see the manual",
                 "see docs", "see documentation", "see oem", "manual", "standard", "various", "misc", "internet"}
# Words that say what kind of source it is: a standard, a manual, the site, the trade.
_SOURCE_WORDS = re.compile(
    r"\b(astm|iso|din|iec|en|ip|sae|api|agma|nfpa|stle|jis|bs)\b|§|clause|table|annex|manual|manufacturer|oem|"
    r"supplier|vendor|site|practice|rule of thumb|no source|from memory|editable default|handbook|datasheet|"
    r"data sheet|bulletin|procedure|specification", re.IGNORECASE)


def vague_source(source: str) -> str | None:
    """Why a source would not tell an auditor where a limit comes from, or None when it would."""
    text = source.strip()
    plain = re.sub(r"[\s.,;:!]+", " ", text.lower()).strip()
    if plain in _PLACEHOLDERS:
        return f"'{text}' is a placeholder"
    if len(plain.split()) < 2:
        return f"'{text}' is a single word"
    if not _SOURCE_WORDS.search(text):
        return f"'{text}' names no standard, manual, site practice or common practice"
    return None


def _vague_sources(ruleset: RuleSet):
    hint = ("name the standard and clause (e.g. 'ASTM D4378 §9.3'), the manual and its section, "
            "'site practice', or 'common practice, no source'")
    for rule in _all_rules(ruleset):
        if why := vague_source(rule.source):
            yield _warning("W010", rule.origin, f"rule '{rule.id}': its source is vague: {why}", hint)
    for caveat in ruleset.caveats:
        if caveat.source and (why := vague_source(caveat.source)):
            yield _warning("W010", caveat.origin, f"caveat '{caveat.id}': its source is vague: {why}", hint)


def _num(value) -> str:
    if isinstance(value, list):
        return "[" + ", ".join(_num(v) for v in value) + "]"
    return f"{value:.6g}"


# -- ester caps -----------------------------------------------------------------------------------

def _ester_caps(ruleset: RuleSet):
    """Rules reading a measure built on FTIR oxidation that a cap meant for esters leaves uncovered.

    Why: an ester's own carbonyl inflates every oxidation-derived value (rise, step, rate,
    differential), so a cap that lists `oxidation_rise` but not `oxidation_step` lets a site
    rule on the step grade an ester uncapped.
    """
    for caveat in ruleset.caveats:
        named = _ester_names(caveat.when)
        if named:
            yield _warning("W015", caveat.origin,
                           f"caveat '{caveat.id}' names ester base stocks one by one ({', '.join(named)}); "
                           "diesters, polyol esters and mixtures not listed escape it",
                           "write {field: base_stock_family, equals: ester} to match the whole ester family")
        if caveat.cap is None or not _about_esters(caveat.when):
            continue
        for rule in _all_rules(ruleset):
            uncovered = sorted(m for m in rule.reads - caveat.cap.measures if _built_on_oxidation(m))
            if uncovered:
                yield _warning("W014", rule.origin,
                               f"rule '{rule.id}' reads {', '.join(uncovered)}, built on FTIR oxidation, which the "
                               f"ester cap of caveat '{caveat.id}' does not cover",
                               f"add {', '.join(uncovered)} to the cap's measures of caveat '{caveat.id}'")


def _unknown_names(ruleset: RuleSet):
    """A `class` or `lubricant` condition naming what the rule set lacks (a typo, `hydraulics`): a
    sample of a class the rule set lacks is unrated, so such a test never holds on a graded one;
    a lubricant code outside the table only on rows that bring their own new-oil values."""
    known = {"class": set(ruleset.classes), "lubricant": set(ruleset.lubricants)}
    owners = [(rule, rule.when) for rule in _all_rules(ruleset) if isinstance(rule, ConditionRule)]
    owners += [(caveat, caveat.when) for caveat in ruleset.caveats]
    owners += [(caveat, caveat.cap.unless) for caveat in ruleset.caveats if caveat.cap and caveat.cap.unless]
    for owner, condition in owners:
        for leaf in leaves(condition) if condition is not None else ():
            if not isinstance(leaf, FieldTest) or leaf.field not in known:
                continue
            folded = {name.casefold(): name for name in known[leaf.field]}  # field tests ignore case
            for value in leaf.values:
                if value.strip().casefold() in folded:
                    continue
                close = difflib.get_close_matches(value, sorted(known[leaf.field]), n=1)
                kind = "rule" if isinstance(owner, ConditionRule) else "caveat"
                yield _warning("W018", owner.origin,
                               f"{kind} '{owner.id}' tests {leaf.field} '{value}', which the rule set does not have "
                               f"(its {'classes' if leaf.field == 'class' else 'lubricant codes'}: "
                               f"{', '.join(sorted(known[leaf.field]))})",
                               f"did you mean '{close[0]}'?" if close else
                               f"add '{value}' under `{'classes' if leaf.field == 'class' else 'lubricants'}:`, or "
                               f"correct the name")


def _about_esters(condition) -> bool:
    if condition is None:
        return False
    for leaf in leaves(condition):
        if isinstance(leaf, FieldTest) and leaf.field == "base_stock_family" and "ester" in leaf.values:
            return True
        if isinstance(leaf, FieldTest) and leaf.field == "base_stock" and any(
                family_of(v) == "ester" for v in leaf.values):
            return True
    return False


def _ester_names(condition) -> list:
    if condition is None:
        return []
    return sorted({v for leaf in leaves(condition) if isinstance(leaf, FieldTest) and leaf.field == "base_stock"
                   for v in leaf.values if family_of(v) == "ester"})


def _built_on_oxidation(measure: str) -> bool:
    return bool({"oxidation", "oxidation_differential"} & set(measure_needs(measure)))
