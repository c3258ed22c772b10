"""Write graded samples as JSON Lines: one object a sample, the same bytes for the same input.

Building a dict and calling json.dumps for each of a million rows would cost more than
all of the grading. Instead each piece of a record is rendered once per distinct state,
with placeholders for per-row values, using the same record classes as the Python API:
the record's skeleton once, each rule's reason once per (grade, capped-from, clauses)
state, each gap once per pattern of missing inputs, each caveat once. The pieces are
then joined column-wise over the rows with numpy object arrays. A test checks that
every line equals json of the per-record API, byte for byte.
"""

from __future__ import annotations

import json
import re
from dataclasses import replace

import numpy as np
import pandas as pd

from .evaluate import NOT_EVALUATED
from .results import (UNRATED, GradedBatch, build_result, caveat_at, gap_at, reason_at, record_shape_groups,
                      rule_inputs)

_TOKEN = re.compile(r'"\\u0000sw(\d+)\\u0000"')
_ESCAPED = re.compile(r'["\\\x00-\x1f]')


class _Placeholder:
    def __init__(self, index: int):
        self.token = f"\x00sw{index}\x00"


class _Piece:
    """A stand-in list item whose JSON is a placeholder: where the reasons, caveats, gaps go."""

    def __init__(self, placeholder: _Placeholder):
        self.placeholder = placeholder

    def to_record(self):
        return self.placeholder


class _TemplateValues:
    """Hands out a placeholder for each per-row value a record piece asks for."""

    def __init__(self):
        self.wanted: list[tuple[str, str]] = []

    def slot(self, kind: str, name: str) -> _Placeholder:
        self.wanted.append((kind, name))
        return _Placeholder(len(self.wanted) - 1)

    def number(self, name: str, i: int):
        return self.slot("number", name)

    def text(self, name: str, i: int):
        return self.slot("text", name)


def dumps(record: dict) -> str:
    """The one JSON spelling sumpwise uses: key order as built, these separators, UTF-8."""
    return json.dumps(record, ensure_ascii=False, separators=(", ", ": "), default=lambda p: p.token,
                      allow_nan=False)


def _template(text: str, values: _TemplateValues) -> tuple[list[str], list]:
    pieces = _TOKEN.split(text)
    return pieces[0::2], [values.wanted[int(k)] for k in pieces[1::2]]


def _text_literals(values: np.ndarray) -> np.ndarray:
    """JSON string literals (or null) for a column of str-or-None."""
    codes, uniques = pd.factorize(values, use_na_sentinel=True)
    if len(uniques) < len(values) // 2:
        table = [json.dumps(str(u), ensure_ascii=False) for u in uniques] + ["null"]
        return np.array(table, dtype=object)[codes]
    present = codes >= 0
    texts = np.where(present, values, "").astype(object)
    joined = "\x00".join(texts)
    if joined.count("\x00") == len(texts) - 1 and not _ESCAPED.search(joined.replace("\x00", "")):
        literal = '"' + texts + '"'
    else:
        literal = np.array([json.dumps(str(t), ensure_ascii=False) for t in texts], dtype=object)
    literal[~present] = "null"
    return literal


def _number_literals(values: np.ndarray) -> np.ndarray:
    """JSON number literals (or null), spelled as Python's float repr, each distinct value once."""
    codes, uniques = pd.factorize(values, use_na_sentinel=True)
    table = [repr(float(u)) if np.isfinite(u) else "null" for u in uniques] + ["null"]
    return np.array(table, dtype=object)[codes]


class _Literals:
    """JSON literals of a column, for the rows asked (one block at a time, so memory stays
    bounded by the block, not the batch)."""

    def __init__(self, measured: pd.DataFrame):
        self.measured = measured

    def get(self, kind: str, name: str, rows: np.ndarray) -> np.ndarray:
        if name not in self.measured.columns:
            return np.full(len(rows), "null", dtype=object)
        column = self.measured[name]
        if kind == "number":
            return _number_literals(column.to_numpy(dtype=float, na_value=np.nan)[rows])
        return _text_literals(column.to_numpy(dtype=object)[rows])


def _fill(chunks: list[str], wanted: list, literals: _Literals, rows: np.ndarray) -> np.ndarray:
    assembled = np.full(len(rows), chunks[0], dtype=object)
    for (kind, name), chunk in zip(wanted, chunks[1:]):
        assembled = assembled + literals.get(kind, name, rows) + chunk
    return assembled


def join_parts(n: int, parts, sep: str = ", ") -> np.ndarray:
    """Join (row mask, texts of those rows) parts, in the order given, with `sep` between them."""
    acc = np.full(n, "", dtype=object)
    started = np.zeros(n, dtype=bool)
    for mask, text in parts:
        if not mask.any():
            continue
        acc[mask] = acc[mask] + np.where(started[mask], sep, "").astype(object) + text
        started |= mask
    return acc


def states(columns: list[np.ndarray]) -> tuple[np.ndarray, np.ndarray]:
    """(first index of each distinct state, state of each row) for rows described by int columns."""
    matrix = np.ascontiguousarray(np.stack(columns, axis=1).astype(np.int8))
    keys = matrix.view(np.dtype((np.void, matrix.shape[1]))).ravel()
    _, first, inverse = np.unique(keys, return_index=True, return_inverse=True)
    return first, inverse.ravel()


class _Writer:
    def __init__(self, batch: GradedBatch):
        self.batch = batch
        self.literals = _Literals(batch.measured)
        self.out = batch.outcome
        self.reason_templates: dict = {}
        self.gap_templates: dict = {}
        self.caveat_templates: dict = {}
        self.skeletons: dict = {}

    def _reason_state(self, j: int, rows: np.ndarray) -> list[np.ndarray]:
        """What decides the shape of slot j's reason: final and raw level, capping caveat, clauses."""
        out, rs = self.out, self.batch.ruleset
        final, raw = out.final[rows, j], out.raw[rows, j]
        columns = [final, raw]
        rule = out.slots[j].rule
        capped_by = np.full(len(rows), -1, dtype=np.int8)
        for k in reversed(range(len(rs.caveats))):
            cap = rs.caveats[k].cap
            if cap is not None and rule.reads & cap.measures:
                capped_by[out.capping[rows, k] & (final == cap.level) & (raw != final)] = k
        columns.append(capped_by)
        if j in out.leaves:
            members, found = out.leaves[j]
            at = np.searchsorted(members, rows)
            for truth, known in found:
                columns.append(truth[at].astype(np.int8) + 2 * known[at].astype(np.int8))
        return columns

    def _reasons(self, j: int, rows: np.ndarray) -> np.ndarray:
        columns = self._reason_state(j, rows)
        first, state = states(columns)
        text = np.empty(len(rows), dtype=object)
        for s, rep in enumerate(rows[first]):
            key = (j, tuple(int(c[first[s]]) for c in columns))
            if key not in self.reason_templates:
                values = _TemplateValues()
                self.reason_templates[key] = _template(dumps(reason_at(self.batch, int(rep), j, values).to_record()),
                                                       values)
            chunks, wanted = self.reason_templates[key]
            members = state == s
            text[members] = _fill(chunks, wanted, self.literals, rows[members])
        return text

    def _gaps(self, j: int, rows: np.ndarray) -> np.ndarray:
        measured = self.batch.measured
        rule = self.out.slots[j].rule
        names = [n for n in rule_inputs(rule) if n in measured.columns]
        columns = [measured[n].isna().to_numpy()[rows] for n in names] or [np.zeros(len(rows), dtype=bool)]
        first, state = states(columns)
        table = []
        for rep in rows[first]:
            key = (j, tuple(bool(measured[n].isna().iat[int(rep)]) for n in names))
            if key not in self.gap_templates:
                self.gap_templates[key] = dumps(gap_at(self.batch, int(rep), j).to_record())
            table.append(self.gap_templates[key])
        return np.array(table, dtype=object)[state]

    def _caveat(self, k: int, rows: np.ndarray) -> np.ndarray:
        if k not in self.caveat_templates:
            values = _TemplateValues()
            self.caveat_templates[k] = _template(dumps(caveat_at(self.batch, int(rows[0]), k, values).to_record()),
                                                 values)
        chunks, wanted = self.caveat_templates[k]
        return _fill(chunks, wanted, self.literals, rows)

    def _skeleton(self, rep: int, unrated: bool) -> tuple[list[str], list]:
        if unrated not in self.skeletons:
            values = _TemplateValues()
            result = build_result(self.batch, rep, values)
            pieces = {name: (_Piece(values.slot("raw", name)),) for name in ("reasons", "caveats", "gaps")}
            result = replace(result, grade=values.slot("raw", "grade"), level=values.slot("raw", "level"),
                             reasons=pieces["reasons"], caveats=pieces["caveats"],
                             not_evaluated=pieces["gaps"],
                             unrated_because=values.slot("raw", "unrated_because") if unrated else None)
            self.skeletons[unrated] = _template(dumps(result.to_record()), values)
        return self.skeletons[unrated]

    def lines(self, rows: np.ndarray) -> np.ndarray:
        out, rs = self.out, self.batch.ruleset
        final = out.final[rows]
        levels = range(len(rs.grades) - 1, 0, -1)  # reasons are listed highest grade first
        fired = {j: np.flatnonzero(final[:, j] > 0) for j in range(final.shape[1])}
        reason_text = {j: self._reasons(j, rows[idx]) for j, idx in fired.items() if len(idx)}
        parts = []
        for level in levels:
            for j, text in reason_text.items():
                idx = fired[j]
                at_level = final[idx, j] == level
                if at_level.any():
                    mask = np.zeros(len(rows), dtype=bool)
                    mask[idx[at_level]] = True
                    parts.append((mask, text[at_level]))
        raw_values = {"reasons": join_parts(len(rows), parts)}

        gap_parts = []
        for j in range(final.shape[1]):
            mask = final[:, j] == NOT_EVALUATED
            if mask.any():
                gap_parts.append((mask, self._gaps(j, rows[mask])))
        raw_values["gaps"] = join_parts(len(rows), gap_parts)

        caveat_parts = []
        for k in range(out.caveats.shape[1]):
            mask = out.caveats[rows, k]
            if mask.any():
                caveat_parts.append((mask, self._caveat(k, rows[mask])))
        raw_values["caveats"] = join_parts(len(rows), caveat_parts)

        level = out.level[rows]
        names = list(rs.grades) + [UNRATED]
        raw_values["grade"] = np.array([json.dumps(n) for n in names], dtype=object)[level]
        raw_values["level"] = np.array([str(k) for k in range(len(rs.grades))] + ["null"], dtype=object)[level]
        unrated = level < 0
        raw_values["unrated_because"] = np.full(len(rows), "", dtype=object)
        if unrated.any():
            raw_values["unrated_because"][unrated] = self._unrated_sentences(rows[unrated])
        return self._assemble(rows, raw_values, unrated)

    def _assemble(self, rows: np.ndarray, raw_values: dict, unrated: np.ndarray) -> list[str]:
        """The lines: each record skeleton becomes one %-template filled once a row.

        Filling one template with a row's ~20 pre-formatted values is a single C-level
        formatting call, far cheaper than joining the ~40 pieces of a line one by one.
        """
        lines: list = [None] * len(rows)
        for is_unrated in (False, True):
            members = np.flatnonzero(unrated == is_unrated)
            if not len(members):
                continue
            chunks, wanted = self._skeleton(int(rows[members[0]]), is_unrated)
            template = "%s".join(chunk.replace("%", "%%") for chunk in chunks)
            columns = [(raw_values[name][members] if kind == "raw" else
                        self.literals.get(kind, name, rows[members])).tolist() for kind, name in wanted]
            for k, args in zip(members.tolist(), zip(*columns)):
                lines[k] = template % args
        return lines

    def _unrated_sentences(self, members: np.ndarray) -> np.ndarray:
        representatives, group_of, _ = record_shape_groups(self.batch, members)
        table = [json.dumps(self.batch.result(int(rep)).unrated_because,
                            ensure_ascii=False) for rep in representatives]
        return np.array(table, dtype=object)[group_of]


def jsonl_lines(batch: GradedBatch, block: int = 100_000):
    """Yield the JSON Lines text of the batch, a block of rows at a time, in input order."""
    writer = _Writer(batch)
    n = len(batch)
    for start in range(0, n, block):
        rows = np.arange(start, min(n, start + block))
        yield "\n".join(writer.lines(rows)) + "\n"


def write_jsonl(batch: GradedBatch, stream) -> None:
    for text in jsonl_lines(batch):
        stream.write(text)
