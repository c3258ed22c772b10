"""Decimal boundaries, graded: a value a lab's numbers put exactly on a limit is graded as the
decimal number it is, not as the binary noise of the bare arithmetic.

The cases (tests/data/derive_found7/boundaries.yaml) are graded by the real `grade` command on a
CSV export whose water column is in % (a column map declares it). Each case with a `binary` value
recomputes the bare IEEE 754 formula on the lab's numbers and checks that it lands on the wrong
side of the limit, so every such case is one the engine could get wrong; the engine must grade it
as the decimal value and record that value. What a test means at equality is the rule language's
(`above` strict, `between` inclusive); the file names its sources.
"""

from __future__ import annotations

import csv
import io

import pytest
import yaml
from conftest import DATA

from support.grade_runs import counts_said, graded_run

CASES = DATA / "derive_found7" / "boundaries.yaml"
DOC = yaml.safe_load(CASES.read_text(encoding="utf-8"))
COLUMNS = ["sample_id", "unit_id", "class", "lubricant", "sampled_on", "oil_hours", "kv40", "kv100", "an", "bn",
           "rpvot", "oxidation", "water"]
HEADER = {"water": "Water %"}  # the lab's header; the column map reads it in %

# The bare formulas, as a hand-written engine would compute them (sources: the measure table).
NAIVE = {
    "kv40_change_pct": lambda r, new: (r["kv40"] - new["kv40"]) / new["kv40"] * 100.0,
    "kv100_change_pct": lambda r, new: (r["kv100"] - new["kv100"]) / new["kv100"] * 100.0,
    "an_rise": lambda r, new: r["an"] - new["an"],
    "water": lambda r, new: r["water"] * 10_000.0,  # % -> ppm
    "oxidation_rise_per_1000h": lambda r, new: (r["oxidation"] - new["oxidation"]) * (1000.0 / r["oil_hours"]),
    "bn_retained_pct": lambda r, new: r["bn"] / new["bn"] * 100.0,
}
NAIVE_INPUTS = {"oil_hours", "kv40", "kv100", "an", "bn", "rpvot", "oxidation", "water"}


def _row(k: int, case: dict) -> dict:
    return {"sample_id": f"B-{k:02d}", "unit_id": f"U-{k:02d}", "class": case["class"], "sampled_on": "2026-03-02",
            **DOC["base"][case["class"]], **case["row"]}


@pytest.fixture(scope="module")
def graded(tmp_path_factory):
    folder = tmp_path_factory.mktemp("boundaries")
    (folder / "rules.yaml").write_text(yaml.safe_dump(DOC["ruleset"], sort_keys=False), encoding="utf-8")
    (folder / "columns.yaml").write_text('water: {column: "Water %", unit: "%"}\n', encoding="utf-8")
    out = io.StringIO()
    writer = csv.DictWriter(out, [HEADER.get(c, c) for c in COLUMNS], lineterminator="\n")
    writer.writeheader()
    for k, case in enumerate(DOC["cases"]):
        writer.writerow({HEADER.get(c, c): v for c, v in _row(k, case).items()})
    (folder / "export.csv").write_text(out.getvalue(), encoding="utf-8")
    return graded_run(folder / "export.csv", "--rules", folder / "rules.yaml", "--columns", folder / "columns.yaml",
                      "--record", "full")


def test_every_row_is_graded(graded):
    records, err = graded
    n = len(DOC["cases"])
    assert counts_said(err) == (n, n, 0, 0)


@pytest.mark.parametrize("k", range(len(DOC["cases"])), ids=[c["name"] for c in DOC["cases"]])
def test_case(graded, k):
    case = DOC["cases"][k]
    record = graded[0][f"B-{k:02d}"]
    assert record["grade"] == case["expect"]["grade"]
    assert {r["rule"]: r["grade"] for r in record["reasons"]} == case["expect"]["fired"]
    if "binary" not in case:
        return
    measure, binary, decimal = case["binary"]["measure"], case["binary"]["value"], case["binary"]["decimal"]
    row = {name: float(value) for name, value in _row(k, case).items() if name in NAIVE_INPUTS}
    new = DOC["ruleset"]["lubricants"][_row(k, case)["lubricant"]]
    assert NAIVE[measure](row, new) == binary != decimal  # a real boundary: the bare arithmetic misses it
    recorded = record["values"][measure] if measure in record["values"] else record["derived"][measure]
    assert recorded == decimal

