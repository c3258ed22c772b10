"""A terminal table of graded samples for a person: aligned, at most 100 columns wide.

Grades are told apart by a marker as well as by name, so the table reads the same
without colour: one more '+' for each step up the ladder.
"""

from __future__ import annotations

import textwrap
from collections import Counter

from .cautions import CAUTIONS
from .results import UNRATED, GradedBatch

WIDTH = 100


def grade_marker(level: int | None) -> str:
    return "?" if level is None else ("+" * level or "-")


def _cut(text: str, width: int) -> str:
    return text if len(text) <= width else text[: width - 1] + "~"


def table_lines(batch: GradedBatch, width: int = WIDTH) -> list[str]:
    """The table's lines: one per sample, then counts, the notice and the cautions."""
    results = list(batch.results())
    sid = max([len("sample")] + [len(r.sample_id) for r in results])
    sid = min(sid, 16)
    unit = min(max([len("unit")] + [len(r.unit_id or "") for r in results]), 10)
    cls = min(max([len("class")] + [len(r.class_name or "") for r in results]), 16)
    grade_w = max(len(g) for g in list(batch.ruleset.grades) + [UNRATED]) + 4
    head = f"{'sample':<{sid}}  {'unit':<{unit}}  {'class':<{cls}}  {'grade':<{grade_w}}  "
    rest = width - len(head)
    lines = [head + "why", "-" * width]
    for r in results:
        if r.reasons:
            why = ", ".join(f"{x.rule}" + (f" (capped from {x.capped_from})" if x.capped_from else "")
                            for x in r.reasons)
        elif r.unrated_because:
            why = r.unrated_because
        else:
            why = "no limit crossed"
        if r.caveats:
            why += " | caveat: " + ", ".join(c.caveat for c in r.caveats)
        grade = f"{r.grade} {grade_marker(r.level)}"
        lines.append(f"{_cut(r.sample_id, sid):<{sid}}  {_cut(r.unit_id or '', unit):<{unit}}  "
                     f"{_cut(r.class_name or '', cls):<{cls}}  {grade:<{grade_w}}  {_cut(why, rest)}")
    lines.append("-" * width)
    counts = batch.counts()
    by_grade = Counter(r.grade for r in results)
    ladder = ", ".join(f"{g} {by_grade.get(g, 0)}" for g in list(batch.ruleset.grades) + [UNRATED])
    lines.append(f"read {counts['read']}: graded {counts['graded']}, unrated {counts['unrated']}, "
                 f"rejected {counts['rejected']}  ({ladder})")
    rs = batch.ruleset
    lines.append(f"rule set {rs.id} version {rs.version}, sha256 {rs.sha256[:16]}...")
    lines.append("")
    lines.extend(_wrap("Notice: " + rs.notice, width))
    for caution in CAUTIONS:
        lines.extend(_wrap("! " + caution, width))
    return lines


def _wrap(text: str, width: int) -> list[str]:
    return textwrap.wrap(text, width) or [""]


def write_table(batch: GradedBatch, stream) -> None:
    stream.write("\n".join(table_lines(batch)) + "\n")
