"""compare names every sample whose grade changes between two rule sets, and no other, checked against the
project's per-row oracle (tests/support/row_evaluator.py: each sample graded the long way, written
independently of the engine's evaluator) on random samples with censored readings (5 %) and missing ones
(15 %). The two rule sets (tests/data/authoring_found6/compare-*.yaml) differ in ladder limits, an
asymmetric `outside` pair, a condition's limit and a caveat's `unless`: a realistic review of site limits.
"""

from __future__ import annotations

from pathlib import Path

import pytest
from random_samples import random_samples
from row_evaluator import grade_row

from sumpwise.authoring.compare import compare_rulesets
from sumpwise.intake.samples import read_samples
from sumpwise.ruleset.compiler import load_ruleset

DATA = Path(__file__).resolve().parents[1] / "data" / "authoring_found6"


def _name(level, grades):
    return "unrated" if level is None else grades[level]


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_compare_moves_are_exactly_the_oracles_grade_changes(seed, tmp_path):
    old, new = load_ruleset(DATA / "compare-old.yaml"), load_ruleset(DATA / "compare-new.yaml")
    frame = random_samples(old, 600, seed=seed)
    frame.to_csv(tmp_path / "samples.csv", index=False)
    batch = read_samples(tmp_path / "samples.csv")
    assert not batch.rejects  # every row graded: the oracle and compare see the same samples
    comparison = compare_rulesets(old, new, batch)
    expected = {}
    for row in frame.astype(object).where(frame.notna(), None).to_dict("records"):
        (was, fired_old), (now, fired_new) = grade_row(old, row), grade_row(new, row)
        if was != now:
            rules = {rule for rule in {*fired_old, *fired_new} if fired_old.get(rule) != fired_new.get(rule)}
            expected[row["sample_id"]] = (_name(was, old.grades), _name(now, new.grades), rules)
    got = {m.sample_id: (m.before, m.after, m.changes) for m in comparison.moves}
    assert set(got) == set(expected)
    assert len(expected) >= 10  # the review moves samples: the check has something to check
    for sample_id, (before, after, changes) in got.items():
        assert (before, after) == expected[sample_id][:2], sample_id
        # Each rule the oracle saw fire differently is named among the changes (compare also names a
        # rule that went from quiet to not evaluated, which the oracle does not report).
        assert expected[sample_id][2] <= {change.rule for change in changes}, sample_id
    assert comparison.graded == len(frame) and sum(comparison.table.values()) == len(frame)
