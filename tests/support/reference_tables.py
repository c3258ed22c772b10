"""The tables of docs/rule-language.md that restate the vocabulary, generated from it.

tests/ruleset/test_rule_language.py fails when the reference and these differ, so the
reference cannot drift from the engine. To refresh the reference after changing the
vocabulary: `python tests/support/reference_tables.py` prints every table with its marker.
"""

from __future__ import annotations

import math

from sumpwise.results.facts import ENGINE_CAVEAT_ORDER
from sumpwise.ruleset.compiler import domain_words
from sumpwise.vocabulary.limit_tests import LIMIT_TESTS, TEXT_TEST_WORDS
from sumpwise.vocabulary.measures import READINGS, ROW_DERIVED, TREND_BASES
from sumpwise.vocabulary.problems import PROBLEM_CODES
from sumpwise.vocabulary.units import CANONICAL, FACTORS
from sumpwise.vocabulary.measures import UNIT_FAMILY

_PAIR = {"no": "a number", "yes": "a pair [low, high]", "either": "a number (a size either side of zero) or a pair [low, high]"}


def _unit(unit: str) -> str:
    return f"`{unit}`" if unit else "(none)"


def readings() -> str:
    rows = ["| measure | unit | meaning | can take |", "|---|---|---|---|"]
    for m in READINGS:
        can_take = domain_words(m.domain, m.unit) if m.domain[0].low > -math.inf else "any value"
        rows.append(f"| `{m.name}` | {_unit(m.unit)} | {m.meaning} | {can_take} |")
    return "\n".join(rows)


def derived() -> str:
    rows = ["| measure | unit | meaning | computed from |", "|---|---|---|---|"]
    for m in ROW_DERIVED:
        rows.append(f"| `{m.name}` | {_unit(m.unit)} | {m.meaning} | {', '.join(f'`{n}`' for n in m.needs)} |")
    return "\n".join(rows)


def trends() -> str:
    rows = ["| reading | trend measures |", "|---|---|"]
    for base in TREND_BASES:
        rows.append(f"| `{base}` | `{base}_step`, `{base}_step_per_1000h`, `{base}_rising` |")
    return "\n".join(rows)


def tests() -> str:
    rows = ["| test | limit | holds when |", "|---|---|---|"]
    for test in LIMIT_TESTS.values():
        example = (1.0, 2.0) if test.pair == "yes" else 5.0
        rows.append(f"| `{test.name}` | {_PAIR[test.pair]} | {test.phrase(example, lambda v: f'{v:g}', '')} |")
    for name, words in TEXT_TEST_WORDS.items():
        rows.append(f"| `{name}` | {'true or false' if name == 'missing' else 'text'} | {words} |")
    return "\n".join(rows)


def units() -> str:
    rows = ["| `units:` key | canonical unit | also accepted |", "|---|---|---|"]
    for key, family in sorted(UNIT_FAMILY.items()):
        others = ", ".join(f"`{u}` (1 {u} = {f:,g} {CANONICAL[family]})" for u, f in FACTORS[family].items()
                           if u != CANONICAL[family])
        rows.append(f"| `{key}` | `{CANONICAL[family]}` | {others} |")
    return "\n".join(rows)


def caveats() -> str:
    rows = ["| engine caveat | why |", "|---|---|"]
    for caveat in ENGINE_CAVEAT_ORDER:
        rows.append(f"| `{caveat.id}` | {caveat.source.removeprefix('sumpwise engine: ')} |")
    return "\n".join(rows)


def codes() -> str:
    rows = ["| code | problem |", "|---|---|"]
    rows += [f"| `{code}` | {text} |" for code, text in PROBLEM_CODES.items()]
    return "\n".join(rows)


TABLES = {"readings": readings, "derived": derived, "trends": trends, "tests": tests, "units": units,
          "caveats": caveats, "codes": codes}


if __name__ == "__main__":
    for name, make in TABLES.items():
        print(f"<!-- generated: {name} -->\n{make()}\n<!-- end: {name} -->\n")
