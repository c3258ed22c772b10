"""Text columns with a closed vocabulary (FTIR `method`, `base_stock`): canonical spelling per row, or why not;
and how an open one, the lubricant code, is compared."""

from __future__ import annotations

import numpy as np
import pandas as pd

from sumpwise.vocabulary.base_stocks import canonical_base_stock
from sumpwise.vocabulary.measures import canonical_method

# column -> function from a cell's text to its canonical spelling (ValueError: refused, with the reason)
TEXT_VOCABULARIES = {"method": canonical_method, "base_stock": canonical_base_stock}


def lubricant_key(code) -> str:
    """A lubricant code as compared with the rule set's: case and surrounding spaces ignored, as field
    tests compare text (a lab's `hyd-46-m` is the table's HYD-46-M, not an unknown oil graded
    without its new-oil values, its ester cap or its reference spectrum)."""
    return str(code).strip().casefold()


def canonical_texts(column: pd.Series, canonical) -> tuple[pd.Series, np.ndarray]:
    """(canonical values, reason per row: "" where accepted). Missing cells stay missing; each distinct value is read once."""
    values = column.to_numpy(dtype=object)
    codes, uniques = pd.factorize(values, use_na_sentinel=True)
    spelled, reasons = [], []
    for text in uniques:
        try:
            spelled.append(canonical(text))
            reasons.append("")
        except ValueError as exc:
            spelled.append(text)
            reasons.append(str(exc))
    spelled = np.array(spelled + [None], dtype=object)[codes]
    reasons = np.array(reasons + [""], dtype=object)[codes]
    return pd.Series(spelled, index=column.index, dtype=object), reasons
