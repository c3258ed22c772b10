"""A quote left open in a lab export's free-text column, graded through the real `grade`.

CSV lets a quoted cell hold line breaks (RFC 4180 §2.6), so a reader takes every line after
an opening quote into that one cell until the next quote, or the end of the file. A LIMS that
cuts a long comment short loses the closing quote: the rows after it vanished into one
rejected row (reason: its field count) or, where the next quote closed the cell with the row's
count of fields intact, into the comment of a sample graded as if nothing had happened. Both
hid BP-8803, whose 2400 ppm water is urgent under the scenario's limits (water above 1000 ppm:
scenarios/brackwater/site.yaml, ASTM D6304 readings). Now the row that took them is rejected
and its reason names the file lines it ran over; a quoted cell that holds line breaks but no
line shaped like a row (BP-8806: a comment over two lines) is read as before.

Fixtures: tests/data/intake_found7/ (see its README.md).
"""

from __future__ import annotations

import csv
import io

import pytest

from conftest import DATA, ROOT, run_cli

HERE = DATA / "intake_found7"
EXPORT = HERE / "lims-comment-open-quote.csv"
SITE = ROOT / "scenarios" / "brackwater" / "site.yaml"

# The same export where the cut comment's quote is closed by an inch mark two rows later
# (`drain valve 3/4"`): the row keeps its ten fields, so nothing but its lines told.
CLOSED_LATER = (EXPORT.read_text(encoding="utf-8")
                .replace("4120,46.4,0.38,130,\n", '4120,46.4,0.38,130,Drain valve 3/4"\n')
                .replace('"Resample, ""A"" side"', "Resample A side"))


def _graded(text: str, *extra):
    run = run_cli("grade", "-", "--rules", SITE, "--columns", HERE / "columns.yaml", "--format", "csv",
                  *extra, stdin=text)
    records = list(csv.DictReader(io.StringIO(run.out)))
    return run, records


@pytest.mark.parametrize("chunk", [(), ("--chunk-rows", "1")])
def test_rows_taken_into_an_open_quote_are_rejected_with_the_lines_they_ran_over(chunk):
    run, records = _graded(EXPORT.read_text(encoding="utf-8"), *chunk)
    graded = [r["sample_id"] for r in records if r.get("grade")]
    assert graded == ["BP-8801", "BP-8806"]  # BP-8806's two-line comment is a whole row
    rejects = [line for line in run.err.splitlines() if "rejected D0" in line]
    assert len(rejects) == 1 and "row 2: rejected D013" in rejects[0]
    assert "runs over file lines 3 to 6" in rejects[0] and "the 3 line(s) after its first" in rejects[0]


@pytest.mark.parametrize("chunk", [(), ("--chunk-rows", "2")])
def test_a_cell_an_open_quote_filled_with_whole_rows_is_rejected_not_graded(chunk):
    # Before: BP-8802 graded normal (its comment holding BP-8803 and BP-8804 whole), the
    # urgent BP-8803 in no record and no reject, and the run said read 4, graded 4.
    assert CLOSED_LATER.count('"') % 2 == 0
    run, records = _graded(CLOSED_LATER, *chunk)
    assert [r["sample_id"] for r in records] == ["BP-8801", "BP-8805", "BP-8806"]
    rejects = [line for line in run.err.splitlines() if "rejected D0" in line]
    assert len(rejects) == 1 and "row 2: rejected D026" in rejects[0]
    assert "runs over file lines 3 to 5" in rejects[0]
    assert "read 4 row(s): 3 graded, 0 unrated, 1 rejected" in run.err


def test_a_comment_over_two_lines_alone_is_no_reject():
    # A quoted comment with a line break and commas, but no line with a row's nine delimiters
    text = EXPORT.read_text(encoding="utf-8").replace(
        '"Taken after top-up with 20 L, drain valve 3/4', '"Taken after top-up with 20 L,\ndrain valve 3/4"')
    run, records = _graded(text)
    assert "rejected" not in run.err.replace("0 rejected", "")
    by_id = {r["sample_id"]: r for r in records}
    assert sorted(by_id) == [f"BP-88{k:02d}" for k in range(1, 7)]
    assert by_id["BP-8803"]["grade"] == "urgent"  # 2400 ppm water, above the site's 1000 ppm urgent step
