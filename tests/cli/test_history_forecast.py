"""`history UNIT --db` tells when the unit's current oil charge will cross a limit: the unit's
stored samples re-graded under the rule set of its latest sample, forecast as `grade` does,
worded as `explain` words it. The crossing is checked against numpy's least-squares line
(numpy.polyfit) through the same readings. The unit and readings are invented (Brackwater
Point, the demo site); the water readings rise steadily, about 27 ppm every 500 oil hours.
"""

from __future__ import annotations

import re

import numpy as np

from tests.conftest import ROOT, run_cli

SCENARIO = ROOT / "scenarios" / "brackwater"
HOURS = [38000, 38500, 39000, 39500, 40000]
WATER = [30, 44, 57, 72, 85]  # ppm, under the steam-turbine watch limit, rising


def _rows(indices):
    header = (SCENARIO / "samples.csv").read_text().splitlines()[0]
    rows = [f"ST9-{k:02d},ST-9,steam-turbine,TURB-46-M,2026-{k + 1:02d}-05,{HOURS[k]},46.75,6.91,0.15,,,,{WATER[k]},"
            f"702,direct,lab-a,false,,,,," for k in indices]
    return "\n".join([header, *rows]) + "\n"


def test_history_says_when_a_steadily_rising_value_crosses_its_limit(tmp_path):
    site = tmp_path / "site.yaml"
    site.write_text((SCENARIO / "site.yaml").read_text().replace("../../rules/", str(ROOT / "rules") + "/"))
    db = tmp_path / "ledger.db"
    for name, indices in (("first.csv", [0, 1, 2]), ("second.csv", [3, 4])):  # two batches: the ledger joins them
        (tmp_path / name).write_text(_rows(indices))
        run = run_cli("grade", tmp_path / name, "--rules", site, "--db", db, "--out", tmp_path / "r.jsonl")
        assert run.code == 0, run.err
    run = run_cli("history", "ST-9", "--db", db)
    assert run.code == 0, run.err
    text = " ".join(run.out.split())
    assert "When will it cross?" in text and "brackwater-site version" in text
    found = re.search(r"water: water reaches the (\w+) limit \(above ([\d.]+) ppm\) at about ([\d,.]+) oil hours",
                      text)
    assert found, run.out
    limit, at_hours = float(found.group(2)), float(found.group(3).replace(",", ""))
    assert limit > WATER[-1]
    slope, intercept = np.polyfit(HOURS, WATER, 1)  # ordinary least squares, numpy's own
    expected = (limit - intercept) / slope
    assert abs(at_hours - expected) <= 0.005 * expected  # printed for people, to 3 significant figures
    assert found.group(3) == f"{float(f'{expected:.3g}'):,.0f}"
    assert at_hours > HOURS[-1]
    # the table is still there, and the cautions follow the forecasts
    assert all(f"ST9-{k:02d}" in run.out for k in range(5))
    assert run.out.index("When will it cross?") < run.out.index("Screening aid only")
    # the report from the ledger draws the same forecast (the engine's, from the re-graded samples)
    report = run_cli("report", "--db", db, "--out", tmp_path / "report.html")
    assert report.code == 0, report.err
    html = (tmp_path / "report.html").read_text(encoding="utf-8")
    assert "When will it cross?" in html and f"water reaches the {found.group(1)} limit (above {limit:g} ppm)" in html


def test_history_of_a_steady_unit_says_there_is_no_forecast(tmp_path):
    site = tmp_path / "site.yaml"
    site.write_text((SCENARIO / "site.yaml").read_text().replace("../../rules/", str(ROOT / "rules") + "/"))
    db = tmp_path / "ledger.db"
    samples = tmp_path / "steady.csv"
    samples.write_text(re.sub(r",(30|44|57|72|85),702,", ",40,702,", _rows(range(5))))
    run = run_cli("grade", samples, "--rules", site, "--db", db, "--out", tmp_path / "r.jsonl")
    assert run.code == 0, run.err
    run = run_cli("history", "ST-9", "--db", db)
    assert run.code == 0, run.err
    assert "When will it cross? No forecast" in run.out and "reaches the" not in run.out
