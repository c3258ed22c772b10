"""An example in a rule set written in % or abs/0.1mm: its failure says the sample is read in ppm and abs/cm.

A site lead who writes `units: {water: '%'}` and limits of 0.02 % writes the example's sample in %
too (`water: 0.03`); the engine reads example samples as it reads a samples file, in ppm, so the
example failed with intake's advice to fix a column map the lead never wrote. Up to engine 0.8.0
nothing said why. 1 % = 10,000 ppm by definition; 200 ppm caution: limits.md, common practice,
no source.
"""

from __future__ import annotations

from sumpwise.authoring.examples import check_examples
from sumpwise.ruleset.compiler import load_ruleset

RULES = """\
ruleset: brackwater-percent
version: 1
units: {water: "%"}
classes:
  steam-turbine:
    rules:
      - id: water
        measure: water
        above: {watch: 0.02, alert: 0.05}
        message: Water in the oil
        source: common practice, no source
examples:
  - name: wet turbine
    sample: {class: steam-turbine, water: WET}
    expect: {grade: watch, fires: [water]}
"""


def _failures(tmp_path, wet: str):
    path = tmp_path / "site.yaml"
    path.write_text(RULES.replace("WET", wet), encoding="utf-8")
    return check_examples(load_ruleset(path))


def test_a_sample_written_in_the_files_percent_fails_and_says_the_unit_it_is_read_in(tmp_path):
    (failure,) = _failures(tmp_path, "0.03")
    assert failure.code == "E001" and failure.line == 13
    assert failure.differences[-1] == ("note: the sample's values are read in the engine's units (water in ppm), not "
                                       "in this file's `units:` (water in %), as a samples file's are")


def test_the_same_sample_in_ppm_holds(tmp_path):
    assert _failures(tmp_path, "300") == ()  # 300 ppm = 0.03 %: above 0.02 %, below 0.05 %


LUBRICANTS = """\
ruleset: brackwater-codes
version: 1
lubricants:
  TURB-46-M: {base_stock: mineral, kv40: 45.9, an: 0.07}
classes:
  steam-turbine:
    rules:
      - id: acid-rise
        measure: an_rise
        above: {watch: 0.1, alert: 0.2}
        message: Acid number has risen above new oil
        source: site practice
examples:
  - name: a code the table lacks leaves the acid rise unknown, and says so
    sample: {class: steam-turbine, lubricant: TURB-46-X, an: 0.40}
    expect: {quiet: [], caveats: [CAVEAT]}
"""


def test_an_example_may_expect_a_caveat_the_engine_raises_itself(tmp_path):
    """Up to engine 0.8.0 `caveats: [unknown-lubricant]` was refused (C012, "no such caveat"),
    though the engine raises it on every sample whose code the lubricants table lacks."""
    path = tmp_path / "site.yaml"
    path.write_text(LUBRICANTS.replace("CAVEAT", "unknown-lubricant"), encoding="utf-8")
    assert check_examples(load_ruleset(path)) == ()


def test_a_misspelt_engine_caveat_is_still_a_failure_with_the_nearest(tmp_path):
    path = tmp_path / "site.yaml"
    path.write_text(LUBRICANTS.replace("CAVEAT", "unknown-lubricants"), encoding="utf-8")
    (failure,) = check_examples(load_ruleset(path))
    assert "did you mean 'unknown-lubricant'?" in failure.differences[0]
