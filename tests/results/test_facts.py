"""A result's facts (results/facts.py): the column-wise extraction agrees with the per-result
one on every row, and the facts with the rule set's texts give back the very same result.

The reference is the per-record API (GradedBatch.result), which the JSON Lines tests check
against the rule-language draft; random samples of every class cover caps, unchecked
exceptions, gaps and unrated rows, the trend rule set covers engine caveats.
"""

from __future__ import annotations

import json
from dataclasses import replace

import pandas as pd

from sumpwise.intake.samples import read_samples
from sumpwise.results.facts import batch_facts, record_names, result_facts, result_from_facts
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
