"""An example's sample key the engine does not read is a failure at the example's line, not a silent pass.

A rule set's examples are a specification by example (README, authoring): `wter: 5000` for `water: 5000`
would leave "a wet oil is urgent" holding as `normal` while it tests nothing about water.
"""

from __future__ import annotations

from pathlib import Path

from sumpwise.authoring.examples import check_examples
from sumpwise.ruleset.compiler import load_ruleset

FIXTURE = Path(__file__).resolve().parents[1] / "data" / "authoring_found6" / "examples-typo.yaml"


def test_a_misspelt_sample_key_fails_with_a_did_you_mean():
    [failure] = check_examples(load_ruleset(FIXTURE))  # the correctly spelt example holds
    assert (failure.code, Path(failure.file).name, failure.line) == ("E001", "examples-typo.yaml", 20)
    [difference] = failure.differences
    assert "'wter'" in difference and "did you mean 'water'?" in difference
