"""Limit tests on a rate whose step is within the noise margin, for every way a limit is tested.

The design: a rate whose number does not cross the limit is decided by the number; one whose
number crosses fires only where the whole interval of rates the two readings allow, (step -
margin, step + margin) / hours x 1000, crosses; else it is not evaluated. Margins are the
published repeatability: ASTM D664 15.1.1 (used oils) r = 0.117 X, ISO 3104 14.2 (formulated
oils) r = 0.0026 x, X and x the mean of the two results. Limits are invented for the test.
"""

from __future__ import annotations

import pandas as pd

import sumpwise
from sumpwise.ruleset.compiler import load_ruleset

RULES = """ruleset: noise-rates
version: 1
lubricants:
  HYD-46-M: {base_stock: mineral, iso_vg: 46, kv40: 46.0, an: 0.20}
classes:
  hydraulic:
    rules:
      - id: acid-falling
        measure: an_step_per_1000h
        below: {watch: -0.05}
        message: Acid number falls fast (a top-up or a fresh charge unrecorded)
        source: test limit, invented
      - id: viscosity-moving
        measure: kv40_step_per_1000h
        outside: {watch: 1}
        message: Viscosity moves fast between samples
        source: test limit, invented
"""


def _pair(an, kv40, hours):
    """Two samples of one unit: the first at 2000 oil hours, the second `hours` later."""
    return pd.DataFrame({"sample_id": ["A", "B"], "unit_id": "HPU-1", "class": "hydraulic", "lubricant": "HYD-46-M",
                         "sampled_on": ["2026-03-02", "2026-03-30"], "oil_hours": [2000.0, 2000.0 + hours],
                         "an": an, "kv40": kv40})


def _outcome(tmp_path, frame):
    path = tmp_path / "rules.yaml"
    path.write_text(RULES)
    graded = sumpwise.grade(frame, load_ruleset(path))
    second = graded.find("B")
    return ({r.rule for r in second.reasons}, {n.rule for n in second.not_evaluated})


def test_a_fall_within_the_d664_repeatability_over_a_short_span_is_not_evaluated(tmp_path):
    # 0.22 -> 0.20 over 100 h: -0.2 per 1000 h is below -0.05, but the step, 0.02, is within
    # r = 0.117 x 0.21 = 0.0246: the rate may be -0.446 to 0.046. Not fired, not evaluated.
    fired, gaps = _outcome(tmp_path, _pair([0.22, 0.20], [46.0, 46.0], 100))
    assert "acid-falling" not in fired and "acid-falling" in gaps


def test_a_fall_beyond_the_repeatability_fires(tmp_path):
    # 0.30 -> 0.20 over 100 h: the step 0.1 is beyond r = 0.117 x 0.25 = 0.029: -1 per 1000 h fires.
    fired, gaps = _outcome(tmp_path, _pair([0.30, 0.20], [46.0, 46.0], 100))
    assert "acid-falling" in fired and "acid-falling" not in gaps


def test_a_rate_within_the_margin_that_does_not_cross_is_decided(tmp_path):
    # 0.21 -> 0.20 over 500 h: -0.02 per 1000 h is not below -0.05: decided (no gap), although
    # its interval [-0.068, 0.028] reaches below the limit. kv40 46.0 -> 46.1 over 500 h: 0.2
    # per 1000 h inside +-1, step 0.1 within r = 0.0026 x 46.05 = 0.12: decided too.
    fired, gaps = _outcome(tmp_path, _pair([0.21, 0.20], [46.0, 46.1], 500))
    assert fired == set() and gaps == set()


def test_an_outside_test_on_a_rate_within_the_iso_3104_repeatability(tmp_path):
    # kv40 46.0 -> 46.1 over 20 h: 5 per 1000 h is outside +-1, but the step 0.1 is within
    # r = 0.12: the interval [-1, 11] straddles the limit 1. Not fired, not evaluated.
    fired, gaps = _outcome(tmp_path, _pair([0.20, 0.20], [46.0, 46.1], 20))
    assert "viscosity-moving" not in fired and "viscosity-moving" in gaps
    # kv40 46.0 -> 45.5 over 20 h: step -0.5 beyond r = 0.12, -25 per 1000 h fires
    fired, gaps = _outcome(tmp_path, _pair([0.20, 0.20], [46.0, 45.5], 20))
    assert "viscosity-moving" in fired
