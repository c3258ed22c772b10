"""What each limit test means, once: how it is evaluated, where it holds, how it reads.

The evaluator applies `crossed` (one line of numpy, NaN compares false), lint reasons on
`region` (the values for which the test holds, as intervals), and the narrative and the
report say it with `phrase`. Adding a test is one entry here, the schema keyword, and the
per-row oracle in the tests.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

from sumpwise.vocabulary.intervals import EVERYTHING, INF, Span


def _outside(values, limit):
    if isinstance(limit, tuple):
        return (values < limit[0]) | (values > limit[1])
    return np.abs(values) > limit


def _outside_region(limit) -> tuple:
    low, high = limit if isinstance(limit, tuple) else (-limit, limit)
    if low > high:  # |value| > a negative number: every value
        return EVERYTHING
    return Span(-INF, low), Span(high, INF)


def _as_pair(limit) -> tuple:
    return limit if isinstance(limit, tuple) else (-limit, limit)


def _wider(lower, higher) -> bool:
    """An `outside` limit for a higher grade must lie wider on both sides (x compares as (-x, x))."""
    lo, hi = _as_pair(lower), _as_pair(higher)
    return hi[0] < lo[0] and hi[1] > lo[1]


def _outside_phrase(limit, number: Callable, unit: str) -> str:
    if isinstance(limit, (tuple, list)):
        return f"outside {number(limit[0])} to {number(limit[1])}{unit}"
    return f"more than {number(limit)}{unit} either side of zero"


@dataclass(frozen=True)
class LimitTest:
    """One test a rule can apply to a measure.

    `pair` says what the limit is: "no" a number, "yes" a (low, high) pair, "either".
    `in_ladder` says how a ladder's limits must move from grade to grade (`stricter(lower,
    higher)` and the word for it); a test with none cannot be a ladder.
    """

    name: str
    pair: str
    crossed: Callable  # (values array, limit) -> bool array; NaN compares false
    region: Callable  # limit -> tuple of Span: where the test holds
    phrase: Callable  # (limit, number formatter, unit text) -> words
    stricter: Callable | None = None  # (limit for the lower grade, for the higher) -> in ladder order
    stricter_word: str = ""


LIMIT_TESTS = {test.name: test for test in (
    LimitTest("above", "no", lambda values, limit: values > limit, lambda limit: (Span(limit, INF),),
              lambda limit, number, unit: f"above {number(limit)}{unit}", lambda lo, hi: hi > lo, "higher"),
    LimitTest("below", "no", lambda values, limit: values < limit, lambda limit: (Span(-INF, limit),),
              lambda limit, number, unit: f"below {number(limit)}{unit}", lambda lo, hi: hi < lo, "lower"),
    LimitTest("outside", "either", _outside, _outside_region, _outside_phrase, _wider, "wider"),
    LimitTest("between", "yes", lambda values, limit: (values >= limit[0]) & (values <= limit[1]),
              lambda limit: (Span(limit[0], limit[1], True, True),),
              lambda limit, number, unit: f"between {number(limit[0])} and {number(limit[1])}{unit}"),
)}

# The tests a ladder rule can use, in the order the language lists them.
LADDER_TESTS = tuple(name for name, test in LIMIT_TESTS.items() if test.stricter is not None)

# How the text tests of `field:` conditions and the `missing:` test read.
TEXT_TEST_WORDS = {"in": "one of", "equals": "equal to", "missing": "missing"}


def unit_text(unit: str | None) -> str:
    """A unit as it follows a number: ' mg KOH/g', '%', or nothing."""
    if not unit:
        return ""
    return "%" if unit == "%" else f" {unit}"


def limit_phrase(test: str, limit, number: Callable, unit: str | None = None) -> str:
    """A limit in words: 'above 0.2 mg KOH/g', 'more than 5% either side of zero', 'one of a, b'."""
    known = LIMIT_TESTS.get(test)
    if known is not None:
        return known.phrase(tuple(limit) if isinstance(limit, list) else limit, number, unit_text(unit))
    if isinstance(limit, (list, tuple)):
        return f"{TEXT_TEST_WORDS.get(test, test)} {', '.join(number(v) for v in limit)}"
    return f"{TEXT_TEST_WORDS.get(test, test)} {number(limit)}{unit_text(unit)}"
