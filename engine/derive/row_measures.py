"""Row measures: the values derived from one sample's own readings and its new-oil reference.

Derivation is column-wise over the whole batch. A derived value is NaN whenever an
input it needs is missing, so a rule on it is "not evaluated", never a pass.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

import difflib

from sumpwise.derive.cleanliness import cleanliness_measures, scale_number_range
from sumpwise.derive.viscosity import viscosity_index
from sumpwise.intake.censored import CENSORED_SUFFIX, WRITTEN_SUFFIX, Bounds, bounds, number_text
from sumpwise.vocabulary.base_stocks import ESTER_FAMILY, family_of
from sumpwise.vocabulary.caveats import EngineCaveat
from sumpwise.vocabulary.texts import lubricant_key
from sumpwise.vocabulary.measures import (INPUT_MEASURES, ISO4406_SIZES, ISO4406_TOP, KNOWN_FIELDS, DECIMALS,
                                         REFERENCE_VALUES, ROW_MEASURES)

# A lubricant code the rule set does not know: its new-oil values are missing, and the
# sample must say so where people look, not only in its not-evaluated list.
# A row's base stock that disagrees with its lubricant's on the ester carbonyl: the ester caveats
# follow the row, the new-oil values (an ester's own carbonyl among them) the table, so the
# grade rests on two accounts of one oil and may be wrong either way. A row whose ISO 4406 code
# and particle counts disagree has one of them on another scale (sumpwise.derive.cleanliness).
LUBRICANT_CAVEATS = (
    EngineCaveat("unknown-lubricant", "unknown_lubricant_note", "sumpwise engine: the rule set's lubricants table"),
    EngineCaveat("base-stock-disagrees", "base_stock_disagrees_note",
                 "sumpwise engine: the row's base_stock against the rule set's lubricants table (an ester's own "
                 "carbonyl inflates a direct FTIR oxidation reading: Tribology Transactions 55 (2012) 872)"),
    EngineCaveat("counts-disagree-with-code", "iso4406_counts_note",
                 "sumpwise engine: the row's ISO 4406 code against the scale numbers of its own particle counts "
                 "(ISO 4406:1999 Table 1; two or more numbers apart: our choice, no source)"),
    EngineCaveat("oxidation-below-new", "oxidation_below_new_note",
                 "sumpwise engine: a direct FTIR carbonyl reading against its new oil's (oxidation adds carbonyl, "
                 "ASTM E2412; under half the new oil's reading: common practice, no source)"),
)
# A direct carbonyl reading under this share of its new oil's, where the new oil reads at least
# BELOW_NEW_FLOOR abs/cm: oxidation only adds carbonyl and a top-up only brings the reading back
# toward new, so such a reading is a unit slip (abs/0.1 mm taken as abs/cm reads 100 times low)
# or another oil's new-oil value, and a rise below zero would pass as health.
BELOW_NEW_SHARE = 0.5  # common practice, no source
BELOW_NEW_FLOOR = 1.0  # abs/cm: a new oil reading less leaves too little to halve (our choice, no source)


def _unknown_lubricant_notes(codes: np.ndarray, known: list) -> np.ndarray:
    """A note per row whose lubricant code is not in the table, naming the nearest known codes."""
    row_codes, uniques = pd.factorize(codes, use_na_sentinel=True)
    found = _lubricant_lookup(np.asarray(uniques, dtype=object), known) >= 0
    notes = []
    for code, here in zip(uniques, found):
        if here:
            notes.append(None)
            continue
        near = difflib.get_close_matches(str(code), known, n=3, cutoff=0.5)
        notes.append(f"lubricant code '{code}' is not in the rule set's lubricants table"
                     + (f" (nearest: {', '.join(near)})" if near else "")
                     + "; its new-oil values are missing, so rules on change from new oil are not evaluated")
    return np.array(notes + [None], dtype=object)[row_codes]


def _base_stock_disagreements(given: np.ndarray, from_table: np.ndarray, codes: np.ndarray) -> np.ndarray:
    """A note per row whose own base stock and its lubricant's differ on the ester carbonyl
    (each distinct pair worded once)."""
    notes = np.full(len(given), None, dtype=object)
    both = pd.notna(given) & pd.notna(from_table)
    if not both.any():
        return notes
    at = np.flatnonzero(both)
    pairs, uniques = pd.MultiIndex.from_arrays([given[at], from_table[at], codes[at]]).factorize()
    worded = []
    for row, table, code in uniques:
        if (family_of(row) == ESTER_FAMILY) == (family_of(table) == ESTER_FAMILY):
            worded.append(None)
            continue
        worded.append(f"the row gives base stock '{row}', the rule set's lubricants table gives {code} as "
                      f"'{table}': the ester caveats follow the row, the new-oil values the table, and only one "
                      f"of them is this oil; check the lubricant code and the base stock before trusting the grade")
    notes[at] = np.array(worded, dtype=object)[pairs]
    return notes


def _oxidation_below_new_notes(oxidation: np.ndarray, new: np.ndarray, codes: np.ndarray) -> np.ndarray:
    """A note per row whose direct carbonyl reading is under BELOW_NEW_SHARE of its new oil's."""
    notes = np.full(len(oxidation), None, dtype=object)
    with np.errstate(invalid="ignore"):
        low = (new >= BELOW_NEW_FLOOR) & (oxidation < BELOW_NEW_SHARE * new)
    at = np.flatnonzero(low)
    if not len(at):
        return notes
    named = np.where(pd.notna(codes[at]), codes[at], "").astype(object)
    triples, uniques = pd.MultiIndex.from_arrays([oxidation[at], new[at], named]).factorize()
    worded = [f"FTIR oxidation {reading:g} abs/cm is under half its new oil's {reference:g} abs/cm"
              f"{f' ({code})' if code else ''}, and oxidation only adds carbonyl: a reading in abs/0.1 mm taken "
              f"as abs/cm reads 100 times low, and so does another oil's new-oil value; its rise below zero is "
              f"no sign of health. Check the reading's unit and the lubricant"
              for reading, reference, code in uniques]  # each distinct reading worded once
    notes[at] = np.array(worded, dtype=object)[triples]
    return notes


# Derived measures that carry a censored input's bounds: how each is computed, and whether it
# rises (+1) or falls (-1) with each input that may be censored. Each is monotonic in those
# inputs (new-oil values and hours are positive), so the interval's ends map to the ends. A row's
# own new-oil value may be censored too (`new_an` '<0.05'): it wins over the table as a number does.
BOUNDED = (
    ("kv40_change_pct", {"kv40": 1, "new_kv40": -1}, lambda v: (v["kv40"] - v["new_kv40"]) / v["new_kv40"] * 100.0),
    ("kv100_change_pct", {"kv100": 1, "new_kv100": -1},
     lambda v: (v["kv100"] - v["new_kv100"]) / v["new_kv100"] * 100.0),
    ("an_rise", {"an": 1, "new_an": -1}, lambda v: v["an"] - v["new_an"]),
    ("oxidation_rise", {"oxidation": 1, "new_oxidation": -1}, lambda v: v["oxidation"] - v["new_oxidation"]),
    ("oxidation_rise_per_1000h", {"oxidation_rise": 1}, lambda v: v["oxidation_rise"] * v["per_hour"]),
    ("an_rise_per_1000h", {"an_rise": 1}, lambda v: v["an_rise"] * v["per_hour"]),
    ("oxidation_differential_per_1000h", {"oxidation_differential": 1},
     lambda v: v["oxidation_differential"] * v["per_hour"]),
    ("bn_retained_pct", {"bn": 1, "new_bn": -1}, lambda v: v["bn"] / v["new_bn"] * 100.0),
    ("rpvot_retained_pct", {"rpvot": 1, "new_rpvot": -1}, lambda v: v["rpvot"] / v["new_rpvot"] * 100.0),
    ("bn_minus_an", {"bn": 1, "an": -1}, lambda v: v["bn"] - v["an"]),
)


def _carried_bounds(name: str, inputs: dict, formula, out: dict, found: dict) -> Bounds | None:
    """The derived measure's interval where one of its inputs is censored and the rest known."""
    censored_inputs = [m for m in inputs if m in found]
    if not censored_inputs:
        return None
    rows = np.logical_or.reduce([found[m].censored for m in censored_inputs])
    low_args, high_args = dict(out), dict(out)
    low_open = np.zeros(len(rows), dtype=bool)
    high_open = np.zeros(len(rows), dtype=bool)
    written = np.full(len(rows), None, dtype=object)
    for m, direction in inputs.items():
        if m not in found:
            continue
        b, here = found[m], found[m].censored
        low_end, high_end = (b.low, b.high) if direction > 0 else (b.high, b.low)
        low_open_end, high_open_end = (b.low_open, b.high_open) if direction > 0 else (b.high_open, b.low_open)
        low_args[m] = np.where(here, low_end, out[m])
        high_args[m] = np.where(here, high_end, out[m])
        low_open |= here & low_open_end
        high_open |= here & high_open_end
        for k in np.flatnonzero(here):  # censored cells only: a few in a batch
            source = b.written[k] if b.written[k] and " from " in str(b.written[k]) else f"{m} '{b.written[k]}'"
            written[k] = source if written[k] is None else f"{written[k]}, {source}"
    with np.errstate(divide="ignore", invalid="ignore"):
        low, high = np.round(formula(low_args), DECIMALS), np.round(formula(high_args), DECIMALS)
    rows &= ~np.isnan(low) & ~np.isnan(high)
    low, high = np.where(rows, low, np.nan), np.where(rows, high, np.nan)
    spelled = np.full(len(rows), None, dtype=object)
    for k in np.flatnonzero(rows):  # censored cells only: a few in a batch
        spelled[k] = (f"{'(' if low_open[k] else '['}{number_text(low[k]) if np.isfinite(low[k]) else '-inf'}, "
                      f"{number_text(high[k]) if np.isfinite(high[k]) else 'inf'}{')' if high_open[k] else ']'}"
                      f" from {written[k]}")
    return Bounds(rows, low, high, low_open | ~np.isfinite(low), high_open | ~np.isfinite(high), spelled)


def _bound_columns(name: str, b: Bounds) -> dict:
    """A censored measure's interval as columns of the measured frame (the evaluator reads them)."""
    rows = b.censored
    return {name + ":low": np.where(rows, b.low, np.nan), name + ":high": np.where(rows, b.high, np.nan),
            name + ":low_open": b.low_open & rows, name + ":high_open": b.high_open & rows,
            name + WRITTEN_SUFFIX: np.where(rows, b.written, None)}


def _at_least_bounds(numbers: np.ndarray, rows: np.ndarray, codes: np.ndarray, counted: Bounds | None) -> Bounds:
    """Scale numbers a code wrote `>=n` as the interval [n, >28] (ISO 4406:1999: fewer than 20
    particles counted, so the true code may be higher), beside the bounds a censored count gave
    other rows (`counted`: only rows with no number in the code, so never these)."""
    n = len(rows)
    spelled = np.full(n, None, dtype=object)
    at = np.flatnonzero(rows)
    index, uniques = pd.factorize(codes[at])  # each distinct code spelled once: it fixes the number
    first = np.empty(len(uniques), dtype=np.intp)
    first[index[::-1]] = at[::-1]
    spelled[at] = np.array([f"[{numbers[k]:.0f}, {ISO4406_TOP + 1}] from iso4406 '{code}'"
                            for k, code in zip(first, uniques)], dtype=object)[index]
    low, high = np.where(rows, numbers, -np.inf), np.where(rows, float(ISO4406_TOP + 1), np.inf)
    closed = np.zeros(n, dtype=bool)
    if counted is None:
        return Bounds(rows, low, high, closed, closed, spelled)
    return Bounds(rows | counted.censored, np.where(rows, low, counted.low), np.where(rows, high, counted.high),
                  np.where(rows, False, counted.low_open), np.where(rows, False, counted.high_open),
                  np.where(rows, spelled, counted.written))


def _numbers(frame: pd.DataFrame, column: str) -> np.ndarray:
    if column in frame.columns:
        values = frame[column]
        if values.dtype.kind != "f":
            values = pd.to_numeric(values, errors="coerce")
        return values.to_numpy(dtype=float, na_value=np.nan)
    return np.full(len(frame), np.nan)


def _texts(frame: pd.DataFrame, column: str) -> pd.Series:
    """A text column as str-or-None; samples.py has already stripped it and blanked empty cells."""
    if column in frame.columns:
        values = frame[column].to_numpy(dtype=object)
        if pd.api.types.infer_dtype(values, skipna=False) != "string":  # str in every cell: none missing
            missing = pd.isna(values)
            if missing.any():  # NaN from a reader becomes None, in a copy: the frame stays as it is
                values = np.where(missing, None, values)
        return pd.Series(values, index=frame.index, dtype=object)  # copied: the samples frame is not shared
    return pd.Series(np.full(len(frame), None, dtype=object), index=frame.index, dtype=object, copy=False)


def _by_code(lookup: np.ndarray, values: list, fill) -> np.ndarray:
    """A per-lubricant value for every row; `lookup` is each row's index into the lubricants
    table (-1 for none), from one factorize of the lubricant column."""
    table = np.array(list(values) + [fill], dtype=object if fill is None else float)
    return table[lookup]


def _lubricant_lookup(codes: np.ndarray, known: list) -> np.ndarray:
    """Each row's index into the lubricants table: its code as written, else the one code equal to
    it by lubricant_key (two table codes equal by it are ambiguous and match only as written)."""
    row_codes, uniques = pd.factorize(codes)
    where = pd.Index(known).get_indexer(uniques) if known else np.full(len(uniques), -1)
    keys = pd.Series([lubricant_key(code) for code in known], dtype=object)
    single = keys[~keys.duplicated(keep=False)]
    by_key = pd.Index(single.to_numpy()).get_indexer([lubricant_key(code) for code in uniques])
    where = np.where(where >= 0, where, np.where(by_key >= 0, single.index.to_numpy()[by_key], -1)) if len(single) \
        else where
    return np.append(where, -1)[row_codes]  # factorize's -1 (no lubricant) stays -1


def derive_measures(samples: pd.DataFrame, lubricants: dict, extra_measures=(), extra_fields=()) -> pd.DataFrame:
    """Every measure and field a rule can read, one column each, aligned with `samples`.

    `lubricants` maps a lubricant code to its compiled new-oil reference. Reference columns
    (`new_kv40`, ...) are kept in the result so "not evaluated" can say what was lacking.
    """
    out: dict[str, object] = {}
    for name in list(INPUT_MEASURES) + [m for m in extra_measures if m not in INPUT_MEASURES]:
        out[name] = _numbers(samples, name)

    lubricant = _texts(samples, "lubricant")
    lookup = _lubricant_lookup(lubricant.to_numpy(dtype=object), list(lubricants))
    for name in REFERENCE_VALUES:
        reference = [np.nan if getattr(lub, name) is None else getattr(lub, name) for lub in lubricants.values()]
        from_table = _by_code(lookup, reference, np.nan).astype(float)
        own = _numbers(samples, f"new_{name}")
        # a row's own bound ('<0.05') is its value, not a gap for the table to fill (the table's 0.10
        # would grade a rise 0.05 or more too small); derivation below carries the bound
        held = samples[f"new_{name}{CENSORED_SUFFIX}"].notna().to_numpy() \
            if f"new_{name}{CENSORED_SUFFIX}" in samples.columns else np.zeros(len(samples), dtype=bool)
        out[f"new_{name}"] = np.where(np.isnan(own) & ~held, from_table, own)

    carried = {"comment"} & set(samples.columns)  # a lab's remark, carried into the record as written
    fields = {name: _texts(samples, name) for name in set(KNOWN_FIELDS) | set(extra_fields) | carried}
    base_from_table = _by_code(lookup, [lub.base_stock for lub in lubricants.values()], None)
    disagrees_notes = _base_stock_disagreements(fields["base_stock"].to_numpy(dtype=object), base_from_table,
                                                lubricant.to_numpy(dtype=object))
    fields["base_stock"] = fields["base_stock"].where(fields["base_stock"].notna(),
                                                      pd.Series(base_from_table, index=samples.index))
    method_codes, method_names = pd.factorize(fields["method"].to_numpy(dtype=object))
    method = pd.Series(np.array([str(m).lower() for m in method_names] + ["direct"], dtype=object)[method_codes],
                       index=samples.index, dtype=object)
    # a row giving only a differential reading (a column mapped to it) and no method is a differential one
    only_differential = (method_codes < 0) & np.isnan(out["oxidation"]) & ~np.isnan(out["oxidation_differential"])
    method[only_differential] = "subtraction"
    fields["method"] = method

    # FTIR conventions never mix: a differential (subtraction) reading is its own measure,
    # and the direct `oxidation`, its rise and its trends stay empty on that row.
    subtraction = (method == "subtraction").to_numpy()
    given = subtraction & ~np.isnan(out["oxidation"])
    out["oxidation_differential"] = np.where(given, out["oxidation"], out["oxidation_differential"])
    out["oxidation"] = np.where(subtraction, np.nan, out["oxidation"])
    family_codes, family_names = pd.factorize(fields["base_stock"].to_numpy(dtype=object))
    families = [family_of(n) for n in family_names] + [None]
    fields["base_stock_family"] = pd.Series(np.array(families, dtype=object)[family_codes], index=samples.index,
                                            dtype=object)

    hours = out["oil_hours"]
    with np.errstate(divide="ignore", invalid="ignore"):
        out["kv40_change_pct"] = (out["kv40"] - out["new_kv40"]) / out["new_kv40"] * 100.0
        out["kv100_change_pct"] = (out["kv100"] - out["new_kv100"]) / out["new_kv100"] * 100.0
        out["an_rise"] = out["an"] - out["new_an"]
        out["oxidation_rise"] = out["oxidation"] - out["new_oxidation"]
        per_hour = np.where(hours > 0, 1000.0 / np.where(hours > 0, hours, 1.0), np.nan)
        out["oxidation_rise_per_1000h"] = out["oxidation_rise"] * per_hour
        out["an_rise_per_1000h"] = out["an_rise"] * per_hour
        out["oxidation_differential_per_1000h"] = out["oxidation_differential"] * per_hour
        out["bn_retained_pct"] = out["bn"] / out["new_bn"] * 100.0
        out["rpvot_retained_pct"] = out["rpvot"] / out["new_rpvot"] * 100.0
        out["bn_minus_an"] = out["bn"] - out["an"]
    found = {}
    for name in (list(INPUT_MEASURES) + [m for m in extra_measures if m not in INPUT_MEASURES]  # declared too
                 + [f"new_{name}" for name in REFERENCE_VALUES]):
        if name + CENSORED_SUFFIX in samples.columns:
            texts = samples[name + CENSORED_SUFFIX].to_numpy(dtype=object)
            found[name] = bounds(name, texts, samples[name + WRITTEN_SUFFIX].to_numpy(dtype=object))
            out[name] = np.where(found[name].censored, np.nan, out[name])  # never its bound's number
    if "oxidation" in found and subtraction.any():
        # a censored reading on a differential row is a differential reading, as a number is above
        moved = found["oxidation"]
        here = moved.censored & subtraction
        found["oxidation_differential"] = Bounds(here, moved.low, moved.high, moved.low_open, moved.high_open,
                                                 moved.written)
        out["oxidation_differential"] = np.where(here, np.nan, out["oxidation_differential"])
        found["oxidation"] = Bounds(moved.censored & ~subtraction, moved.low, moved.high, moved.low_open,
                                    moved.high_open, moved.written)
    if found:
        out["per_hour"] = per_hour
        for name, inputs, formula in BOUNDED:
            carried = _carried_bounds(name, inputs, formula, out, found)
            if carried is not None and carried.censored.any():
                found[name] = carried
        del out["per_hour"]
    for name in ROW_MEASURES:
        if name != "vi":
            values = np.round(out[name], DECIMALS)
            out[name] = np.where(np.isfinite(values), values, np.nan)
    out["vi"] = viscosity_index(out["kv40"], out["kv100"])
    codes = fields["iso4406"].to_numpy(dtype=object)
    scales, at_least, counts_notes = cleanliness_measures(codes, {size: out[f"particles_{size}"]
                                                                  for size in ISO4406_SIZES})
    out.update(scales)
    for size in ISO4406_SIZES:  # a censored count where no code was written: the scale numbers it can have
        count, scale = f"particles_{size}", f"iso4406_{size}"
        if count in found:
            b = found[count]
            rows = b.censored & np.isnan(out[scale]) & pd.isna(counts_notes)  # counts at odds with the code fill none
            least, most = scale_number_range(b.low, b.high, b.low_open)
            out[scale] = np.where(rows & (least == most), least, out[scale])  # '<=0.01' is scale 0, known
            rows &= least < most
            if rows.any():
                spelled = np.full(len(rows), None, dtype=object)
                for k in np.flatnonzero(rows):  # censored cells only: a few in a batch
                    spelled[k] = f"[{least[k]:.0f}, {most[k]:.0f}] from {count} '{b.written[k]}'"
                found[scale] = Bounds(rows, least, most, np.zeros(len(rows), dtype=bool),
                                      np.zeros(len(rows), dtype=bool), spelled)

    for k, size in enumerate(ISO4406_SIZES):  # a number the code wrote `>=n`: n or higher, censored
        if at_least[:, k].any():
            scale = f"iso4406_{size}"
            found[scale] = _at_least_bounds(out[scale], at_least[:, k], codes, found.get(scale))
            out[scale] = np.where(at_least[:, k], np.nan, out[scale])
    if at_least.any():  # the code as written, for saying which reading left a rule undecided
        out["iso4406" + WRITTEN_SUFFIX] = np.where(at_least.any(axis=1), codes, None)

    for name, b in found.items():
        out.update(_bound_columns(name, b))
    out["unknown_lubricant_note"] = _unknown_lubricant_notes(lubricant.to_numpy(dtype=object), list(lubricants))
    out["base_stock_disagrees_note"] = disagrees_notes
    out["iso4406_counts_note"] = counts_notes
    out["oxidation_below_new_note"] = _oxidation_below_new_notes(out["oxidation"], out["new_oxidation"],
                                                                 lubricant.to_numpy(dtype=object))
    for name, series in fields.items():
        out[name] = series.astype(object).to_numpy(dtype=object)
    return pd.DataFrame(out, index=samples.index, copy=False)
