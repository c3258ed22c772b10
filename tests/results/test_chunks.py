"""Grading a file in chunks gives the bytes of grading it whole, trends and rejects included.

The reference is the same command reading the whole file as one chunk; the chunked runs cut
the file every 2 or 3 rows, so trends, oil changes, method changes and duplicate ids all
cross chunk boundaries. Forecasts are the one difference, and it is a stated one: they need
a unit's whole oil charge, so a file of several chunks has records saying `forecasts: null`
(not made), never a forecast fitted on part of a charge.
"""

from __future__ import annotations

import json

import pytest
from conftest import DATA, ROOT, run_cli

TRENDS = (DATA / "ledger" / "samples.csv", DATA / "ledger" / "trend-rules.yaml")
BAD_ROWS = (DATA / "samples" / "bad-rows.csv", DATA / "rulesets" / "draft.yaml")
SITE = (ROOT / "scenarios" / "brackwater" / "samples.csv", ROOT / "scenarios" / "brackwater" / "site.yaml")


def _grade(tmp_path, samples, rules, rows, *options):
    out, rejects = tmp_path / f"out-{rows}", tmp_path / f"rejects-{rows}.csv"
    run = run_cli("grade", samples, "--rules", rules, "--chunk-rows", rows, "--out", out, "--rejects", rejects,
                  *options)
    return run.code, out.read_text(), rejects.read_text(), run.err


def _without_forecasts(run: tuple) -> tuple:
    """The run's JSON Lines records with `forecasts` set to null, as a file of several chunks has them."""
    code, out, rejects, err = run
    lines = [json.dumps(dict(json.loads(line), forecasts=None)) for line in out.splitlines()]
    return code, "\n".join(lines), rejects, "".join(line for line in err.splitlines(True)
                                                   if "note: forecasts not made" not in line)


@pytest.mark.parametrize("samples, rules", [TRENDS, BAD_ROWS])
@pytest.mark.parametrize("options", [(), ("--record", "compact"), ("--format", "csv")])
@pytest.mark.parametrize("rows", [2, 3])
def test_chunks_give_the_bytes_of_the_whole_file(tmp_path, samples, rules, options, rows):
    whole = _grade(tmp_path, samples, rules, 1_000_000, *options)
    chunked = _grade(tmp_path, samples, rules, rows, *options)
    assert whole[0] == 0 and whole[1]
    if "csv" in options:  # the CSV has no forecasts: the very bytes
        assert chunked == whole
        return
    assert all(json.loads(line)["forecasts"] is None for line in chunked[1].splitlines())
    assert chunked[3].count("note: forecasts not made") == 1 and "forecasts not made" not in whole[3]
    assert all(json.loads(line)["forecasts"] is not None for line in whole[1].splitlines())
    assert _without_forecasts(chunked) == _without_forecasts(whole)
    # and with the forecasts left as written, the rest of each line is the very bytes
    assert [line.split('"forecasts": ')[0] for line in chunked[1].splitlines()] == \
        [line.split('"forecasts": ')[0] for line in whole[1].splitlines()]


def test_the_site_scenario_in_chunks_keeps_its_trend_grades(tmp_path):
    samples, rules = SITE
    whole = _grade(tmp_path, samples, rules, 1_000_000)
    chunked = _grade(tmp_path, samples, rules, 40)
    assert _without_forecasts(chunked) == _without_forecasts(whole)
    caveats = [c["caveat"] for line in whole[1].splitlines() for c in json.loads(line)["caveats"]]
    assert "oil-changed" in caveats  # an engine trend caveat, found across chunk boundaries too
    # the whole file forecasts (the demo's units with a rising trend); in chunks none is made
    assert sum(len(json.loads(line)["forecasts"]) for line in whole[1].splitlines()) >= 5
    assert {json.loads(line)["forecasts"] is None for line in chunked[1].splitlines()} == {True}


def test_an_id_repeated_in_a_later_chunk_is_rejected_naming_its_first_row(tmp_path):
    text = ("sample_id,unit_id,class,lubricant,an\nA,U1,steam-turbine,TURB-46-M,0.2\nB,U2,steam-turbine,TURB-46-M,0.2\n"
            "C,U3,steam-turbine,TURB-46-M,0.2\nA,U4,steam-turbine,TURB-46-M,0.3\n")
    (tmp_path / "s.csv").write_text(text)
    code, out, rejects, err = _grade(tmp_path, tmp_path / "s.csv", BAD_ROWS[1], 2)
    assert code == 0 and len(out.splitlines()) == 3
    assert rejects.splitlines()[1].endswith(",4,A,sample_id,D003,sample id 'A' already seen at row 1")
    assert "read 4 row(s): 3 graded, 0 unrated, 1 rejected" in err


def test_a_sample_dated_before_its_units_sample_in_an_earlier_chunk_is_refused(tmp_path):
    lines = (TRENDS[0]).read_text().splitlines()
    (tmp_path / "s.csv").write_text("\n".join([lines[0], lines[3], lines[1], lines[2]]) + "\n")
    run = run_cli("grade", tmp_path / "s.csv", "--rules", TRENDS[1], "--chunk-rows", 1)
    assert run.code == 2
    assert "row 2: sample T-01 of unit ST-1 sorts before that unit's sample T-03 in an earlier chunk" in run.err
    assert "Traceback" not in run.err
    assert run_cli("grade", tmp_path / "s.csv", "--rules", TRENDS[1]).code == 0  # one chunk: graded as given


def test_a_quoted_field_across_lines_stays_in_one_chunk(tmp_path):
    text = ('sample_id,unit_id,class,lubricant,an\nA,"U\n1",steam-turbine,TURB-46-M,0.2\n'
            'B,U2,steam-turbine,TURB-46-M,0.2\n')
    (tmp_path / "s.csv").write_text(text)
    code, out, _, err = _grade(tmp_path, tmp_path / "s.csv", BAD_ROWS[1], 1)
    assert code == 0 and [json.loads(line)["unit_id"] for line in out.splitlines()] == ["U\n1", "U2"]
    assert "read 2 row(s): 2 graded" in err


@pytest.mark.parametrize("lines, rows, told", [
    (["S1", "S2", "S3", "S4", "S5"], 2, [True, True, False]),
    (["S1", "S2"], 2, [False]),  # exactly one chunk: nothing follows
    (["S1", "S2", "", ""], 2, [False]),  # blank lines stay with the chunk before: still one
    (["S1", "S2", "S3"], 2, [True, False]),
])
def test_a_chunk_says_whether_the_file_goes_on(lines, rows, told):
    import io
    from sumpwise.intake.chunked import sample_chunks
    text = "sample_id,unit_id,class,lubricant\n" + "".join(
        (f"{sid},U1,hydraulic,HYD-46-M" if sid else "") + "\n" for sid in lines)
    assert [c.more for c in sample_chunks(io.StringIO(text), "t.csv", rows=rows)] == told


def test_forecasts_follow_the_file_s_one_chunk_whether_or_not_a_chunk_says_so():
    # batches that do not say (more=None, as read_samples gives them) are read one ahead to know
    from dataclasses import replace
    from sumpwise.intake.chunked import sample_chunks
    from sumpwise.intake.samples import read_samples
    from sumpwise.results.pipeline import grade_in_chunks
    from sumpwise.ruleset.compiler import load_ruleset
    samples, rules = SITE
    ruleset = load_ruleset(rules)
    for rows, whole in ((10_000, True), (100, False)):
        told = list(grade_in_chunks(sample_chunks(samples, rows=rows), ruleset))
        untold = list(grade_in_chunks((replace(b, more=None) for b in sample_chunks(samples, rows=rows)), ruleset))
        assert [g.forecasts_made for g in told] == [g.forecasts_made for g in untold] == [whole] * len(told)
    (alone,) = list(grade_in_chunks([read_samples(samples)], ruleset))
    assert alone.forecasts_made and len(alone.forecasts) >= 5  # the demo's rising units (test above)
