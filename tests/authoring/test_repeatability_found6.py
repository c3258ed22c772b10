"""The repeatability figures that space proposed limits, against the published precision statements.

- Acid number, ASTM D664 used oils, buffer end point: r = 0.117 X (D664's precision section, seen in two
  reproductions: §15.1.1 of an older edition, §16.1.1 of a later one; fresh oils there are 0.044 (X + 1)).
- Kinematic viscosity, formulated oils at 40 and 100 C: r = 0.0026 X, 0.26 % (ISO 3104 §14.2 as reproduced;
  the project's fact sheet ../shared/reference/viscosity.md). Not the 0.0013 X of §14.1, which is the
  determinability (two determinations within one result), nor the base-oil 0.0011 X.
- Water, ASTM D6304 Procedure A: r = 0.08852 X^0.7 mg/kg, from memory (its precision section was not found),
  so the entry must say "from memory".
"""

from __future__ import annotations

import pytest

from sumpwise.authoring.repeatability import REPEATABILITY


@pytest.mark.parametrize("reading, level, r", [
    ("an", 0.50, 0.117 * 0.50),     # D664: a used oil at 0.50 mg KOH/g
    ("an", 2.40, 0.117 * 2.40),
    ("kv40", 46.0, 0.0026 * 46.0),  # ISO 3104: a VG 46 oil, 0.12 mm2/s
    ("kv100", 6.85, 0.0026 * 6.85),
    ("kv40", 320.0, 0.0026 * 320.0),
])
def test_published_repeatability_at_realistic_levels(reading, level, r):
    assert REPEATABILITY[reading].at(level) == pytest.approx(r, rel=1e-12)


def test_each_figure_says_how_sure_it_is():
    assert REPEATABILITY["an"].status.startswith("confirmed")
    assert REPEATABILITY["kv40"].status.startswith("confirmed") and "ISO 3104" in REPEATABILITY["kv40"].status
    assert REPEATABILITY["water"].status == "from memory"
