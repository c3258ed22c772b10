"""The engine's forecasts travel in the records (format 3), and `report --results` draws them from
there, as `report --db` does from a ledger: the same numbers, nothing recomputed. A results file
of format 2 (older, without forecasts, origins or codes as written) still renders. The ISO 4406
code as the lab wrote it is in the record and in the report.

The data is the invented Brackwater Point demo year (regression data); the independent check of
a forecast's crossing is numpy's least-squares fit (numpy.polyfit) of the records' own values.
"""

from __future__ import annotations

import json
import re
from datetime import date
from html import unescape

import numpy as np
import pytest
from conftest import DATA, ROOT, run_cli

from sumpwise.vocabulary.limit_tests import unit_text
from sumpwise.render.html_report import Ladder, forecast_text, parse_results, unit_plots, unit_views
from sumpwise.render.narrative import rounded
from sumpwise.ruleset.compiler import load_ruleset

RULES = ROOT / "scenarios" / "brackwater" / "site.yaml"
FORMAT_2 = DATA / "report" / "format-2-results.jsonl"  # written by `grade` before format 3 (units ST-1, HPU-1)


@pytest.fixture(scope="module")
def demo(tmp_path_factory) -> dict:
    folder = tmp_path_factory.mktemp("demo")
    run = run_cli("demo", "--out", folder)
    assert run.code == 0, run.err
    results = folder / "brackwater-results.jsonl"
    records = [json.loads(line) for line in results.read_text(encoding="utf-8").splitlines()]
    return {"folder": folder, "results": results, "records": records, "ledger": folder / "brackwater.db",
            "html": (folder / "brackwater-report.html").read_text(encoding="utf-8")}


def _sections(html: str) -> dict:
    """Each unit's card, by unit id."""
    parts = re.split(r'(?=<section class="unit" id="unit-)', html)
    return {re.match(r'<section class="unit" id="unit-([^"]+)"', p).group(1): p for p in parts[1:]}


def _listed(html: str) -> dict:
    """The forecasts each unit's card lists, as text."""
    return {unit: [unescape(t) for t in re.findall(r"<li class='forecast'>([^<]*)</li>", section)]
            for unit, section in _sections(html).items()}


def test_each_forecast_is_on_the_record_of_the_sample_it_was_made_from(demo):
    records = demo["records"]
    assert {r["format"] for r in records} == {4}
    carried = [(r, f) for r in records for f in r["forecasts"]]
    assert len(carried) >= 5  # the demo year's rising units (scenarios/brackwater/README.md)
    by_unit: dict = {}
    for record in records:
        by_unit.setdefault(record["unit_id"], []).append(record)
    for record, f in carried:
        assert (f["unit_id"], f["sample_id"]) == (record["unit_id"], record["sample_id"])
        # the unit's latest sample carries it (trend order: date, then oil hours); the others carry []
        latest = max(by_unit[record["unit_id"]], key=lambda r: (r["sampled_on"], r["values"]["oil_hours"]))
        assert latest is record
        assert set(f) >= {"rule", "measure", "unit", "grade", "test", "limit", "samples", "oil_hours", "value",
                          "slope_per_1000h", "slope_t", "at_hours", "at_hours_low", "at_hours_high", "horizon_hours",
                          "on", "on_low", "on_high", "method"}
    assert all(r["forecasts"] == [] for r in records if not r["forecasts"])


def test_a_recorded_crossing_is_the_least_squares_line_of_the_records_own_values(demo):
    # SWP-3's iron forecast: a fit of iron on oil hours over the samples since the last oil change,
    # recomputed here with numpy.polyfit from the values the records carry
    (record,) = [r for r in demo["records"] if any(f["measure"] == "iron" for f in r["forecasts"])]
    (f,) = [f for f in record["forecasts"] if f["measure"] == "iron"]
    unit = sorted((r for r in demo["records"] if r["unit_id"] == record["unit_id"]),
                  key=lambda r: (r["sampled_on"], r["values"]["oil_hours"]))
    start = max([k for k, r in enumerate(unit) if r["oil_changed"]], default=0)
    charge = [r for r in unit[start:] if r["values"].get("iron") is not None]
    assert len(charge) == f["samples"]
    hours = [r["values"]["oil_hours"] for r in charge]
    slope, intercept = np.polyfit(hours, [r["values"]["iron"] for r in charge], 1)
    assert f["at_hours"] == pytest.approx((f["limit"] - intercept) / slope, abs=1e-3)  # recorded to 3 decimals
    assert f["slope_per_1000h"] == pytest.approx(slope * 1000, rel=1e-9)


def test_report_from_results_draws_the_recorded_forecasts_with_their_own_numbers(demo, tmp_path):
    out = tmp_path / "report.html"
    run = run_cli("report", "--results", demo["results"], "--rules", RULES, "--out", out)
    assert run.code == 0, run.err
    html = out.read_text(encoding="utf-8")
    listed, sections = _listed(html), _sections(html)
    ruleset = load_ruleset(RULES)
    records = parse_results(demo["results"].read_text(encoding="utf-8").splitlines(), "results")
    views = {v.unit_id: v for v in unit_views(records, ruleset)}
    ladder = Ladder.of(records, ruleset)
    for record in records:
        if not record["forecasts"]:
            continue
        unit = record["unit_id"]
        assert len(listed[unit]) == len(record["forecasts"])
        plots = {p.title: p for p in unit_plots(views[unit], ladder, [dict(f) for f in record["forecasts"]])}
        for f in record["forecasts"]:
            text = forecast_text(f)
            assert text in listed[unit]
            # the printed numbers are the record's: its date, band, limit and samples, its hours for people
            assert f"about {f['on']} ({rounded(f['at_hours'])} oil hours)" in text
            assert f"band {f['on_low'] or 'now'} to {f['on_high'] or 'beyond the horizon'}" in text
            side = f["test"] if f["test"] != "outside" else ("below" if f["slope_per_1000h"] < 0 else "above")
            assert f"fitted on {f['samples']} samples" in text and f"({side} {f['limit']:g}{unit_text(f['unit'])})" in text
            # the drawn projection runs from the record's own value on its sample's date to its limit on its date
            (drawn,) = [p for p in plots[f["measure"]].projections if p.label == text]
            assert (drawn.x0, drawn.y0) == (date.fromisoformat(record["sampled_on"]).toordinal(), f["value"])
            assert (drawn.x1, drawn.y1) == (date.fromisoformat(f["on"]).toordinal(), f["limit"])
            assert drawn.x_low == (date.fromisoformat(f["on_low"]).toordinal() if f["on_low"] else None)
            assert f"<title>{text}</title>" in unescape(sections[unit])
    assert sum(s.count('class="projection"') for s in sections.values()) == sum(
        len(r["forecasts"]) for r in records if r["forecasts"])
    # the demo's own report was drawn from the same records
    assert _listed(demo["html"]) == listed


def test_report_from_the_ledger_shows_the_same_forecasts_as_from_the_results(demo, tmp_path):
    out = tmp_path / "ledger.html"
    run = run_cli("report", "--db", demo["ledger"], "--out", out)
    assert run.code == 0, run.err
    from_ledger = {unit: items for unit, items in _listed(out.read_text(encoding="utf-8")).items() if items}
    from_results = {unit: items for unit, items in _listed(demo["html"]).items() if items}
    assert from_ledger == from_results and from_results


def test_a_format_2_results_file_still_renders(tmp_path):
    records = [json.loads(line) for line in FORMAT_2.read_text(encoding="utf-8").splitlines()]
    assert {r["format"] for r in records} == {2} and not any("forecasts" in r or "origin" in r for r in records)
    for rules in ((), ("--rules", RULES)):
        out = tmp_path / "old.html"
        run = run_cli("report", "--results", FORMAT_2, *rules, "--out", out)
        assert run.code == 0, run.err
        html = out.read_text(encoding="utf-8")
        assert set(_sections(html)) == {"ST-1", "HPU-1"}
        assert "When will it cross?" not in html and 'class="projection"' not in html  # format 2 carries none
        assert "Screening aid only" in html


def test_the_report_shows_the_cleanliness_code_as_written(demo):
    sections = _sections(demo["html"])
    latest = {}
    for record in demo["records"]:
        if record["unit_id"] in ("HPU-2", "HPU-3"):
            latest[record["unit_id"]] = max(latest.get(record["unit_id"], record), record,
                                            key=lambda r: r["sampled_on"])
    for unit, record in latest.items():
        assert record["iso4406"]  # the demo's hydraulic units carry codes as the lab wrote them
        assert f"ISO 4406 {record['iso4406']} as written" in sections[unit]


def test_records_rebuilt_from_the_ledger_say_what_it_holds(demo):
    # a ledger keeps the batch's source and the sample's fields, not its row or forecasts: the rebuilt
    # record names the file with "row": null and says "forecasts": null (not made), never an empty list
    from sumpwise.ledger.audit import stored_results
    from sumpwise.render.jsonl import dumps
    results, _ = stored_results(demo["ledger"])
    written = {r["sample_id"]: r for r in demo["records"]}
    assert len(results) == len(written)
    for result in results:
        record = json.loads(dumps(result.to_record()))
        assert record["format"] == 4 and record["forecasts"] is None
        assert record["origin"] == {"file": written[record["sample_id"]]["origin"]["file"], "row": None}
        assert record["iso4406"] == written[record["sample_id"]]["iso4406"]
    assert any(r["iso4406"] for r in written.values())


@pytest.mark.parametrize("forecasts, field", [([1], "forecasts[0]"), ([{"rule": "iron", "measure": "iron"}],
                                                                    "forecasts[0].grade"),
                                             ("soon", "forecasts")])
def test_a_malformed_forecast_in_a_results_file_is_an_error_naming_line_and_field(demo, tmp_path, forecasts, field):
    records = [dict(r) for r in demo["records"][:3]]
    records[1]["forecasts"] = forecasts
    (tmp_path / "bad.jsonl").write_text("".join(json.dumps(r) + "\n" for r in records), encoding="utf-8")
    run = run_cli("report", "--results", tmp_path / "bad.jsonl", "--out", tmp_path / "bad.html")
    assert run.code == 2 and f"bad.jsonl: line 2: field '{field}" in run.err and "Traceback" not in run.err
