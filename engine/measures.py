"""The measures rules can read: lab values as read, and the values derived from them.

Derivation is column-wise over the whole batch. A derived value is NaN whenever an
input it needs is missing, so a rule on it is "not evaluated", never a pass.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .viscosity import viscosity_index

# Input measures and their canonical unit (see units.py for the conversions).
INPUT_MEASURES = {
    "kv40": "mm2/s",
    "kv100": "mm2/s",
    "an": "mg KOH/g",
    "bn": "mg KOH/g",
    "oxidation": "abs/cm",
    "nitration": "abs/cm",
    "sulfation": "abs/cm",
    "antiwear": "abs/cm",
    "soot": "abs/cm",
    "water": "ppm",
    "oil_hours": "h",
    "rpvot": "min",
}

# New-oil reference values: a row's own `new_<name>` wins over the lubricants table.
REFERENCE_VALUES = ("kv40", "kv100", "an", "bn", "oxidation", "rpvot")


@dataclass(frozen=True)
class DerivedMeasure:
    unit: str
    needs: tuple[str, ...]
    scale_of: str | None  # the input measure whose rule-set unit its limits are written in
    meaning: str


# Measures derived from one sample's own values (and its new-oil reference).
ROW_MEASURES = {
    "kv40_change_pct": DerivedMeasure("%", ("kv40", "new_kv40"), None,
                                      "(used - new) / new x 100, viscosity at 40 C"),
    "kv100_change_pct": DerivedMeasure("%", ("kv100", "new_kv100"), None,
                                       "(used - new) / new x 100, viscosity at 100 C"),
    "an_rise": DerivedMeasure("mg KOH/g", ("an", "new_an"), None, "acid number used - new"),
    "oxidation_rise": DerivedMeasure("abs/cm", ("oxidation", "new_oxidation"), "oxidation",
                                     "FTIR oxidation used - new-oil reading (a subtraction reading is its own rise)"),
    "vi": DerivedMeasure("", ("kv40", "kv100"), None, "viscosity index, ASTM D2270"),
    "oxidation_rise_per_1000h": DerivedMeasure("abs/cm per 1000 h", ("oxidation", "new_oxidation", "oil_hours"),
                                               "oxidation", "oxidation rise / oil hours x 1000"),
    "an_rise_per_1000h": DerivedMeasure("mg KOH/g per 1000 h", ("an", "new_an", "oil_hours"), None,
                                        "acid number rise / oil hours x 1000"),
    "bn_retained_pct": DerivedMeasure("%", ("bn", "new_bn"), None, "base number / new-oil base number x 100"),
    "rpvot_retained_pct": DerivedMeasure("%", ("rpvot", "new_rpvot"), None, "RPVOT / new-oil RPVOT x 100"),
    "bn_minus_an": DerivedMeasure("mg KOH/g", ("bn", "an"), None,
                                  "base number - acid number of the same sample (engine oils)"),
}

# Trend measures compare a sample with its unit's previous sample (engine/trends.py computes them).
# `previous_<base>` and `hours_since_previous` are columns of the measured frame, so "not evaluated"
# can say that the previous sample was lacking (first sample, oil change, or a trend break).
TREND_BASES = ("kv40", "kv100", "an", "bn", "oxidation", "nitration", "sulfation", "antiwear", "soot", "water",
               "rpvot")


def _trend_vocabulary() -> dict:
    vocabulary = {}
    for base in TREND_BASES:
        unit, previous = INPUT_MEASURES[base], f"previous_{base}"
        vocabulary[f"{base}_step"] = DerivedMeasure(unit, (base, previous), base,
                                                    f"{base} minus the unit's previous sample's {base}")
        vocabulary[f"{base}_step_per_1000h"] = DerivedMeasure(
            f"{unit} per 1000 h", (base, previous, "hours_since_previous"), base,
            f"{base}_step / oil hours between the two samples x 1000")
        vocabulary[f"{base}_rising"] = DerivedMeasure("", (base, previous), None,
                                                      f"consecutive rises of {base} ending at this sample")
    return vocabulary


TREND_MEASURES = _trend_vocabulary()

# Every derived measure a rule can name.
DERIVED_MEASURES = {**ROW_MEASURES, **TREND_MEASURES}

# Text columns a `field:` condition may read without the rule set declaring them.
KNOWN_FIELDS = ("sample_id", "unit_id", "class", "lubricant", "base_stock", "method", "lab", "sampled_on")

METHODS = ("direct", "subtraction")

# Differences of decimal lab values carry binary noise (0.22 - 0.07 = 0.15000000000000002),
# which would make "above 0.15" fire on a value that is exactly 0.15. Round it away.
_DECIMALS = 9


def measure_needs(measure: str) -> tuple[str, ...]:
    """The columns a measure is computed from (itself, for an input measure)."""
    derived = DERIVED_MEASURES.get(measure)
    return derived.needs if derived else (measure,)


def unit_key(measure: str) -> str | None:
    """The `units:` key whose unit a limit on this measure is written in, if any."""
    derived = DERIVED_MEASURES.get(measure)
    return derived.scale_of if derived else measure


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
    fields["method"] = method

    subtraction = (method == "subtraction").to_numpy()
    # A subtraction reading has the new oil removed already: its reference is zero by construction.
    out["new_oxidation"] = np.where(subtraction, 0.0, out["new_oxidation"])

    hours = out["oil_hours"]
    with np.errstate(divide="ignore", invalid="ignore"):
        out["kv40_change_pct"] = (out["kv40"] - out["new_kv40"]) / out["new_kv40"] * 100.0
        out["kv100_change_pct"] = (out["kv100"] - out["new_kv100"]) / out["new_kv100"] * 100.0
        out["an_rise"] = out["an"] - out["new_an"]
        out["oxidation_rise"] = out["oxidation"] - out["new_oxidation"]
        per_hour = np.where(hours > 0, 1000.0 / np.where(hours > 0, hours, 1.0), np.nan)
        out["oxidation_rise_per_1000h"] = out["oxidation_rise"] * per_hour
        out["an_rise_per_1000h"] = out["an_rise"] * per_hour
        out["bn_retained_pct"] = out["bn"] / out["new_bn"] * 100.0
        out["rpvot_retained_pct"] = out["rpvot"] / out["new_rpvot"] * 100.0
        out["bn_minus_an"] = out["bn"] - out["an"]
    for name in ROW_MEASURES:
        if name != "vi":
            values = np.round(out[name], _DECIMALS)
            out[name] = np.where(np.isfinite(values), values, np.nan)
    out["vi"] = viscosity_index(out["kv40"], out["kv100"])

    frame = pd.DataFrame(out, index=samples.index, copy=False)
    for name, series in fields.items():
        frame[name] = series.astype(object)
    return frame
