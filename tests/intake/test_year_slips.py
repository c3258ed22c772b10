"""A slip in the year of a sampling date (0026 or 2062 for 2026) rejects the row, D023.

Such a date is read as a real one and puts the sample out of its unit's order: a 2062 sample
is the unit's latest, so the next real sample steps against the wrong one and forecasts run
from it. Bounds: before 1900, or more than a year after the day the file is read (our
choice, no source). `today` is passed, so the test does not depend on the day it runs.
"""

import datetime as dt
import io

import pandas as pd

from sumpwise.intake.samples import ColumnMap, read_samples, validate_samples

TODAY = dt.date(2026, 12, 5)


def _batch(dates):
    frame = pd.DataFrame({"sample_id": [f"Y{k}" for k in range(len(dates))], "class": "gearbox",
                          "unit_id": "SWP-1", "sampled_on": dates})
    return validate_samples(frame, [], "<t>", ColumnMap(), today=TODAY)


def test_years_out_of_reach_are_rejected_and_near_ones_kept():
    batch = _batch(["2062-03-02", "0026-03-02", "1899-12-31", "2026-03-02", "2027-12-06", "2027-12-07",
                    "1900-01-01", "2027-06-02T10:00:00"])
    assert {r.sample_id for r in batch.rejects} == {"Y0", "Y1", "Y2", "Y5"}
    assert {r.code for r in batch.rejects} == {"D023"} and {r.field for r in batch.rejects} == {"sampled_on"}
    assert "'2062-03-02' is before 1900 or more than a year after" in next(r.reason for r in batch.rejects
                                                                          if r.sample_id == "Y0")
    assert list(batch.frame["sample_id"]) == ["Y3", "Y4", "Y6", "Y7"]


def test_a_declared_day_first_date_with_a_slip_is_caught_after_it_is_read():
    text = "sample_id,class,sampled_on\nD1,gearbox,02/03/2062\nD2,gearbox,02/03/2026\n"
    columns = ColumnMap(options={"date_format": "%d/%m/%Y"})
    batch = read_samples(io.StringIO(text), "<d>", columns)
    assert [(r.sample_id, r.code) for r in batch.rejects] == [("D1", "D023")]
    assert batch.frame["sampled_on"].tolist() == ["2026-03-02"]
