"""Sample dates: ISO 8601 read as dates; any other form only with the column map's `date_format`.

ISO 8601 (year first) is read even where a format is declared: it cannot be misread. A UTC
offset (`2026-03-02T23:30:00-05:00`, `Z`) is dropped, not applied: the date and time a lab
writes are the site's own, and converting to UTC moves an evening sample to the next day
(ahead of a next-morning resample written as a date, which reverses the unit's trend).

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
    swapped: tuple | None = None  # (row position, cell) of a date that fits only with day and month swapped


def read_dates(values: np.ndarray, date_format: str | None) -> Dates:
    """Each distinct spelling read once; empty cells stay missing (a date is not required).

    A date the declared format does not fit but fits with its day and month swapped (`03/15/2026`
    under '%d/%m/%Y') is reported in `swapped`: the lab writes the other order (or both), so every
    date that fits both orders (`03/04/2026`) would be read a month or more off, breaking trends;
    the caller refuses the file rather than grade them."""
    codes, uniques = pd.factorize(values, use_na_sentinel=True)
    text = np.full(len(uniques) + 1, None, dtype=object)
    why = np.full(len(uniques) + 1, "", dtype=object)
    swap = _swapped_format(date_format)
    swapped = None
    for k, cell in enumerate(uniques):
        text[k], why[k] = _one(str(cell).strip(), date_format)
        if why[k] and swap and swapped is None and _one(str(cell).strip(), swap)[1] == "":
            swapped = (int(np.argmax(codes == k)), str(cell).strip())
    bad = (why != "")[codes]
    return Dates(text[codes], bad, why[codes], swapped)


def _swapped_format(date_format: str | None) -> str | None:
    """The format with its day and month swapped (%d and %m), when it has both."""
    if not date_format or "%d" not in date_format or "%m" not in date_format:
        return None
    return date_format.replace("%d", "\x00").replace("%m", "%d").replace("\x00", "%m")


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
        stamp = stamp.tz_localize(None)  # the wall time as written: the offset is not applied
    if stamp.hour == stamp.minute == stamp.second == 0 and stamp.microsecond == 0 and len(cell) <= 10:
        return stamp.date().isoformat(), ""
    return stamp.isoformat(timespec="seconds"), ""
