"""A terminal table of graded samples for a person: aligned, at most 100 columns wide.

Grades are told apart by a marker as well as by name, so the table reads the same
without colour: one more '+' for each step up the ladder. Rows whose records have the
same shape share one 'why' text, so the table is built column-wise like the JSON Lines
writer. Each line gives the sample's row in its file (as the rejects number it); the footer
names the file. Long runs report progress on a terminal's standard error, and stay quiet when
it is a file or a pipe.
"""

from __future__ import annotations

import textwrap
from collections import Counter

import numpy as np
import pandas as pd

from sumpwise.vocabulary.cautions import CAUTIONS
from sumpwise.version import engine_name
from sumpwise.evaluation.evaluator import NOT_EVALUATED
from sumpwise.render.jsonl import states
from sumpwise.results.records import UNRATED, GradedBatch, gap_at, gap_states, record_shape_groups
from sumpwise.render.narrative import step_phrases
from sumpwise.render.safe_text import terminal_column, terminal_text

WIDTH = 100
PROGRESS_MIN_ROWS = 50_000  # a shorter table is written in a blink: no progress
CHUNK_ROWS = 10_000


def grade_marker(level: int | None) -> str:
    return "?" if level is None else ("+" * level or "-")


def _cut(text: str, width: int) -> str:
    return text if len(text) <= width else text[: width - 1] + "~"


def _cut_column(values: pd.Series, width: int) -> pd.Series:
    """Cut and pad a text column to exactly `width` characters."""
    cut = values.where(values.str.len() <= width, values.str[: max(width - 1, 0)] + "~")
    return cut.str.ljust(width)


def wants_progress(stream, rows: int, min_rows: int = PROGRESS_MIN_ROWS) -> bool:
    """Progress only for long runs, and only when a person is watching the stream."""
    isatty = getattr(stream, "isatty", None)
    return stream is not None and rows > min_rows and callable(isatty) and bool(isatty())


# Caveats meaning a sample was graded on less than it should be, or may deserve a higher grade
# (the no-silent-pass ones): a trend cut or a rate not taken counts. Not among them: trend-break,
# oil-changed (a known new charge: nothing is missing) and unit-id-spelling (the spellings are
# joined into one unit, so the trend is whole).
FIRST_CAVEATS = ("unknown-lubricant", "base-stock-disagrees", "oxidation-below-new", "counts-disagree-with-code",
                 "unknown-class", "few-rules-evaluated", "grade-may-be-higher", "oil-charge-unknown", "class-changed",
                 "one-moment", "oil-hours-not-from-fill", "oil-hours-slip", "oil-change-untold")


def _why(result) -> str:
    if result.reasons:
        why = ", ".join(f"{x.rule}" + (f" (capped from {x.capped_from} by {x.capped_by})" if x.capped_from else "")
                        for x in result.reasons)
    elif result.unrated_because:
        why = result.unrated_because
    else:
        why = "no limit crossed"
    undecided = [gap.rule for gap in result.not_evaluated if gap.undecided]
    if undecided:  # a censored reading that may lie on either side of a limit: the grade may be too mild
        why += " | undecided: " + ", ".join(undecided)
    if result.caveats:  # what may make the grade too mild first, so a cut line still shows it
        names = sorted((c.caveat for c in result.caveats), key=lambda name: name not in FIRST_CAVEATS)
        why += " | caveat: " + ", ".join(names)
    steps = step_phrases(result)
    if steps:
        why += " | next: " + "; ".join(steps)
    return why


def _text_column(measured: pd.DataFrame, name: str) -> pd.Series:
    if name not in measured.columns:
        return pd.Series([""] * len(measured), dtype=object)
    text = measured[name].astype(object).where(measured[name].notna(), "").astype(str).reset_index(drop=True)
    return terminal_column(text)  # a lab's text, escaped before widths are measured


def table_rows(batch: GradedBatch, width: int = WIDTH) -> tuple[str, pd.Series]:
    """The header line and one aligned line per sample (a Series, in batch order)."""
    measured = batch.measured
    sample_ids = _text_column(measured, "sample_id")
    units = _text_column(measured, "unit_id")
    classes = _text_column(measured, "class")
    index = batch.columns.index  # each sample's row in its file; the footer names the file
    rows = pd.Series(index.astype(str) if index is not None else np.full(len(measured), ""), dtype=object)
    row_w = max([len("row")] + rows.str.len().tolist())
    sid = min(max([len("sample")] + sample_ids.str.len().tolist()), 16)
    unit = min(max([len("unit")] + units.str.len().tolist()), 10)
    cls = min(max([len("class")] + classes.str.len().tolist()), 16)
    grades = list(batch.ruleset.grades)
    name_w = min(max(len(g) for g in grades + [UNRATED]), 12)
    grade_w = min(name_w + 1 + max(1, len(grades) - 1), 24)
    head = f"{'sample':<{sid}}  {'row':>{row_w}}  {'unit':<{unit}}  {'class':<{cls}}  {'grade':<{grade_w}}  "
    rest = width - len(head)
    if len(batch) == 0:
        return head + "why", pd.Series([], dtype=object)
    firsts, group, _ = record_shape_groups(batch, np.arange(len(batch)))
    shapes = [batch.result(int(i)) for i in firsts]  # one record per shape, not per row
    grade_text = np.array([_cut(f"{_cut(r.grade, name_w)} {grade_marker(r.level)}", grade_w).ljust(grade_w)
                           for r in shapes], dtype=object)
    why_text = np.array([_cut(terminal_text(_why(r)), rest) for r in shapes], dtype=object)
    lines = (_cut_column(sample_ids, sid) + "  " + rows.str.rjust(row_w) + "  " + _cut_column(units, unit) + "  " + _cut_column(classes, cls)
             + "  " + pd.Series(grade_text[group]) + "  " + pd.Series(why_text[group]))
    return head + "why", lines.str.rstrip()


def footer_lines(batch: GradedBatch, width: int = WIDTH) -> list[str]:
    """Counts, the rule set and engine, the notice and the cautions."""
    counts = batch.counts()
    by_grade = Counter(batch.grades())
    ladder = ", ".join(f"{g} {by_grade.get(g, 0)}" for g in list(batch.ruleset.grades) + [UNRATED])
    rs = batch.ruleset
    lines = ["-" * width] + next_step_lines(batch, width) + not_evaluated_lines(batch, width)
    lines.extend(_wrap(f"{terminal_text(batch.source)}: read {counts['read']}: graded {counts['graded']}, unrated {counts['unrated']}, "
                       f"rejected {counts['rejected']}  ({ladder})", width))
    lines.extend(_wrap(f"rule set {rs.id} version {rs.version}, sha256 {rs.sha256}, {engine_name()}",
                       width))  # the whole fingerprint, as records and `check` give it
    lines.append("")
    lines.extend(_wrap("Notice: " + rs.notice, width))
    for caution in CAUTIONS:
        lines.extend(_wrap("! " + caution, width))
    return lines


SAMPLES_PER_STEP = 12  # sample ids named beside a next step; the rest are counted


def next_step_lines(batch: GradedBatch, width: int = WIDTH) -> list[str]:
    """Each next step the findings ask, once and whole (the why column cuts it), with its samples."""
    if len(batch) == 0:
        return []
    firsts, group, _ = record_shape_groups(batch, np.arange(len(batch)))
    asked: dict[str, list] = {}
    for shape, first in enumerate(firsts):  # one record per shape, not per row
        for step in step_phrases(batch.result(int(first))):
            asked.setdefault(step, []).append(shape)
    if not asked:
        return []
    ids = _text_column(batch.measured, "sample_id").to_numpy(dtype=object)
    lines = ["What to do (the rule set's next steps, each with the samples that ask it):"]
    for step, shapes in asked.items():
        named = ids[np.isin(group, shapes)]
        more = f" and {len(named) - SAMPLES_PER_STEP} more" if len(named) > SAMPLES_PER_STEP else ""
        lines.extend(textwrap.wrap(f"- {terminal_text(step)}: {', '.join(named[:SAMPLES_PER_STEP])}{more}", width,
                                   subsequent_indent="  ", break_on_hyphens=False))
    return lines + ["-" * width]


def not_evaluated_lines(batch: GradedBatch, width: int = WIDTH) -> list[str]:
    """The rules some samples could not be evaluated on, each once with how many samples and the
    inputs they lacked (records' `not_evaluated`; the why column has no room for them)."""
    out = batch.outcome
    gaps: dict[str, tuple[int, list]] = {}  # rule id -> (samples, inputs lacked); a rule may be in several classes
    for j, slot in enumerate(out.slots):
        rows = np.flatnonzero(out.final[:, j] == NOT_EVALUATED)
        if not len(rows):
            continue
        first, _ = states(gap_states(batch, j, rows))
        count, names = gaps.get(slot.rule.id, (0, []))
        for rep in rows[first].tolist():
            names.extend(name for name in gap_at(batch, rep, j).missing if name not in names)
        gaps[slot.rule.id] = (count + len(rows), names)
    if not gaps:
        return []
    lines = ["Not evaluated (an input missing, or a censored reading that does not decide the rule):"]
    for rule, (count, names) in gaps.items():
        lines.extend(textwrap.wrap(f"- {rule}: {count} sample(s), lacking {', '.join(names)}", width,
                                   subsequent_indent="  ", break_on_hyphens=False))
    return lines + ["-" * width]


def _wrap(text: str, width: int) -> list[str]:
    return textwrap.wrap(text, width) or [""]


def write_table(batch: GradedBatch, stream, progress=None, min_rows: int = PROGRESS_MIN_ROWS,
                width: int = WIDTH) -> None:
    """Write the table in chunks: one line per sample, then counts, the notice and the cautions;
    `progress` (standard error) gets a counter if wants_progress says so."""
    shown = progress if wants_progress(progress, len(batch), min_rows) else None
    head, rows = table_rows(batch, width)
    stream.write(head + "\n" + "-" * width + "\n")
    total = len(rows)
    for start in range(0, total, CHUNK_ROWS):
        chunk = rows.iloc[start:start + CHUNK_ROWS]
        stream.write("\n".join(chunk.tolist()) + "\n")
        if shown is not None:
            done = start + len(chunk)
            shown.write(f"\rsumpwise: table: {done:,} of {total:,} rows ({done * 100 // total}%)")
            shown.flush()
    if shown is not None:
        shown.write("\n")
        shown.flush()
    stream.write("\n".join(footer_lines(batch, width)) + "\n")
