"""Random samples of every class and lubricant of a rule set (and some that no rule set knows),
with 15 % of each reading missing and 5 % censored: input for the oracle and writer agreement tests.
Each unit keeps one lubricant and one class."""

from __future__ import annotations

import numpy as np
import pandas as pd


def random_samples(ruleset, n: int, seed: int, censored: float = 0.05) -> pd.DataFrame:
    """`censored` of the readings are written as a lab's bound (`<x`, `>x`, `<=x`), as text."""
    rng = np.random.default_rng(seed)
    classes = list(ruleset.classes) + ["unknown-class"]
    lubricants = list(ruleset.lubricants) + ["NO-SUCH-OIL"]
    frame = pd.DataFrame({
        "sample_id": [f"R{i}" for i in range(n)],
        "unit_id": rng.choice(["U1", "U2", "U3"], n),
        "class": rng.choice(classes, n),
        "lubricant": rng.choice(lubricants, n),
        "method": rng.choice(["direct", "subtraction", ""], n),
    })
    # each unit keeps one lubricant and one class (a change of code is an oil change, and a change of
    # class another machine: either would break every trend)
    frame["unit_id"] = frame["unit_id"] + "-" + frame["lubricant"] + "-" + frame["class"]
    spreads = {"kv40": (20, 400), "kv100": (1.5, 40), "an": (0, 3), "bn": (0, 15), "oxidation": (0, 300),
               "nitration": (0, 40), "water": (1, 3000), "oil_hours": (0, 40000), "rpvot": (10, 1500),
               "soot": (0, 5), "sulfation": (0, 40)}
    numbers = {}
    for name, (lo, hi) in spreads.items():
        values = rng.uniform(lo, hi, n).round(3)
        if name == "kv100":  # below kv40, as in every oil (ASTM D341; intake refuses the rest, D021)
            values = np.fmin(values, (numbers["kv40"] * rng.uniform(0.04, 0.3, n)).round(3))
        numbers[name] = values.copy()
        values[rng.random(n) < 0.15] = np.nan
        frame[name] = values
        cut = (rng.random(n) < censored) & ~np.isnan(values)
        if cut.any():
            signs = rng.choice(["<", ">", "<="], n)
            column = frame[name].astype(object)
            column[cut] = [f"{sign}{value:g}" for sign, value in zip(signs[cut], values[cut])]
            frame[name] = column
    return frame
