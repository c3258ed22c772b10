"""A plain per-row Python evaluator of a compiled rule set.

Two uses: the benchmark's baseline (how fast the obvious loop is), and the tests'
oracle, written independently of sumpwise.vocabulary.measures and sumpwise.evaluation.evaluator, which must agree
with the vectorized engine on every grade and every fired rule.

Censored readings (`<0.05`, `>5000`, `<=3`) are intervals here too, decided independently
of the engine's region arithmetic: a test is tried at the interval's ends (or just inside
an open end), at every limit inside it and between those points; it is known when all
agree. Ends follow each measure's range as the lab can report it (viscosities above 0,
acid and base number, water, hours and RPVOT from 0; from memory of what a lab reports).
"""

from __future__ import annotations

import math
import re

from sumpwise.ruleset.model import AllOf, AnyOf, FieldTest, LadderRule, MeasureTest, MissingTest
from sumpwise.derive.viscosity import viscosity_index


_FROM_ZERO = {"an", "bn", "water", "oil_hours", "rpvot"}
_ABOVE_ZERO = {"kv40", "kv100"}
_AT_MOST = {"water": 1_000_000.0}  # ppm: water is at most the whole sample
_CENSORED = re.compile(r"^(<=|>=|<|>)\s*([0-9.eE+-]+)$")


class Interval:
    """An interval [lo, hi], each end possibly open; infinite ends are open."""

    def __init__(self, lo, hi, lo_in, hi_in):
        self.lo, self.hi = lo, hi
        self.lo_in, self.hi_in = lo_in and math.isfinite(lo), hi_in and math.isfinite(hi)

    def points(self, limits):
        lo = self.lo if self.lo_in else (math.nextafter(self.lo, math.inf) if math.isfinite(self.lo) else -1e300)
        hi = self.hi if self.hi_in else (math.nextafter(self.hi, -math.inf) if math.isfinite(self.hi) else 1e300)
        inner = sorted({lo, hi} | {x for x in limits if lo <= x <= hi})
        between = [(a + b) / 2 for a, b in zip(inner, inner[1:])]
        near = [math.nextafter(x, d) for x in inner for d in (-math.inf, math.inf)]
        return [p for p in inner + between + near if lo <= p <= hi]


def _censored(name, value):
    """An Interval for a censored cell of measure `name`, else None."""
    if not isinstance(value, str):
        return None
    found = _CENSORED.match(value.strip())
    if not found:
        return None
    sign, bound = found.group(1), float(found.group(2))
    floor = 0.0 if name in _FROM_ZERO | _ABOVE_ZERO else -math.inf
    if sign.startswith("<"):
        return Interval(floor, bound, name in _FROM_ZERO, sign == "<=")
    return Interval(bound, _AT_MOST.get(name, math.inf), sign == ">=", name in _AT_MOST)


def _map(interval, f, rising=True):
    """The interval through a monotonic function f (ends rounded like the engine's measures)."""
    lo, hi = round(f(interval.lo), 9), round(f(interval.hi), 9)
    if not rising:
        return Interval(hi, lo, interval.hi_in, interval.lo_in)
    return Interval(lo, hi, interval.lo_in, interval.hi_in)


def _num(value):
    if value is None or value == "":
        return None
    try:
        number = float(value)
    except (TypeError, ValueError):
        return None
    return None if math.isnan(number) else number


def _text(value):
    if value is None:
        return None
    if isinstance(value, float) and math.isnan(value):
        return None
    text = str(value).strip()
    return text or None


def derive_row(row: dict, lubricants: dict) -> dict:
    """Measures of one sample, computed the long way."""
    out = {k: _num(v) for k, v in row.items()}
    lub = _lubricant(lubricants, _text(row.get("lubricant")))

    def reference(name):
        own = _num(row.get(f"new_{name}"))
        if own is not None:
            return own
        return getattr(lub, name) if lub is not None else None

    method = (_text(row.get("method")) or "direct").lower()
    if _text(row.get("method")) is None and out.get("oxidation") is None and out.get("oxidation_differential") is not None:
        method = "subtraction"  # only a differential reading given (a column mapped to it)
    if method == "differential":  # ASTM D7418's word for spectral subtraction
        method = "subtraction"
    new = {name: reference(name) for name in ("kv40", "kv100", "an", "bn", "oxidation", "rpvot")}
    if method == "subtraction":
        # a differential reading is its own measure; the direct one and its rise stay empty (issue 11)
        if out.get("oxidation") is not None:
            out["oxidation_differential"] = out["oxidation"]
        out["oxidation"] = None

    def diff(a, b):
        return None if a is None or b is None else round(a - b, 9)

    def pct(a, b):
        return None if a is None or b is None or b == 0 else round((a - b) / b * 100.0, 9)

    def ratio(a, b):
        return None if a is None or b is None or b == 0 else round(a / b * 100.0, 9)

    hours = out.get("oil_hours")
    out["kv40_change_pct"] = pct(out.get("kv40"), new["kv40"])
    out["kv100_change_pct"] = pct(out.get("kv100"), new["kv100"])
    out["an_rise"] = diff(out.get("an"), new["an"])
    out["oxidation_rise"] = diff(out.get("oxidation"), new["oxidation"])
    for rate, rise in (("oxidation_rise_per_1000h", "oxidation_rise"), ("an_rise_per_1000h", "an_rise"),
                       ("oxidation_differential_per_1000h", "oxidation_differential")):
        unrounded = None
        if out.get(rise) is not None and hours is not None and hours > 0:
            unrounded = round(out[rise] * (1000.0 / hours), 9)
        out[rate] = unrounded
    out["bn_retained_pct"] = ratio(out.get("bn"), new["bn"])
    out["rpvot_retained_pct"] = ratio(out.get("rpvot"), new["rpvot"])
    out["bn_minus_an"] = diff(out.get("bn"), out.get("an"))
    kv40, kv100 = out.get("kv40"), out.get("kv100")
    vi = None
    if kv40 is not None and kv100 is not None:
        value = float(viscosity_index([kv40], [kv100])[0])
        vi = None if math.isnan(value) else value
    out["vi"] = vi
    intervals = {name: _censored(name, row.get(name)) for name in ("kv40", "kv100", "an", "bn", "oxidation",
                                                                    "nitration", "sulfation", "antiwear", "soot",
                                                                    "water", "oil_hours", "rpvot")}
    intervals = {k: v for k, v in intervals.items() if v is not None}
    if method == "subtraction" and "oxidation" in intervals:  # a censored differential reading
        intervals["oxidation_differential"] = intervals.pop("oxidation")
        out["oxidation_differential"] = None

    def carry(name, source, f, rising=True):
        if source in intervals and all(x is not None for x in f.__defaults__ or ()):
            try:
                intervals[name] = _map(intervals[source], f, rising)
            except (TypeError, ZeroDivisionError):
                pass

    for name, ref in (("kv40", "kv40"), ("kv100", "kv100")):
        if new[ref] not in (None, 0):
            carry(f"{name}_change_pct", name, lambda x, n=new[ref]: (x - n) / n * 100.0)
    if new["an"] is not None:
        carry("an_rise", "an", lambda x, n=new["an"]: x - n)
    if new["oxidation"] is not None:
        carry("oxidation_rise", "oxidation", lambda x, n=new["oxidation"]: x - n)
    if hours is not None and hours > 0:
        carry("oxidation_rise_per_1000h", "oxidation_rise", lambda x, h=hours: x * (1000.0 / h))
        carry("an_rise_per_1000h", "an_rise", lambda x, h=hours: x * (1000.0 / h))
        carry("oxidation_differential_per_1000h", "oxidation_differential", lambda x, h=hours: x * (1000.0 / h))
    if new["bn"] not in (None, 0):
        carry("bn_retained_pct", "bn", lambda x, n=new["bn"]: x / n * 100.0)
    if new["rpvot"] not in (None, 0):
        carry("rpvot_retained_pct", "rpvot", lambda x, n=new["rpvot"]: x / n * 100.0)
    bn, an = intervals.get("bn"), intervals.get("an")
    if bn is not None and an is None and out.get("an") is not None:
        carry("bn_minus_an", "bn", lambda x, a=out["an"]: x - a)
    elif an is not None and bn is None and out.get("bn") is not None:
        carry("bn_minus_an", "an", lambda x, b=out["bn"]: b - x, rising=False)
    elif an is not None and bn is not None:
        intervals["bn_minus_an"] = Interval(round(bn.lo - an.hi, 9), round(bn.hi - an.lo, 9),
                                            bn.lo_in and an.hi_in, bn.hi_in and an.lo_in)
    texts = {k: _text(v) for k, v in row.items()}
    base = texts.get("base_stock") or (lub.base_stock if lub is not None else None)
    texts["base_stock"] = base
    texts["method"] = method
    texts["base_stock_family"] = _family(base)
    return {"numbers": out, "texts": texts, "intervals": intervals, "new": new}


def _lubricant(lubricants: dict, code):
    """The table's entry for a code as written, else for the one code equal to it ignoring case."""
    if code is None or code in lubricants:
        return lubricants.get(code)
    same = [name for name in lubricants if name.casefold() == code.casefold()]
    return lubricants[same[0]] if len(same) == 1 else None


# Written out here, not read from sumpwise.vocabulary.base_stocks: any carbonyl ester part makes the
# family "ester"; a phosphate ester has no carbonyl (IR correlation tables, from memory).
_FAMILIES = {"mineral": "hydrocarbon", "pao": "hydrocarbon", "ester": "ester", "diester": "ester",
             "polyol-ester": "ester", "phosphate-ester": "phosphate-ester", "pag": "pag"}


def _family(base):
    if base is None or any(part not in _FAMILIES for part in base.split("+")):
        return None
    families = [_FAMILIES[part] for part in base.split("+")]
    return "ester" if "ester" in families else "+".join(dict.fromkeys(families))


def _test(test, value, limit) -> bool:
    if test == "above":
        return value > limit
    if test == "below":
        return value < limit
    if test == "between":
        return limit[0] <= value <= limit[1]
    if isinstance(limit, tuple):
        return value < limit[0] or value > limit[1]
    return abs(value) > limit


def _limits(limit):
    return list(limit) if isinstance(limit, tuple) else [limit, -limit]


def measure_truth(sample, measure, test, limit) -> bool | None:
    """A limit test on a number, or on a censored reading's interval (known when all its points agree)."""
    interval = sample["intervals"].get(measure)
    if interval is not None:
        seen = {_test(test, p, limit) for p in interval.points(_limits(limit))}
        return seen.pop() if len(seen) == 1 else None
    value = sample["numbers"].get(measure)
    return None if value is None else _test(test, value, limit)


def truth(condition, sample, masked=frozenset()) -> bool | None:
    """True, False, or None for unknown (Kleene logic); limit tests of `masked` measures are unknown."""
    numbers, texts = sample["numbers"], sample["texts"]
    if isinstance(condition, MeasureTest) and condition.measure in masked:
        return None
    if isinstance(condition, MeasureTest):
        return measure_truth(sample, condition.measure, condition.test, condition.limit)
    if isinstance(condition, MissingTest):
        absent = numbers.get(condition.measure) is None and condition.measure not in sample["intervals"]
        return absent == condition.missing
    if isinstance(condition, FieldTest):
        value = texts.get(condition.field)
        if value is None:
            return None
        return value.casefold() in {v.strip().casefold() for v in condition.values}
    if isinstance(condition, AllOf):
        parts = [truth(p, sample, masked) for p in condition.parts]
        if any(p is False for p in parts):
            return False
        return True if all(p is True for p in parts) else None
    if isinstance(condition, AnyOf):
        parts = [truth(p, sample, masked) for p in condition.parts]
        if any(p is True for p in parts):
            return True
        return False if all(p is False for p in parts) else None
    inner = truth(condition.part, sample, masked)
    return None if inner is None else not inner


def grade_row(ruleset, row: dict):
    """(level or None for unrated, {rule id: (final level, raw level)} of fired rules)."""
    sample = derive_row(row, ruleset.lubricants)
    class_name = _text(row.get("class"))
    if class_name not in ruleset.classes:
        return None, {}
    caps = []
    for caveat in ruleset.caveats:
        if caveat.cap is not None and truth(caveat.when, sample) is True:
            lifted = caveat.cap.unless is not None and truth(caveat.cap.unless, sample) is True
            if not lifted:
                caps.append(caveat.cap)
    fired, evaluated = {}, False
    for rule in ruleset.rules_for(class_name):
        if isinstance(rule, LadderRule):
            outcomes = [(step_level, measure_truth(sample, rule.measure, rule.test, limit))
                        for step_level, limit in rule.steps]
            crossed = [step_level for step_level, held in outcomes if held is True]
            if not crossed and any(held is None for _, held in outcomes):
                continue  # nothing known crossed, something undecided: not evaluated
            level = max(crossed, default=0)
        else:
            outcome = truth(rule.when, sample)
            if outcome is None:
                continue
            level = rule.level if outcome else 0
        evaluated = True
        final = _capped(rule, level, [cap for cap in caps if rule.reads & cap.measures], sample)
        if final > 0:
            fired[rule.id] = (final, level)
    if not evaluated:
        return None, {}
    return max([0] + [f for f, _ in fired.values()]), fired


def _capped(rule, level: int, caps: list, sample) -> int:
    """A fired rule's level under the caps in force on measures it reads: the highest of its own
    level and the caps' lower levels at which its outcome still holds with every measure capped
    below that level unknown (a ladder reads its one measure: the lowest cap's level)."""
    if level == 0 or not caps:
        return level
    if isinstance(rule, LadderRule):
        return min([level] + [cap.level for cap in caps])
    for candidate in sorted({level} | {cap.level for cap in caps if cap.level < level}, reverse=True):
        masked = {m for cap in caps if cap.level < candidate for m in cap.measures}
        if truth(rule.when, sample, masked) is True:
            return candidate
    raise AssertionError("a fired rule holds with nothing masked")
