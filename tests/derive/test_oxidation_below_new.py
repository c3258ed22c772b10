"""A direct FTIR carbonyl reading under half its new oil's is flagged, not passed as health.

Oxidation adds carbonyl (ASTM E2412: the used oil's carbonyl against the new oil's), and a
top-up only brings a reading back toward new, so a reading far under the new oil's is a
unit slip or another oil's new-oil value. The slip found in a lab export: an `Oxidation`
column reported in abs/0.1 mm (100 abs/cm = 1 abs/0.1 mm, the rule-language draft's units)
read as abs/cm, 100 times low, graded normal on a rise below zero. The half is common
practice, no source. New-oil readings are the shipped files' (rules/hydraulic.yaml HYD-46-M
1.8 abs/cm; rules/screw-compressor.yaml COMP-46-PE, a polyol ester, 172 abs/cm).
"""

from __future__ import annotations

import json

import pytest

from tests.conftest import ROOT, run_cli


@pytest.mark.parametrize("rules, lubricant, reading, flagged", [
    ("hydraulic.yaml", "HYD-46-M", 0.18, True),     # 18 abs/cm written in abs/0.1 mm: alert read as normal
    ("hydraulic.yaml", "HYD-46-M", 18.0, False),    # the same reading in abs/cm: graded on its rise
    ("hydraulic.yaml", "HYD-46-M", 1.2, False),     # a little under new: test scatter, not a slip
    ("screw-compressor.yaml", "COMP-46-PE", 1.95, True),  # 195 abs/cm of a polyol ester, in abs/0.1 mm
    ("screw-compressor.yaml", "COMP-46-PE", 168.0, False),  # an ester a little under its new reading
])
def test_a_reading_far_under_its_new_oil_carries_a_warning_caveat(tmp_path, rules, lubricant, reading, flagged):
    cls = rules.removesuffix(".yaml")
    path = tmp_path / "samples.csv"
    path.write_text("sample_id,unit_id,class,lubricant,sampled_on,kv40,an,oxidation\n"
                    f"S-1,U-1,{cls},{lubricant},2026-02-02,46.2,0.30,{reading}\n")
    run = run_cli("grade", path, "--rules", ROOT / "rules" / rules, "--record", "full")
    assert run.code == 0, run.err
    [record] = [json.loads(line) for line in run.out.splitlines()]
    caveats = {c["caveat"]: c for c in record["caveats"]}
    assert ("oxidation-below-new" in caveats) == flagged
    assert ("with caveat oxidation-below-new" in run.err) == flagged  # counted as a warning
    if flagged:
        assert f"{reading:g} abs/cm is under half" in caveats["oxidation-below-new"]["message"]
        assert "abs/0.1 mm" in caveats["oxidation-below-new"]["message"]
