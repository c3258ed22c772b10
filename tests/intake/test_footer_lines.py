"""Page footers and report lines of a printed export are rejected as summary lines (D019).

An export printed to a file repeats `Page 1 of 3` or `Printed on ... by ...` padded out to
the full width of the table (`Page 1 of 1;;;;;;`). Before, such a line came out as an
unrated "sample" named `Page 1 of 1`: a record and a count for a line that is not a sample.
A footer has no class; a sample whose id only looks like one (`PAGE-7`) keeps its row.
"""

import io

from sumpwise.intake.samples import read_samples

TEXT = ("sample_id;unit_id;class;lubricant;sampled_on;oil_hours;kv40\n"
        "S1;ST-1;steam-turbine;TURB-46-M;2026-03-02;3000;46,1\n"
        "Page 1 of 2;;;;;;\n"
        "S2;ST-1;steam-turbine;TURB-46-M;2026-03-03;3010;46,1\n"
        "Printed on 2026-03-03 by the lab;;;;;;\n"
        ";;;Page 2 / 2;;;\n"
        "End of report;;;;;;\n"
        "PAGE-7;HY-1;;HYD-46-M;2026-03-03;100;46\n")


def test_footer_lines_are_rejected_and_counted():
    batch = read_samples(io.StringIO(TEXT), "<printed>")
    footers = {r.row: (r.field, r.code) for r in batch.rejects}
    assert footers == {2: ("sample_id", "D019"), 4: ("sample_id", "D019"), 5: ("lubricant", "D019"),
                       6: ("sample_id", "D019")}
    assert list(batch.frame["sample_id"]) == ["S1", "S2", "PAGE-7"]
    assert batch.rejected_rows + len(batch.frame) == batch.rows_read == 7
