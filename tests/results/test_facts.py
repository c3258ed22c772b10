"""A result's facts (results/facts.py): the column-wise extraction agrees with the per-result
one on every row, and the facts with the rule set's texts give back the very same result.

The reference is the per-record API (GradedBatch.result), which the JSON Lines tests check
against the rule-language draft; random samples of every class cover caps, unchecked
exceptions, gaps, censored readings and unrated rows, the trend rule set covers engine
caveats. A values text is also held to its bytes: it must be what Python's json module
writes for the array it holds (ledgers already written store those bytes and digest them).
"""

from __future__ import annotations

import json
from dataclasses import replace

import numpy as np
import pandas as pd
import pytest

from sumpwise.intake.samples import read_samples
from sumpwise.results.facts import (batch_facts, distinct_rows, record_names, result_facts, result_from_facts,
                                    values_text)
from sumpwise.results.pipeline import grade
from sumpwise.ruleset.compiler import load_ruleset
from tests.conftest import DATA, ROOT


def _sample(frame: pd.DataFrame, i: int) -> dict:
    return {name: (None if pd.isna(value) else value) for name, value in frame.iloc[i].items()}


def _check(graded, frame: pd.DataFrame) -> int:
    """`frame`: the sample fields as the ledger keeps them."""
    facts = batch_facts(graded)
    columns = record_names(graded)
    shapes = set()
    for i, result in enumerate(graded.results()):
        shape, values = result_facts(result, columns)
        assert shape == facts.shapes[facts.shape_of[i]], result.sample_id
        # equal as numbers: the per-record reader may spell a zero -0.0 where the column holds 0.0
        assert json.loads(values) == json.loads(facts.values[i]), result.sample_id
        assert values_text(json.loads(facts.values[i])) == facts.values[i], result.sample_id  # the json module's bytes
        assert (facts.grades[i], facts.levels[i]) == (result.grade, -1 if result.level is None else result.level)
        back = result_from_facts(json.loads(shape), json.loads(values), _sample(frame, i), graded.ruleset,
                                 result.engine, columns, graded.source)
        # what a ledger does not keep, the rebuilt result says it lacks: the row, and forecasts (null)
        assert back == replace(result, row=None, forecasts=None), result.sample_id
        assert back.file == graded.source and back.iso4406 == result.iso4406
        assert "message" not in shape or '"message":{"$"' in shape  # texts stay in the rule set
        shapes.add(shape)
    return len(shapes)


def test_facts_of_random_samples_of_every_class():
    from random_samples import random_samples
    ruleset = load_ruleset(ROOT / "benchmarks" / "all-classes.yaml")
    frame = random_samples(ruleset, 600, seed=11)
    graded = grade(frame, ruleset)
    assert (graded.outcome.level < 0).any() and graded.outcome.capping.any() and graded.outcome.unchecked.any()
    shapes = _check(graded, graded.measured)
    assert 10 < shapes < len(graded)  # shared shapes: far fewer than samples


def test_facts_of_trend_samples_with_engine_caveats():
    ruleset = load_ruleset(DATA / "ledger" / "trend-rules.yaml")
    batch = read_samples(DATA / "ledger" / "samples.csv", None, None, None, ruleset.measures)
    graded = grade(batch, ruleset)
    assert any(c.caveat in ("trend-break", "oil-changed") for r in graded.results() for c in r.caveats)
    _check(graded, batch.frame)


def test_an_empty_batch_has_no_facts():
    ruleset = load_ruleset(DATA / "ledger" / "trend-rules.yaml")
    batch = read_samples(DATA / "ledger" / "samples.csv", None, None, None, ruleset.measures)
    graded = grade(batch.frame.iloc[:0], ruleset)
    facts = batch_facts(graded)
    assert facts.shapes == () and len(facts.values) == 0


@pytest.mark.parametrize("names", [{}, {"values": ["kv40", "no-such-column", "water"], "oil_changed": True},
                                   {"derived": ["no-such-measure"]}])
def test_facts_of_any_recorded_names(names):
    """Replay passes the names a stored batch recorded: none (the values end with the shape's),
    or columns the batch does not hold (null in every row)."""
    from random_samples import random_samples
    ruleset = load_ruleset(ROOT / "benchmarks" / "all-classes.yaml")
    graded = grade(random_samples(ruleset, 1000, seed=11), ruleset)  # 1,000: one row of them records nothing
    facts = batch_facts(graded, names)
    for i, result in enumerate(graded.results()):
        shape, values = result_facts(result, names)
        assert shape == facts.shapes[facts.shape_of[i]]
        assert json.loads(values) == json.loads(facts.values[i]), result.sample_id
        assert values_text(json.loads(facts.values[i])) == facts.values[i], result.sample_id
    if not names:
        assert "[]" in set(facts.values)  # a normal row with nothing to record


@pytest.mark.parametrize("rows, width, seed", [(1, 5, 0), (2_000, 9, 1), (2_000, 40, 2), (5_000, 12, 3)])
def test_distinct_rows_are_what_numpy_unique_gives(rows, width, seed):
    """distinct_rows (hashed keys) against np.unique of the rows' bytes, the general route whose
    order of groups fixes the order, and so the stored ids, of a batch's shapes. Wide matrices of
    cells from -1 to 120 overflow one int64 key, so the key is factorized again on the way."""
    rng = np.random.default_rng(seed)
    pool = rng.integers(-1, 121, size=(max(1, rows // 20), width)).astype(np.int8)
    matrix = pool[rng.integers(0, len(pool), rows)]
    matrix[:, 0] = rng.integers(-1, 2, rows)  # some columns with few values, as levels and flags have
    first, group = distinct_rows(matrix)
    keys = matrix.view(np.dtype((np.void, width))).ravel()
    _, expected_first, expected_group = np.unique(keys, return_index=True, return_inverse=True)
    assert first.tolist() == expected_first.tolist()
    assert group.tolist() == expected_group.ravel().tolist()


def test_a_censored_and_a_missing_input_do_not_share_a_shape():
    """Seed 5: row 42's water is written `<2438.24` (its gaps hold it as undecided), row 212's is
    missing (no undecided value). Both leave the number empty; keyed on that alone they fell in
    one group and row 212's stored shape said its water was undecided, null: explain and history
    rebuilt from a ledger showed a gap grade never reported."""
    from random_samples import random_samples
    ruleset = load_ruleset(ROOT / "benchmarks" / "all-classes.yaml")
    graded = grade(random_samples(ruleset, 300, seed=5), ruleset)
    facts, names = batch_facts(graded), record_names(graded)
    assert graded.result(42).not_evaluated != graded.result(212).not_evaluated  # the case is there
    for k in range(len(graded)):  # every row's stored shape is the one its own result gives
        assert result_facts(graded.result(k), names)[0] == facts.shapes[facts.shape_of[k]], k
