"""Row measures: the values derived from one sample's own readings and its new-oil reference.

Derivation is column-wise over the whole batch. A derived value is NaN whenever an
input it needs is missing, so a rule on it is "not evaluated", never a pass.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from sumpwise.derive.cleanliness import cleanliness_measures
from sumpwise.derive.viscosity import viscosity_index
from sumpwise.vocabulary.base_stocks import family_of
from sumpwise.vocabulary.measures import (INPUT_MEASURES, ISO4406_SIZES, KNOWN_FIELDS, DECIMALS, REFERENCE_VALUES,
                                         ROW_MEASURES)




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
        series = frame[column].astype(object)
        return series.where(series.notna(), None)
    return pd.Series([None] * len(frame), index=frame.index, dtype=object)


def _by_code(lookup: np.ndarray, values: list, fill) -> np.ndarray:
    """A per-lubricant value for every row; `lookup` is each row's index into the lubricants
    table (-1 for none), from one factorize of the lubricant column."""
    table = np.array(list(values) + [fill], dtype=object if fill is None else float)
    return table[lookup]


def _lubricant_lookup(codes: np.ndarray, known: list) -> np.ndarray:
    row_codes, uniques = pd.factorize(codes)
    where = pd.Index(known).get_indexer(uniques) if known else np.full(len(uniques), -1)
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
        out[f"new_{name}"] = np.where(np.isnan(own), from_table, own)

    fields = {name: _texts(samples, name) for name in set(KNOWN_FIELDS) | set(extra_fields)}
    base_from_table = _by_code(lookup, [lub.base_stock for lub in lubricants.values()], None)
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
    for name in ROW_MEASURES:
        if name != "vi":
            values = np.round(out[name], DECIMALS)
            out[name] = np.where(np.isfinite(values), values, np.nan)
    out["vi"] = viscosity_index(out["kv40"], out["kv100"])
    out.update(cleanliness_measures(fields["iso4406"].to_numpy(dtype=object),
                                    {size: out[f"particles_{size}"] for size in ISO4406_SIZES}))

    frame = pd.DataFrame(out, index=samples.index, copy=False)
    for name, series in fields.items():
        frame[name] = series.astype(object)
    return frame
