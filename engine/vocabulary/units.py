"""Unit conversion to the engine's canonical units.

Canonical units: FTIR measures in abs/cm, water in ppm. A direct FTIR reading is
usually reported per 0.1 mm path (ASTM D7414 §1.4.1) and a differential one per cm;
1 abs/0.1mm = 100 abs/cm (ASTM D7412 §12.1-12.2). 1 % = 10 000 ppm by definition. Which family a measure belongs to is in the measure table
(sumpwise.vocabulary.measures.UNIT_FAMILY).
"""

from __future__ import annotations

CANONICAL = {"absorbance": "abs/cm", "water": "ppm"}

FACTORS = {
    "absorbance": {"abs/cm": 1.0, "abs/0.1mm": 100.0},
    "water": {"ppm": 1.0, "%": 10_000.0},
}

def factor_to_canonical(family: str, unit: str) -> float:
    """Multiply a value written in `unit` by this to get the canonical unit; KeyError if unknown."""
    return FACTORS[family][unit]


def known_units(family: str) -> list[str]:
    return sorted(FACTORS[family])
