"""sumpwise: grade in-service lubricating oil samples against a site's YAML limits.

The public API: load a rule set, read samples, grade them, read results and rejects back
as frozen records. The command line (engine.cli) is a thin layer over these calls.
"""

__version__ = "0.1.0"

from .compile import load_ruleset  # noqa: E402
from .grade import grade, grade_batch  # noqa: E402
from .problems import InputError, InvalidFile, Problem  # noqa: E402
from .results import GradedBatch, Reason, SampleResult  # noqa: E402
from .samples import ColumnMap, Reject, SampleBatch, load_column_map, read_samples  # noqa: E402
from .spectra_grading import measure_sample_spectra  # noqa: E402
from .lint import lint_ruleset  # noqa: E402
from .examples import check_examples  # noqa: E402
from .compare import compare_rulesets  # noqa: E402
from .ledger import grade_into_ledger  # noqa: E402

__all__ = ["__version__", "load_ruleset", "grade", "grade_batch", "read_samples", "load_column_map",
           "InvalidFile", "InputError", "Problem", "GradedBatch", "SampleResult", "Reason", "Reject",
           "SampleBatch", "ColumnMap", "measure_sample_spectra", "lint_ruleset", "check_examples",
           "compare_rulesets", "grade_into_ledger"]
