"""Sample dates: ISO 8601 read as dates; any other form only with the column map's `date_format`.

ISO 8601 (year first) is read even where a format is declared: it cannot be misread.

A date is kept as ISO 8601 text (`2026-01-15`, or `2026-01-15T08:30:00` with a time), so
text order is date order everywhere downstream (trends, the ledger, report ranges). A
date that cannot be read, or that the declared format does not fit, rejects its row: a
day-first `03/04/2026` read the wrong way round would be a silent wrong trend.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
import pandas as pd

_ISO = re.compile(r"^\d{4}-\d{2}-\d{2}([T ]\d{2}:\d{2}(:\d{2}(\.\d+)?)?(Z|[+-]\d{2}:?\d{2})?)?$")


@dataclass(frozen=True)
class Dates:
    text: np.ndarray  # ISO 8601 text or None, per row
    bad: np.ndarray
    reasons: np.ndarray


def read_dates(values: np.ndarray, date_format: str | None) -> Dates:
    """Each distinct spelling read once; empty cells stay missing (a date is not required)."""
    codes, uniques = pd.factorize(values, use_na_sentinel=True)
    text = np.full(len(uniques) + 1, None, dtype=object)
    why = np.full(len(uniques) + 1, "", dtype=object)
    for k, cell in enumerate(uniques):
        text[k], why[k] = _one(str(cell).strip(), date_format)
    bad = (why != "")[codes]
    return Dates(text[codes], bad, why[codes])


def _one(cell: str, date_format: str | None) -> tuple[str | None, str]:
    if _ISO.match(cell):  # year first: unambiguous, read whatever the map declares (workbook dates arrive so)
        try:
            stamp = pd.Timestamp(cell)
        except ValueError:
            return None, f"'{cell}' is not a date that exists"
    elif date_format is None:
        return None, (f"'{cell}' is not an ISO 8601 date (YYYY-MM-DD); declare the lab's form in the column "
                      f"map (file: {{date_format: '%d/%m/%Y'}})")
    else:
        try:
            stamp = pd.to_datetime(cell, format=date_format)
        except (ValueError, TypeError):
            return None, f"'{cell}' does not fit the declared date_format '{date_format}' or is not a real date"
    if stamp.tzinfo is not None:
        stamp = stamp.tz_convert("UTC").tz_localize(None)
    if stamp.hour == stamp.minute == stamp.second == 0 and stamp.microsecond == 0 and len(cell) <= 10:
        return stamp.date().isoformat(), ""
    return stamp.isoformat(timespec="seconds"), ""
