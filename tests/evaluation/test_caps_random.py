"""Random condition trees under random caps: the vectorized evaluator agrees with the per-row
oracle (tests/support/row_evaluator.py), which decides each sample the long way, Kleene logic and
the cap rule written out per row (a cap limits what its measures contribute: the rule keeps the
highest grade at which it still holds with the measures capped below that grade unknown).
Magnitudes are realistic: water 0-3000 ppm, acid rise 0-2 mg KOH/g, carbonyl rise -50 to 100
abs/cm, viscosity change -20 to 20 %, oil hours to 30,000 (limits.md ranges, common practice)."""

import random

import pytest
import yaml
from random_samples import random_samples
from row_evaluator import grade_row

from sumpwise import grade, load_ruleset

SPANS = {"water": (0, 3000), "an_rise": (0, 2), "oxidation_rise": (-50, 100), "kv40_change_pct": (-20, 20),
         "oil_hours": (0, 30000)}
GRADES = ["watch", "alert", "urgent"]


def _leaf(r):
    measure = r.choice(list(SPANS))
    low, high = SPANS[measure]
    test = r.choice(["above", "below", "between", "outside", "missing"])
    if test == "missing":
        return {"measure": measure, "missing": r.choice([True, False])}
    if test == "between":
        a, b = sorted(round(r.uniform(low, high), 2) for _ in range(2))
        return {"measure": measure, "between": [a, b + 1]}
    return {"measure": measure, test: round(r.uniform(0 if test == "outside" else low, high), 2)}


def _condition(r, depth=0):
    if depth > 2 or r.random() < 0.35:
        return _leaf(r)
    kind = r.choice(["all", "any", "not"])
    if kind == "not":
        return {"not": _condition(r, depth + 1)}
    return {kind: [_condition(r, depth + 1) for _ in range(r.randint(1, 3))]}


def _ruleset(r, folder):
    caveats = []
    for k in range(r.randint(1, 3)):
        caveat = {"id": f"cap-{k}", "message": "capped",
                  "when": r.choice([{"field": "base_stock_family", "equals": "ester"},
                                    {"field": "method", "equals": "direct"}, _condition(r)]),
                  "cap": {"measures": r.sample(list(SPANS), r.randint(1, 2)), "grade": r.choice(GRADES[:2])}}
        if r.random() < 0.5:
            caveat["cap"]["unless"] = _condition(r)
        caveats.append(caveat)
    doc = {"ruleset": "random-caps", "version": 1,
           "lubricants": {"COMP-46-PE": {"base_stock": "polyol-ester", "kv40": 46.3, "an": 0.08, "oxidation": 172.0},
                          "COMP-46-M": {"base_stock": "mineral", "kv40": 45.3, "an": 0.10, "oxidation": 1.5}},
           "classes": {"screw-compressor": {"rules": [
               {"id": f"rule-{i}", "when": _condition(r), "grade": r.choice(GRADES), "message": "m",
                "source": "site practice"} for i in range(6)]}},
           "caveats": caveats}
    path = folder / "random-caps.yaml"
    path.write_text(yaml.safe_dump(doc, sort_keys=False), encoding="utf-8")
    return load_ruleset(path)


@pytest.mark.parametrize("seed", range(12))
def test_engine_agrees_with_the_oracle_on_random_trees_under_random_caps(seed, tmp_path):
    r = random.Random(seed)
    ruleset = _ruleset(r, tmp_path)
    frame = random_samples(ruleset, 300, seed=seed)
    graded = grade(frame, ruleset)
    rows = frame.to_dict("records")
    for i, result in enumerate(graded.results()):
        level, fired = grade_row(ruleset, rows[i])
        got = {x.rule: (x.level, ruleset.level_of(x.capped_from) if x.capped_from else x.level)
               for x in result.reasons}
        assert (result.level, got) == (level, fired), rows[i]
