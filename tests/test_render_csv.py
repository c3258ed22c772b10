"""CSV output: one row a sample, fired rules folded into text, the same grades as JSON Lines."""

import csv
import io

from conftest import DATA

from engine import grade, load_ruleset, read_samples
from engine.render_csv import COLUMNS, write_csv


def test_csv_rows_agree_with_the_records():
    rs = load_ruleset(DATA / "rulesets" / "draft.yaml")
    graded = grade(read_samples(DATA / "samples" / "draft-record.csv"), rs)
    out = io.StringIO()
    write_csv(graded, out)
    rows = list(csv.DictReader(io.StringIO(out.getvalue())))
    assert list(rows[0]) == list(COLUMNS)
    row = rows[0]
    assert row["grade"] == "watch" and row["level"] == "1"
    assert row["fired"] == "acid-rise=watch;carbonyl-rise=watch<alert;young-oil-oxidising=watch<alert"
    assert row["caveats"] == "ester-carbonyl"
    assert row["not_evaluated"] == "visc-drift(kv40)"
    assert row["ruleset_sha256"] == rs.sha256
