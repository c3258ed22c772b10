"""Trend measures: each sample against its unit's previous sample, for a whole batch at once.

Samples are put in order by unit, sample date and oil hours (a ledger's earlier samples of the
same units first, so they come before the batch's on a tie). A unit's chain restarts at an oil
change: the `oil_changed` flag, or oil hours going down. A step across a change of method
(direct vs subtraction) or of lab is not computed: the two readings are not comparable. All of
it is one sort plus shifted arrays; there is no loop over units.

A step counts towards a rising run only when it exceeds the measure's noise margin: the rule
set's `noise_margins:` entry where it gives one, else the test method's published repeatability
at the mean of the two readings (vocabulary.measures.Repeatability), else zero (any rise counts).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd

from sumpwise.vocabulary.measures import (DECIMALS, MEASURES, TREND_BASES, TREND_MEASURES, TRENDED,
                                         declared_trend_measures)
from sumpwise.ruleset.model import RuleSet, condition_measures
from sumpwise.vocabulary.caveats import EngineCaveat
from sumpwise.intake.samples import Reject, SampleBatch

# The columns a sample contributes to trends; a ledger's history frame has these.
CHAIN_COLUMNS = ("sample_id", "unit_id", "sampled_on", "oil_hours", "oil_changed", "method", "lab")

_LAST = np.iinfo(np.int64).max  # sort key of a missing date: after every real one


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
    values = column.where(column.notna(), "").to_numpy(dtype=object)
    codes, uniques = pd.factorize(values)  # each distinct spelling is read once
    if not all(type(u) is str for u in uniques):  # 1, 1.0 and True factorize alike but are spelled apart
        codes, uniques = pd.factorize(np.array([str(v) for v in values], dtype=object))
    spelled = np.array([str(u).strip() for u in uniques], dtype=object)
    meaning = [_FLAGS.get(text.casefold()) for text in spelled]
    set_flag = np.array([m is True for m in meaning], dtype=bool)[codes]
    bad = np.array([m is None and text != "" for m, text in zip(meaning, spelled)], dtype=bool)[codes]
    frame = batch.frame[~bad].copy()
    frame["oil_changed"] = set_flag[~bad]
    if not bad.any():
        return replace(batch, frame=frame)
    ids = batch.frame["sample_id"].to_numpy(dtype=object)[bad]
    found = spelled[codes[bad]]
    rejects = [Reject(int(row), sid, "oil_changed", f"expected true or false (yes/no, 1/0), found '{value}'", "D006")
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
    known = {**TREND_MEASURES, **declared_trend_measures(ruleset.measures)}
    wanted = {known[name].needs[0] for name in read if name in known}
    return tuple(base for base in TRENDED if base in wanted) + tuple(sorted(wanted - set(TRENDED)))


def noise_margins(ruleset: RuleSet, bases: tuple) -> dict:
    """Each base's noise margin as (absolute, factor, offset): a step above absolute + factor x
    (mean of the two readings + offset) is a rise. The rule set's margin replaces a published one."""
    margins = {}
    for base in bases:
        given = getattr(ruleset, "noise_margins", {}).get(base)
        published = MEASURES[base].repeatability if base in MEASURES else None
        if given is not None:
            margins[base] = (float(given), 0.0, 0.0)
        elif published is not None:
            margins[base] = (0.0, published.factor, published.offset)
    return margins


def chain_frame(measured: pd.DataFrame, oil_changed, bases: tuple = TREND_BASES) -> pd.DataFrame:
    """The columns of `measured` trends read for `bases`, with `oil_changed` as booleans (False when absent)."""
    frame = pd.DataFrame({name: measured[name].to_numpy(dtype=object) for name in CHAIN_COLUMNS
                          if name not in ("oil_hours", "oil_changed")})
    frame["oil_hours"] = measured["oil_hours"].to_numpy(dtype=float)
    flags = np.zeros(len(measured), dtype=bool) if oil_changed is None else np.asarray(oil_changed, dtype=bool)
    frame["oil_changed"] = flags
    for base in bases:
        frame[base] = measured[base].to_numpy(dtype=float)
    return frame[list(CHAIN_COLUMNS) + list(bases)]


def _chain_arrays(measured: pd.DataFrame, oil_changed, history: pd.DataFrame | None, bases: tuple) -> dict:
    """CHAIN_COLUMNS and the bases as plain arrays, `history`'s rows before the batch's."""
    own = {name: measured[name].to_numpy(dtype=object) for name in ("sample_id", "unit_id", "sampled_on", "method",
                                                                    "lab")}
    own["oil_hours"] = measured["oil_hours"].to_numpy(dtype=float)
    own["oil_changed"] = (np.zeros(len(measured), dtype=bool) if oil_changed is None
                          else np.asarray(oil_changed, dtype=bool))
    own.update({base: measured[base].to_numpy(dtype=float) for base in bases})
    if history is None or not len(history):
        return own
    # A base the history does not carry has no earlier value there.
    return {name: np.concatenate([history[name].to_numpy(dtype=values.dtype) if name in history.columns
                                  else np.full(len(history), np.nan), values]) for name, values in own.items()}


def _dense_rank(values: np.ndarray) -> tuple[np.ndarray, int]:
    """Each value's rank among the distinct values (equal values share one), and how many there are."""
    codes, uniques = pd.factorize(values)
    rank_of_unique = np.empty(len(uniques), dtype=np.int64)
    rank_of_unique[np.argsort(uniques, kind="stable")] = np.arange(len(uniques))
    return rank_of_unique[codes], len(uniques)


def date_keys(dates: np.ndarray) -> np.ndarray:
    """Sort keys of dates as written (ISO 8601): nanoseconds, missing or unreadable ones last;
    each distinct text parsed once (a file holds a few hundred dates for a million rows)."""
    codes, uniques = pd.factorize(dates)
    parsed = pd.to_datetime(pd.Series(uniques, dtype=object), errors="coerce", format="ISO8601")
    keys = np.where(parsed.isna().to_numpy(), _LAST, parsed.to_numpy(dtype="datetime64[ns]").view(np.int64))
    return np.where(codes >= 0, keys[np.maximum(codes, 0)] if len(keys) else _LAST, _LAST)


def _trend_order(unit_codes: np.ndarray, day_keys: np.ndarray, hours: np.ndarray) -> np.ndarray:
    """The stable order by unit, date, then oil hours (missing hours last).

    The three ranks are packed into one integer key when it fits: one stable argsort is
    cheaper than lexsort's pass per key, and gives the same order.
    """
    date_rank, dates = _dense_rank(day_keys)
    hour_rank, hour_values = _dense_rank(np.where(np.isnan(hours), np.inf, hours) + 0.0)  # + 0.0: -0.0 ties 0.0
    units = int(unit_codes.max(initial=-1)) + 2  # codes run from -1 (no unit)
    if units * max(dates, 1) * max(hour_values, 1) >= 2 ** 63:
        return np.lexsort((hour_rank, date_rank, unit_codes))
    return np.argsort((unit_codes + 1) * (dates * hour_values) + date_rank * hour_values + hour_rank, kind="stable")


def _shifted(values: np.ndarray, fill) -> np.ndarray:
    out = np.empty_like(values)
    if len(values):
        out[0] = fill
        out[1:] = values[:-1]
    return out


def trend_columns(bases: tuple) -> list[str]:
    """The numeric columns add_trend_measures adds for `bases`, in order."""
    return ["hours_since_previous"] + [name for base in bases for name in
                                       (f"previous_{base}", f"{base}_step", f"{base}_step_per_1000h", f"{base}_rising")]


def add_trend_measures(measured: pd.DataFrame, oil_changed=None, history: pd.DataFrame | None = None,
                       bases: tuple = TREND_BASES, margins: dict | None = None) -> pd.DataFrame:
    """`measured` with trend measures for `bases`, previous-sample columns and the two caveat notes.

    `history` holds earlier samples (CHAIN_COLUMNS plus the bases), e.g. from a ledger; it only
    supplies predecessors. `margins` (noise_margins) gives each base's noise margin; a base
    without one counts every rise. A note column is text where its caveat applies and None elsewhere.
    """
    margins = margins or {}
    chain = _chain_arrays(measured, oil_changed, history, bases)
    total = len(chain["oil_hours"])
    earlier = total - len(measured)
    unit_codes, _ = pd.factorize(chain["unit_id"])
    dates = date_keys(chain["sampled_on"])
    hours = chain["oil_hours"]
    order = _trend_order(unit_codes, dates, hours)

    unit = unit_codes[order]
    dated = dates[order] != _LAST
    h = hours[order]
    h_before = _shifted(h, np.nan)
    same_unit = (unit >= 0) & (unit == _shifted(unit, -1))
    flagged = chain["oil_changed"][order]
    hours_fell = same_unit & (h < h_before)
    new_oil = flagged | hours_fell
    linked = same_unit & dated & _shifted(dated, False) & ~new_oil

    method_codes, _ = pd.factorize(chain["method"])
    lab_codes, _ = pd.factorize(chain["lab"])
    m, lab = method_codes[order], lab_codes[order]
    m_before, lab_before = _shifted(m, -1), _shifted(lab, -1)
    method_changed = linked & (m != m_before)
    lab_changed = linked & (lab >= 0) & (lab_before >= 0) & (lab != lab_before)
    comparable = linked & ~method_changed & ~lab_changed

    at = np.empty(total, dtype=np.int64)
    positions = np.arange(total)
    at[order] = positions
    mine = at[earlier:]  # sorted position of each incoming row

    # The numeric columns, one row each in input order; each base is worked out in sorted order
    # in a reused scratch block, then moved into place with one gather.
    names = trend_columns(bases)
    out = np.empty((len(names), len(measured)))
    span = h - h_before
    span = np.where(comparable & (span > 0), span, np.nan)
    np.take(span, mine, out=out[0])
    scratch = np.empty((4, total))
    previous, step, rate, rising = scratch
    for k, base in enumerate(bases):
        values = chain[base][order]
        if total:
            previous[0] = np.nan
            previous[1:] = values[:-1]
        previous[~comparable] = np.nan
        np.round(np.subtract(values, previous, out=step), DECIMALS, out=step)
        with np.errstate(divide="ignore", invalid="ignore"):
            np.divide(step, span, out=rate)
        np.round(np.multiply(rate, 1000.0, out=rate), DECIMALS, out=rate)
        absolute, factor, offset = margins.get(base, (0.0, 0.0, 0.0))
        margin = absolute + factor * np.abs((values + previous) / 2.0 + offset) if factor else absolute
        with np.errstate(invalid="ignore"):
            risen = step > margin
        np.maximum.accumulate(np.where(risen, 0, positions), out=rising)  # the last reset, as float
        np.subtract(positions, rising, out=rising)
        rising[np.isnan(step)] = np.nan
        np.take(scratch, mine, axis=1, out=out[1 + 4 * k: 5 + 4 * k])
    numbers = pd.DataFrame(out.T, index=measured.index, columns=names, copy=False)

    before = _shifted(order, 0)[mine]  # chain row of each incoming row's predecessor
    # Each row's unbroken run (one unit, one oil charge, one method and lab: a forecast fits over
    # it) and its place in the trend order; a run id never spans two units.
    run = np.cumsum(~comparable)
    runs = pd.DataFrame({"trend_run": run[mine], "trend_position": mine}, index=measured.index)
    notes = pd.DataFrame({
        "trend_break_note": _break_notes(chain, before, method_changed[mine], lab_changed[mine],
                                         np.arange(earlier, total)),
        "oil_change_note": _oil_notes(chain, before, flagged[mine], hours_fell[mine], h_before[mine], h[mine]),
    }, index=measured.index, dtype=object)
    return pd.concat([measured, numbers, runs, notes], axis=1)


def _text(values: np.ndarray) -> np.ndarray:
    """Values as text for a note, "(none)" where missing."""
    text = np.where(pd.isna(values), "(none)", values).astype(object)
    if all(type(v) is str for v in text):
        return text
    return np.array([str(v) for v in text], dtype=object)


def _since(chain: dict, before: np.ndarray) -> np.ndarray:
    """" since the previous sample of unit U (ID, DATE)" for the given predecessor rows."""
    def column(name):
        return _text(chain[name][before])
    return (" since the previous sample of unit " + column("unit_id") + " (" + column("sample_id") + ", "
            + column("sampled_on") + ")")


def _break_notes(chain: dict, before: np.ndarray, method_changed: np.ndarray, lab_changed: np.ndarray,
                 rows: np.ndarray) -> np.ndarray:
    notes = np.full(len(rows), None, dtype=object)
    hit = np.flatnonzero(method_changed | lab_changed)
    if not len(hit):
        return notes
    what = np.full(len(hit), "", dtype=object)
    for name, changed in (("method", method_changed[hit]), ("lab", lab_changed[hit])):
        column = chain[name]
        phrase = name + " changed from " + _text(column[before[hit]]) + " to " + _text(column[rows[hit]])
        joiner = np.where(what == "", "", " and ")
        what = np.where(changed, what + joiner + phrase, what)
    notes[hit] = what + _since(chain, before[hit]) + "; step measures across the change are not evaluated"
    return notes


def _oil_notes(chain: dict, before: np.ndarray, flagged: np.ndarray, hours_fell: np.ndarray,
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
