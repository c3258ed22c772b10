"""Text from input files, made safe to show: escaped for terminals, neutralised for spreadsheets.

A sample id is whatever the lab wrote. On a terminal, an escape sequence in it can recolour,
retitle or rewrite the screen, so every control character (C0, DEL, C1, line and paragraph
separators, bidirectional overrides) and every lone surrogate is shown as its Python escape
(`\\x1b`, `\\u202e`). In a CSV cell opened by a spreadsheet, text starting with `=`, `+`, `-`,
`@`, a tab or a carriage return can run as a formula; such a cell gets a leading apostrophe,
the common practice (OWASP "CSV Injection"), which spreadsheets show as text. A cell that is
a plain number (`-0.5`, `+3e2`) is left as it is.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

_CONTROL = re.compile("[\\x00-\\x1f\\x7f-\\x9f\\u2028\\u2029\\u202a-\\u202e\\u2066-\\u2069\\ud800-\\udfff]")
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
_PLAIN_NUMBER = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?")


def _escape(match: re.Match) -> str:
    return match.group().encode("unicode_escape", "backslashreplace").decode("ascii")


def terminal_text(text: str) -> str:
    """`text` with every control character and lone surrogate written as its escape."""
    return _CONTROL.sub(_escape, text)


def terminal_lines(lines) -> list[str]:
    """Each line made safe for a terminal (a line holds no newline of its own afterwards)."""
    return [terminal_text(line) for line in lines]


def terminal_column(values: pd.Series) -> pd.Series:
    """A text column made safe for a terminal; only the rare rows that need it are rewritten."""
    needs = _matches(values.str.contains(_CONTROL.pattern, regex=True) if _has_text(values) else None, len(values))
    if not needs.any():
        return values
    safe = values.astype(object)
    safe[needs] = [terminal_text(text) for text in values[needs]]
    return safe


def spreadsheet_text(value):
    """A CSV cell a spreadsheet will not run as a formula; numbers and non-text values unchanged."""
    if isinstance(value, str) and value.startswith(_FORMULA_START) and not _PLAIN_NUMBER.fullmatch(value):
        return "'" + value
    return value


def spreadsheet_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """The frame with every text cell that could start a formula neutralised (a copy when any is)."""
    columns = {}
    for name in frame.columns:
        column = frame[name]
        if not _has_text(column):
            continue
        risky = _matches(column.str.startswith(_FORMULA_START), len(column))
        if risky.any():
            safe = column.astype(object)
            safe[risky] = [spreadsheet_text(value) for value in column[risky]]
            columns[name] = safe
    return frame.assign(**columns) if columns else frame


def _has_text(column: pd.Series) -> bool:
    """Whether pandas lets the column be searched as text (text or object with some strings)."""
    if pd.api.types.is_string_dtype(column.dtype):
        return True
    if column.dtype != object:
        return False
    return pd.api.types.infer_dtype(column, skipna=True) in ("string", "mixed")


def _matches(found, n: int) -> np.ndarray:
    if found is None:
        return np.zeros(n, dtype=bool)
    return found.fillna(False).astype(bool).to_numpy()


def reject_line(source: str, reject) -> str:
    """A rejected row as one line for a terminal: where, which sample, the code, field and reason."""
    who = f" (sample {reject.sample_id})" if reject.sample_id else ""
    return terminal_text(f"{source}: row {reject.row}{who}: rejected {reject.code}: {reject.field}: {reject.reason}")
