"""Trend measures: each sample against its unit's previous sample, for a whole batch at once.

Samples are put in order by unit (its id with case and surrounding spaces ignored: unit_keys),
sample date and oil hours (on one date, a sample flagged
`oil_changed` after the others; a ledger's earlier samples of the same units first, so they
come before the batch's on a tie). A unit's chain restarts at an oil
change: the `oil_changed` flag, the lubricant code changing, or oil hours going down against
the unit's last sample that has oil hours (a sample without them in between hides nothing),
unless the oil's aged readings stayed aged: then the hours meter was reset without an oil change
(an overhaul, a meter changed), the chain goes on and the `oil-hours-not-from-fill` caveat says so;
so it does where an oil change's oil hours are more than the calendar holds (the unit's hours). A
sample without oil hours between an oil change's two sides cannot be placed on either charge:
no step is taken to or from it, and it says so. A step across a change of method (direct vs
subtraction) or of lab is not computed: the two readings are not comparable. A fall in oil
hours whose next sample is back on the run is a slip in that one reading (_slips), so is a rise
beyond the calendar that the next sample falls back from onto the run, and a fall
that no aged reading tells is taken as an oil change and says it could not tell. All of it is one
sort plus shifted and accumulated arrays; there is no loop over units.

A step counts towards a rising run only when it exceeds the measure's noise margin: the rule
set's `noise_margins:` entry where it gives one, else the test method's published repeatability
at the mean of the two readings (vocabulary.measures.Repeatability), else zero (any rise counts).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd

from sumpwise.vocabulary.measures import (DECIMALS, MEASURES, ROW_DERIVED, TREND_BASES, TREND_MEASURES, TRENDED,
                                         declared_trend_measures)
from sumpwise.ruleset.model import RuleSet, condition_measures
from sumpwise.vocabulary.caveats import EngineCaveat
from sumpwise.vocabulary.texts import lubricant_key
from sumpwise.intake.censored import WRITTEN_SUFFIX
from sumpwise.intake.samples import Reject, SampleBatch

# The columns a sample contributes to trends; a ledger's history frame has these.

_LAST = np.iinfo(np.int64).max  # sort key of a missing date: after every real one
HOURS_A_DAY = 24.0  # the most oil hours a calendar day can add
# Row measures taken per 1000 of the sample's own oil hours.
PER_OIL_HOUR = tuple(m.name for m in ROW_DERIVED if "oil_hours" in m.needs)
# Twice that, for oil hours estimated or read off a meter on another day than the sample was
# taken (our margin, no source): only hours the calendar cannot hold by far (a digit too many,
# a wrong year or month) are refused.
HOURS_MARGIN = 2.0
# The column beside a rate whose step is within the noise margin (_noise_bounds): the margin, set
# on exactly those rows (records give the rate's interval there); unlike a censored reading's
# `:written`, the rate's number stays what records show.
MARGIN_SUFFIX = ":margin"
# The column that marks a sample whose oil hours are a slip in one reading (_slips): a forecast
# leaves it out, its hours being no point on the charge's line.
SLIP_COLUMN = "oil_hours_slip"


TREND_CAVEATS = (
    EngineCaveat("trend-break", "trend_break_note",
                 "sumpwise engine: readings by another method or lab are not compared step by step "
                 "(common practice, no source)"),
    EngineCaveat("oil-changed", "oil_change_note",
                 "sumpwise engine: oil hours restart at an oil change and no rate is taken across it "
                 "(common practice, no source)"),
    EngineCaveat("class-changed", "class_change_note",
                 "sumpwise engine: a unit id whose equipment class changes is another machine under a reused id, or "
                 "a class written wrong; its trend restarts there, with no step or rate across the change "
                 "(common practice, no source)"),
    EngineCaveat("one-moment", "one_moment_note",
                 "sumpwise engine: samples of one unit on one date at the same oil hours (two sample points under "
                 "one unit id, or a resample) have no order but the file's; none of them is stepped, nor the sample "
                 "after them (common practice, no source)"),
    EngineCaveat("oil-hours-not-from-fill", "hours_reset_note",
                 "sumpwise engine: oil hours count from the oil's fill; where they do not (they fall with no "
                 "oil_changed flag and no change of lubricant code while the old oil's aged readings stay aged, none "
                 "back at least halfway to the new oil's: a meter reset without an oil change, and the trend goes "
                 "on across it; or at an oil change they are more than the calendar holds since the old oil's last "
                 "sample: the unit's hours), no rate per 1000 of a sample's own oil hours is taken for the rest of "
                 "that charge (common practice, no source)"),
    EngineCaveat("oil-charge-unknown", "oil_charge_note",
                 "sumpwise engine: a sample that cannot be placed on one oil charge (no oil hours or lubricant "
                 "code to tell which side of an oil change it lies, or oil hours the calendar cannot hold) is "
                 "not compared step by step or by rate (common practice, no source)"),
    EngineCaveat("unit-id-spelling", "unit_spelling_note",
                 "sumpwise engine: unit ids that differ only in case or surrounding spaces (HP-2, hp-2, 'HP-2 ') "
                 "are one unit to trends; records keep each id as the lab wrote it, and a sample whose id is "
                 "spelled otherwise than its unit's previous sample says so (common practice, no source)"),
    EngineCaveat("oil-hours-slip", "hours_slip_note",
                 "sumpwise engine: oil hours that fall, or rise by more than the calendar holds, with no "
                 "oil_changed flag or change of lubricant code and are back on the run at the unit's next sample "
                 "(within what the calendar holds) are a slip in "
                 "that one reading, not an oil change: the charge and its trend go on, with no rate per 1000 h "
                 "to or from that sample and none per 1000 of its own oil hours (common practice, no source)"),
    EngineCaveat("oil-change-untold", "hours_untold_note",
                 "sumpwise engine: oil hours fell with no oil_changed flag or change of lubricant code, and no "
                 "aged reading on both samples (acid or base number, carbonyl, RPVOT against the new oil's) "
                 "tells a meter reset from an unrecorded oil change: taken as an oil change, the trend "
                 "restarting, and said so (common practice, no source)"),
)


# Spellings of the `oil_changed` flag (case ignored); an empty cell means no change.
_FLAGS = {"true": True, "false": False, "yes": True, "no": False, "1": True, "0": False}

# The readings that tell an oil change from an hours meter reset when oil hours fall unflagged:
# those with a new-oil value (`new_<name>`, from the lubricants table or the row) move back
# toward it when the oil is changed and stay where the aged oil had them when it is not; a
# differential reading is the carbonyl gained over the new oil, whose own is 0 (ASTM D7414
# Procedure B). A declared wear metal has no new-oil value and tells nothing here.
# Each with the way it ages from new: acid number and carbonyl rise, base number and RPVOT fall
# (ASTM D4378, D6224, from memory), viscosity either way (0: the distance either side).
RESET_EVIDENCE = {"kv40": 0, "kv100": 0, "an": 1, "bn": -1, "oxidation": 1, "oxidation_differential": 1, "rpvot": -1}
NEW_ZERO = ("oxidation_differential",)
# A reading is aged when it lies more than twice its noise margin from the new oil's: the noise
# margin (noise_margins), else the method's published repeatability, else this share of the new
# oil's value (our choice, no source).
AGED_SHARE = 0.05
# An oil change brings an aged reading at least halfway back to the new oil's: a drain leaves
# some old oil in lines, coolers and the sump (common practice, no source).
BACK_SHARE = 0.5
# A sample's evidence readings under their own names, and the sample from which its charge's
# oil hours stopped counting from the fill ("ID (DATE)", None elsewhere): a file graded in
# chunks carries them with each unit's latest samples (results.pipeline), so a reset or the
# unit's hours are told across a chunk boundary.
EVIDENCE_PREFIX = "aged:"
RESET_COLUMN = "hours_reset_at"
EVIDENCE_COLUMNS = tuple(EVIDENCE_PREFIX + name for name in RESET_EVIDENCE)
# RESET_COLUMN of a history sample whose neighbours are all given (a ledger's): found again from them.
NOT_TOLD = ""

# The columns a sample contributes to trends; a ledger's history frame has these.
CHAIN_COLUMNS = ("sample_id", "unit_id", "sampled_on", "oil_hours", "oil_changed", "method", "lab", "lubricant",
                 "class", RESET_COLUMN) + EVIDENCE_COLUMNS


def unit_id_key(unit) -> str:
    """A unit id as trends compare it (unit_keys): stripped and case-folded."""
    return str(unit).strip().casefold()


def unit_keys(units: np.ndarray) -> np.ndarray:
    """A code per unit id as trends group samples: case and surrounding spaces ignored (`hp-2 `
    is HP-2: a site's lab writes one unit's id several ways, and a trend split by spelling misses
    a rise, common practice, no source), -1 where none or blank. Records keep the id as written;
    the `unit-id-spelling` caveat says where two spellings meet. Each distinct id is read once."""
    return _unit_codes(units)[0]


def _unit_codes(units: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(unit_keys, a code per spelling as written): one factorize of the ids."""
    spelled, uniques = pd.factorize(units)
    folded = np.array([unit_id_key(u) for u in uniques], dtype=object)
    same, _ = pd.factorize(np.where(folded == "", None, folded))
    return np.r_[same, -1][spelled], spelled  # code -1 (no unit) takes the last: -1


def unit_id_texts(units: np.ndarray) -> np.ndarray:
    """Each unit id as unit_id_key gives it, None where none; each distinct id is read once."""
    codes, uniques = pd.factorize(units)
    folded = np.array([unit_id_key(u) for u in uniques] + [None], dtype=object)
    return folded[codes]  # code -1 (no unit) takes the last: None


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
                          if name not in ("oil_hours", "oil_changed", RESET_COLUMN) + EVIDENCE_COLUMNS})
    frame["oil_hours"] = measured["oil_hours"].to_numpy(dtype=float)
    flags = np.zeros(len(measured), dtype=bool) if oil_changed is None else np.asarray(oil_changed, dtype=bool)
    frame["oil_changed"] = flags
    frame[RESET_COLUMN] = NOT_TOLD  # a ledger gives every earlier sample: what it says is found again
    for name, values in _evidence(measured).items():
        frame[name] = values
    for base in bases:
        frame[base] = measured[base].to_numpy(dtype=float)
    new = [f"new_{name}" for name in RESET_EVIDENCE if f"new_{name}" in measured.columns]
    for name in new:  # the new-oil values a reset is judged against (RESET_EVIDENCE)
        frame[name] = measured[name].to_numpy(dtype=float)
    return frame[list(CHAIN_COLUMNS) + list(bases) + new]


def _evidence(measured: pd.DataFrame) -> dict:
    """EVIDENCE_COLUMNS from a measured frame's readings (NaN where it has none)."""
    return {EVIDENCE_PREFIX + name: (measured[name].to_numpy(dtype=float) if name in measured.columns
                                     else np.full(len(measured), np.nan)) for name in RESET_EVIDENCE}


def _chain_arrays(measured: pd.DataFrame, oil_changed, history: pd.DataFrame | None, bases: tuple) -> dict:
    """CHAIN_COLUMNS and the bases as plain arrays, `history`'s rows before the batch's."""
    own = {name: measured[name].to_numpy(dtype=object) if name in measured.columns
           else np.full(len(measured), None, dtype=object)
           for name in ("sample_id", "unit_id", "sampled_on", "method", "lab", "lubricant", "class")}
    own["oil_hours"] = measured["oil_hours"].to_numpy(dtype=float)
    own["oil_changed"] = (np.zeros(len(measured), dtype=bool) if oil_changed is None
                          else np.asarray(oil_changed, dtype=bool))
    own.update({base: measured[base].to_numpy(dtype=float) for base in bases})
    own.update(_evidence(measured))
    own.update({f"new_{name}": measured[f"new_{name}"].to_numpy(dtype=float) if f"new_{name}" in measured.columns
                else np.full(len(measured), np.nan) for name in RESET_EVIDENCE if name not in NEW_ZERO})
    own[RESET_COLUMN] = np.full(len(measured), None, dtype=object)
    if history is None or not len(history):
        return own
    # A base the history does not carry has no earlier value there.
    return {name: np.concatenate([history[name].to_numpy(dtype=values.dtype) if name in history.columns
                                  else np.full(len(history), None if values.dtype == object else np.nan,
                                               dtype=values.dtype), values]) for name, values in own.items()}


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


def _trend_order(unit_codes: np.ndarray, day_keys: np.ndarray, hours: np.ndarray,
                 flags: np.ndarray | None = None) -> np.ndarray:
    """The stable order by unit, date, the `oil_changed` flag (on one date a flagged sample
    comes after the others: the oil was changed that day, after the old oil was sampled), then
    oil hours (missing hours last).

    The ranks are packed into one integer key when it fits: one stable argsort is cheaper than
    lexsort's pass per key, and gives the same order.
    """
    flag = np.zeros(len(hours), dtype=np.int64) if flags is None else np.asarray(flags, dtype=np.int64)
    date_rank, dates = _dense_rank(day_keys)
    hour_rank, hour_values = _dense_rank(np.where(np.isnan(hours), np.inf, hours) + 0.0)  # + 0.0: -0.0 ties 0.0
    units = int(unit_codes.max(initial=-1)) + 2  # codes run from -1 (no unit)
    within = 2 * max(hour_values, 1)
    if units * max(dates, 1) * within >= 2 ** 63:
        return np.lexsort((hour_rank, flag, date_rank, unit_codes))
    return np.argsort((unit_codes + 1) * (dates * within) + date_rank * within + flag * hour_values + hour_rank,
                      kind="stable")


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
    unit_codes, spelled = _unit_codes(chain["unit_id"])
    dates = date_keys(chain["sampled_on"])
    hours = chain["oil_hours"]
    order = _trend_order(unit_codes, dates, hours, chain["oil_changed"])

    unit = unit_codes[order]
    dated = dates[order] != _LAST
    h = hours[order]
    same_unit = (unit >= 0) & (unit == _shifted(unit, -1))
    flagged = chain["oil_changed"][order]
    evidence = {name: (chain[EVIDENCE_PREFIX + name][order],
                       np.zeros(total) if name in NEW_ZERO else chain[f"new_{name}"][order],
                       _evidence_margin(name, margins)) for name in RESET_EVIDENCE}
    # a charge whose hours an earlier chunk found not counting from the fill, told by the unit's
    # latest carried sample (an older one, carried for its oil hours or flag, may be of an earlier charge)
    told = chain[RESET_COLUMN][order]
    carried = (order < earlier) & (told != NOT_TOLD)
    reset_told = (carried, carried & pd.notna(told))
    charges = _oil_charges(unit, same_unit, h, flagged, _text_codes(chain["lubricant"])[order], dates[order],
                           _text_codes(chain["class"])[order], evidence, reset_told)
    new_oil, unplaced = charges["new_oil"], charges["unplaced"]
    restarts = new_oil | charges["class_changed"]
    method_codes, _ = pd.factorize(chain["method"])
    lab_codes, _ = pd.factorize(chain["lab"])
    m, lab = method_codes[order], lab_codes[order]
    m_before, lab_before = _shifted(m, -1), _shifted(lab, -1)
    differs = (m != m_before) | (lab != lab_before)  # from the previous sample in trend order
    for base in bases:
        values = chain[base][order]
        before = _shifted(values, np.nan)
        differs |= ~((values == before) | (np.isnan(values) & np.isnan(before)))
    moment = _one_moment(same_unit, dated, dates[order], h, flagged, differs)
    linked = (same_unit & dated & _shifted(dated, False) & ~restarts & ~unplaced & ~_shifted(unplaced, False)
              & ~moment["member"] & ~moment["after"])
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
    believed = np.where(charges["slip"], np.nan, h)  # a slip's oil hours: no rate to or from it
    span = believed - _shifted(believed, np.nan)
    span = np.where(comparable & (span > 0) & ~charges["outrun"], span, np.nan)
    np.take(span, mine, out=out[0])
    scratch = np.empty((4, total))
    previous, step, rate, rising = scratch
    noisy: dict = {}  # the interval columns of rates whose step is within the noise margin
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
            noise = (np.abs(step) <= margin) & (margin > 0) & np.isfinite(rate)
        noise = noise[mine]
        if noise.any():
            noisy.update(_noise_bounds(base, noise, rate[mine], step[mine], np.broadcast_to(margin, total)[mine],
                                       span[mine]))
        np.maximum.accumulate(np.where(risen, 0, positions), out=rising)  # the last reset, as float
        np.subtract(positions, rising, out=rising)
        rising[np.isnan(step)] = np.nan
        np.take(scratch, mine, axis=1, out=out[1 + 4 * k: 5 + 4 * k])
    numbers = pd.DataFrame(out.T, index=measured.index, columns=names, copy=False)
    if noisy:
        numbers = pd.concat([numbers, pd.DataFrame(noisy, index=measured.index)], axis=1)

    before = _shifted(order, 0)[mine]  # chain row of each incoming row's predecessor
    # Each row's unbroken run (one unit, one oil charge, one method and lab: a forecast fits over
    # it) and its place in the trend order; a run id never spans two units.
    run = np.cumsum(~comparable | charges["reset"])  # a forecast fits on oil hours: none across a meter reset
    runs = pd.DataFrame({"trend_run": run[mine], "trend_position": mine, SLIP_COLUMN: charges["slip"][mine]},
                        index=measured.index)
    notes = pd.DataFrame({
        "trend_break_note": _break_notes(chain, before, method_changed[mine], lab_changed[mine],
                                         np.arange(earlier, total)),
        "oil_change_note": _oil_notes(chain, order, mine, flagged, charges, h),
        "class_change_note": _class_notes(chain, order, mine, charges),
        "one_moment_note": _moment_notes(chain, order, mine, moment, h),
        "hours_reset_note": _reset_notes(chain, order, mine, charges, h, evidence),
        "oil_charge_note": _charge_notes(chain, order, mine, charges, h, unplaced, restarts),
        "unit_spelling_note": _spelling_notes(chain, order, mine, same_unit, spelled[order]),
        "hours_slip_note": _slip_notes(chain, order, mine, charges, h),
        "hours_untold_note": _untold_notes(chain, order, mine, charges, h),
    }, index=measured.index, dtype=object)
    reset_at = charges["reset_at"][mine]
    place = np.full(len(mine), None, dtype=object)
    if (reset_at >= 0).any():  # one text per charge, gathered to its samples
        starts, which = np.unique(reset_at[reset_at >= 0], return_inverse=True)
        place[reset_at >= 0] = _reset_places(chain, order[starts])[which.ravel()]
    carried = pd.DataFrame({RESET_COLUMN: place, **_evidence(measured)}, index=measured.index)
    out = pd.concat([measured, numbers, runs, notes, carried], axis=1)
    # its own oil hours may be the wrong ones, or count from a meter reset, not the fill: no rate
    # per 1000 oil hours on it either
    outrun = charges["outrun"][mine] | (reset_at >= 0) | charges["slip"][mine]
    if outrun.any():
        for name in PER_OIL_HOUR:
            for column, empty in ((name, np.nan), (name + ":low", np.nan), (name + ":high", np.nan),
                                  (name + WRITTEN_SUFFIX, None)):
                if column in out.columns:
                    out[column] = out[column].where(~outrun, empty)
    return out


def _noise_bounds(base: str, rows: np.ndarray, rate: np.ndarray, step: np.ndarray, margin: np.ndarray,
                  span: np.ndarray) -> dict:
    """The rates of `rows`, whose step is no larger than the noise margin, with the interval of
    rates the two readings allow beside them: (step - margin, step + margin) / hours x 1000, and
    the margin itself (`<rate>:margin`).

    Over a short span test scatter reads as a steep rate (+2 ppm in 20 h is 100 per 1000 h). The
    evaluator decides a limit test on such a rate by its number where the number does not cross
    the limit (a normal sample stays normal), and by the whole interval where it does: a limit the
    interval straddles is undecided (not evaluated, and the grade may be higher), never fired on
    scatter. The interval holds the number and, the step being within the margin, zero.
    """
    name = f"{base}_step_per_1000h"
    with np.errstate(invalid="ignore", divide="ignore"):
        low = np.where(rows, np.fmin(np.round((step - margin) / span * 1000.0, DECIMALS), rate), np.nan)
        high = np.where(rows, np.fmax(np.round((step + margin) / span * 1000.0, DECIMALS), rate), np.nan)
    closed = np.zeros(len(rows), dtype=bool)
    return {name + ":low": low, name + ":high": high, name + ":low_open": closed, name + ":high_open": closed.copy(),
            name + MARGIN_SUFFIX: np.where(rows, np.round(margin, DECIMALS), np.nan)}


def _text(values: np.ndarray) -> np.ndarray:
    """Values as text for a note, "(none)" where missing."""
    text = np.where(pd.isna(values), "(none)", values).astype(object)
    if all(type(v) is str for v in text):
        return text
    return np.array([str(v) for v in text], dtype=object)


def _since(chain: dict, before: np.ndarray, which="") -> np.ndarray:
    """" since the previous sample of unit U[which] (ID, DATE)" for the given predecessor rows."""
    def column(name):
        return _text(chain[name][before])
    return (" since the previous sample of unit " + column("unit_id") + which + " (" + column("sample_id") + ", "
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


def _text_codes(texts: np.ndarray) -> np.ndarray:
    """A code per equipment class or lubricant code as compared for a change (stripped, case-folded,
    as vocabulary.texts.lubricant_key: `hyd-46-m` after HYD-46-M is no oil change), -1 where none."""
    codes, uniques = pd.factorize(texts)
    folded = np.array([lubricant_key(u) for u in uniques], dtype=object)
    same, _ = pd.factorize(folded)
    same[folded == ""] = -1  # an empty class tells nothing
    return np.where(codes >= 0, same[np.maximum(codes, 0)] if len(same) else -1, -1)


def _oil_charges(unit: np.ndarray, same_unit: np.ndarray, h: np.ndarray, flagged: np.ndarray,
                 lubricant: np.ndarray, day_keys: np.ndarray, classes: np.ndarray | None = None,
                 evidence: dict | None = None, reset_told: tuple | None = None) -> dict:
    """Where each unit's oil charges start, in trend order (all arrays sorted).

    A unit's samples are one chain only while its equipment class stays the same: a sample whose
    class differs from the unit's last one given (`class_changed`) is of another machine under a
    reused id, or its class is written wrong (common practice, no source). It restarts the chain
    as an oil change does (nothing is compared across it, oil hours and lubricant included), and
    is no oil change itself.

    A charge starts at the `oil_changed` flag, at a lubricant code other than the unit's last
    one given, or at oil hours below the unit's last oil hours given since the charge began
    (looked back past samples without oil hours, common practice, no source: oil hours restart
    at an oil change, shared/reference/limits.md "Service hours"). `unplaced` marks the samples
    without oil hours (and, for a lubricant change, without a lubricant code) that lie between
    the two sides of such a change: they may be of either charge. So does a sample whose oil hours
    rose since the charge's last ones by more than the calendar holds (_most_hours) is `outrun`:
    its hours or a date are wrong, or the two are not of one charge. No rate is taken to it; on
    one date (an oil change that day, unflagged, puts the new fill first) no step either.

    Oil hours that fall with neither the flag nor a change of code, where `evidence` (each
    RESET_EVIDENCE reading, its new-oil value and noise margin, sorted) shows the old oil aged and
    none of its aged readings back toward new (_stayed_aged), are a `reset` of the hours meter
    without an oil change: no charge starts there. `reset_at` is, for each sample of a charge from
    such a reset on, the reset's position (-1 elsewhere): its oil hours no longer count from the fill.
    So is, from it on, an oil change (flag or code) whose oil hours are more than the calendar holds
    since the unit's last sample with oil hours before it (`unit_hours`: the unit's hours, not the
    new oil's). `reset_told` is (the samples an earlier chunk carried, those of them that carried
    such a charge): a carried sample is not judged again here, a chunk's carried samples being
    too few to judge; the unit's latest one that is no slip says the charge's state.

    A fall whose next sample is back on the run (_slips) is a `slip` in one reading: its oil hours
    count for nothing here, and the charge goes on. A fall that no reading tells (no aged reading
    on both sides: _stayed_aged) is `untold`: taken as an oil change, and the caveat says so.
    """
    n = len(unit)
    positions = np.arange(n)
    first = ~same_unit
    unit_start = np.maximum.accumulate(np.where(first, positions, 0)) if n else positions

    def last_before(known):
        """The position of the unit's previous row where `known`, -1 where none."""
        last = _shifted(np.maximum.accumulate(np.where(known, positions, -1)) if n else positions, -1)
        return np.where(same_unit & (last >= unit_start), last, -1)

    def next_from(known):
        """The position of the first row at or after each row where `known` in the same unit, -1 where none."""
        ahead = np.minimum.accumulate(np.where(known, positions, n)[::-1])[::-1] if n else positions
        at = np.minimum(ahead, max(n - 1, 0))
        return np.where((ahead < n) & (unit >= 0) & (unit[at] == unit), ahead, -1)

    classes = np.full(n, -1, dtype=np.int64) if classes is None else classes
    classed = classes >= 0
    class_from = last_before(classed)
    class_changed = classed & (class_from >= 0) & (classes != classes[np.maximum(class_from, 0)])
    named = lubricant >= 0
    lubricant_from = last_before(named)
    lubricant_from = np.where(lubricant_from >= _start_at(class_changed | first, positions), lubricant_from, -1)
    lubricant_changed = named & (lubricant_from >= 0) & (lubricant != lubricant[np.maximum(lubricant_from, 0)])
    restart = flagged | lubricant_changed | class_changed | first
    charge_start = _start_at(restart, positions)
    dated = day_keys != _LAST
    slip, slip_from, slip_back = _slips(unit, h, flagged | lubricant_changed, charge_start, day_keys, dated,
                                        last_before, next_from, evidence)
    timed = np.isfinite(h) & ~slip  # a slip's oil hours are not the charge's
    hours_from = last_before(timed)
    hours_from = np.where(hours_from >= charge_start, hours_from, -1)  # looked back within the charge only
    from_at = np.maximum(hours_from, 0)
    days = np.where(dated & dated[from_at], (day_keys - day_keys[from_at]) / 86_400e9, np.nan)
    with np.errstate(invalid="ignore"):
        outrun = timed & (hours_from >= 0) & (h - h[from_at] > _most_hours(days))
    hours_fell = timed & (hours_from >= 0) & (h < h[np.maximum(hours_from, 0)])
    # a fall from oil hours the calendar cannot hold is that slip's other side, no meter reset
    reset = hours_fell & ~flagged & ~lubricant_changed & ~outrun[from_at]
    untold = np.zeros(n, dtype=bool)
    if reset.any():  # judged only where oil hours fell unflagged: a few samples
        at = np.flatnonzero(reset)
        reset[at], told = _stayed_aged(evidence, at, hours_from[at]) if evidence else (False, False)
        untold[at] = ~np.asarray(told, dtype=bool)
    hours_fell &= ~reset  # a fall in oil hours that tells an oil change
    new_oil = flagged | lubricant_changed | hours_fell
    # At an oil change (flag or code) the new oil's hours are at most what the calendar holds since
    # the old oil's last sample with oil hours: more are the unit's hours, not the oil's.
    across = last_before(timed)
    across_at = np.maximum(across, 0)
    days_across = np.where(dated & dated[across_at], (day_keys - day_keys[across_at]) / 86_400e9, np.nan)
    with np.errstate(invalid="ignore"):
        unit_hours = ((flagged | lubricant_changed) & timed & (across >= 0) & ~class_changed
                      & (h > _most_hours(days_across)))
    told = reset | unit_hours
    if reset_told is not None:  # the charge's state as the unit's latest carried sample says (a slip says nothing)
        carried, present = reset_told
        kept = carried & ~slip
        later = np.r_[next_from(kept)[1:], -1] if n else positions
        later = np.where(later >= 0, unit[np.maximum(later, 0)] == unit, False)
        told = (told & ~carried) | (kept & ~later & present)
    last_reset = np.maximum.accumulate(np.where(told, positions, -1)) if n else positions
    reset_at = np.where(last_reset >= _start_at(new_oil | class_changed | first, positions), last_reset, -1)

    # A sample without oil hours before a fall in them, with no restart in between, lies between
    # the fall's two sides; one without a lubricant code either, before a change of code, too.
    fall = next_from(timed)
    fall_at = np.maximum(fall, 0)
    unplaced = ~timed & (fall >= 0) & hours_fell[fall_at] & (charge_start[fall_at] <= positions)
    change = next_from(named)
    change_at = np.maximum(change, 0)
    last_change = np.maximum.accumulate(np.where(new_oil | class_changed | first, positions, -1)) if n else positions
    unplaced |= (~timed & ~named & (change >= 0) & lubricant_changed[change_at]
                 & (last_change[np.maximum(change_at - 1, 0)] <= positions))
    unplaced &= ~(new_oil | class_changed)
    # what placed nothing: the change it lies before, and that change's other side
    change_of = np.where(~timed & (fall >= 0) & hours_fell[fall_at], fall, change)
    return {"new_oil": new_oil, "hours_fell": hours_fell, "hours_from": hours_from,
            "lubricant_changed": lubricant_changed, "lubricant_from": lubricant_from,
            "unplaced": unplaced | (outrun & (days == 0)), "outrun": outrun, "days": days, "change_of": change_of,
            "same_unit": same_unit, "class_changed": class_changed, "class_from": class_from,
            "reset": reset, "reset_at": reset_at, "unit_hours": unit_hours, "across": across,
            "days_across": days_across, "untold": untold, "slip": slip, "slip_from": slip_from,
            "slip_back": slip_back}


def _slips(unit, h, restarted, charge_start, day_keys, dated, last_before, next_from, evidence) -> tuple:
    """Where oil hours fell with no flag or change of code and the unit's next sample with oil
    hours, on the same charge and a later date, is back at or above the hours before the fall
    within what the calendar holds (_most_hours) since them: a slip in that one reading (4300,
    430, 4500: a digit dropped), not an oil change nor a meter reset (common practice, no
    source). So is a rise, since an earlier date, by more than the calendar holds that the next
    sample falls back from onto the run (4300, 43000, 4500: a digit added), whose fall was taken
    for an oil change; judged against the samples that are no dropped slip, or the sample back
    on the run after one (4340, 434, 4580) would be a rise from 434. Not where the aged readings
    came back toward new at the fall (_stayed_aged): the oil was changed there, whatever the
    hours after. Not on the fall's own date either: on one date an unflagged new fill at 0 h
    sorts before the old oil's last sample. Returns (slip, the sample before it, the sample back
    on the run), positions -1 where none. Only the next sample with oil hours is looked at: a
    fall that later samples agree with stays a fall."""
    n = len(unit)
    timed = np.isfinite(h)
    back = np.r_[next_from(timed)[1:], -1] if n else np.zeros(0, dtype=np.int64)
    to = np.maximum(back, 0)
    back = np.where((back >= 0) & (unit[to] == unit) & (charge_start[to] == charge_start), back, -1)

    def run_from(kept):
        """The sample before each one among `kept` on its charge, and whether the next sample is back
        on the run from it, on a later date, within what the calendar holds."""
        before = last_before(kept)
        before = np.where(before >= charge_start, before, -1)
        at = np.maximum(before, 0)
        days = np.where(dated[at] & dated[to], (day_keys[to] - day_keys[at]) / 86_400e9, np.nan)
        with np.errstate(invalid="ignore"):
            on_run = ((before >= 0) & (back >= 0) & dated & (day_keys[to] > day_keys) & (h[to] >= h[at])
                      & (h[to] - h[at] <= _most_hours(days)))
        return before, on_run

    def told_change(slip, fell_at, before):
        """Drop the slips where the aged readings came back toward new where the hours fell."""
        if evidence and slip.any():
            now = np.flatnonzero(slip)
            stayed, told = _stayed_aged(evidence, fell_at[now], before[now])
            slip[now] = ~(told & ~stayed)  # told, and not stayed: back toward new
        return slip

    positions = np.arange(n)
    before, on_run = run_from(timed)
    dropped = told_change(timed & ~restarted & on_run & (h < h[np.maximum(before, 0)]), positions, before)
    rise_from, on_run = run_from(timed & ~dropped)
    at = np.maximum(rise_from, 0)
    days_to = np.where(dated[at] & dated, (day_keys - day_keys[at]) / 86_400e9, np.nan)
    with np.errstate(invalid="ignore"):
        leapt = (timed & ~restarted & on_run & (days_to > 0) & (h - h[at] > _most_hours(days_to))
                 & (h[to] < h))
    leapt = told_change(leapt & ~dropped, back, rise_from)  # the fall is at the sample back on the run
    slip = dropped | leapt
    return slip, np.where(dropped, before, np.where(leapt, rise_from, -1)), np.where(slip, back, -1)


def _evidence_margin(name: str, margins: dict) -> tuple:
    """The noise margin (absolute, factor, offset) a RESET_EVIDENCE reading is judged aged by:
    the rule set's or published one (noise_margins), else AGED_SHARE of the new oil's value
    (factor None)."""
    if name in margins:
        return margins[name]
    published = MEASURES[name].repeatability if name in MEASURES else None
    return (0.0, published.factor, published.offset) if published is not None else (0.0, None, 0.0)


def _distances(evidence: dict, now: np.ndarray, before: np.ndarray) -> dict:
    """For each evidence reading, at the positions `now` and their earlier sample `before`: the
    earlier reading's distance from new oil the way it ages, the later's, and whether the earlier
    one was aged (a reading on the other side of new, such as carbonyl under the new oil's, is not)."""
    out = {}
    for name, (values, new, (absolute, factor, offset)) in evidence.items():
        way = RESET_EVIDENCE[name]
        reference = np.where(np.isnan(new[now]), new[before], new[now])
        old, current = values[before], values[now]
        if factor is None:
            margin = AGED_SHARE * np.abs(reference)
        else:
            margin = absolute + factor * np.abs((old + reference) / 2.0 + offset)
        was = way * (old - reference) if way else np.abs(old - reference)
        now_at = way * (current - reference) if way else np.abs(current - reference)
        with np.errstate(invalid="ignore"):
            aged = was > 2.0 * margin
        out[name] = (old, current, reference, was, now_at, aged)
    return out


def _stayed_aged(evidence: dict, now: np.ndarray, before: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Where the old oil (at `before`) had an aged reading and none of its aged readings came back
    at least BACK_SHARE of the way to the new oil's: no oil change between (common practice, no
    source). NaN anywhere is no evidence either way. Viscosity alone tells no reset: it ages
    little, and new oil of one grade may lie anywhere in its ISO VG band (ISO 3448: +-10 %), so a
    fresh fill can sit as far from the table's value as the old oil did; it can still tell a change.
    `now` are the positions judged, `before` their old oil's. Also returns where the readings
    told anything (an aged reading on both sides, stayed or back): elsewhere a fall is not told."""
    aged_any = np.zeros(len(before), dtype=bool)
    back_any = np.zeros(len(before), dtype=bool)
    for name, (_, _, _, was, current, aged) in _distances(evidence, now, before).items():
        with np.errstate(invalid="ignore"):
            aged &= np.isfinite(current)
            if RESET_EVIDENCE[name]:
                aged_any |= aged
            back_any |= aged & (current <= (1.0 - BACK_SHARE) * was)
    return aged_any & ~back_any, aged_any | back_any


def _start_at(starts: np.ndarray, positions: np.ndarray) -> np.ndarray:
    """The position of the last row at or before each row where `starts` (0 where none)."""
    return np.maximum.accumulate(np.where(starts, positions, 0)) if len(starts) else positions


def _oil_notes(chain: dict, order: np.ndarray, mine: np.ndarray, flagged: np.ndarray, charges: dict,
               h: np.ndarray) -> np.ndarray:
    """The oil-changed note of each incoming row (sorted arrays, `mine` their sorted positions)."""
    notes = np.full(len(mine), None, dtype=object)
    hit = np.flatnonzero(charges["new_oil"][mine])
    if not len(hit):
        return notes
    at = mine[hit]
    notes[hit] = ("first sample after an oil change (" + _why(chain, order, at, flagged, charges, h)
                  + "); trend measures restart here, with no step")
    return notes


def _why(chain: dict, order: np.ndarray, at: np.ndarray, flagged: np.ndarray, charges: dict,
         h: np.ndarray) -> np.ndarray:
    """What tells an oil change at the sorted positions `at` (each one of them is a change); each
    phrase is built only for the rows it describes."""
    why = np.full(len(at), "oil_changed is set on this sample", dtype=object)
    told = flagged[at]
    fell = np.flatnonzero(charges["hours_fell"][at] & ~told)
    if len(fell):
        to = at[fell]
        start = charges["hours_from"][to]
        which = np.where(start == to - 1, "", " with oil hours").astype(object)
        why[fell] = ("oil hours fell from " + _hours(h[start]) + " to " + _hours(h[to])
                     + _since(chain, order[start], which))
    changed = np.flatnonzero(charges["lubricant_changed"][at] & ~told)
    if len(changed):
        to = at[changed]
        start = charges["lubricant_from"][to]
        which = np.where(start == to - 1, "", " with a lubricant code").astype(object)
        lubricant = chain["lubricant"]
        text = ("lubricant changed from " + _text(lubricant[order[start]]) + " to " + _text(lubricant[order[to]])
                + _since(chain, order[start], which))
        both = charges["hours_fell"][to]
        why[changed] = np.where(both, text + " and " + why[changed], text)
    return why


def _reset_notes(chain: dict, order: np.ndarray, mine: np.ndarray, charges: dict, h: np.ndarray,
                 evidence: dict) -> np.ndarray:
    """The oil-hours-not-from-fill note of each incoming row (sorted arrays, `mine` their sorted
    positions): where the charge's hours stopped counting from the fill, what told it; on the
    charge's later samples, where."""
    notes = np.full(len(mine), None, dtype=object)
    reset_at = charges["reset_at"][mine]
    hit = np.flatnonzero(reset_at >= 0)
    if not len(hit):
        return notes
    at = mine[hit]
    here = charges["reset"][at]
    if here.any():
        now = at[here]
        before = charges["hours_from"][now]
        told = np.full(len(now), "", dtype=object)
        for name, (old, current, reference, _, _, aged) in _distances(evidence, now, before).items():
            with np.errstate(invalid="ignore"):
                shown = aged & np.isfinite(current)
            phrase = (name + " " + _hours(old) + " to " + _hours(current) + " (new oil " + _hours(reference) + ")")
            told = np.where(shown, told + np.where(told == "", "", ", ") + phrase, told)
        which = np.where(before == now - 1, "", " with oil hours").astype(object)
        notes[hit[here]] = ("oil hours fell from " + _hours(h[before]) + " to " + _hours(h[now])
                            + _since(chain, order[before], which) + " with no oil_changed flag, and the aged readings "
                            "stayed aged (" + told + "): taken as the hours meter reset without an oil change (an "
                            "overhaul, a meter changed); the trend goes on across it, with no rate per 1000 h to this "
                            "sample, and no rate per 1000 of its own oil hours on it or on the later samples of this "
                            "charge, whose oil hours no longer count from the fill; if the oil was changed, set "
                            "oil_changed on this sample")
    unit_hours = charges["unit_hours"][at]  # an oil change: never a reset too
    if unit_hours.any():
        now = at[unit_hours]
        before = charges["across"][now]
        days = charges["days_across"][now]
        which = np.where(before == now - 1, "", " with oil hours").astype(object)
        notes[hit[unit_hours]] = (
            "an oil change, yet its oil hours, " + _hours(h[now]) + ", are more than the calendar holds"
            + _since(chain, order[before], which) + " (" + _hours(h[before]) + " h, " + _hours(days)
            + " days earlier: at most " + _hours(_most_hours(days)) + " h, 24 h a day, twice over): they count the "
            "unit's hours, not the new oil's; no rate per 1000 of its own oil hours is taken on it or on the later "
            "samples of this charge (give oil hours from the fill; if oil_changed marks a top-up, clear it; if it "
            "marks the old oil sampled at the drain, set it on the new oil's first sample instead)")
    later = ~here & ~unit_hours
    if later.any():  # one wording per charge, gathered to its samples
        starts, which = np.unique(reset_at[hit[later]], return_inverse=True)
        start = order[starts]
        worded = ("the oil hours of unit " + _text(chain["unit_id"][start]) + " do not count from the fill since "
                  "sample " + _reset_places(chain, start) + " (its caveat says why): no rate per 1000 of this "
                  "sample's own oil hours is taken")
        notes[hit[later]] = worded[which.ravel()]
    return notes


def _reset_places(chain: dict, rows: np.ndarray) -> np.ndarray:
    """"ID (DATE)" of the reset samples at chain `rows`, or what an earlier chunk carried for them."""
    told = chain[RESET_COLUMN][rows]
    own = _text(chain["sample_id"][rows]) + " (" + _text(chain["sampled_on"][rows]) + ")"
    return np.where(pd.notna(told) & (told != NOT_TOLD), told, own).astype(object)


def _spelling_notes(chain: dict, order: np.ndarray, mine: np.ndarray, same_unit: np.ndarray,
                    spelled: np.ndarray) -> np.ndarray:
    """The unit-id-spelling note of each incoming row whose unit id is spelled otherwise than its
    unit's previous sample (unit_keys; `spelled`: a code per spelling, sorted): both spellings,
    quoted so spaces show."""
    notes = np.full(len(mine), None, dtype=object)
    hit = np.flatnonzero((same_unit & (spelled != _shifted(spelled, -1)))[mine])
    if not len(hit):
        return notes
    now, before = order[mine[hit]], order[mine[hit] - 1]
    ids = chain["unit_id"]
    notes[hit] = ("unit id '" + _text(ids[now]) + "' differs from '" + _text(ids[before]) + "', the unit id of the "
                  "previous sample (" + _text(chain["sample_id"][before]) + ", " + _text(chain["sampled_on"][before])
                  + "), only in case or surrounding spaces: taken as one unit for trends; the record keeps the id "
                  "as written (write one spelling)")
    return notes


def _slip_notes(chain: dict, order: np.ndarray, mine: np.ndarray, charges: dict, h: np.ndarray) -> np.ndarray:
    """The oil-hours-slip note: on the sample whose oil hours slipped, and on the sample back on
    the run after it (which says so even when the slip was graded earlier, in an earlier chunk
    or import, before its next sample was known)."""
    notes = np.full(len(mine), None, dtype=object)
    slip = charges["slip"]
    hit = np.flatnonzero(slip[mine])
    ids, dates = chain["sample_id"], chain["sampled_on"]
    if len(hit):
        at = mine[hit]
        before, back = charges["slip_from"][at], charges["slip_back"][at]
        moved = np.where(h[at] < h[before], "fell", "rose, more than the calendar holds,").astype(object)
        notes[hit] = ("oil hours " + moved + " from " + _hours(h[before]) + " (" + _text(ids[order[before]]) + ", "
                      + _text(dates[order[before]]) + ") to " + _hours(h[at]) + " with no oil_changed flag or change "
                      "of lubricant code, and the next sample, " + _text(ids[order[back]]) + " ("
                      + _text(dates[order[back]]) + "), is back at " + _hours(h[back]) + ": taken as a slip in this "
                      "reading, not an oil change; the charge and its trend go on, with no rate per 1000 h to or "
                      "from this sample and none per 1000 of its own oil hours (mend its oil hours)")
    back_of = np.full(len(slip), -1, dtype=np.int64)
    back_of[charges["slip_back"][slip]] = np.flatnonzero(slip)
    hit = np.flatnonzero(back_of[mine] >= 0)
    if len(hit):
        at = mine[hit]
        slipped = back_of[at]
        before = charges["slip_from"][slipped]
        moved = np.where(h[slipped] < h[before], ", fell from ", ", rose beyond what the calendar holds from ")
        notes[hit] = ("the oil hours of sample " + _text(ids[order[slipped]]) + " (" + _text(dates[order[slipped]])
                      + "), " + _hours(h[slipped]) + moved.astype(object) + _hours(h[before]) + " and this sample's, "
                      + _hours(h[at]) + ", are back on the run: taken as a slip in that reading, not an oil change; "
                      "the charge goes on, with no rate per 1000 h to this sample")
    return notes


def _untold_notes(chain: dict, order: np.ndarray, mine: np.ndarray, charges: dict, h: np.ndarray) -> np.ndarray:
    """The oil-change-untold note of each incoming row where oil hours fell unflagged and no
    reading told a meter reset from an oil change."""
    notes = np.full(len(mine), None, dtype=object)
    hit = np.flatnonzero(charges["untold"][mine])
    if not len(hit):
        return notes
    at = mine[hit]
    before = charges["hours_from"][at]
    which = np.where(before == at - 1, "", " with oil hours").astype(object)
    notes[hit] = ("oil hours fell from " + _hours(h[before]) + " to " + _hours(h[at]) + _since(chain, order[before], which)
                  + " with no oil_changed flag or change of lubricant code, and no aged reading on both samples "
                  "(acid or base number, carbonyl, RPVOT against the new oil's) tells an hours meter reset from an "
                  "unrecorded oil change: could not tell which; taken as an oil change, trend measures restarting "
                  "here (set oil_changed if the oil was changed; if it was not, the hours meter was reset and the "
                  "trend was cut here)")
    return notes


def _class_notes(chain: dict, order: np.ndarray, mine: np.ndarray, charges: dict) -> np.ndarray:
    """The class-changed note of each incoming row (sorted arrays, `mine` their sorted positions)."""
    notes = np.full(len(mine), None, dtype=object)
    hit = np.flatnonzero(charges["class_changed"][mine])
    if not len(hit):
        return notes
    at = mine[hit]
    start = charges["class_from"][at]
    which = np.where(start == at - 1, "", " with a class").astype(object)
    classes = chain["class"]
    notes[hit] = ("class changed from " + _text(classes[order[start]]) + " to " + _text(classes[order[at]])
                  + _since(chain, order[start], which) + ": another machine under the same id, or a class written "
                  "wrong; trend measures restart here, with no step")
    return notes


def _one_moment(same_unit: np.ndarray, dated: np.ndarray, day_keys: np.ndarray, h: np.ndarray,
                flagged: np.ndarray, differs: np.ndarray) -> dict:
    """Samples of one unit on one date at the same oil hours (or both without), in trend order,
    whose readings (or method or lab) are not all alike.

    Nothing but the order of the rows in the file puts one before the other: two sample points
    under one unit id, or a resample of one bottle. A step between them is no change over time,
    and a step from one of them to the next sample depends on that order (common practice, no
    source). So none of them (`member`) is stepped, nor the sample after them (`after`). A result
    filed twice (every reading alike) steps as before: either order gives the same steps.
    """
    hours_tie = (h == _shifted(h, np.nan)) | (np.isnan(h) & np.isnan(_shifted(h, np.nan)))
    tie = same_unit & dated & (day_keys == _shifted(day_keys, _LAST)) & hours_tie & (flagged == _shifted(flagged, False))
    group = np.cumsum(~tie)  # a tie continues the previous sample's group
    mixed = np.zeros(len(tie) + 1, dtype=bool)
    np.logical_or.at(mixed, group, tie & differs)
    ahead = np.empty_like(tie)
    if len(tie):
        ahead[:-1], ahead[-1] = tie[1:], False
    member = (tie | ahead) & mixed[group]
    after = same_unit & ~member & _shifted(member, False)
    return {"tie": tie & mixed[group], "member": member, "after": after}


def _moment_notes(chain: dict, order: np.ndarray, mine: np.ndarray, moment: dict, h: np.ndarray) -> np.ndarray:
    """The one-moment note of each incoming row (sorted arrays, `mine` their sorted positions)."""
    notes = np.full(len(mine), None, dtype=object)
    hit = np.flatnonzero(moment["member"][mine])
    if len(hit):
        at = mine[hit]
        other = np.where(moment["tie"][at], at - 1, at + 1)
        hours = np.where(np.isnan(h[at]), "no oil hours", _hours(h[at]) + " oil hours").astype(object)
        notes[hit] = ("sample " + _text(chain["sample_id"][order[other]]) + " of unit " + _text(chain["unit_id"][order[at]])
                      + " was taken on the same date (" + _text(chain["sampled_on"][order[at]]) + ") at " + hours
                      + ": two sample points under one unit id, or a resample; which came first is not told, so "
                      "neither is stepped, nor the sample after them (give each sample point its own unit id)")
    hit = np.flatnonzero(moment["after"][mine])
    if len(hit):
        before = order[mine[hit] - 1]
        notes[hit] = ("the previous samples of unit " + _text(chain["unit_id"][before]) + " (" + _text(chain["sampled_on"][before])
                      + ", " + _text(chain["sample_id"][before]) + " and another) were taken at one moment, so which "
                      "one this sample follows is not told; trend measures restart here, with no step")
    return notes


def _charge_notes(chain: dict, order: np.ndarray, mine: np.ndarray, charges: dict, h: np.ndarray,
                  unplaced: np.ndarray, restarts: np.ndarray) -> np.ndarray:
    """The oil-charge-unknown note: on a sample that cannot be placed on one charge, and on the
    sample after such a one (no step to it either) that starts no chain itself."""
    notes = np.full(len(mine), None, dtype=object)
    after = _shifted(unplaced, False) & ~unplaced & ~restarts & charges["same_unit"]
    outrun = charges["outrun"]
    hit = np.flatnonzero(outrun[mine])
    if len(hit):
        at = mine[hit]
        base = order[charges["hours_from"][at]]
        days = charges["days"][at]
        notes[hit] = ("oil hours rose from " + _hours(h[charges["hours_from"][at]]) + " ("
                      + _text(chain["sample_id"][base]) + ", " + _text(chain["sampled_on"][base]) + ") to "
                      + _hours(h[at]) + " in " + _hours(days) + " days, more than the calendar holds (at most "
                      + _hours(_most_hours(days)) + " h: 24 h a day, twice over): the oil hours or a date "
                      "are wrong, or the two samples are not of one oil charge; "
                      + np.where(days == 0, "trend measures are not computed on it",
                                 "no rate per 1000 h is taken to it, nor one per 1000 of its own oil hours"))
    hit = np.flatnonzero(unplaced[mine] & ~outrun[mine])
    if len(hit):
        at = mine[hit]
        change = charges["change_of"][at]
        no_hours_fall = ~charges["hours_fell"][change]
        other = np.where(no_hours_fall, charges["lubricant_from"][change], charges["hours_from"][change])
        charge_why = _why(chain, order, change, np.zeros(len(order), dtype=bool), charges, h)
        lacking = np.where(no_hours_fall, "no oil hours or lubricant code", "no oil hours")
        notes[hit] = ("an oil change came between samples " + _text(chain["sample_id"][order[other]]) + " and "
                      + _text(chain["sample_id"][order[change]]) + " of unit " + _text(chain["unit_id"][order[at]])
                      + " (" + charge_why + ") and this sample has " + lacking
                      + " to tell which charge it is from; trend measures are not computed on it")
    hit = np.flatnonzero(after[mine])
    if len(hit):
        at = mine[hit]
        before = order[at - 1]
        notes[hit] = ("the previous sample of unit " + _text(chain["unit_id"][before]) + " ("
                      + _text(chain["sample_id"][before]) + ", " + _text(chain["sampled_on"][before])
                      + ") cannot be placed on one oil charge; trend measures restart here, with no step")
    return notes


def _most_hours(days: np.ndarray) -> np.ndarray:
    """The most oil hours a unit can run between two dates `days` apart: both dates' days in full
    (a date carries no time of day), 24 h each, with HOURS_MARGIN."""
    return HOURS_A_DAY * (days + 1.0) * HOURS_MARGIN


def _hours(values: np.ndarray) -> np.ndarray:
    return np.array([f"{v:g}" for v in values], dtype=object)


def trend_caveat_flags(measured: pd.DataFrame) -> np.ndarray:
    """bool [rows, TREND_CAVEATS]: the engine's own caveats that apply to each sample."""
    return np.stack([measured[c.message_column].notna().to_numpy() for c in TREND_CAVEATS], axis=1)
