"""Properties of loading any rule set: a shipped rule set mutated, or one generated from parts,
is either valid (exit 0) or refused with problems naming the file (exit 2); never exit 1, never a hang."""

from __future__ import annotations

import math
import re
import sys

import yaml
from hypothesis import given, strategies as st

from conftest import run_cli
from property_inputs import GEARBOX, assert_no_bug, grade, sample_rows, to_csv

SHIPPED = GEARBOX.read_text(encoding="utf-8")
NUMBER = re.compile(r"(?<=[ \[{,])\d+(\.\d+)?(?=[,}\]\n ])")

# Replacements an editor slip or a hostile author can make: non-finite and huge numbers, aliases,
# deep nesting, control characters, tags, wrong types.
HOSTILE_VALUES = st.sampled_from([".nan", ".inf", "-.inf", "1.0e+999", "1" + "0" * 400, "*nowhere", "&a [*a]",
                                  "[" * 80 + "]" * 80, '"\\x1b[31m"', '"\\0"', "!!python/object:os.system",
                                  "~", "''", "[]", "{}", "-1", "1e3", "0x1F", "2026-03-02", "yes", '"\\ud800"'])


@st.composite
def mutated_ruleset(draw) -> str:
    text = SHIPPED
    for _ in range(draw(st.integers(1, 3))):
        kind = draw(st.sampled_from(["number", "cut", "insert", "duplicate-line"]))
        if kind == "number":
            spots = list(NUMBER.finditer(text))
            spot = spots[draw(st.integers(0, len(spots) - 1))]
            text = text[:spot.start()] + draw(HOSTILE_VALUES) + text[spot.end():]
        elif kind == "cut":
            at = draw(st.integers(0, len(text)))
            text = text[:at] + text[at + draw(st.integers(1, 40)):]
        elif kind == "insert":
            at = draw(st.integers(0, len(text)))
            text = text[:at] + draw(st.one_of(HOSTILE_VALUES, st.text(max_size=8))) + text[at:]
        else:
            lines = text.split("\n")
            at = draw(st.integers(0, len(lines) - 1))
            text = "\n".join(lines[:at + 1] + lines[at:])
    return text


@given(text=mutated_ruleset())
def test_a_mutated_shipped_rule_set_is_valid_or_refused_naming_the_file(text, tmp_path_factory):
    path = tmp_path_factory.mktemp("rules") / "gearbox.yaml"
    path.write_text(text, encoding="utf-8", errors="surrogatepass")
    run = run_cli("check", path)
    assert_no_bug(run.code, run.err)
    assert run.code in (0, 2)
    if run.code == 2:
        assert str(path) in run.err


LARGEST_FLOAT = int(sys.float_info.max)
LIMIT = st.one_of(st.floats(allow_nan=True, allow_infinity=True), st.integers(-10**400, 10**400),
                  st.floats(0, 5000, allow_nan=False))


@st.composite
def generated_ruleset(draw) -> dict:
    """A water ladder whose limits may be anything a YAML number can be."""
    grades = ["normal", "watch", "alert", "urgent"]
    steps = draw(st.lists(st.sampled_from(grades[1:]), min_size=1, max_size=3, unique=True))
    ladder = {grade: draw(LIMIT) for grade in steps}
    return {"ruleset": "brackwater-generated", "version": draw(st.integers(1, 5)),
            "title": "Brackwater Point, generated water limits",
            "classes": {"gearbox": {"rules": [{
                "id": "water-high", "measure": "water", draw(st.sampled_from(["above", "below"])): ladder,
                "message": "Water is past its limit", "source": "site practice"}]}}}


@given(ruleset=generated_ruleset(), rows=sample_rows(max_rows=4))
def test_a_generated_rule_set_never_makes_a_bug_and_never_grades_with_a_non_finite_limit(ruleset, rows,
                                                                                       tmp_path_factory):
    path = tmp_path_factory.mktemp("rules") / "generated.yaml"
    path.write_text(yaml.safe_dump(ruleset), encoding="utf-8")
    result = grade(to_csv(rows), rules=path)
    assert_no_bug(result.code, result.err)
    rule = ruleset["classes"]["gearbox"]["rules"][0]
    limits = rule.get("above", rule.get("below"))
    finite = all(math.isfinite(v) if isinstance(v, float) else abs(v) <= LARGEST_FLOAT for v in limits.values())
    if not finite:
        assert result.code == 2 and "Y007" in result.err  # refused, never graded against nan or inf
