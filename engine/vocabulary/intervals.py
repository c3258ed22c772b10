"""Sets of values as unions of intervals: where a limit test holds, what a measure can take.

Inclusion and emptiness are decided by testing the finitely many points where membership
can change (every interval end and a point between each two), which is exact for intervals.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

INF = math.inf


@dataclass(frozen=True)
class Span:
    """One interval of values; `low_in`/`high_in` say whether its ends belong to it."""

    low: float
    high: float
    low_in: bool = False
    high_in: bool = False

    def holds(self, value: float) -> bool:
        above_low = value > self.low or (self.low_in and value == self.low)
        below_high = value < self.high or (self.high_in and value == self.high)
        return above_low and below_high


EVERYTHING = (Span(-INF, INF),)


def inside(spans: tuple, value: float) -> bool:
    return any(span.holds(value) for span in spans)


def _points(*regions: tuple) -> list[float]:
    ends = sorted({end for spans in regions for span in spans for end in (span.low, span.high) if math.isfinite(end)})
    if not ends:
        return [0.0]
    between = [(a + b) / 2.0 for a, b in zip(ends, ends[1:])]
    return [ends[0] - 1.0, *ends, *between, ends[-1] + 1.0]


def can_hold(*regions: tuple) -> bool:
    """Some value lies in every one of the regions."""
    return any(all(inside(spans, p) for spans in regions) for p in _points(*regions))


def covered(part: tuple, whole: tuple, domain: tuple) -> bool:
    """Every possible value (in `domain`) of `part` lies in `whole`."""
    return all(inside(whole, p) for p in _points(part, whole, domain) if inside(part, p) and inside(domain, p))
