"""The grading pipeline as one call: samples in, a graded batch out. The public API's core."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd

from sumpwise.evaluation.evaluator import (BOUND_CAVEATS, COVERAGE_CAVEATS, bound_notes, coverage_notes,
                                           evaluate)
from sumpwise.derive.row_measures import LUBRICANT_CAVEATS, derive_measures
from sumpwise.vocabulary.measures import INPUT_MEASURES
from sumpwise.results.facts import ENGINE_CAVEAT_ORDER
from sumpwise.results.records import GradedBatch, recorded_derived
from sumpwise.ruleset.model import RuleSet

from sumpwise.intake.samples import ColumnMap, SampleBatch, validate_samples
from sumpwise.intake.sample_spectra import SPECTRUM_COLUMNS, convention_notes, spectrum_caveat_flags
from sumpwise.derive.cleanliness import read_cleanliness_codes
from sumpwise.derive.forecast import forecast
from sumpwise.derive.trends import (CHAIN_COLUMNS, add_trend_measures, date_keys, noise_margins,
                                    read_oil_changes, trend_bases, trend_caveat_flags, unit_id_texts, unit_keys)
from sumpwise.vocabulary.problems import InputError


def grade_batch(batch: SampleBatch, ruleset: RuleSet, history: pd.DataFrame | None = None,
                forecasts: bool = True) -> GradedBatch:
    """Derive measures for the accepted rows and evaluate the rule set over them.

    Trend measures compare each sample with its unit's previous one: within the batch, after the
    earlier samples in `history` (trends.CHAIN_COLUMNS and the measures; a ledger supplies it).
    `forecasts=False` makes none (its records then say null, not an empty list).
    """
    batch = read_cleanliness_codes(read_oil_changes(batch))
    measured = derive_measures(batch.frame, ruleset.lubricants, ruleset.measures, ruleset.fields)
    bases = trend_bases(ruleset)
    measured = add_trend_measures(measured, batch.frame.get("oil_changed"), history, bases,
                                  noise_margins(ruleset, bases))
    added = {column: (batch.frame[column].to_numpy(dtype=object) if column in batch.frame.columns
                      else np.full(len(measured), None, dtype=object)) for column in SPECTRUM_COLUMNS}
    added["ftir_convention_note"] = convention_notes(measured, ruleset)
    added["oil_changed"] = (batch.frame["oil_changed"].to_numpy(dtype=bool) if "oil_changed" in batch.frame.columns
                            else np.zeros(len(measured), dtype=bool))
    measured = pd.concat([measured.drop(columns=[c for c in added if c in measured.columns]),
                          pd.DataFrame(added, index=measured.index)], axis=1)  # one insert, not many
    outcome = evaluate(ruleset, measured)
    notes = {**coverage_notes(ruleset, measured, outcome), **bound_notes(ruleset, measured, outcome)}
    measured = pd.concat([measured, pd.DataFrame(notes, index=measured.index, dtype=object)], axis=1)  # text or None: no str inference
    engine_caveats = LUBRICANT_CAVEATS + COVERAGE_CAVEATS + BOUND_CAVEATS
    intake_flags = [measured[c.message_column].notna().to_numpy() for c in engine_caveats]
    outcome = replace(outcome, caveats=np.hstack([outcome.caveats, trend_caveat_flags(measured),
                                                  spectrum_caveat_flags(measured),
                                                  np.stack(intake_flags, axis=1)]))
    carried = tuple(name for name in list(INPUT_MEASURES) + list(ruleset.measures) if name in batch.frame.columns)
    if "oxidation" in carried and "method" in batch.frame.columns and "oxidation_differential" not in carried:
        # a differential reading is recorded under its own name (issue 11); decided by the columns, not the
        # values, so a record's shape does not depend on the other rows of its batch (replay re-grades subsets)
        carried += ("oxidation_differential",)
    return GradedBatch(ruleset, measured, outcome, batch.rejects, batch.rows_read, batch.source, carried,
                       ENGINE_CAVEAT_ORDER,
                       forecast(measured, ruleset) if forecasts else (), recorded_derived(ruleset, measured),
                       forecasts)


def grade(samples, ruleset: RuleSet, columns: ColumnMap | None = None) -> GradedBatch:
    """Grade a DataFrame (or an already-read SampleBatch); bad rows come back as rejects."""
    if isinstance(samples, (str, bytes)) or hasattr(samples, "__fspath__"):
        raise TypeError("grade() takes a DataFrame or a SampleBatch; read files with read_samples()")
    if isinstance(samples, pd.DataFrame):
        samples = validate_samples(samples, [], "<DataFrame>", columns or ColumnMap(), ruleset.measures)
    return grade_batch(samples, ruleset)


def grade_in_chunks(batches, ruleset: RuleSet):
    """Grade SampleBatches one after another (a large file read in chunks); yield each GradedBatch.

    Trend measures and the engine's trend caveats compare a sample with its unit's previous
    one, so each unit's latest sample (in trend order: date, then oil hours) is carried from
    chunk to chunk as history: memory grows with the number of units, not rows. The results
    equal grading the whole file at once when each unit's samples in a chunk come after its
    samples in earlier chunks; a sample that would sort before its unit's carried sample is
    refused with an InputError (sort the file by date, or use larger chunks), never graded
    against the wrong predecessor.

    Forecasts are made only when the file is one chunk: a forecast is fitted over a unit's
    whole current oil charge and carried by the unit's latest sample, which an earlier chunk
    cannot know. A chunk says whether the file goes on after it (SampleBatch.more, set by
    intake.chunked); from a source that cannot say, the next batch is read after a chunk is
    graded and before it is yielded, to know. The records of a file of several chunks say
    `forecasts: null` (forecasts not made), never a partial fit.
    """
    bases = trend_bases(ruleset)
    history = None
    batches = iter(batches)
    batch, first = next(batches, None), True
    while batch is not None:
        told = batch.more
        batch = read_oil_changes(batch)
        if history is not None and len(history):
            _check_order(batch, history)
        graded = grade_batch(batch, ruleset, history, forecasts=False)
        batch = None
        history = _latest_per_unit(history, graded.measured, bases)
        following = next(batches, None) if told is None else None  # read ahead only when not told
        last = following is None if told is None else not told
        if first and last:  # the whole file in one chunk: its forecasts are whole
            graded = replace(graded, forecasts=forecast(graded.measured, ruleset), forecasts_made=True)
        yield graded
        graded = None  # let the graded chunk go before the next one is graded
        batch, first = (following if told is None else next(batches, None)), False  # the source ends itself


def _trend_keys(frame: pd.DataFrame) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(date, oil-changed flag, oil hours) sort keys as trends order samples: unreadable dates
    and missing hours last; on one date a flagged sample after the others."""
    written = frame["sampled_on"].to_numpy(dtype=object) if "sampled_on" in frame else np.full(len(frame), None)
    keys = date_keys(written)
    flags = (frame["oil_changed"].to_numpy(dtype=bool) if "oil_changed" in frame
             else np.zeros(len(frame), dtype=bool)).astype(np.int64)
    hours = frame["oil_hours"].to_numpy(dtype=float) if "oil_hours" in frame else np.full(len(frame), np.nan)
    return keys, flags, np.where(np.isnan(hours), np.inf, hours)


def _latest_per_unit(history: pd.DataFrame | None, measured: pd.DataFrame, bases: tuple) -> pd.DataFrame:
    """Each unit's samples a later chunk's trends need: its latest, and before it the run of
    rising samples a `<base>_rising` count of the latest goes back over, its last sample with oil
    hours, its last with a lubricant code, its last flagged oil change and its last change of
    lubricant code with the sample before it (an oil change is looked for back to them:
    trends._oil_charges), and the one or two with oil hours before its last one with them (a
    slip in one reading is told by the hours before the fall or the rise: trends._slips; where
    the latest's hours fell, with the rising run before the fall too). Those are carried for their oil hours, flag
    and code only: their readings are left empty, so no step is taken from them."""
    names = list(CHAIN_COLUMNS) + list(bases)
    own = pd.DataFrame({name: (measured[name].to_numpy() if name in measured else None) for name in names})
    rising = [measured[f"{base}_rising"].to_numpy(dtype=float) for base in bases if f"{base}_rising" in measured]
    with np.errstate(invalid="ignore"):
        run = np.nanmax(np.stack(rising), axis=0, initial=0.0) if rising else np.zeros(len(own))
    own["_keep"] = 1.0 + np.nan_to_num(run)
    if "one_moment_note" in measured:  # of samples at one moment, or after them: the two before it too, to tell so
        own["_keep"] = np.where(measured["one_moment_note"].notna().to_numpy(), np.fmax(own["_keep"], 3.0), own["_keep"])
    if history is not None:
        history = history.assign(_keep=np.inf)  # a unit not seen in this chunk keeps what it had
    frame = own if history is None else pd.concat([history[names + ["_keep"]], own], ignore_index=True)
    # The rows to keep are found on arrays; only they are taken from the frame (a few per unit).
    keys = unit_keys(frame["unit_id"].to_numpy(dtype=object))  # a unit under any spelling of its id
    present = np.flatnonzero(keys >= 0)
    if not len(present):
        return frame.iloc[present][names].reset_index(drop=True)
    dates, flags, hours = _trend_keys(frame)
    codes = keys[present]
    by = np.lexsort((hours[present], flags[present], dates[present], codes))  # stable: ties keep their order
    order, unit_of = present[by], codes[by]
    last = np.r_[np.flatnonzero(unit_of[1:] != unit_of[:-1]), len(order) - 1]  # each unit's latest
    unit_last = np.repeat(last, np.diff(np.r_[-1, last]))
    from_end = unit_last - np.arange(len(order))
    at = np.arange(len(order))
    first = np.r_[0, last[:-1] + 1]
    # the unit's latest sample with oil hours and the one with oil hours before it: if the
    # latest's hours fell, the unit's next sample may tell a slip in that one reading
    # (trends._slips), read by the hours before the fall and going on with that sample's rising run
    in_order = hours[order]
    timed = np.isfinite(in_order)
    latest_timed = np.maximum.accumulate(np.where(timed, at, -1))
    timed_before = _shifted_back(latest_timed)[np.maximum(latest_timed[last], 0)]
    has_both = (latest_timed[last] >= first) & (timed_before >= first)
    fell = has_both & (in_order[np.maximum(latest_timed[last], 0)] < in_order[np.maximum(timed_before, 0)])
    keep_of = frame["_keep"].to_numpy()[order]
    keep = np.where(fell, np.fmax(keep_of[last], last - timed_before + keep_of[np.maximum(timed_before, 0)]),
                    keep_of[last])
    kept = from_end < np.repeat(keep, np.diff(np.r_[-1, last]))
    unit_first = np.repeat(first, np.diff(np.r_[-1, last]))
    lubricant = frame["lubricant"].to_numpy(dtype=object)[order] if "lubricant" in frame else np.full(len(order), None)
    named = pd.notna(lubricant)
    named_before = _shifted_back(np.maximum.accumulate(np.where(named, at, -1)))  # the unit's previous code
    named_before = np.where(named_before >= unit_first, named_before, -1)
    code_changed = named & (named_before >= 0) & (lubricant != lubricant[np.maximum(named_before, 0)])
    context = np.zeros(len(order), dtype=bool)
    for evidence in (timed, named, flags[order].astype(bool), code_changed):
        latest = np.maximum.accumulate(np.where(evidence, at, -1))[last]
        context[latest[latest >= first]] = True
        if evidence is code_changed:
            before = named_before[latest[latest >= first]]
            context[before[before >= 0]] = True
    context[timed_before[has_both]] = True  # for its oil hours, where the fall is no slip (kept above where it is)
    # where the latest's hours rose, the one with oil hours before those two: whether the one
    # between was a dropped digit (never two in a row) tells whether the rise is a digit added
    # (trends._slips); where they fell it is left out, its own state unknown here
    timed_before2 = _shifted_back(latest_timed)[np.maximum(timed_before, 0)]
    rose = has_both & (in_order[np.maximum(latest_timed[last], 0)] > in_order[np.maximum(timed_before, 0)])
    context[timed_before2[rose & (timed_before2 >= first)]] = True
    context &= ~kept
    carried = frame.iloc[order[kept | context]][names].reset_index(drop=True)
    for base in bases:  # a sample kept for its oil hours, flag or code only gives no step
        carried.loc[context[kept | context], base] = np.nan
    return carried


def _shifted_back(values: np.ndarray) -> np.ndarray:
    """Each element's predecessor, -1 for the first."""
    return np.r_[-1, values[:-1]] if len(values) else values


def _check_order(batch: SampleBatch, history: pd.DataFrame) -> None:
    frame = batch.frame
    if "unit_id" not in frame or not len(frame):
        return
    keyed = history.assign(_key=unit_id_texts(history["unit_id"].to_numpy(dtype=object)))
    carried = keyed.drop_duplicates("_key", keep="last").set_index("_key")  # each unit's latest, any spelling
    where = carried.index.get_indexer(unit_id_texts(frame["unit_id"].to_numpy(dtype=object)))
    has = where >= 0
    if not has.any():
        return
    dates, flags, hours = _trend_keys(frame)
    before_dates, before_flags, before_hours = _trend_keys(carried)
    early = np.zeros(len(frame), dtype=bool)
    b_dates, b_flags, b_hours = before_dates[where[has]], before_flags[where[has]], before_hours[where[has]]
    d, f, h = dates[has], flags[has], hours[has]
    early[has] = (d < b_dates) | ((d == b_dates) & ((f < b_flags) | ((f == b_flags) & (h < b_hours))))
    if early.any():
        k = int(np.flatnonzero(early)[0])
        unit = frame["unit_id"].iat[k]
        earlier = carried["sample_id"].iat[where[k]]
        raise InputError(f"{batch.source}: row {frame.index[k]}: sample {frame['sample_id'].iat[k]} of unit {unit} "
                         f"sorts before that unit's sample {earlier} in an earlier chunk of the file; a file graded "
                         f"in chunks must list each unit's samples in date order (sort it by date, or give a larger "
                         f"--chunk-rows)")
