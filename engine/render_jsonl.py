"""Write graded samples as JSON Lines: one object a sample, the same bytes for the same input.

Building a dict and calling json.dumps for each of a million rows costs more than all
of the grading. Instead rows are grouped by the shape of their record; each shape
is rendered once, with placeholders for the per-row values (ids, dates, measured
values), and the lines of a group are assembled column-wise.
"""

from __future__ import annotations

import json
import re

import numpy as np
import pandas as pd

from .results import GradedBatch, build_result, record_shape_groups

_TOKEN = re.compile(r'"\\u0000sw(\d+)\\u0000"')
_NEEDS_ESCAPE = r'["\\\x00-\x1f\x7f\u2028\u2029]'


class _Placeholder:
    def __init__(self, index: int):
        self.token = f"\x00sw{index}\x00"


class _TemplateValues:
    """Hands out placeholders for per-row values; `class` is part of the shape, so it stays real."""

    def __init__(self, measured: pd.DataFrame):
        self.measured = measured
        self.wanted: list[tuple[str, str]] = []

    def _slot(self, kind: str, name: str) -> _Placeholder:
        self.wanted.append((kind, name))
        return _Placeholder(len(self.wanted) - 1)

    def number(self, name: str, i: int):
        return self._slot("number", name)

    def text(self, name: str, i: int):
        if name == "class":
            value = self.measured["class"].iat[i]
            return None if value is None else str(value)
        return self._slot("text", name)


def dumps(record: dict) -> str:
    """The one JSON spelling sumpwise uses: key order as built, compact separators, UTF-8."""
    return json.dumps(record, ensure_ascii=False, separators=(", ", ": "),
                      default=lambda p: p.token, allow_nan=False)


class _Literals:
    """Per-column JSON literals for the whole batch, each column formatted once."""

    def __init__(self, measured: pd.DataFrame):
        self.measured = measured
        self.cache: dict = {}

    def get(self, kind: str, name: str) -> np.ndarray:
        key = (kind, name)
        if key not in self.cache:
            self.cache[key] = self._number(name) if kind == "number" else self._text(name)
        return self.cache[key]

    def _number(self, name: str) -> np.ndarray:
        values = self.measured[name].to_numpy(dtype=float, na_value=np.nan)
        literal = pd.Series(values).astype(str).to_numpy(dtype=object)
        literal[~np.isfinite(values)] = "null"
        return literal

    def _text(self, name: str) -> np.ndarray:
        if name not in self.measured.columns:
            return np.full(len(self.measured), "null", dtype=object)
        column = self.measured[name].astype(object)
        present = column.notna().to_numpy()
        text = column.astype(str)
        plain = ~text.str.contains(_NEEDS_ESCAPE, regex=True).to_numpy()
        literal = ('"' + text + '"').to_numpy(dtype=object)
        for k in np.flatnonzero(~plain & present):
            literal[k] = json.dumps(text.iat[k], ensure_ascii=False)
        literal[~present] = "null"
        return literal


def jsonl_lines(batch: GradedBatch, block: int = 200_000):
    """Yield the JSON Lines text of the batch, a block of rows at a time, in input order."""
    templates: dict[bytes, tuple[list[str], list]] = {}
    literals = _Literals(batch.measured)
    n = len(batch)
    for start in range(0, n, block):
        rows = np.arange(start, min(n, start + block))
        representatives, group_of, signatures = record_shape_groups(batch, rows)
        lines = np.empty(len(rows), dtype=object)
        order = np.argsort(group_of, kind="stable")
        bounds = np.searchsorted(group_of[order], np.arange(len(signatures) + 1))
        for g, (rep, signature) in enumerate(zip(representatives, signatures)):
            if signature not in templates:
                values = _TemplateValues(batch.measured)
                text = dumps(build_result(batch, int(rep), values).to_record())
                pieces = _TOKEN.split(text)
                templates[signature] = (pieces[0::2], [values.wanted[int(k)] for k in pieces[1::2]])
            chunks, wanted = templates[signature]
            members = rows[order[bounds[g]:bounds[g + 1]]]
            assembled = np.full(len(members), chunks[0], dtype=object)
            for (kind, name), chunk in zip(wanted, chunks[1:]):
                assembled = assembled + literals.get(kind, name)[members] + chunk
            lines[members - start] = assembled
        yield "\n".join(lines) + "\n"


def write_jsonl(batch: GradedBatch, stream) -> None:
    for text in jsonl_lines(batch):
        stream.write(text)
