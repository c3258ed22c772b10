"""ISO 4406 cleanliness, graded: a lab export's counts and codes through the real `grade` command.

Source of the scale numbers: ISO 4406:1999 Table 1 (particles per mL; scale number N holds "more
than" its lower figure "up to and including" its upper one, 17 is 640 to 1,300, 28 is 1,300,000
to 2,500,000; beyond the table the code is written >28), as reproduced in a filter maker's public
appendix "Contamination Classification in accordance with ISO 4406:1999" and, for scale numbers
6 to 24, in a trade magazine's "ISO 4406 basics" table (counts per mL, and per 100 mL 100 times
those). Whether the 2021 edition changed the table was not confirmed here (from memory: it did not).
The site's target code (17/15/12 watch, 19/17/14 alert) is site practice.
"""

from __future__ import annotations

import pytest
from conftest import DATA

from support.grade_runs import counts_said, fired_rules, graded_run, rejects_said

HERE = DATA / "derive_found7"


@pytest.fixture(scope="module")
def graded():
    return graded_run(HERE / "cleanliness-export.csv", "--rules", HERE / "cleanliness-rules.yaml", "--record", "full")


ALL_THREE = {"target-4um", "target-6um", "target-14um"}


@pytest.mark.parametrize("sample, grade, fired, numbers", [
    # counts exactly on the upper edges of 17, 15 and 12 ("up to and including"): the target code itself
    ("CL-01", "normal", set(), (17, 15, 12)),
    # a tenth of a particle per mL more: "more than" 1,300, 320 and 40 is 18, 16 and 13
    ("CL-02", "watch", ALL_THREE, (18, 16, 13)),
    # 18-16-13 with hyphens reads as 18/16/13 and grades alike
    ("CL-03", "watch", ALL_THREE, (18, 16, 13)),
    ("CL-04", "watch", ALL_THREE, (18, 16, 13)),
    # the two-number form reports >= 6 and >= 14 um(c) only: the 4 um(c) limit is not evaluated
    ("CL-06", "watch", {"target-6um", "target-14um"}, (None, 16, 13)),
    # >28 is beyond the table: above 28, so a limit of 28 fires
    ("CL-07", "urgent", ALL_THREE | {"beyond-table"}, (29, 27, 24)),
    # 2,500,000 per mL is the table's last figure (28); one more is beyond it (>28)
    ("CL-08", "alert", ALL_THREE, (28, 26, 23)),
    ("CL-09", "urgent", ALL_THREE | {"beyond-table"}, (29, 26, 23)),
    # counts per mL that agree with the code fill the size it leaves out (2,000 per mL is 18)
    ("CL-11", "watch", ALL_THREE, (18, 16, 13)),
    # a count on the edge of 17 beside a code of 18: one number apart, as a printed count rounds
    ("CL-12", "watch", ALL_THREE, (18, 16, 13)),
])
def test_counts_and_codes_grade_by_the_published_table(graded, sample, grade, fired, numbers):
    record = graded[0][sample]
    assert record["grade"] == grade
    assert fired_rules(record) == fired
    assert tuple(record["derived"][f"iso4406_{size}"] for size in ("4um", "6um", "14um")) == numbers
    assert "counts-disagree-with-code" not in {c["caveat"] for c in record["caveats"]}


def test_a_hyphen_where_a_size_may_be_missing_rejects_the_row(graded):
    records, err = graded
    assert "CL-05" not in records
    assert rejects_said(err) == [(5, "D012", "iso4406")]
    assert counts_said(err) == (12, 11, 0, 1)


def test_counts_per_100_ml_beside_a_code_do_not_fill_the_size_it_leaves_out(graded):
    """A lab export giving `-/16/13` with counts per 100 mL in the per-mL columns: 130,000 per
    100 mL is 1,300 per mL, scale 17, but read per mL it is 24, and filled in for the 4 um(c) size
    the code leaves out it graded the sample alert against a 19/17/14 alert target. The counts
    read 6 numbers above the code at the sizes both give, so the row says so and the 4 um(c) size
    is not evaluated."""
    records, err = graded
    record = records["CL-10"]
    assert record["grade"] == "watch"
    assert fired_rules(record) == {"target-6um", "target-14um"}
    assert {n["rule"] for n in record["not_evaluated"]} == {"target-4um", "beyond-table"}
    assert record["derived"]["iso4406_4um"] is None
    caveat = next(c for c in record["caveats"] if c["caveat"] == "counts-disagree-with-code")
    assert "the code gives 16, the count 32000 per mL gives 22" in caveat["message"]
    assert "counts per 100 mL" in caveat["message"]
    assert "1 sample(s) with caveat counts-disagree-with-code" in err  # counted as a warning
