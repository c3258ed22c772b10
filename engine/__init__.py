"""sumpwise: grade in-service lubricating oil samples against a site's YAML limits.

The public API: load a rule set, read samples, grade them, read results and rejects back
as frozen records. The command line (sumpwise.cli) is a thin layer over these calls.
The package's folders are its stages, in the order data flows through them:
vocabulary, ruleset, intake, derive, evaluation, results, render, ledger, authoring, cli.
"""

from sumpwise.version import __version__
from sumpwise.ruleset.compiler import load_ruleset
from sumpwise.results.pipeline import grade, grade_batch
from sumpwise.vocabulary.problems import InputError, InvalidFile, Problem
from sumpwise.results.records import GradedBatch, Reason, SampleResult
from sumpwise.intake.samples import ColumnMap, Reject, SampleBatch, load_column_map, read_samples
from sumpwise.intake.sample_spectra import measure_sample_spectra
from sumpwise.authoring.lint import lint_ruleset
from sumpwise.authoring.examples import check_examples
from sumpwise.authoring.compare import compare_rulesets
from sumpwise.ledger.store import grade_into_ledger

__all__ = ["__version__", "load_ruleset", "grade", "grade_batch", "read_samples", "load_column_map",
           "InvalidFile", "InputError", "Problem", "GradedBatch", "SampleResult", "Reason", "Reject",
           "SampleBatch", "ColumnMap", "measure_sample_spectra", "lint_ruleset", "check_examples",
           "compare_rulesets", "grade_into_ledger"]
