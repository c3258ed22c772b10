"""Reading the ledger back: the story of one verdict, a unit's history, queries, and a replay.

Stored verdicts are facts (results/facts.py); their wording is put back from the rule set
the batch was graded with, rebuilt from its stored canonical text (whose SHA-256 must
still match). Replay (the verify command) answers two questions apart. Integrity: the
digest chain, each batch's counts, every sample's typed columns against its stored values
(and a form-1 sample's values against their fingerprint), the rule sets. Reproducibility:
each batch re-graded after the samples that were in the ledger when it was recorded, every
fact compared; a difference under the recording engine fails, one an older engine recorded
in an intact batch is an engine change, listed apart.
"""

from __future__ import annotations

import contextlib
import gc
import json
import re
import tempfile
from dataclasses import dataclass, replace
from functools import lru_cache, partial
from pathlib import Path

import numpy as np
import pandas as pd

from sumpwise.derive.trends import trend_bases, unit_id_key
from sumpwise.intake.samples import SampleBatch
from sumpwise.ledger.aside import Aside
from sumpwise.ledger.schema import (DIGEST_2_SAMPLE_COLUMNS, DIGEST_3_QUERIES, DIGEST_3_SAMPLE_COLUMNS,  # noqa: F401 (API)
                                    batch_digest, fingerprint, result_from_record, written_digest_3)
from sumpwise.ledger.store import (STORED_VALUES, LedgerError, batch_entries, batch_list,
                                   batch_rejects, digest_columns, current_contents, current_verdicts, find_entries, frame_from_arrays,
                                   frame_from_contents, history_frame, object_text, open_ledger, reads_ledger,
                                   measures_of, ruleset_text, sample_entries, stored_rulesets, unit_entries,
                                   unit_spellings, version_text)
from sumpwise.render.jsonl import dumps
from sumpwise.version import engine_name
from sumpwise.render.narrative import explain_lines, forecast_lines, wrapper
from sumpwise.render.safe_text import spreadsheet_frame, terminal_lines
from sumpwise.results.facts import batch_facts, result_from_facts, same_as_stored
from sumpwise.results.pipeline import grade_batch
from sumpwise.results.records import SampleResult
from sumpwise.ruleset.compiler import load_ruleset
from sumpwise.ruleset.model import RuleSet
from sumpwise.vocabulary.cautions import CAUTIONS, caution_text
from sumpwise.vocabulary.limit_tests import unit_text
from sumpwise.vocabulary.measures import TREND_BASES
from sumpwise.vocabulary.problems import InputError

TREND_TABLE_ROWS = 6  # the sample itself and up to five before it


@lru_cache(maxsize=64)
def ruleset_from_canonical(canonical: str, sha256: str) -> RuleSet | None:
    """Rebuild a rule set from its canonical text; None when the text no longer has its fingerprint."""
    if fingerprint(canonical) != sha256:
        return None
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "ruleset.json"
        try:  # one value a line: the canonical text is one long line, over the rule-set loader's line limit
            path.write_text(json.dumps(json.loads(canonical), indent=0), encoding="utf-8")
            ruleset = load_ruleset(path)
        except Exception:  # a stored text that no longer loads is as good as altered
            return None
    return ruleset if ruleset.sha256 == sha256 else None


@lru_cache(maxsize=4096)
def _parsed(text: str):
    return json.loads(text)


def _sample(content: str) -> dict:
    return json.loads(content)


def rebuilt_result(content: str, facts: str, vals: str, ruleset: RuleSet, engine: str,
                   value_names: str, source: str | None = None, method: str | None = None) -> SampleResult:
    """A stored verdict with its wording put back from its rule set; `source`: its batch's;
    `method`: the sample's stored FTIR method, as the engine read it (a row may name none)."""
    return result_from_facts(_parsed(facts), json.loads(vals), _sample(content), ruleset, engine,
                             json.loads(value_names), source, method)


def _number(value) -> str:
    if value is None or (isinstance(value, float) and np.isnan(value)):
        return "-"
    if isinstance(value, str):  # a censored reading, as the lab wrote it (`<0.05`)
        return value
    return f"{value:.6g}"


_KEY_VALUES = (("kv40", "kv40", 7), ("an", "an", 6), ("oxidation", "oxid.", 7), ("water", "water", 6))


def trend_table(unit: pd.DataFrame, extra: tuple = ()) -> list[str]:
    """A short fixed-width table of a unit's samples: date, id, oil hours, key values, then the
    `extra` measures (columns of `unit`: what the rules trend beyond the key values), grade."""
    shown = list(_KEY_VALUES) + [(name, name, max(len(name), 7)) for name in extra]
    head = f"{'sampled':<10}  {'sample':<12} {'oil h':>8} " + " ".join(f"{title:>{width}}" for _, title, width in shown)
    lines = [head + "  grade"]
    for row in unit.to_dict("records"):
        note = " (oil changed)" if row["oil_changed"] else ""
        values = " ".join(f"{_number(row[name]):>{width}}" for name, _, width in shown)
        lines.append(f"{row['sampled_on'] or '-':<10}  {row['sample_id']:<12} {_number(row['oil_hours']):>8} "
                     f"{values}  {row['grade']}{note}")
    return lines


def _trended_values(unit: pd.DataFrame, ruleset: RuleSet) -> tuple[pd.DataFrame, tuple]:
    """The unit with a column for each measure `ruleset` trends beyond the key values (a declared
    wear metal, a particle count, a differential reading), derived from the stored input values."""
    key = tuple(name for name, _, _ in _KEY_VALUES)
    extra = tuple(base for base in trend_bases(ruleset) if base not in key)
    if not len(unit):
        return unit, ()
    columns = list(dict.fromkeys(name for names in unit["columns"] for name in json.loads(names)))
    recorded = frame_from_contents(unit["content"].tolist(), columns)
    measured = measures_of(recorded, ruleset, key)
    shown = {name: measured[name].to_numpy() for name in key + extra}
    for name in key:  # a censored reading as the lab wrote it (`>500`), not as a missing value
        written = recorded[name + ":written"].to_numpy(dtype=object) if name + ":written" in recorded.columns else None
        if written is not None and pd.notna(written).any():
            censored = pd.notna(written)
            shown[name] = shown[name].astype(object)
            shown[name][censored] = written[censored]
    unit = unit.assign(**shown)
    return unit, tuple(name for name in extra if unit[name].notna().any())


def _reader(path):
    return open_ledger(path, create=False, write=False)


def _ruleset_of(path, entry: dict) -> RuleSet:
    ruleset = ruleset_from_canonical(entry["canonical"], entry["ruleset_sha256"])
    if ruleset is None:
        raise LedgerError(f"{path}: rule set {entry['ruleset_sha256'][:12]}... is not stored intact in the ledger "
                          f"(run `sumpwise replay --db {path}`)")
    return ruleset


@reads_ledger
def explain_from_ledger(path, sample_id: str, other: RuleSet | None = None) -> list[str]:
    """The story of a recorded verdict: values, reasons, caveats, rule set, trend, corrections.

    With `other`, the sample is also graded under that rule set (after the same earlier
    samples of its unit) and that story is told too; nothing is written to the ledger.
    """
    conn = _reader(path)
    try:
        versions = sample_entries(conn, sample_id)
        if not versions:
            raise LedgerError(f"{path}: no sample '{sample_id}' in the ledger")
        current = next((v for v in versions if v["superseded_in"] is None), versions[-1])
        unit = unit_entries(conn, current["unit_id"]) if current["unit_id"] else None
        regraded = _regrade_one(conn, current, other) if other is not None else None
    finally:
        conn.close()
    ruleset = _ruleset_of(path, current)
    result = rebuilt_result(current["content"], current["facts"], current["vals"], ruleset, current["engine"],
                            current["value_names"], current["source"], current["method"])
    story = explain_lines(result, ruleset.grades, ruleset=ruleset)
    values = ", ".join(f"{name} {_number(value)}{unit_text(ruleset.unit_of(name))}"  # with its unit, as findings give it
                       for name, value in result.values if value is not None)
    story[1:1] = [f"Values as recorded: {values or '(none)'}; method {result.method}"]
    at = next(i for i, line in enumerate(story) if line.startswith("Rule set "))
    lines = [f"Recorded {current['recorded_at']} in batch {current['batch']} from {current['source']}; "
             f"rule set sha256 {current['ruleset_sha256']}."]
    if current["corrects"] is not None:
        lines.append(f"This version is a correction by {current['author'] or '(no author recorded)'}: "
                     f"{current['reason'] or '(no reason recorded)'}.")
    if len(versions) > 1:
        older = [v for v in versions if v is not current]
        lines.append(f"This is the current record; {len(older)} earlier version(s) were corrected: " + "; ".join(
            f"batch {v['batch']} ({v['recorded_at']}, {v['source']}) graded {v['grade']} (rule set {v['ruleset_id']} "
            f"version {version_text(v['version'])}){_changed(v, current)}{_correction_of(v)}" for v in older) + ".")
    if unit is not None and len(unit):
        mine = unit.index[unit["entry"] == current["entry"]]
        upto = int(mine[0]) + 1 if len(mine) else len(unit)
        shown, extra = _trended_values(unit.iloc[max(0, upto - TREND_TABLE_ROWS):upto], ruleset)
        lines.append("")
        lines.append(f"Unit {current['unit_id']}: this sample and the ones before it")
        lines.extend("  " + line for line in trend_table(shown, extra))
    told = story[:at] + lines + [""] + story[at:]
    if regraded is not None:
        told += ["", f"Re-graded under rule set {other.id} version {other.version} (sha256 {other.sha256}); "
                     f"not recorded, the ledger is unchanged: {result.grade} as recorded, {regraded.grade} under "
                     f"this rule set.", ""]
        told += explain_lines(regraded, other.grades, ruleset=other)
    return told


def _changed(older: dict, current: dict) -> str:
    """What an earlier version of a sample held that the current one does not: the values the
    correction changed, each with the current value."""
    was, now = _sample(older["content"]), _sample(current["content"])
    changed = [f"{name} {_shown(was.get(name))} (now {_shown(now.get(name))})"
               for name in dict.fromkeys([*was, *now]) if was.get(name) != now.get(name)]
    return ", with " + ", ".join(changed) if changed else ", with the same values"


def _correction_of(version: dict) -> str:
    """An earlier version that was itself a correction keeps its author and reason in the story."""
    if version["corrects"] is None:
        return ""
    return (f", itself a correction by {version['author'] or '(no author recorded)'}: "
            f"{version['reason'] or '(no reason recorded)'}")


def _shown(value) -> str:
    return "(none)" if value is None else _number(value)


def _regrade_one(conn, entry: dict, ruleset: RuleSet) -> SampleResult:
    """One stored sample graded under another rule set, after the unit's samples recorded before it."""
    frame = frame_from_contents([entry["content"]], json.loads(entry["columns"]))
    history = None
    if entry["unit_id"] is not None:
        history = history_frame(conn, [entry["unit_id"]], ruleset)
        unit_spellings(conn, entry["unit_id"])  # the unit under any spelling of its id, as history_frame
        entries = conn.execute("SELECT sample_id FROM samples WHERE unit_id IN (SELECT value FROM temp.wanted_units) "
                               "AND superseded_in IS NULL AND entry >= ?", (entry["entry"],)).fetchall()
        history = history[~history["sample_id"].isin([sid for (sid,) in entries])]
    graded = grade_batch(SampleBatch(frame, (), 1, entry["source"]), ruleset, history)
    if graded.rejects:
        r = graded.rejects[0]
        raise LedgerError(f"sample {r.sample_id}: this engine refuses its stored values, so it cannot be "
                          f"graded again under another rule set ({r.code}, {r.field}: {r.reason})")
    return replace(graded.result(0), row=None)


@reads_ledger
def unit_history(path, unit_id: str) -> pd.DataFrame:
    """A unit's current samples and grades over time, with what fired and the caveats."""
    conn = _reader(path)
    try:
        unit = unit_entries(conn, unit_id)
        canonical = conn.execute("SELECT canonical FROM rulesets WHERE sha256 = ?",
                                 (unit["ruleset_sha256"].iloc[-1] if len(unit) else "",)).fetchone()
        canonical = canonical[0] if canonical else ""
        names = {sha: f"{rid}@{version_text(version)}" for sha, rid, version in
                 conn.execute("SELECT sha256, ruleset_id, version FROM rulesets").fetchall()}
    finally:
        conn.close()
    if not len(unit):
        raise LedgerError(f"{path}: no samples of unit '{unit_id}' in the ledger")
    sha = unit["ruleset_sha256"].iloc[-1]
    unit, extra = _trended_values(unit, _ruleset_of(path, {"canonical": canonical, "ruleset_sha256": sha}))
    shapes = [_parsed(text) for text in unit["facts"]]
    unit["fired"] = [";".join(f"{r['rule']}={r['grade']}" for r in shape["reasons"]) for shape in shapes]
    unit["caveats"] = [";".join(c["caveat"] for c in shape["caveats"]) for shape in shapes]
    unit["corrected"] = unit["corrects"].notna()
    unit["correction_author"] = unit["author"].where(unit["corrected"], None)  # the batch's, for corrections only
    unit["correction_reason"] = unit["reason"].where(unit["corrected"], None)
    unit["oil_changed"] = unit["oil_changed"].astype(bool)
    unit["ruleset"] = unit["ruleset_sha256"].map(names)  # which rule set, in which version, graded each sample
    return unit[["sample_id", "sampled_on", "oil_hours", "oil_changed", "method", "lab", "kv40", "an", "oxidation",
                 "water", *extra, "grade", "level", "fired", "caveats", "corrected", "ruleset",
                 "unit_id", "batch", "correction_author", "correction_reason"]].reset_index(drop=True)


@reads_ledger
def unit_forecasts(path, unit_id: str) -> tuple[RuleSet | None, tuple]:
    """When the unit's current oil charge reaches each rule's next limit: its stored samples
    re-graded (nothing written) under the rule set that graded its latest sample, as `grade`
    forecasts them. Returns that rule set and the forecasts."""
    conn = _reader(path)
    try:
        unit = unit_entries(conn, unit_id)
        if not len(unit):
            return None, ()
        latest = next(v for v in sample_entries(conn, unit["sample_id"].iloc[-1]) if v["superseded_in"] is None)
        unit_spellings(conn, unit_id)  # the unit under any spelling of its id, as unit_entries
        rows = [(object_text(*row), row[2]) for row in conn.execute(
            f"SELECT {STORED_VALUES} FROM samples s JOIN batches b ON b.batch = s.batch "
            "WHERE s.unit_id IN (SELECT value FROM temp.wanted_units) AND s.superseded_in IS NULL ORDER BY s.entry")]
    finally:
        conn.close()
    ruleset = _ruleset_of(path, latest)
    columns = list(dict.fromkeys(name for _, names in rows for name in json.loads(names)))
    frame = frame_from_contents([content for content, _ in rows], columns)
    graded = grade_batch(SampleBatch(frame, (), 1, f"ledger {path}"), ruleset, None)
    return ruleset, tuple(f for f in graded.forecasts if unit_id_key(f.unit_id) == unit_id_key(unit_id))


def write_history(unit: pd.DataFrame, unit_id: str, stream, fmt: str = "table", forecasts=(),
                  ruleset: RuleSet | None = None) -> None:
    """The unit's samples; in the table, then the forecasts (made under `ruleset`) if given."""
    if fmt == "csv":  # read by a person in a spreadsheet: the cautions on every row, as grade's CSV has them
        spreadsheet_frame(unit.assign(cautions=" ".join(CAUTIONS))).to_csv(stream, index=False, lineterminator="\n")
    elif fmt == "jsonl":
        stream.write(unit.to_json(orient="records", lines=True, force_ascii=False))
    else:
        extra = tuple(unit.columns[unit.columns.get_loc("water") + 1:unit.columns.get_loc("grade")])
        spellings = list(dict.fromkeys(unit["unit_id"]))  # as the lab wrote the id, one unit as grading takes it
        written = f" (written {', '.join(repr(u) for u in spellings)})" if spellings != [unit_id] else ""
        lines = [f"Unit {unit_id}{written}: {len(unit)} sample(s) in the ledger", *trend_table(unit, extra)]
        fired = unit[unit["fired"] != ""]
        several = unit["ruleset"].nunique() > 1  # the limits changed over the unit's samples: say whose fired
        for row in fired.itertuples():
            lines.append(f"  {row.sample_id}: {row.fired.replace(';', ', ')}"
                         + (f" (rule set {row.ruleset})" if several else "")
                         + (f" | caveat: {row.caveats.replace(';', ', ')}" if row.caveats else ""))
        for row in unit[unit["corrected"]].itertuples():  # the values shown are a correction's: whose, and why
            lines.append(f"  {row.sample_id}: a correction (batch {row.batch}) by "
                         f"{row.correction_author or '(no author recorded)'}: "
                         f"{row.correction_reason or '(no reason recorded)'}")
        if ruleset is not None:
            told = forecast_lines(forecasts, None, str(unit["caveats"].iloc[-1] or "").split(";"), ruleset)
            lines.extend(told or ["", "When will it cross? No forecast: no rule's next limit is forecast within the "
                                      "horizon from this unit's current oil charge."])
            lines.extend(wrapper()(f"(\"This sample\" is the latest, {unit['sample_id'].iloc[-1]}; the unit's "
                                   f"samples were re-graded under rule set {ruleset.id} version {ruleset.version}, "
                                   f"which graded it; nothing is recorded.)", "  "))
        stream.write("\n".join(terminal_lines(lines)) + "\n")
        stream.write("\n" + caution_text("! ") + "\n")


# What a replay finding is about. Integrity: was anything altered, added or deleted (digest
# chain, stored values, typed columns against values, rule sets). Reproducibility:
# today's engine grades a stored sample otherwise than the same engine version recorded.
# An engine change: it grades otherwise than an older engine version recorded, in an intact batch.
INTEGRITY, REPRODUCIBILITY, ENGINE_CHANGE = "integrity", "reproducibility", "engine change"


@dataclass(frozen=True)
class Difference:
    sample_id: str | None  # None for a finding about a whole batch or the ledger
    batch: int | None
    what: str
    kind: str = INTEGRITY


@dataclass(frozen=True)
class ReplayReport:
    checked: int
    batches: int
    rulesets: int
    differences: tuple  # the findings that fail a replay: integrity, and reproducibility by the recording engine
    head: str = ""  # the last batch's digest: note it down to detect a later deletion of the newest batches
    last_batch: int | None = None
    engine_changes: tuple = ()  # re-grades that differ from what an older engine recorded: listed, failing only
    # when the auditor asks (`replay --strict`)

    @property
    def integrity(self) -> tuple:
        return tuple(d for d in self.differences if d.kind == INTEGRITY)

    @property
    def reproducibility(self) -> tuple:
        return tuple(d for d in self.differences if d.kind == REPRODUCIBILITY)

    def failed(self, strict: bool = False) -> bool:
        return bool(self.differences) or (strict and bool(self.engine_changes))


def _engine_version(name) -> tuple | None:
    """(0, 2, 0) from "sumpwise 0.2.0"; None for any other spelling."""
    found = re.fullmatch(r"sumpwise (\d+(?:\.\d+)*)", str(name or ""))
    return tuple(int(part) for part in found.group(1).split(".")) if found else None


def older_engine(recorded) -> bool:
    """Whether `recorded` names an engine version older than this one."""
    then, now = _engine_version(recorded), _engine_version(engine_name())
    return then is not None and now is not None and then < now


_TYPED = ("sample_id", "unit_id", "class", "sampled_on", "oil_hours", "method", "lab") + TREND_BASES


def _typed_mismatch(entries: pd.DataFrame, measured: pd.DataFrame, frame: pd.DataFrame, form: int,
                    held: list) -> np.ndarray:
    """Rows whose typed columns (what history and queries read) hold a value that is neither the
    stored input value nor what recording them now would write (the re-graded measured frame):
    an engine that derives a column differently since is not an alteration, a value from
    nowhere is. A form-2 batch leaves the reading columns empty (its digest counts any that are
    not), and the columns it `held` are the stored input values themselves."""
    bad = np.zeros(len(entries), dtype=bool)
    for name in _TYPED if form == 1 else [n for n in _TYPED[:-len(TREND_BASES)] if n not in held]:
        stored = entries[name].to_numpy(dtype=object)
        same = np.zeros(len(entries), dtype=bool)
        for source in (measured, frame):
            if name in source.columns:
                same |= _same(stored, source[name].to_numpy(dtype=object), numeric=name in ("oil_hours",) + TREND_BASES)
            elif source is measured:
                same |= pd.isna(stored)
        bad |= ~same
    if "oil_changed" not in held:
        flags = frame["oil_changed"].to_numpy(dtype=bool) if "oil_changed" in frame.columns \
            else np.zeros(len(frame), dtype=bool)
        bad |= pd.to_numeric(entries["oil_changed"], errors="coerce").to_numpy() != flags.astype(int)
    return bad


def _same(a: np.ndarray, b: np.ndarray, numeric: bool) -> np.ndarray:
    """Equal values, or both missing; text compares as text (a value of another type by its str())."""
    if numeric:
        a, b = pd.to_numeric(pd.Series(a), errors="coerce"), pd.to_numeric(pd.Series(b), errors="coerce")
        return ((a == b) | (a.isna() & b.isna())).to_numpy()
    gone_a, gone_b = pd.isna(a), pd.isna(b)
    both = ~gone_a & ~gone_b
    equal = np.zeros(len(a), dtype=bool)
    equal[both] = a[both] == b[both]
    other = both & ~equal
    if other.any():
        equal[other] = [str(x) == str(y) for x, y in zip(a[other], b[other])]
    return (gone_a & gone_b) | equal


def _levels(stored: np.ndarray) -> np.ndarray:
    """Stored levels as floats, NaN for none: integers (and None) directly, anything else (an
    altered row) as pandas reads a number, NaN where it reads none."""
    if set(map(type, stored.tolist())) <= {int, type(None)}:
        return np.array(stored, dtype=float)  # None reads as NaN
    return pd.to_numeric(pd.Series(stored, dtype=object), errors="coerce").to_numpy(dtype=float)


def _facts_differ(stored: dict, facts, k: int) -> str:
    """What differs between row k's stored verdict and its replayed facts (a row known to differ)."""
    level = int(facts.levels[k])
    parts = []
    if stored["grade"][k] != facts.grades[k]:
        parts.append(f"stored {stored['grade'][k]}, replayed {facts.grades[k]}")
    stored_level = stored["level"][k]
    if np.isnan(stored_level) != (level < 0) or (level >= 0 and stored_level != level):
        shown = None if np.isnan(stored_level) else int(stored_level)
        parts.append(f"stored level {shown}, replayed {level if level >= 0 else None}")
    if stored["facts"][k] != facts.shapes[facts.shape_of[k]]:
        parts.append(_shape_changes(stored["facts"][k], facts.shapes[facts.shape_of[k]]))
    if stored["vals"][k] != facts.values[k]:
        parts.append(f"its values differ (stored {stored['vals'][k]}, replayed {facts.values[k]})")
    return "; ".join(parts)


def _shape_changes(stored: str, replayed: str) -> str:
    """Which rules fired, which caveats were raised and which rules were not evaluated, recorded
    against replayed, where they differ."""
    try:
        was, now = _parsed(stored), _parsed(replayed)
        lists = (("fired", lambda s: [f"{r['rule']}={r['grade']}" for r in s["reasons"]]),
                 ("caveats", lambda s: [c["caveat"] for c in s["caveats"]]),
                 ("not evaluated", lambda s: [n[0] for n in s["not_evaluated"]]))
        parts = [f"{name}: recorded {', '.join(read(was)) or 'none'}, now {', '.join(read(now)) or 'none'}"
                 for name, read in lists if read(was) != read(now)]
    except (ValueError, KeyError, TypeError, IndexError):
        parts = []
    return "; ".join(parts) or "its reasons, caveats or gaps differ in their details"


@contextlib.contextmanager
def _no_cycle_collection():
    """Replay holds a batch's rows as millions of small objects and makes millions more; the
    cycle collector would rescan them all again and again (about a sixth of replay's CPU time,
    measured) while they are all in use. Reference counting still frees what is dropped."""
    enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if enabled:
            gc.enable()


@reads_ledger
@_no_cycle_collection()
def replay(path, since: str | None = None, head: tuple[int, str] | None = None) -> ReplayReport:
    """Verify the digest chain and re-grade every recorded sample (dated on or after `since`).

    `head` is a (batch, digest) an auditor noted from an earlier replay: a ledger whose chain
    was recomputed after an alteration, or cut short, no longer shows it.
    """
    conn = _reader(path)
    differences: list[Difference] = []
    checked = batches_seen = 0
    rulesets: dict = {}
    previous, last = "", None
    try:
        differences += _ledger_findings(conn)
        shapes = {shape: (sha, facts) for shape, sha, facts in conn.execute("SELECT shape, sha256, facts FROM shapes")}
        no_verdicts = conn.execute("SELECT NOT EXISTS (SELECT 1 FROM verdicts)").fetchone()[0]
        for batch in batch_list(conn):
            number = batch["batch"]
            if batch["previous"] != previous:
                differences.append(Difference(None, number, "the chain is broken: this batch does not follow the "
                                                            "one before it (a batch was deleted, added or altered)"))
            if head is not None and number == head[0] and batch["digest"] != head[1]:
                differences.append(Difference(None, number, f"its digest is not the one noted ({head[1][:16]}...): "
                                                            f"the chain was rewritten at or before this batch"))
            found, regraded = _replayed_batch(conn, batch, shapes, no_verdicts, batch["previous"] == previous, since,
                                              rulesets)
            differences += found
            previous, last = batch["digest"], number
            if regraded is not None:
                batches_seen += 1
                checked += regraded
        if head is not None and (last is None or last < head[0]):
            differences.append(Difference(None, head[0], "the noted head batch is not in the ledger (batches were "
                                                         "deleted from the end)"))
    finally:
        conn.close()
    return ReplayReport(checked, batches_seen, len(rulesets), tuple(d for d in differences if d.kind != ENGINE_CHANGE),
                        previous, last, tuple(d for d in differences if d.kind == ENGINE_CHANGE))


def _replayed_batch(conn, batch: dict, shapes: dict, no_verdicts: bool, chained: bool, since: str | None,
                    rulesets: dict) -> tuple[list, int | None]:
    """One batch's findings (its digest's first) and how many of its samples were re-graded (None
    when none was wanted). Its digest is computed by another process while this one turns the
    rows read back into values and re-grades them (_BatchDigest): the two take about as long."""
    number = batch["batch"]
    entries, columns = batch_entries(conn, number, batch["form"], shapes)
    contents = columns["content"]
    if batch["form"] == 1:
        written = {1: list(zip(*(columns[n] for n in ("entry", "sample_id", "content_sha256", "corrects"))))}
    elif batch["form"] == 2:
        written = {1: [columns[n] for n in DIGEST_2_SAMPLE_COLUMNS],
                   3: [columns[n] for n in ("verdict_entry", "grade", "level", "shape", "vals")],
                   4: columns["used_shapes"]}
    else:
        written = {1: [columns[n] for n in DIGEST_3_SAMPLE_COLUMNS], 3: columns["used_shapes"]}
        if no_verdicts:  # digest 3's count of what form 3 leaves empty, from the rows just read
            written[2] = [[len(columns["filled"]) - columns["filled"].tolist().count(None)]]
    del columns
    digest = _BatchDigest(conn, number, batch["form"], written)
    del written  # views of the batch's rows, as `contents` is until the values frame is built
    try:
        found, regraded = [], None
        if len(entries) != batch["new_samples"] + batch["corrections"]:
            found.append(Difference(None, number, f"it holds {len(entries)} sample(s) but recorded "
                                                  f"{batch['new_samples'] + batch['corrections']}"))
        rejected = conn.execute("SELECT count(*) FROM rejects WHERE batch = ?", (number,)).fetchone()[0]
        if rejected != batch["rejected"]:
            found.append(Difference(None, number, f"it holds {rejected} rejected row(s) but recorded "
                                                  f"{batch['rejected']}"))
        wanted = entries["sampled_on"].fillna("").to_numpy(dtype=object) >= since if since else \
            np.ones(len(entries), dtype=bool)
        if wanted.any():
            regraded = int(wanted.sum())
            sha = batch["ruleset_sha256"]
            if sha not in rulesets:
                rulesets[sha] = ruleset_from_canonical(batch["canonical"], sha) if batch["canonical"] else None
                if rulesets[sha] is not None and (batch["ruleset_id"] != rulesets[sha].id or
                                                  batch["version"] != json.dumps(rulesets[sha].version)):
                    found.append(Difference(None, number, f"the stored id or version of rule set {sha[:12]}... "
                                                          f"no longer match its text"))
            ruleset = rulesets[sha]
            if ruleset is None:
                found.extend(Difference(sid, number, f"the stored rule set text no longer has its fingerprint {sha} "
                                                     f"(or is gone)") for sid in entries["sample_id"][wanted])
            else:
                frame, altered = _stored_values(batch, entries, contents)
                del contents  # the rows read back, and their texts, go before the re-grade
                found += _batch_findings(conn, batch, entries, frame, altered, ruleset, wanted,
                                         lambda: chained and digest.result() == batch["digest"])
        if digest.result() != batch["digest"]:
            found.insert(0, Difference(None, number, "its stored rows no longer match the batch's digest (a row "
                                                     "altered, added or deleted after recording)"))
        return found, regraded
    finally:
        digest.close()


class _BatchDigest:
    """A batch's digest: a form-3 batch's computed by another process from the rows already read
    (ledger.aside; the batch's own row and rejects are read here first, since a connection is not
    used across fork), any other's here, as batch_digest gives it either way."""

    def __init__(self, conn, number: int, form: int, written: dict):
        self.value, self.aside = None, None
        if form not in (1, 2):
            written = dict(written)
            for k in (0, 2, 4):
                if k not in written:
                    written[k] = digest_columns(conn, DIGEST_3_QUERIES[k], number)
            self.aside = Aside(partial(written_digest_3, written))
        if self.aside is None or self.aside.pid is None:
            self.value = batch_digest(conn, number, written)

    def result(self) -> str:
        if self.value is None:
            self.value = self.aside.result()
        return self.value

    def close(self) -> None:
        if self.aside is not None:
            self.aside.close()


def _stored_values(batch: dict, entries: pd.DataFrame, contents: np.ndarray) -> tuple[pd.DataFrame | None,
                                                                                     np.ndarray]:
    """A batch's stored input values as the frame grading reads (None: they can no longer be
    read), and which samples' values no longer match their fingerprint (form 1; the digests of
    later forms cover the values themselves)."""
    if batch["form"] == 1:
        altered = (np.array(list(map(fingerprint, contents.tolist())), dtype=object)
                   != entries["content_sha256"].to_numpy(dtype=object))
    else:
        altered = np.zeros(len(entries), dtype=bool)
    try:
        if batch["form"] == 1:
            return frame_from_contents(contents.tolist(), json.loads(batch["columns"])), altered
        held = json.loads(batch["held"])
        return frame_from_arrays(contents.tolist(), json.loads(batch["columns"]), held,
                                 {name: entries[name].to_numpy(dtype=object) for name in held}), altered
    except (ValueError, TypeError, AssertionError):
        return None, altered


def _batch_findings(conn, batch: dict, entries: pd.DataFrame, frame: pd.DataFrame | None, altered: np.ndarray,
                    ruleset: RuleSet, wanted: np.ndarray, intact) -> list:
    """Each sample's integrity (fingerprint, typed columns, verdict present), then its re-grade.

    A re-grade that differs is an engine change only when an older engine recorded it and the
    batch is intact (its digest and place in the chain hold: `intact()`, asked only then, since
    the digest may still be in the making); else it fails the replay."""
    number, form = batch["batch"], batch["form"]
    if frame is None:
        return [Difference(None, number, "its stored values or columns can no longer be read (altered after "
                                         "recording); its samples were not re-graded")]
    units = [unit for unit in pd.unique(entries["unit_id"].to_numpy(dtype=object)) if not pd.isna(unit)]
    history = history_frame(conn, units, ruleset, before_batch=number)
    if len(history):
        history = history[~history["sample_id"].isin(entries["sample_id"])]
    # No forecasts: a verdict's facts hold none, and replay compares facts.
    graded = grade_batch(SampleBatch(frame, (), len(frame), batch["source"]), ruleset, history, forecasts=False)
    found = []
    if graded.rejects:  # stored values this engine refuses (an ISO 4406 code it no longer reads): no verdict to compare
        refused = {r.row: r for r in graded.rejects}
        rows = frame.index.to_numpy()
        for k in np.flatnonzero(np.isin(rows, list(refused)) & wanted):
            reject = refused[int(rows[k])]
            found.append(_unreproduced(batch, intact(), entries["sample_id"].iat[k],
                                       f"this engine refuses its stored values ({reject.code}, {reject.field}: "
                                       f"{reject.reason})"))
        kept = ~np.isin(rows, list(refused))
        entries, frame = entries[kept].reset_index(drop=True), frame[kept]
        altered, wanted = altered[kept], wanted[kept]
    typed = _typed_mismatch(entries, graded.measured, frame, form, json.loads(batch["held"]) if form != 1 else [])
    names = json.loads(batch["value_names"])
    facts = batch_facts(graded, names)
    read_otherwise = np.zeros(len(entries), dtype=bool)  # a value the batch reads back from the sample's stored ones
    for name in names.get("from_content", ()):
        read_otherwise |= ~same_as_stored(graded, frame, name)
    stored = {"grade": entries["grade"].to_numpy(dtype=object), "facts": entries["facts"].to_numpy(dtype=object),
              "vals": entries["vals"].to_numpy(dtype=object),
              "level": _levels(entries["level"].to_numpy(dtype=object))}
    replayed_level = np.where(facts.levels >= 0, facts.levels, np.nan)
    shapes = np.array(facts.shapes, dtype=object)[facts.shape_of] if len(facts.shapes) else stored["facts"][:0]
    same_level = (stored["level"] == replayed_level) | (np.isnan(stored["level"]) & np.isnan(replayed_level))
    differs = ~((stored["grade"] == facts.grades) & same_level & (stored["facts"] == shapes)
                & (stored["vals"] == facts.values))
    sids = entries["sample_id"].to_numpy(dtype=object)
    for k in np.flatnonzero(wanted & (altered | typed | differs | read_otherwise)):
        sid = sids[k]
        if altered[k]:
            found.append(Difference(sid, number, "its stored values no longer match their fingerprint "
                                                 "(altered after recording)"))
        elif typed[k]:
            found.append(Difference(sid, number, "its stored columns no longer match its stored values "
                                                 "(altered after recording)"))
        elif pd.isna(stored["facts"][k]):
            found.append(Difference(sid, number, "its verdict is missing (deleted, or its shape is gone)"))
        elif read_otherwise[k] and not differs[k]:
            found.append(_unreproduced(batch, intact(), sid, "its record's values, which the ledger reads back from its "
                                                           "stored input values, are not those values as this engine "
                                                           "reads them"))
        else:
            found.append(_unreproduced(batch, intact(), sid, _facts_differ(stored, facts, k) or "its verdict differs"))
    return found


def _unreproduced(batch: dict, intact: bool, sid, why: str) -> Difference:
    """A recorded verdict this engine does not give again: an engine change only when an older
    engine recorded it and the batch is intact; else the replay fails on it."""
    number, engine = batch["batch"], batch["engine"]
    if intact and older_engine(engine):
        return Difference(sid, number, f"{why} (recorded by {engine}; {engine_name()} grades it otherwise: an "
                                       f"engine change, not an alteration, as the batch's digest and the sample's "
                                       f"fingerprint hold)", ENGINE_CHANGE)
    if intact and engine == engine_name():
        return Difference(sid, number, f"{why} (recorded by {engine}, the engine replaying it: not reproduced)",
                          REPRODUCIBILITY)
    if not intact:
        return Difference(sid, number, f"{why} (recorded by {engine}; the batch's digest or its place in the chain "
                                       f"does not hold: altered after recording?)", REPRODUCIBILITY)
    return Difference(sid, number, f"{why} (recorded by {engine}, which is not older than {engine_name()}: not "
                                   f"reproduced)", REPRODUCIBILITY)


def _ledger_findings(conn) -> list:
    """Rows that belong to no batch, verdicts of no sample, and corrections that do not pair up."""
    # One pass over the samples finds those of no batch and every row a correction involves (the
    # pairing is checked below, as the SQL `(entry, superseded_in) NOT IN (corrects, batch)` and
    # `NOT EXISTS` would: SQLite gives these INTEGER columns back as numbers, or as text that
    # equals no number, and Python compares them alike).
    rows = conn.execute("SELECT s.sample_id, s.batch, b.batch IS NULL, s.entry, s.superseded_in, s.corrects "
                        "FROM samples s LEFT JOIN batches b ON b.batch = s.batch WHERE b.batch IS NULL OR "
                        "s.superseded_in IS NOT NULL OR s.corrects IS NOT NULL ORDER BY s.entry").fetchall()
    pairs = {(corrects, batch) for _, batch, _, _, _, corrects in rows if corrects is not None}
    superseded = {entry: later for _, _, _, entry, later, _ in rows if later is not None}
    no_batch = "recorded in a batch that is not in the ledger (its batch was deleted)"
    found = [Difference(sid, batch, no_batch) for sid, batch, orphan, *_ in rows if orphan]
    checks = (
        ("SELECT NULL, v.entry FROM verdicts v LEFT JOIN samples s ON s.entry = v.entry WHERE s.entry IS NULL",
         "a verdict of no sample (added, or its sample deleted)"),
        ("SELECT r.sample_id, r.batch FROM rejects r LEFT JOIN batches b ON b.batch = r.batch WHERE b.batch IS NULL",
         "a rejected row of a batch that is not in the ledger"),
    )
    for query, what in checks:
        found.extend(Difference(row[0], row[1], what) for row in conn.execute(query).fetchall())
    found.extend(Difference(sid, batch, "marked as corrected, but no correction of it was recorded")
                 for sid, batch, _, entry, later, _ in rows if later is not None and (entry, later) not in pairs)
    found.extend(Difference(sid, batch, "a correction whose corrected version is not marked as corrected by it")
                 for sid, batch, _, _, _, corrects in rows
                 if corrects is not None and (corrects not in superseded or superseded[corrects] != batch))
    checks = (
        ("SELECT s.sample_id, s.batch FROM samples s WHERE s.batch IN (SELECT batch FROM batches WHERE form < 3) "
         "AND (s.grade IS NOT NULL OR s.level IS NOT NULL OR s.shape IS NOT NULL OR s.vals IS NOT NULL)",
         "a verdict in the sample's row, which its batch's storage form keeps in the verdicts table (added?)"),
        ("SELECT NULL, NULL, sha256 FROM rulesets WHERE sha256 NOT IN (SELECT ruleset_sha256 FROM batches)",
         "a stored rule set that no batch was graded with (added after recording?)"),
    )
    for query, what in checks:
        for row in conn.execute(query).fetchall():
            note = f" ({row[2][:12]}...)" if len(row) > 2 else ""
            found.append(Difference(row[0], row[1], what + note))
    for shape, sha, facts in conn.execute("SELECT shape, sha256, facts FROM shapes").fetchall():
        if fingerprint(facts) != sha:
            found.append(Difference(None, None, f"stored shape {shape} no longer matches its fingerprint"))
        stored = conn.execute("SELECT rule, grade FROM shape_rules WHERE shape = ? ORDER BY rule, grade",
                              (shape,)).fetchall()
        try:
            wanted = sorted({(r["rule"], r["grade"]) for r in _parsed(facts)["reasons"]})
        except (ValueError, KeyError, TypeError):
            found.append(Difference(None, None, f"stored shape {shape} can no longer be read"))
            continue
        if sorted(stored) != wanted:
            found.append(Difference(None, None, f"the rule index of stored shape {shape} no longer matches it"))
    return found


def replay_lines(report: ReplayReport, strict: bool = False) -> list[str]:
    """Integrity findings, then re-grades not reproduced, then engine changes, then the verdicts."""
    lines = []
    for label, found in (("integrity", report.integrity), ("not reproduced", report.reproducibility),
                         ("engine change", report.engine_changes)):
        for d in found:
            where = f"{d.sample_id} (batch {d.batch})" if d.sample_id is not None else (
                f"batch {d.batch}" if d.batch is not None else "ledger")
            lines.append(f"{label}: {where}: {d.what}")
    lines.append(f"replayed {report.checked} result(s) from {report.batches} batch(es) under {report.rulesets} "
                 f"rule set(s)")
    lines.append("integrity: " + (f"{len(report.integrity)} finding(s): rows, batches or rule sets altered, added or "
                                  f"deleted" if report.integrity else
                                  "clean (digest chain, stored values, typed columns against values, "
                                  "rule sets)"))
    same = report.checked - len({(d.sample_id, d.batch) for d in report.reproducibility + report.engine_changes
                                 if d.sample_id is not None})
    told = (f"reproducibility: {same} result(s) graded as recorded" if same < report.checked else
            f"reproducibility: every result matches its record ({same} re-graded)")
    if report.reproducibility:
        told += f"; {len(report.reproducibility)} not reproduced"
    if report.engine_changes:
        told += (f"; {len(report.engine_changes)} graded otherwise than an older engine recorded them (engine "
                 f"changes, listed above" + ("; --strict fails on them)" if strict else
                                             "; not a failure without --strict)"))
    lines.append(told)
    if report.last_batch is not None:
        lines.append(f"ledger head: batch {report.last_batch}, digest {report.head} (keep it elsewhere and give it "
                     f"to a later replay as --head {report.last_batch}:{report.head}: another digest for this batch "
                     f"means batches were removed or rewritten)")
    return lines


@reads_ledger
def stored_samples(path) -> SampleBatch:
    """The ledger's current samples as a batch, for commands that take `--db` instead of `--samples`."""
    conn = _reader(path)
    try:
        contents, columns = current_contents(conn)
    finally:
        conn.close()
    if not contents:
        raise InputError(f"{path}: the ledger holds no samples")
    frame = frame_from_contents(contents, columns)
    return SampleBatch(frame, (), len(frame), f"ledger {path}")


@reads_ledger
def stored_results(path, batch: int | None = None) -> tuple[list[SampleResult], dict]:
    """The ledger's current results (or one batch's), each worded from the rule set it was graded
    with, and those rule sets by fingerprint: what a whole-ledger report draws each sample against."""
    conn = _reader(path)
    try:
        rows = current_verdicts(conn, batch)
        canonical = dict(conn.execute("SELECT sha256, canonical FROM rulesets").fetchall())
    finally:
        conn.close()
    if not rows:
        raise InputError(f"{path}: the ledger holds no results" + (f" for batch {batch}" if batch else ""))
    rulesets = {}
    for sha in dict.fromkeys(row[3] for row in rows):
        rulesets[sha] = _ruleset_of(path, {"canonical": canonical.get(sha, ""), "ruleset_sha256": sha})
    return [rebuilt_result(content, facts, vals, rulesets[sha], engine, names, source, method)
            for content, facts, vals, sha, engine, names, source, method in rows], rulesets


@reads_ledger
def corrected_later(path, batch: int) -> list[tuple]:
    """(sample id, the batch that corrected it, its author, its reason) of each sample `batch`
    recorded that a later batch corrected: a report of that batch shows the replaced version."""
    conn = _reader(path)
    try:
        return conn.execute("SELECT s.sample_id, s.superseded_in, b.author, b.reason FROM samples s JOIN batches b "
                            "ON b.batch = s.superseded_in WHERE s.batch = ? ORDER BY s.entry", (batch,)).fetchall()
    finally:
        conn.close()


@reads_ledger
def stored_records(path, batch: int | None = None) -> list[str]:
    """The ledger's current result records (or one batch's) as self-contained JSON Lines text."""
    results, _ = stored_results(path, batch)
    return [dumps(result.to_record()) for result in results]


@reads_ledger
def stored_ruleset(path, selector: str) -> RuleSet:
    """A rule set the ledger recorded, by fingerprint (or an unambiguous prefix of at least 8 hex
    digits) or ID@VERSION, rebuilt from its canonical form and checked against its fingerprint."""
    sha, canonical = stored_ruleset_text(path, selector)
    ruleset = ruleset_from_canonical(canonical, sha)
    if ruleset is None:
        raise InputError(f"{path}: rule set {sha[:12]}... is not stored intact in the ledger")
    return ruleset


@reads_ledger
def stored_ruleset_text(path, selector: str) -> tuple[str, str]:
    """(sha256, canonical text) of one stored rule set; the text is a one-file rule set `check` reads."""
    conn = _reader(path)
    try:
        found = ruleset_text(conn, selector)
    finally:
        conn.close()
    if not found:
        raise InputError(f"{path}: rule set '{selector}' is not stored intact in the ledger: none has that "
                         f"fingerprint or ID@VERSION (give a fingerprint, at least its first 8 hex digits, or "
                         f"ID@VERSION; `sumpwise rulesets --db {path}` lists them)")
    if len(found) > 1:
        raise InputError(f"{path}: '{selector}' names {len(found)} stored rule sets: "
                         + ", ".join(sha[:16] for sha, _ in found) + "; give more of the fingerprint")
    return found[0]


@reads_ledger
def ledger_rulesets(path) -> list[dict]:
    conn = _reader(path)
    try:
        return stored_rulesets(conn)
    finally:
        conn.close()


@reads_ledger
def find_samples(path, **filters) -> pd.DataFrame:
    """The recorded samples matching every filter (see store.find_entries), with the rules that fired."""
    conn = _reader(path)
    try:
        found = find_entries(conn, **filters)
    finally:
        conn.close()
    found["fired"] = [";".join(f"{r['rule']}={r['grade']}" for r in _parsed(text)["reasons"])
                      for text in found["facts"]]
    return found.drop(columns=["facts"])


@reads_ledger
def recorded_rejects(path) -> pd.DataFrame:
    conn = _reader(path)
    try:
        return batch_rejects(conn)
    finally:
        conn.close()
