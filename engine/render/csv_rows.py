"""Write graded samples as CSV: one row a sample, reasons folded into short text columns.

CSV suits spreadsheets and simple pipelines; the full reason records are in JSON Lines.
`file` and `row` say where each sample was read (as the rejects file says it); `fired`
lists rule=grade (with <capped-from where a caveat lowered it), highest grade first;
`not_evaluated` lists rule(missing,...), a censored input that did not decide the rule
as name=reading as written (`water(water=<500)`: present, but not below or above the limit,
where a bare `water(water)` means no value); `next_steps` the rule set's steps for what
applies, each once, as the table words them; `notice` the rule set's notice (the cautions),
as a full JSON Lines record carries it; `cautions` the engine's cautions
(engine/vocabulary/cautions.py), which a site's own notice may leave out. Built column-wise
like the JSON Lines writer: each rule's text once per state, joined over the rows.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from sumpwise.version import engine_name
from sumpwise.vocabulary.cautions import CAUTIONS
from sumpwise.evaluation.evaluator import NOT_EVALUATED
from sumpwise.render.jsonl import states
from sumpwise.render.narrative import phrases_of
from sumpwise.render.safe_text import spreadsheet_frame
from sumpwise.results.records import UNRATED, GradedBatch, gap_at, gap_states, record_shape_groups

CAUTION_TEXT = " ".join(CAUTIONS)

COLUMNS = ("sample_id", "unit_id", "class", "lubricant", "sampled_on", "file", "row", "grade", "level", "fired", "caveats",
           "not_evaluated", "unrated_because", "next_steps", "ruleset", "ruleset_version", "ruleset_sha256", "engine",
           "notice", "cautions")


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


def _fired(batch: GradedBatch) -> np.ndarray:
    out, grades = batch.outcome, batch.ruleset.grades
    n = len(batch)
    parts = []
    for level in range(len(grades) - 1, 0, -1):
        for j, slot in enumerate(out.slots):
            mask = out.final[:, j] == level
            if not mask.any():
                continue
            raw = out.raw[mask, j]
            text = np.where(raw == level, f"{slot.rule.id}={grades[level]}", "").astype(object)
            for capped_from in np.unique(raw[raw != level]):
                text[raw == capped_from] = f"{slot.rule.id}={grades[level]}<{grades[capped_from]}"
            parts.append((mask, text))
    return join_parts(n, parts, ";")


def _gaps(batch: GradedBatch) -> np.ndarray:
    out = batch.outcome
    parts = []
    for j, slot in enumerate(out.slots):
        mask = out.final[:, j] == NOT_EVALUATED
        if not mask.any():
            continue
        rows = np.flatnonzero(mask)
        first, state = states(gap_states(batch, j, rows))
        text = np.empty(len(rows), dtype=object)
        for s, rep in enumerate(rows[first]):
            gap = gap_at(batch, int(rep), j)
            undecided = dict(gap.undecided)
            members = state == s
            # a censored reading differs row by row within a state: each row's own, as written
            pieces = [f"{name}=" + batch.columns.written(name)[rows[members]].astype(object) if name in undecided
                      else name for name in gap.missing]
            joined = pieces[0]
            for piece in pieces[1:]:
                joined = joined + "," + piece
            text[members] = f"{gap.rule}(" + np.asarray(joined, dtype=object) + ")"
        parts.append((mask, text))
    return join_parts(len(batch), parts, ";")


def _caveats(batch: GradedBatch) -> np.ndarray:
    rs, out = batch.ruleset, batch.outcome
    ids = [c.id for c in rs.caveats] + [c.id for c in batch.engine_caveats]
    parts = [(out.caveats[:, k], np.full(int(out.caveats[:, k].sum()), ident, dtype=object))
             for k, ident in enumerate(ids)]
    return join_parts(len(batch), parts, ";")


def _unrated(batch: GradedBatch) -> np.ndarray:
    n = len(batch)
    text = np.full(n, "", dtype=object)
    rows = np.flatnonzero(batch.outcome.level < 0)
    if len(rows):
        representatives, group_of, _ = record_shape_groups(batch, rows)
        sentences = [batch.result(int(rep)).unrated_because for rep in representatives]
        text[rows] = np.array(sentences, dtype=object)[group_of]
    return text


def _next_steps(batch: GradedBatch) -> np.ndarray:
    """What the rule set says to do, from the rules that fired and the caveats that apply, each
    step once, in the order a record lists them (reasons highest grade first, then caveats):
    worded once a distinct state of the rules and caveats that carry a step."""
    out, rs, n = batch.outcome, batch.ruleset, len(batch)
    rules = [j for j, slot in enumerate(out.slots) if slot.rule.next_step is not None]
    caveats = [k for k, caveat in enumerate(rs.caveats) if caveat.next_step is not None]
    if not n or not (rules or caveats):
        return np.full(n, "", dtype=object)
    columns = [np.maximum(out.final[:, j], 0) for j in rules] + [out.caveats[:, k] for k in caveats]
    first, state = states(columns)
    table = []
    for rep in first.tolist():
        fired = sorted((-int(out.final[rep, j]), j) for j in rules if out.final[rep, j] > 0)
        steps = [out.slots[j].rule.next_step for _, j in fired]
        steps += [rs.caveats[k].next_step for k in caveats if out.caveats[rep, k]]
        table.append("; ".join(phrases_of(steps)))
    return np.array(table, dtype=object)[state]


def csv_frame(batch: GradedBatch) -> pd.DataFrame:
    """The CSV table as a DataFrame."""
    n = len(batch)
    measured, rs = batch.measured, batch.ruleset
    level = batch.outcome.level
    frame = pd.DataFrame({name: (measured[name].to_numpy(dtype=object) if name in measured.columns
                                 else np.full(n, None, dtype=object))
                          for name in ("sample_id", "unit_id", "class", "lubricant", "sampled_on")})
    frame["file"] = batch.source  # the sample's origin, spelt as the rejects file spells it
    index = batch.columns.index
    frame["row"] = index.astype(str) if index is not None else ""
    frame["grade"] = np.array(list(rs.grades) + [UNRATED], dtype=object)[level]
    frame["level"] = np.array([str(k) for k in range(len(rs.grades))] + [""], dtype=object)[level]
    frame["fired"] = _fired(batch)
    frame["caveats"] = _caveats(batch)
    frame["not_evaluated"] = _gaps(batch)
    frame["unrated_because"] = _unrated(batch)
    frame["next_steps"] = _next_steps(batch)
    frame["ruleset"] = rs.id
    frame["ruleset_version"] = str(rs.version)
    frame["ruleset_sha256"] = rs.sha256
    frame["engine"] = engine_name()
    frame["notice"] = rs.notice  # a spreadsheet is read by a person: the cautions go with every row, as in a full record
    frame["cautions"] = CAUTION_TEXT  # the engine's own, whatever the rule set's notice says (a site's may leave them out)
    return frame[list(COLUMNS)]


def write_csv(batch: GradedBatch, stream, header: bool = True) -> None:
    """The CSV rows; `header=False` for the second and later chunks of one file."""
    spreadsheet_frame(csv_frame(batch)).to_csv(stream, index=False, header=header, lineterminator="\n")
