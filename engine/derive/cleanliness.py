"""ISO 4406 cleanliness: codes as labs write them, and codes from particle counts per mL.

A code such as 18/16/13 gives one scale number per size (>= 4, >= 6 and >= 14 um(c)); the
measures `iso4406_4um`, `iso4406_6um` and `iso4406_14um` hold them. Where the lab wrote a
code, its number is used as written; where it did not (or left a size out), the number is
computed from that size's particle count with the standard's scale-number table. The record
keeps the code as written in the `iso4406` field.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd

from sumpwise.intake.samples import Reject, SampleBatch
from sumpwise.vocabulary.measures import ISO4406_SIZES, ISO4406_TOP, iso4406_parts, read_iso4406

# ISO 4406:1999 Table 1, particles per mL: scale number N holds counts more than MORE_THAN[N]
# and up to and including UP_TO[N]. The scale doubles per number, but the published table
# rounds (17 is 640 to 1,300, not 655.36 to 1,310.72): the table, not the doubling, is the rule.
UP_TO = np.array([0.01, 0.02, 0.04, 0.08, 0.16, 0.32, 0.64, 1.3, 2.5, 5.0, 10.0, 20.0, 40.0, 80.0, 160.0,
                  320.0, 640.0, 1300.0, 2500.0, 5000.0, 10000.0, 20000.0, 40000.0, 80000.0, 160000.0,
                  320000.0, 640000.0, 1300000.0, 2500000.0])
MORE_THAN = np.concatenate([[0.0], UP_TO[:-1]])
assert len(UP_TO) == ISO4406_TOP + 1


def scale_numbers(counts) -> np.ndarray:
    """The ISO 4406 scale number of each count per mL (NaN where the count is missing).

    A count above the table's last row (2,500,000 per mL) gets ISO4406_TOP + 1: the standard
    writes such a code as >28, and a rule on it must still fire.
    """
    counts = np.asarray(counts, dtype=float)
    numbers = np.searchsorted(UP_TO, counts, side="left").astype(float)
    numbers[np.isnan(counts)] = np.nan
    return numbers


def scale_number_range(low, high, low_open) -> tuple[np.ndarray, np.ndarray]:
    """The least and greatest scale number of counts in an interval (a censored count per mL,
    `>2500000` or `<0.5`): the table applied to each end (an open-ended top is ISO4406_TOP + 1)."""
    low = np.where(np.isfinite(low), low, 0.0)
    least = np.where(low_open, np.searchsorted(UP_TO, low, side="right"), np.searchsorted(UP_TO, low, side="left"))
    return least.astype(float), np.searchsorted(UP_TO, high, side="left").astype(float)


def read_codes(codes) -> tuple[np.ndarray, np.ndarray]:
    """(float [rows, 3], bool [rows, 3]): each code's scale numbers as written (NaN for a size not
    reported, a missing code, or one that cannot be read: read_cleanliness_codes rejects those
    first), and which of them were written `>=n` (n or higher: iso4406_parts)."""
    values = pd.Series(codes, dtype=object).to_numpy(dtype=object)
    out = np.full((len(values), len(ISO4406_SIZES)), np.nan)
    at_least = np.zeros((len(values), len(ISO4406_SIZES)), dtype=bool)
    present = pd.notna(values)
    if not present.any():
        return out, at_least
    index, uniques = pd.factorize(values[present])  # each distinct code is read once
    table = np.full((len(uniques), len(ISO4406_SIZES)), np.nan)
    marks = np.zeros((len(uniques), len(ISO4406_SIZES)), dtype=bool)
    for k, text in enumerate(uniques):
        try:
            parts = iso4406_parts(text)  # one reading of each distinct code gives both
        except ValueError:
            continue
        table[k] = [np.nan if number is None else number for number, _ in parts]
        marks[k] = [at_least for _, at_least in parts]
    out[present] = table[index]
    at_least[present] = marks[index]
    return out, at_least


# A lab computes its code from its own counts with the same table, so the two agree, give or
# take one number where a count printed rounded sits at a range's edge. Two or more apart, one of
# them is on another scale: counts per 100 mL read as per mL give numbers 6 to 7 higher (a factor
# of 100 is log2(100) = 6.6 doublings), per 10 mL 3 to 4. (Our choice, no source.)
DISAGREE_BY = 2


def cleanliness_measures(codes, counts: dict) -> tuple[dict, np.ndarray, np.ndarray]:
    """`iso4406_<size>` columns: the code's number where written, else the count's; which
    numbers the code wrote `>=n` (bool [rows, 3]), for derivation to take as n or higher; and a
    note per row whose code and counts disagree (None elsewhere). On such a row the counts fill
    no size the code leaves out: which of the two is on the wrong scale cannot be told, and a
    count read 100 times high would grade that size several grades too high."""
    written, at_least = read_codes(codes)
    from_counts = np.stack([scale_numbers(counts[size]) for size in ISO4406_SIZES], axis=1)
    with np.errstate(invalid="ignore"):
        apart = ~at_least & (np.abs(written - from_counts) >= DISAGREE_BY)  # NaN on either side: False
    disagree = apart.any(axis=1)
    filled = np.where(np.isnan(written) & ~disagree[:, None], from_counts, written)
    notes = np.full(len(filled), None, dtype=object)
    for row in np.flatnonzero(disagree):  # rows whose code and counts disagree: a few in a batch
        notes[row] = _disagreement(codes[row], written[row], from_counts[row], counts, row, apart[row])
    return {f"iso4406_{size}": filled[:, k] for k, size in enumerate(ISO4406_SIZES)}, at_least, notes


def _disagreement(code, written, from_counts, counts: dict, row: int, apart: np.ndarray) -> str:
    sizes = [f"at >= {size[:-2]} um(c) the code gives {written[k]:.0f}, the count {counts[size][row]:g} per mL "
             f"gives {from_counts[k]:.0f}" for k, size in enumerate(ISO4406_SIZES) if apart[k]]
    left = [f"{size[:-2]} um(c)" for k, size in enumerate(ISO4406_SIZES)
            if np.isnan(written[k]) and not np.isnan(from_counts[k])]
    return (f"the ISO 4406 code '{code}' and the particle counts disagree ({'; '.join(sizes)}): counts per 100 mL "
            f"read as per mL give numbers 6 to 7 higher, per 10 mL 3 to 4. The code's numbers are graded"
            + (f"; the counts give no number for the sizes the code leaves out ({', '.join(left)}), so rules on "
               f"those are not evaluated" if left else "")
            + "; rules on the counts themselves read them as written. Check the counts' unit and the column map")


def read_cleanliness_codes(batch: SampleBatch) -> SampleBatch:
    """The batch without the rows whose `iso4406` code cannot be read; each such row is rejected."""
    if "iso4406" not in batch.frame.columns:
        return batch
    column = batch.frame["iso4406"].astype(object)
    codes, uniques = pd.factorize(column.where(column.notna(), None).to_numpy(dtype=object))  # None -> -1
    problems = {}
    for k, value in enumerate(uniques):
        if str(value).strip():
            try:
                read_iso4406(value)
            except ValueError as error:
                problems[k] = str(error)
    if not problems:
        return batch
    bad = np.isin(codes, list(problems))
    frame = batch.frame[~bad].copy()
    ids = batch.frame["sample_id"].to_numpy(dtype=object)[bad]
    rejects = [Reject(int(row), sid, "iso4406", problems[code], "D012")
               for row, sid, code in zip(batch.frame.index[bad], ids, codes[bad])]
    rejects = tuple(sorted(batch.rejects + tuple(rejects), key=lambda r: (r.row, r.field)))
    return replace(batch, frame=frame, rejects=rejects)
