"""A plain per-row Python evaluator of a compiled rule set.

Two uses: the benchmark's baseline (how fast the obvious loop is), and the tests'
oracle, written independently of sumpwise.vocabulary.measures and sumpwise.evaluation.evaluator, which must agree
with the vectorized engine on every grade and every fired rule.
"""

from __future__ import annotations

import math

from sumpwise.ruleset.model import AllOf, AnyOf, FieldTest, LadderRule, MeasureTest, MissingTest
from sumpwise.derive.viscosity import viscosity_index


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
    lub = lubricants.get(_text(row.get("lubricant")))

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
    texts = {k: _text(v) for k, v in row.items()}
    base = texts.get("base_stock") or (lub.base_stock if lub is not None else None)
    texts["base_stock"] = base
    texts["method"] = method
    texts["base_stock_family"] = _family(base)
    return {"numbers": out, "texts": texts}


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


def truth(condition, sample) -> bool | None:
    """True, False, or None for unknown (Kleene logic)."""
    numbers, texts = sample["numbers"], sample["texts"]
    if isinstance(condition, MeasureTest):
        value = numbers.get(condition.measure)
        return None if value is None else _test(condition.test, value, condition.limit)
    if isinstance(condition, MissingTest):
        return (numbers.get(condition.measure) is None) == condition.missing
    if isinstance(condition, FieldTest):
        value = texts.get(condition.field)
        if value is None:
            return None
        return value.casefold() in {v.strip().casefold() for v in condition.values}
    if isinstance(condition, AllOf):
        parts = [truth(p, sample) for p in condition.parts]
        if any(p is False for p in parts):
            return False
        return True if all(p is True for p in parts) else None
    if isinstance(condition, AnyOf):
        parts = [truth(p, sample) for p in condition.parts]
        if any(p is True for p in parts):
            return True
        return False if all(p is False for p in parts) else None
    inner = truth(condition.part, sample)
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
            value = sample["numbers"].get(rule.measure)
            if value is None:
                continue
            level = 0
            for step_level, limit in rule.steps:
                if _test(rule.test, value, limit):
                    level = step_level
        else:
            outcome = truth(rule.when, sample)
            if outcome is None:
                continue
            level = rule.level if outcome else 0
        evaluated = True
        final = level
        for cap in caps:
            if rule.reads & cap.measures:
                final = min(final, cap.level)
        if final > 0:
            fired[rule.id] = (final, level)
    if not evaluated:
        return None, {}
    return max([0] + [f for f, _ in fired.values()]), fired
