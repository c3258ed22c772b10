"""Property: the same limits written in ppm and in %, or in abs/cm and in abs/0.1mm, are one rule set.

1 % = 10,000 ppm (by definition) and 1 abs/0.1mm = 100 abs/cm (absorbance per path length, Beer-Lambert;
ASTM E2412 reports per 0.1 mm): a lead who rewrites a file in the other unit must get the same fingerprint,
no change from `compare`, and the same grades on the same samples.
"""

from __future__ import annotations

from decimal import Decimal

from hypothesis import given, settings, strategies as st

from sumpwise import grade
from sumpwise.authoring.compare import ruleset_changes
from sumpwise.ruleset.compiler import load_ruleset

import pandas as pd

TEMPLATE = """\
ruleset: brackwater-units
version: 1
units: {{water: "{water_unit}", oxidation: {ftir_unit}}}
lubricants:
  TURB-46-M: {{base_stock: mineral, kv40: 45.9, an: 0.07, oxidation: {new_ox}}}
classes:
  steam-turbine:
    rules:
      - id: water
        measure: water
        above: {{watch: {w1}, alert: {w2}}}
        message: Water in the oil
        source: common practice, no source
      - id: carbonyl-rise
        measure: oxidation_rise
        above: {{watch: {o1}, alert: {o2}}}
        message: FTIR carbonyl has risen above new oil
        source: site practice
      - id: wet-and-oxidising
        when:
          all:
            - {{measure: water, between: [{w1}, {w2}]}}
            - {{measure: oxidation_rise, above: {o1}}}
        grade: alert
        message: Water with a carbonyl rise
        source: site practice
"""


def _write(path, water_unit, ftir_unit, ppm, abs_cm, new_ox):
    water_scale = Decimal(1) if water_unit == "ppm" else Decimal(10000)
    ftir_scale = Decimal(1) if ftir_unit == "abs/cm" else Decimal(100)
    w1, w2 = (Decimal(v) / water_scale for v in ppm)
    o1, o2 = (Decimal(v) / ftir_scale for v in abs_cm)
    path.write_text(TEMPLATE.format(water_unit=water_unit, ftir_unit=ftir_unit, w1=w1, w2=w2, o1=o1, o2=o2,
                                    new_ox=Decimal(new_ox) / ftir_scale), encoding="utf-8")
    return path


@settings(max_examples=40, deadline=None)
@given(ppm=st.tuples(st.integers(20, 2000), st.integers(1, 5000)).map(lambda p: (p[0], p[0] + p[1])),
       abs_cm=st.tuples(st.integers(1, 300), st.integers(1, 300)).map(lambda p: (f"{p[0] / 10:.1f}",
                                                                                 f"{(p[0] + p[1]) / 10:.1f}")),
       new_ox=st.integers(0, 2000).map(lambda v: f"{v / 10:.1f}"),
       readings=st.lists(st.tuples(st.integers(0, 9000), st.integers(0, 600)), min_size=1, max_size=8))
def test_a_rule_set_rewritten_in_the_other_units_is_the_same_rule_set(tmp_path_factory, ppm, abs_cm, new_ox, readings):
    folder = tmp_path_factory.mktemp("units")
    canonical = load_ruleset(_write(folder / "a.yaml", "ppm", "abs/cm", ppm, abs_cm, new_ox))
    other = load_ruleset(_write(folder / "b.yaml", "%", "abs/0.1mm", ppm, abs_cm, new_ox))
    assert ruleset_changes(canonical, other) == ()
    assert other.sha256 == canonical.sha256
    samples = pd.DataFrame([{"sample_id": f"BP-{i}", "unit_id": f"ST-{i}", "class": "steam-turbine",
                             "lubricant": "TURB-46-M", "sampled_on": "2026-03-02", "water": water,
                             "oxidation": oxidation / 10} for i, (water, oxidation) in enumerate(readings)])
    assert grade(samples, canonical).grades() == grade(samples, other).grades()
