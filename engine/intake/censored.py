"""Readings a lab writes as a bound or a word: `<0.05`, `>5000`, `ND`, `N/A`, `-`.

A censored reading is an interval, never its bound's number: `<50` is somewhere in
[0, 50), `>5000` somewhere above 5000. Intake keeps two text columns beside the
measure's (then missing) number: `<measure>:censored`, the interval in the engine's
unit and spelling (`<50`, `<=0.05`, `>5000`), and `<measure>:written`, the cell as the
lab wrote it. Derivation turns the first into bound columns (see `bounds`); records
show the second. Both are text, so a ledger stores and replays them like any field.

Work is per distinct cell text, not per row: a million rows hold a handful of spellings.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
import pandas as pd

from sumpwise.vocabulary.measures import DECIMALS, domain_of

CENSORED_SUFFIX = ":censored"
WRITTEN_SUFFIX = ":written"

# Cells that mean "no reading" (compared stripped and case-folded). An empty cell is one too.
MISSING_SPELLINGS = ("-", "--", "---", "\u2013", "\u2014", "n/a", "na", "n.a.", "nr", "n.r.", "not tested",
                     "not reported", "nt")
# Cells that mean "not detected": below the column's detection limit when the column map
# gives one, else missing.
# `<LOD`: below the limit of detection, as IUPAC names it (a spelling of `<DL`).
NOT_DETECTED_SPELLINGS = ("nd", "n.d.", "n.d", "n. d.", "not detected", "<dl", "< dl", "bdl", "<lod", "< lod")
# Cells that mean "below the limit of quantitation": detected or not, below the lowest value the method
# reports (the LOQ, as IUPAC and ICH Q2(R1) name it; `BLQ` common practice, no source). The LOQ lies above
# the detection limit (ICH Q2(R1): about 10 sigma against 3.3), so the map's detection limit cannot bound
# such a cell: its `quantitation_limit` does, else the reading is missing.
BELOW_QUANTITATION_SPELLINGS = ("<loq", "< loq", "<lq", "< lq", "blq", "bloq", "below loq")
# Cells whose meaning is no one value or bound: `trace` is a reading seen but not measured, which labs
# use both for "below the reporting limit" and for "detected, small" (common practice, no source). The
# row is refused (D025), not guessed as missing (a water reading that may be well above 0 dropped) or 0.
AMBIGUOUS_SPELLINGS = ("trace", "traces", "tr", "tr.", "trc", "trace amount", "spur", "spuren")

_BOUND = re.compile(r"^(<=|>=|<|>|\u2264|\u2265)\s*(\S.*)$")
_SIGN = {"<": "<", ">": ">", "<=": "<=", ">=": ">=", "\u2264": "<=", "\u2265": ">="}


@dataclass(frozen=True)
class CensoredCells:
    """What the cells that are not plain numbers of one column turned out to be.

    Arrays are aligned with the column: `censored` text (or None), `held` (where that text
    is: a mask, so callers need not compare a million objects with None), `bad` (neither
    censored nor a spelling of "no reading", or a bound that is not a finite number: the row
    is rejected) and `ambiguous` (a word such as `trace` whose meaning is not one bound: the
    row is rejected). The rest (`N/A`, ND without a detection limit) stay missing.
    """

    censored: np.ndarray
    held: np.ndarray
    bad: np.ndarray
    ambiguous: np.ndarray


def number_text(value: float) -> str:
    """A bound as the engine spells it: rounded like derived measures, no binary noise."""
    value = round(float(value), DECIMALS)
    return repr(int(value)) if value.is_integer() and abs(value) < 1e15 else repr(value)


def numbers_text(values: np.ndarray) -> np.ndarray:
    """number_text of each value, each distinct value spelled once (readings repeat), "(none)" where missing."""
    codes, uniques = pd.factorize(values)
    return np.array([number_text(u) for u in uniques.tolist()] + ["(none)"], dtype=object)[codes]


def read_censored(text: np.ndarray, candidates: np.ndarray, decimal: str, factor: float,
                  detection_limit: float | None, quantitation_limit: float | None = None) -> CensoredCells:
    """Classify the `candidates` cells of `text` (stripped cell texts) that are not numbers.

    `factor` converts a bound to the engine's unit; `detection_limit` and `quantitation_limit`
    are already in it.
    """
    n = len(text)
    censored = np.full(n, None, dtype=object)
    held, bad, ambiguous = np.zeros(n, dtype=bool), np.zeros(n, dtype=bool), np.zeros(n, dtype=bool)
    if not candidates.any():
        return CensoredCells(censored, held, bad, ambiguous)
    at = np.flatnonzero(candidates)
    codes, uniques = pd.factorize(text[at])
    kinds = np.zeros(len(uniques), dtype=np.int8)  # 0 bad, 1 censored, 2 missing, 3 ambiguous
    spelled = np.full(len(uniques), None, dtype=object)
    for k, cell in enumerate(uniques):
        kinds[k], spelled[k] = _classify(str(cell), decimal, factor, detection_limit, quantitation_limit)
    kind = kinds[codes]
    censored[at[kind == 1]] = spelled[codes][kind == 1]
    held[at[kind == 1]] = True
    bad[at[kind == 0]] = True
    ambiguous[at[kind == 3]] = True
    return CensoredCells(censored, held, bad, ambiguous)


def _classify(cell: str, decimal: str, factor: float, detection_limit: float | None,
              quantitation_limit: float | None = None) -> tuple[int, str | None]:
    folded = cell.strip().casefold()
    if folded in MISSING_SPELLINGS or folded == "":
        return 2, None
    if folded in AMBIGUOUS_SPELLINGS:
        return 3, None
    for spellings, limit in ((NOT_DETECTED_SPELLINGS, detection_limit),
                             (BELOW_QUANTITATION_SPELLINGS, quantitation_limit)):
        if folded in spellings:
            return (2, None) if limit is None else (1, "<" + number_text(limit))
    found = _BOUND.match(cell.strip())
    if not found:
        return 0, None
    number = found.group(2).strip()
    if decimal != ".":
        if "." in number:  # `<1.000` where ',' is the decimal mark: 1 or 1000? not guessed
            return 0, None
        number = number.replace(decimal, ".")
    try:
        bound = float(number)
    except ValueError:
        return 0, None
    if not np.isfinite(bound) or number.casefold().strip("+-") in ("nan", "inf", "infinity"):
        return 0, None
    return 1, _SIGN[found.group(1)] + number_text(bound * factor)


@dataclass(frozen=True)
class Bounds:
    """Per-row intervals of one measure: `low`/`high` (±inf when open-ended), whether each end
    is excluded, and `written` text for records. Only rows where `censored` is set count."""

    censored: np.ndarray
    low: np.ndarray
    high: np.ndarray
    low_open: np.ndarray
    high_open: np.ndarray
    written: np.ndarray


def bounds(measure: str, censored_text: np.ndarray, written: np.ndarray) -> Bounds:
    """Intervals from the `:censored` texts of a reading; the other end is the measure's domain
    (water `>1000` is (1000, 1,000,000] ppm: inside `between: [500, 1000000]`, not undecided)."""
    n = len(censored_text)
    low, high = np.full(n, -np.inf), np.full(n, np.inf)
    low_open, high_open = np.ones(n, dtype=bool), np.ones(n, dtype=bool)
    codes, uniques = pd.factorize(censored_text, use_na_sentinel=True)
    floor, top = domain_of(measure)[0], domain_of(measure)[-1]
    for k, text in enumerate(uniques):
        rows = codes == k
        found = _BOUND.match(str(text))
        sign, bound = _SIGN[found.group(1)], float(found.group(2))
        if sign in ("<", "<="):
            high[rows], high_open[rows] = bound, sign == "<"
            low[rows], low_open[rows] = floor.low, not floor.low_in
        else:
            low[rows], low_open[rows] = bound, sign == ">"
            high[rows], high_open[rows] = top.high, not top.high_in
    return Bounds(codes >= 0, low, high, low_open, high_open, np.asarray(written, dtype=object))


def interval_truth(region: tuple, bounds: Bounds) -> tuple[np.ndarray, np.ndarray]:
    """(truth, known) of a limit test on intervals: known true when the whole interval lies in
    the test's region, known false when none of it does, unknown otherwise.

    `region` is the test's tuple of disjoint, non-touching Spans (vocabulary.limit_tests)."""
    lo, hi, lo_open, hi_open = bounds.low, bounds.high, bounds.low_open, bounds.high_open
    inside = np.zeros(len(lo), dtype=bool)
    apart = np.ones(len(lo), dtype=bool)
    for span in region:
        starts_in = (lo > span.low) | ((lo == span.low) & (span.low_in | lo_open))
        ends_in = (hi < span.high) | ((hi == span.high) & (span.high_in | hi_open))
        inside |= starts_in & ends_in
        before = (hi < span.low) | ((hi == span.low) & (hi_open | (not span.low_in)))
        after = (lo > span.high) | ((lo == span.high) & (lo_open | (not span.high_in)))
        apart &= before | after
    return inside, inside | apart
