"""The grading pipeline as one call: samples in, a graded batch out. The public API's core."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd

from sumpwise.evaluation.evaluator import evaluate
from sumpwise.derive.row_measures import derive_measures
from sumpwise.vocabulary.measures import INPUT_MEASURES
from sumpwise.results.records import GradedBatch
from sumpwise.ruleset.model import RuleSet
from sumpwise.intake.samples import ColumnMap, SampleBatch, validate_samples
from sumpwise.intake.sample_spectra import SPECTRUM_CAVEATS, SPECTRUM_COLUMNS, convention_notes, spectrum_caveat_flags
from sumpwise.derive.cleanliness import read_cleanliness_codes
from sumpwise.derive.forecast import forecast
from sumpwise.derive.trends import (TREND_CAVEATS, add_trend_measures, noise_margins, read_oil_changes, trend_bases,
                                    trend_caveat_flags)


def grade_batch(batch: SampleBatch, ruleset: RuleSet, history: pd.DataFrame | None = None) -> GradedBatch:
    """Derive measures for the accepted rows and evaluate the rule set over them.

    Trend measures compare each sample with its unit's previous one: within the batch, after the
    earlier samples in `history` (trends.CHAIN_COLUMNS and the measures; a ledger supplies it).
    """
    batch = read_cleanliness_codes(read_oil_changes(batch))
    measured = derive_measures(batch.frame, ruleset.lubricants, ruleset.measures, ruleset.fields)
    bases = trend_bases(ruleset)
    measured = add_trend_measures(measured, batch.frame.get("oil_changed"), history, bases,
                                  noise_margins(ruleset, bases))
    for column in SPECTRUM_COLUMNS:
        measured[column] = batch.frame[column] if column in batch.frame.columns else None
    measured["ftir_convention_note"] = convention_notes(measured, ruleset)
    outcome = evaluate(ruleset, measured)
    outcome = replace(outcome, caveats=np.hstack([outcome.caveats, trend_caveat_flags(measured),
                                                  spectrum_caveat_flags(measured)]))
    carried = tuple(name for name in list(INPUT_MEASURES) + list(ruleset.measures) if name in batch.frame.columns)
    if "oxidation" in carried and "method" in batch.frame.columns and "oxidation_differential" not in carried:
        # a differential reading is recorded under its own name (issue 11); decided by the columns, not the
        # values, so a record's shape does not depend on the other rows of its batch (replay re-grades subsets)
        carried += ("oxidation_differential",)
    return GradedBatch(ruleset, measured, outcome, batch.rejects, batch.rows_read, batch.source, carried,
                       TREND_CAVEATS + SPECTRUM_CAVEATS, forecast(measured, ruleset))


def grade(samples, ruleset: RuleSet, columns: ColumnMap | None = None) -> GradedBatch:
    """Grade a DataFrame (or an already-read SampleBatch); bad rows come back as rejects."""
    if isinstance(samples, (str, bytes)) or hasattr(samples, "__fspath__"):
        raise TypeError("grade() takes a DataFrame or a SampleBatch; read files with read_samples()")
    if isinstance(samples, pd.DataFrame):
        samples = validate_samples(samples, [], "<DataFrame>", columns or ColumnMap(), ruleset.measures)
    return grade_batch(samples, ruleset)
