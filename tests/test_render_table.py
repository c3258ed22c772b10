"""The terminal table: aligned, at most 100 columns, counts and cautions at the foot."""

from conftest import ROOT

from engine import grade, load_ruleset, read_samples
from engine.render_table import table_lines

SITE = ROOT / "scenarios" / "brackwater" / "site.yaml"
SAMPLES = ROOT / "scenarios" / "brackwater" / "samples.csv"


def test_table_fits_100_columns_and_lists_every_sample():
    graded = grade(read_samples(SAMPLES), load_ruleset(SITE))
    lines = table_lines(graded)
    assert max(len(line) for line in lines) <= 100
    body = "\n".join(lines)
    for result in graded.results():
        assert result.sample_id in body
    assert "Screening aid only" in body
    assert "rejected 4" in body
