"""The measures rules can read: lab values as read, and the values derived from them.

This is the table every stage reads (what a measure is, its unit, what it needs);
sumpwise.derive computes the derived ones column-wise.
"""

from __future__ import annotations

from dataclasses import dataclass


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
DECIMALS = 9


def measure_needs(measure: str) -> tuple[str, ...]:
    """The columns a measure is computed from (itself, for an input measure)."""
    derived = DERIVED_MEASURES.get(measure)
    return derived.needs if derived else (measure,)


def unit_key(measure: str) -> str | None:
    """The `units:` key whose unit a limit on this measure is written in, if any."""
    derived = DERIVED_MEASURES.get(measure)
    return derived.scale_of if derived else measure
