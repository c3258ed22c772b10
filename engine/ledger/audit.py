"""Reading the ledger back: the story of one verdict, a unit's history, and a replay of every grade.

Replay re-grades each recorded batch with the rule set it was graded with (rebuilt from
its stored canonical text, whose SHA-256 must still match), after the samples that were
in the ledger when the batch was recorded, and compares the new records byte for byte
with the stored ones. Any difference means the ledger, the rule set text or the engine
changed what a verdict would be.
"""

from __future__ import annotations

import json
import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from sumpwise.vocabulary.cautions import caution_text
from sumpwise.ruleset.compiler import load_ruleset
from sumpwise.render.narrative import explain_lines
from sumpwise.render.safe_text import spreadsheet_frame, terminal_lines
from sumpwise.results.pipeline import grade_batch
from sumpwise.ledger.store import (LedgerError, batch_entries, batch_list, current_contents, current_records, fingerprint,
                     history_frame, open_ledger, sample_entries, unit_entries)
from sumpwise.vocabulary.problems import InputError
from sumpwise.render.jsonl import jsonl_lines
from sumpwise.results.records import (FORMAT_1, FULL, CaveatNote, Clause, NotEvaluated, Reason, SampleResult,
                                      next_step_from_record)
from sumpwise.ruleset.model import RuleSet
from sumpwise.intake.samples import SampleBatch

TREND_TABLE_ROWS = 6  # the sample itself and up to five before it


def result_from_record(record: dict, grades: tuple) -> SampleResult:
    """A stored JSON Lines record as the frozen SampleResult it was written from."""
    reasons = []
    for r in record["reasons"]:
        clauses = tuple(Clause(c["test"], c["limit"], c["held"], c["value"], measure=c.get("measure"),
                               field=c.get("field")) for c in r.get("clauses", ()))
        reasons.append(Reason(r["rule"], r["grade"], grades.index(r["grade"]), r["message"], r["source"],
                              measure=r.get("measure"), value=r.get("value"), unit=r.get("unit"),
                              test=r.get("test"), limit=r.get("limit"), capped_from=r.get("capped_from"),
                              capped_by=r.get("capped_by"), clauses=clauses,
                              next_step=next_step_from_record(r.get("next_step"))))
    ruleset = record["ruleset"]
    return SampleResult(
        sample_id=record["sample_id"], unit_id=record["unit_id"], class_name=record["class"],
        lubricant=record["lubricant"], sampled_on=record["sampled_on"], grade=record["grade"],
        level=record["level"], reasons=tuple(reasons),
        caveats=tuple(CaveatNote(c["caveat"], c["message"], c.get("source", ""), tuple(c.get("unless_missing", ())),
                                 next_step_from_record(c.get("next_step"))) for c in record["caveats"]),
        not_evaluated=tuple(NotEvaluated(n["rule"], tuple(n["missing"]), tuple(n.get("undecided", {}).items()))
                            for n in record["not_evaluated"]),
        notice=record["notice"], ruleset_id=ruleset["id"], ruleset_version=ruleset["version"],
        ruleset_sha256=ruleset["sha256"], engine=record["engine"], unrated_because=record.get("unrated_because"),
        values=tuple(record["values"].items()), method=record["method"],
        comment=record.get("comment"), comment_given="comment" in record)


def _number(value) -> str:
    if value is None or (isinstance(value, float) and np.isnan(value)):
        return "-"
    if isinstance(value, str):  # a censored reading, as the lab wrote it (`<0.05`)
        return value
    return f"{value:.6g}"


def trend_table(unit: pd.DataFrame) -> list[str]:
    """A short fixed-width table of a unit's samples: date, id, oil hours, key values, grade."""
    head = f"{'sampled':<10}  {'sample':<12} {'oil h':>8} {'kv40':>7} {'an':>6} {'oxid.':>7} {'water':>6}  grade"
    lines = [head]
    for row in unit.itertuples():
        note = " (oil changed)" if row.oil_changed else ""
        lines.append(f"{row.sampled_on or '-':<10}  {row.sample_id:<12} {_number(row.oil_hours):>8} "
                     f"{_number(row.kv40):>7} {_number(row.an):>6} {_number(row.oxidation):>7} "
                     f"{_number(row.water):>6}  {row.grade}{note}")
    return lines


def explain_from_ledger(path, sample_id: str) -> list[str]:
    """The story of a recorded verdict: values, reasons, caveats, rule set, trend, corrections."""
    conn = open_ledger(path, create=False)
    try:
        versions = sample_entries(conn, sample_id)
        if not versions:
            raise LedgerError(f"{path}: no sample '{sample_id}' in the ledger")
        current = next(v for v in versions if v["superseded_in"] is None)
        unit = unit_entries(conn, current["unit_id"]) if current["unit_id"] else None
    finally:
        conn.close()
    record = json.loads(current["record"])
    grades = tuple(json.loads(current["canonical"])["grades"])
    story = explain_lines(result_from_record(record, grades), grades)
    values = ", ".join(f"{name} {_number(value)}" for name, value in record["values"].items() if value is not None)
    story[1:1] = [f"Values as recorded: {values or '(none)'}; method {record['method']}"]
    at = next(i for i, line in enumerate(story) if line.startswith("Rule set "))
    lines = []
    lines.append(f"Recorded {current['recorded_at']} in batch {current['batch']} from {current['source']}; "
                 f"rule set sha256 {current['ruleset_sha256']}.")
    if len(versions) > 1:
        older = [v for v in versions if v is not current]
        lines.append(f"This is the current record; {len(older)} earlier version(s) were corrected: " + "; ".join(
            f"batch {v['batch']} ({v['recorded_at']}, {v['source']}) graded {v['grade']}" for v in older) + ".")
    if unit is not None and len(unit):
        mine = unit.index[unit["entry"] == current["entry"]]
        upto = int(mine[0]) + 1 if len(mine) else len(unit)
        shown = unit.iloc[max(0, upto - TREND_TABLE_ROWS):upto]
        lines.append("")
        lines.append(f"Unit {current['unit_id']}: this sample and the ones before it")
        lines.extend("  " + line for line in trend_table(shown))
    return story[:at] + lines + [""] + story[at:]


def unit_history(path, unit_id: str) -> pd.DataFrame:
    """A unit's current samples and grades over time, with what fired and the caveats."""
    conn = open_ledger(path, create=False)
    try:
        unit = unit_entries(conn, unit_id)
    finally:
        conn.close()
    if not len(unit):
        raise LedgerError(f"{path}: no samples of unit '{unit_id}' in the ledger")
    records = [json.loads(text) for text in unit["record"]]
    unit["fired"] = [";".join(f"{r['rule']}={r['grade']}" for r in rec["reasons"]) for rec in records]
    unit["caveats"] = [";".join(c["caveat"] for c in rec["caveats"]) for rec in records]
    unit["corrected"] = unit["corrects"].notna()
    unit["oil_changed"] = unit["oil_changed"].astype(bool)
    return unit[["sample_id", "sampled_on", "oil_hours", "oil_changed", "method", "lab", "kv40", "an", "oxidation",
                 "water", "grade", "level", "fired", "caveats", "corrected"]].reset_index(drop=True)


def write_history(unit: pd.DataFrame, unit_id: str, stream, fmt: str = "table") -> None:
    if fmt == "csv":
        spreadsheet_frame(unit).to_csv(stream, index=False, lineterminator="\n")
    elif fmt == "jsonl":
        stream.write(unit.to_json(orient="records", lines=True, force_ascii=False))
    else:
        lines = [f"Unit {unit_id}: {len(unit)} sample(s) in the ledger", *trend_table(unit)]
        fired = unit[unit["fired"] != ""]
        for row in fired.itertuples():
            lines.append(f"  {row.sample_id}: {row.fired.replace(';', ', ')}"
                         + (f" | caveat: {row.caveats.replace(';', ', ')}" if row.caveats else ""))
        stream.write("\n".join(terminal_lines(lines)) + "\n")
        stream.write("\n" + caution_text("! ") + "\n")


@dataclass(frozen=True)
class Difference:
    sample_id: str
    batch: int
    what: str


@dataclass(frozen=True)
class ReplayReport:
    checked: int
    batches: int
    rulesets: int
    differences: tuple


def _ruleset_from_canonical(canonical: str, sha256: str) -> RuleSet | None:
    """Rebuild a rule set from its canonical text; None when the text no longer has its fingerprint."""
    if fingerprint(canonical) != sha256:
        return None
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "ruleset.json"
        # one value a line: the canonical text is one long line, over the rule-set loader's line limit
        path.write_text(json.dumps(json.loads(canonical), indent=0), encoding="utf-8")
        ruleset = load_ruleset(path)
    return ruleset if ruleset.sha256 == sha256 else None


def _frame_from_contents(contents, columns: list) -> pd.DataFrame:
    """Stored sample values back into the frame samples.py made of them (floats, text or None, flags)."""
    frame = pd.DataFrame.from_records([json.loads(text) for text in contents])
    frame = frame.reindex(columns=columns)
    for name in frame.columns:
        column = frame[name]
        if column.dtype == object:
            frame[name] = column.where(column.notna(), None)
    frame.index = pd.RangeIndex(1, len(frame) + 1, name="row")
    return frame


def _differing_keys(stored: str, replayed: str) -> str:
    a, b = json.loads(stored), json.loads(replayed)
    keys = [k for k in dict.fromkeys(list(a) + list(b)) if a.get(k) != b.get(k)]
    grade = f"stored {a.get('grade')}, replayed {b.get('grade')}; " if a.get("grade") != b.get("grade") else ""
    return f"{grade}differs in: {', '.join(keys) or 'spelling only'}"


def replay(path, since: str | None = None) -> ReplayReport:
    """Re-grade every recorded sample (dated on or after `since`) and list the results that differ."""
    conn = open_ledger(path, create=False)
    differences: list[Difference] = []
    checked = batches_seen = 0
    rulesets: dict = {}
    try:
        for batch in batch_list(conn):
            entries = batch_entries(conn, batch["batch"])
            wanted = entries["sampled_on"].fillna("").to_numpy(dtype=object) >= since if since else \
                np.ones(len(entries), dtype=bool)
            if not wanted.any():
                continue
            batches_seen += 1
            sha = batch["ruleset_sha256"]
            if sha not in rulesets:
                rulesets[sha] = _ruleset_from_canonical(batch["canonical"], sha)
            ruleset = rulesets[sha]
            if ruleset is None:
                differences.extend(Difference(sid, batch["batch"], f"the stored rule set text no longer has its "
                                                                    f"fingerprint {sha}") for sid in
                                   entries["sample_id"][wanted])
                checked += int(wanted.sum())
                continue
            altered = np.array([fingerprint(c) != s for c, s in zip(entries["content"], entries["content_sha256"])],
                               dtype=bool)
            frame = _frame_from_contents(entries["content"], json.loads(batch["columns"]))
            units = pd.unique(entries["unit_id"].dropna().to_numpy(dtype=object))
            history = history_frame(conn, units, before_batch=batch["batch"])
            history = history[~history["sample_id"].isin(entries["sample_id"])]
            graded = grade_batch(SampleBatch(frame, (), len(frame), batch["source"]), ruleset, history)
            # A batch recorded before records had a format is replayed in the form it was written in.
            form = FULL if entries["record"].iat[0].startswith('{"format": ') else FORMAT_1
            replayed = "".join(jsonl_lines(graded, form=form)).split("\n")[:-1]
            for k in np.flatnonzero(wanted):
                checked += 1
                stored = entries["record"].iat[k] + batch["record_tail"]
                sid = entries["sample_id"].iat[k]
                if altered[k]:
                    differences.append(Difference(sid, batch["batch"], "its stored values no longer match their "
                                                                       "fingerprint (altered after recording)"))
                elif stored != replayed[k]:
                    differences.append(Difference(sid, batch["batch"], _differing_keys(stored, replayed[k])))
    finally:
        conn.close()
    return ReplayReport(checked, batches_seen, len(rulesets), tuple(differences))


def replay_lines(report: ReplayReport) -> list[str]:
    lines = [f"{d.sample_id} (batch {d.batch}): {d.what}" for d in report.differences]
    summary = (f"replayed {report.checked} result(s) from {report.batches} batch(es) under {report.rulesets} "
               f"rule set(s): ")
    summary += (f"{len(report.differences)} differ" if report.differences else "every result matches its record")
    return lines + [summary]


def stored_samples(path) -> SampleBatch:
    """The ledger's current samples as a batch, for commands that take `--db` instead of `--samples`."""
    conn = open_ledger(path, create=False)
    try:
        contents, columns = current_contents(conn)
    finally:
        conn.close()
    if not contents:
        raise InputError(f"{path}: the ledger holds no samples")
    frame = _frame_from_contents(contents, columns)
    return SampleBatch(frame, (), len(frame), f"ledger {path}")


def stored_records(path, batch: int | None = None) -> list[str]:
    """The ledger's current result records (or one batch's), as JSON Lines text."""
    conn = open_ledger(path, create=False)
    try:
        records = current_records(conn, batch)
    finally:
        conn.close()
    if not records:
        raise InputError(f"{path}: the ledger holds no results" + (f" for batch {batch}" if batch else ""))
    return records


def stored_ruleset(path, sha256: str) -> RuleSet:
    """A rule set the ledger recorded, rebuilt from its canonical form and checked against its fingerprint."""
    conn = open_ledger(path, create=False)
    try:
        row = conn.execute("SELECT canonical FROM rulesets WHERE sha256 = ?", (sha256,)).fetchone()
    finally:
        conn.close()
    ruleset = _ruleset_from_canonical(row[0], sha256) if row else None
    if ruleset is None:
        raise InputError(f"{path}: rule set {sha256[:12]}... is not stored intact in the ledger")
    return ruleset
