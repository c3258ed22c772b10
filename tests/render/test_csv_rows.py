"""CSV output: one row a sample, fired rules folded into text, the same grades as JSON Lines."""

import csv
import io

from conftest import DATA

from sumpwise import grade, load_ruleset, read_samples
from sumpwise.render.csv_rows import COLUMNS, write_csv


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


def test_csv_agrees_with_every_record_on_random_samples():
    from conftest import ROOT
    from random_samples import random_samples

    from sumpwise.render.csv_rows import csv_frame
    ruleset = load_ruleset(ROOT / "benchmarks" / "all-classes.yaml")
    graded = grade(random_samples(ruleset, 1500, seed=9), ruleset)
    frame = csv_frame(graded)
    for row, result in zip(frame.itertuples(index=False), graded.results()):
        assert row.grade == result.grade
        assert row.fired == ";".join(f"{r.rule}={r.grade}" + (f"<{r.capped_from}" if r.capped_from else "")
                                     for r in result.reasons)
        assert row.caveats == ";".join(c.caveat for c in result.caveats)
        assert row.not_evaluated == ";".join(f"{n.rule}({','.join(n.missing)})" for n in result.not_evaluated)
        assert row.unrated_because == (result.unrated_because or "")
