"""Trend measures: each sample against its unit's previous sample, for a whole batch at once.

Samples are put in order by unit, sample date and oil hours (a ledger's earlier samples of the
same units first, so they come before the batch's on a tie). A unit's chain restarts at an oil
change: the `oil_changed` flag, or oil hours going down. A step across a change of method
(direct vs subtraction) or of lab is not computed: the two readings are not comparable. All of
it is one sort plus shifted arrays; there is no loop over units.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
import pandas as pd

from .measures import TREND_BASES, TREND_MEASURES
from .ruleset import RuleSet, condition_measures
from .samples import Reject, SampleBatch

# The columns a sample contributes to trends; a ledger's history frame has these.
CHAIN_COLUMNS = ("sample_id", "unit_id", "sampled_on", "oil_hours", "oil_changed", "method", "lab")

_LAST = np.iinfo(np.int64).max  # sort key of a missing date: after every real one
_DECIMALS = 9  # as in measures.py: differences of decimal lab values carry binary noise


@dataclass(frozen=True)
class EngineCaveat:
    """A caveat the engine raises itself, in no rule set; its message is a per-sample column."""

    id: str
    message_column: str
    source: str


TREND_CAVEATS = (
    EngineCaveat("trend-break", "trend_break_note",
                 "sumpwise engine: readings by another method or lab are not compared step by step "
                 "(common practice, no source)"),
    EngineCaveat("oil-changed", "oil_change_note",
                 "sumpwise engine: oil hours restart at an oil change and no rate is taken across it "
                 "(common practice, no source)"),
)


# Spellings of the `oil_changed` flag (case ignored); an empty cell means no change.
_FLAGS = {"true": True, "false": False, "yes": True, "no": False, "1": True, "0": False}


def read_oil_changes(batch: SampleBatch) -> SampleBatch:
    """The batch with `oil_changed` as booleans; a row whose flag is neither yes nor no is rejected."""
    if "oil_changed" not in batch.frame.columns or batch.frame["oil_changed"].dtype == bool:
        return batch  # nothing to read, or read already (the ledger reads flags before grading)
    column = batch.frame["oil_changed"].astype(object)
    text = column.where(column.notna(), "").astype(str).str.strip()
    flags = text.str.casefold().map(_FLAGS)
    bad = (flags.isna() & (text != "")).to_numpy()
    frame = batch.frame[~bad].copy()
    frame["oil_changed"] = flags[~bad].eq(True)
    if not bad.any():
        return replace(batch, frame=frame)
    ids = batch.frame["sample_id"].to_numpy(dtype=object)[bad]
    found = text.to_numpy(dtype=object)[bad]
    rejects = [Reject(int(row), sid, "oil_changed", f"expected true or false (yes/no, 1/0), found '{value}'")
               for row, sid, value in zip(batch.frame.index[bad], ids, found)]
    rejects = tuple(sorted(batch.rejects + tuple(rejects), key=lambda r: (r.row, r.field)))
    return replace(batch, frame=frame, rejects=rejects)


def trend_bases(ruleset: RuleSet) -> tuple[str, ...]:
    """The measures whose trends the rule set reads: only those are computed."""
    read: set[str] = set()
    for name in ruleset.classes:
        for rule in ruleset.rules_for(name):
            read |= rule.reads
    for caveat in ruleset.caveats:
        read |= set(condition_measures(caveat.when))
        if caveat.cap is not None and caveat.cap.unless is not None:
            read |= set(condition_measures(caveat.cap.unless))
    wanted = {TREND_MEASURES[name].needs[0] for name in read if name in TREND_MEASURES}
    return tuple(base for base in TREND_BASES if base in wanted)


def chain_frame(measured: pd.DataFrame, oil_changed) -> pd.DataFrame:
    """The columns of `measured` trends read, with `oil_changed` as booleans (False when absent)."""
    frame = pd.DataFrame({name: measured[name].to_numpy(dtype=object) for name in CHAIN_COLUMNS
                          if name not in ("oil_hours", "oil_changed")})
    frame["oil_hours"] = measured["oil_hours"].to_numpy(dtype=float)
    flags = np.zeros(len(measured), dtype=bool) if oil_changed is None else np.asarray(oil_changed, dtype=bool)
    frame["oil_changed"] = flags
    for base in TREND_BASES:
        frame[base] = measured[base].to_numpy(dtype=float)
    return frame[list(CHAIN_COLUMNS) + list(TREND_BASES)]


def _date_keys(dates: np.ndarray) -> np.ndarray:
    codes, uniques = pd.factorize(dates)
    parsed = pd.to_datetime(pd.Series(uniques, dtype=object), errors="coerce", format="ISO8601")
    keys = np.where(parsed.isna().to_numpy(), _LAST, parsed.to_numpy(dtype="datetime64[ns]").view(np.int64))
    return np.where(codes >= 0, keys[np.maximum(codes, 0)] if len(keys) else _LAST, _LAST)


def _shifted(values: np.ndarray, fill) -> np.ndarray:
    out = np.empty_like(values)
    if len(values):
        out[0] = fill
        out[1:] = values[:-1]
    return out


def add_trend_measures(measured: pd.DataFrame, oil_changed=None, history: pd.DataFrame | None = None,
                       bases: tuple = TREND_BASES) -> pd.DataFrame:
    """`measured` with trend measures for `bases`, previous-sample columns and the two caveat notes.

    `history` holds earlier samples (CHAIN_COLUMNS plus the bases), e.g. from a ledger; it only
    supplies predecessors. A note column is text where its caveat applies and None elsewhere.
    """
    incoming = chain_frame(measured, oil_changed)
    earlier = 0 if history is None else len(history)
    if earlier:
        chain = pd.concat([history[list(incoming.columns)], incoming], ignore_index=True)
    else:
        chain = incoming
    unit_codes, _ = pd.factorize(chain["unit_id"].to_numpy(dtype=object))
    date_keys = _date_keys(chain["sampled_on"].to_numpy(dtype=object))
    hours = chain["oil_hours"].to_numpy(dtype=float)
    order = np.lexsort((np.arange(len(chain)), np.where(np.isnan(hours), np.inf, hours), date_keys, unit_codes))

    unit = unit_codes[order]
    dated = date_keys[order] != _LAST
    h = hours[order]
    h_before = _shifted(h, np.nan)
    same_unit = (unit >= 0) & (unit == _shifted(unit, -1))
    flagged = chain["oil_changed"].to_numpy(dtype=bool)[order]
    hours_fell = same_unit & (h < h_before)
    new_oil = flagged | hours_fell
    linked = same_unit & dated & _shifted(dated, False) & ~new_oil

    method_codes, _ = pd.factorize(chain["method"].to_numpy(dtype=object))
    lab_codes, _ = pd.factorize(chain["lab"].to_numpy(dtype=object))
    m, lab = method_codes[order], lab_codes[order]
    m_before, lab_before = _shifted(m, -1), _shifted(lab, -1)
    method_changed = linked & (m != m_before)
    lab_changed = linked & (lab >= 0) & (lab_before >= 0) & (lab != lab_before)
    comparable = linked & ~method_changed & ~lab_changed

    span = h - h_before
    span = np.where(comparable & (span > 0), span, np.nan)
    sorted_out: dict[str, np.ndarray] = {"hours_since_previous": span}
    positions = np.arange(len(chain))
    for base in bases:
        values = chain[base].to_numpy(dtype=float)[order]
        previous = np.where(comparable, _shifted(values, np.nan), np.nan)
        step = np.round(values - previous, _DECIMALS)
        with np.errstate(divide="ignore", invalid="ignore"):
            rate = np.round(step / span * 1000.0, _DECIMALS)
        reset = ~(step > 0)
        last_reset = np.maximum.accumulate(np.where(reset, positions, 0)) if len(positions) else positions
        rising = (positions - last_reset).astype(float)
        rising[np.isnan(step)] = np.nan
        sorted_out[f"previous_{base}"] = previous
        sorted_out[f"{base}_step"] = step
        sorted_out[f"{base}_step_per_1000h"] = rate
        sorted_out[f"{base}_rising"] = rising

    at = np.empty(len(chain), dtype=np.int64)
    at[order] = positions
    mine = at[earlier:]  # sorted position of each incoming row
    columns = {name: values[mine] for name, values in sorted_out.items()}

    before = _shifted(order, 0)[mine]  # chain row of each incoming row's predecessor
    columns["trend_break_note"] = _break_notes(chain, before, method_changed[mine], lab_changed[mine],
                                               np.arange(earlier, len(chain)))
    columns["oil_change_note"] = _oil_notes(chain, before, flagged[mine], hours_fell[mine], h_before[mine], h[mine])
    added = pd.DataFrame({name: pd.Series(values, index=measured.index, dtype=object if values.dtype == object
                                          else float) for name, values in columns.items()})
    return pd.concat([measured, added], axis=1)


def _text(values: np.ndarray) -> np.ndarray:
    return pd.Series(values, dtype=object).fillna("(none)").astype(str).to_numpy(dtype=object)


def _since(chain: pd.DataFrame, before: np.ndarray) -> np.ndarray:
    """" since the previous sample of unit U (ID, DATE)" for the given predecessor rows."""
    def column(name):
        return _text(chain[name].to_numpy(dtype=object)[before])
    return (" since the previous sample of unit " + column("unit_id") + " (" + column("sample_id") + ", "
            + column("sampled_on") + ")")


def _break_notes(chain: pd.DataFrame, before: np.ndarray, method_changed: np.ndarray, lab_changed: np.ndarray,
                 rows: np.ndarray) -> np.ndarray:
    notes = np.full(len(rows), None, dtype=object)
    hit = np.flatnonzero(method_changed | lab_changed)
    if not len(hit):
        return notes
    what = np.full(len(hit), "", dtype=object)
    for name, changed in (("method", method_changed[hit]), ("lab", lab_changed[hit])):
        column = chain[name].to_numpy(dtype=object)
        phrase = name + " changed from " + _text(column[before[hit]]) + " to " + _text(column[rows[hit]])
        joiner = np.where(what == "", "", " and ")
        what = np.where(changed, what + joiner + phrase, what)
    notes[hit] = what + _since(chain, before[hit]) + "; step measures across the change are not evaluated"
    return notes


def _oil_notes(chain: pd.DataFrame, before: np.ndarray, flagged: np.ndarray, hours_fell: np.ndarray,
               hours_before: np.ndarray, hours: np.ndarray) -> np.ndarray:
    notes = np.full(len(flagged), None, dtype=object)
    hit = np.flatnonzero(flagged | hours_fell)
    if not len(hit):
        return notes
    fell = ("oil hours fell from " + _hours(hours_before[hit]) + " to " + _hours(hours[hit])
            + _since(chain, before[hit]))
    why = np.where(flagged[hit], "oil_changed is set on this sample", fell)
    notes[hit] = "first sample after an oil change (" + why + "); trend measures restart here, with no step"
    return notes


def _hours(values: np.ndarray) -> np.ndarray:
    return np.array([f"{v:g}" for v in values], dtype=object)


def trend_caveat_flags(measured: pd.DataFrame) -> np.ndarray:
    """bool [rows, TREND_CAVEATS]: the engine's own caveats that apply to each sample."""
    return np.stack([measured[c.message_column].notna().to_numpy() for c in TREND_CAVEATS], axis=1)
