"""What people read says what the engine decided, with the cautions (tenth stop's hunt).

Invented Brackwater Point exports (tests/data/report_found7/README.md), graded through the real
CLI, then read as their reader would: the site lead reads `explain` and the table, the nightly
pipeline's people the CSV and the HTML report, the auditor the report of a ledger batch.
"""

from __future__ import annotations

import csv
import io
import json
import re
from html import unescape

import numpy as np

from sumpwise.vocabulary.cautions import CAUTIONS
from tests.conftest import DATA, ROOT, run_cli

FOUND = DATA / "report_found7"
HYDRAULIC = ROOT / "rules" / "hydraulic.yaml"
SITE = ROOT / "scenarios" / "brackwater" / "site.yaml"
SAMPLES = ROOT / "scenarios" / "brackwater" / "samples.csv"


def _flat(text: str) -> str:
    return " ".join(unescape(re.sub(r"<[^>]+>", " ", text)).split())


def _graded(tmp_path, samples, rules, name="results.jsonl", *more) -> tuple:
    out, rejects = tmp_path / name, tmp_path / (name + ".rejects.csv")
    run = run_cli("grade", samples, "--rules", rules, "--out", out, "--rejects", rejects, *more)
    assert run.code == 0, run.err
    return out, rejects


# -- a forecast on an `outside` rule, falling ------------------------------------------------------

def test_a_falling_viscosity_forecast_reads_below_its_limit_not_either_side_of_zero(tmp_path):
    """HPU-7's oil thins (shear of its VI improver): the forecast records the side the fit moves to,
    signed, -10 %. explain said "reaches the alert limit (more than -10% either side of zero)", which
    no value can be, and the report "(-10 %)" with no direction."""
    run = run_cli("explain", "BP-7104", "--samples", FOUND / "shear-down.csv", "--rules", HYDRAULIC)
    said = " ".join(run.out.split())
    assert run.code == 0
    assert "visc-drift: kv40_change_pct reaches the alert limit (below -10%) at about" in said
    assert "either side of zero) at about" not in said and "more than -10" not in said
    # The crossing the text gives is where the OLS line of the four samples meets -10 % (numpy.polyfit,
    # a general-purpose reference; new oil 46.2 mm2/s from rules/hydraulic.yaml).
    hours = np.array([500.0, 1200.0, 1900.0, 2600.0])
    change = (np.array([45.9, 45.0, 44.1, 43.3]) - 46.2) / 46.2 * 100
    slope, intercept = np.polyfit(hours, change, 1)
    crossing = (-10.0 - intercept) / slope
    assert f"at about {round(crossing, -1):,.0f} oil hours" in said  # 3 significant figures: 3,960

    results, _ = _graded(tmp_path, FOUND / "shear-down.csv", HYDRAULIC)
    record = [json.loads(line) for line in results.read_text().splitlines()][-1]
    (ahead,) = record["forecasts"]
    assert (ahead["test"], ahead["limit"], ahead["grade"]) == ("outside", -10.0, "alert")
    assert ahead["slope_per_1000h"] < 0
    html = tmp_path / "report.html"
    assert run_cli("report", "--results", results, "--rules", HYDRAULIC, "--out", html).code == 0
    assert "visc-drift: kv40_change_pct reaches the alert limit (below -10%) about 2026-06-20" in _flat(
        html.read_text())


def test_the_forecast_phrase_follows_the_recorded_side_and_test():
    from sumpwise.render.narrative import forecast_limit_phrase
    assert forecast_limit_phrase("outside", -10.0, "%", -2.69) == "below -10%"
    assert forecast_limit_phrase("outside", 10.0, "%", 0.597) == "above 10%"
    assert forecast_limit_phrase("outside", 40.0, "mm2/s", -1.0) == "below 40 mm2/s"  # a pair's low side
    assert forecast_limit_phrase("below", 50.0, "%", -3.0) == "below 50%"
    assert forecast_limit_phrase("above", 300.0, "ppm", 12.0) == "above 300 ppm"
    assert forecast_limit_phrase(None, 300.0, "ppm", None) == "300 ppm"  # a record that names no test


# -- units of declared measures in a condition ----------------------------------------------------

def test_a_condition_on_measures_the_site_declares_names_their_unit(tmp_path):
    """iron and silicon are the site's (`measures:`, ppm); a condition's clause record names no unit,
    and explain and the report took it from the vocabulary, which has none for them: "iron = 74,
    test above 50"."""
    run = run_cli("explain", "BP-7202", "--samples", FOUND / "dirt-wear.csv", "--rules", FOUND / "dirt-wear.yaml")
    assert run.code == 0
    assert "- silicon = 23 ppm, test above 15 ppm: holds" in run.out
    assert "- iron = 74 ppm, test above 50 ppm: holds" in run.out

    results, _ = _graded(tmp_path, FOUND / "dirt-wear.csv", FOUND / "dirt-wear.yaml")
    for rules in ((), ("--rules", FOUND / "dirt-wear.yaml")):  # with the rule set, and from the records alone
        html = tmp_path / "report.html"
        assert run_cli("report", "--results", results, *rules, "--out", html).code == 0
        reasons = re.search(r"<table class='grid reasons'>.*?</table>", html.read_text()).group(0)
        if rules:
            assert "iron = 74 ppm" in _flat(reasons) and "above 50 ppm: holds" in _flat(reasons)
        else:  # no rule set and no ladder finding on iron: no unit is guessed
            assert "iron = 74" in _flat(reasons)


# -- a capped grade says which caveat capped it --------------------------------------------------

def test_a_capped_finding_names_the_caveat_that_capped_it(tmp_path):
    """AC-3's polyol ester: carbonyl-rise crossed its alert limit and the ester caveat holds it at
    watch. The table said "(capped from alert)", and a cut line lost the caveat; the report's earlier
    findings said the same without the caveat."""
    run = run_cli("grade", SAMPLES, "--rules", SITE, "--format", "table")
    line = next(x for x in run.out.splitlines() if x.startswith("BP-0013 "))
    assert "carbonyl-rise (capped from alert by ester-carbo" in line
    results, rejects = _graded(tmp_path, SAMPLES, SITE)
    html = tmp_path / "report.html"
    assert run_cli("report", "--results", results, "--rules", SITE, "--rejects", rejects, "--out", html).code == 0
    earlier = re.search(r'data-unit="AC-3">.*?</section>', html.read_text(), re.S).group(0)
    rows = re.findall(r"<tr class='earlier'.*?</tr>", earlier, re.S)
    said = [m for r in rows for m in re.findall(r"capped from \w+(?: by caveat [\w-]+)?", _flat(r))]
    assert said and all(re.fullmatch(r"capped from (alert|urgent) by caveat ester-(carbonyl|subtracted)", m) for m in said)


# -- a tooltip keeps the figures that put a value past its limit ---------------------------------

def test_a_tooltip_does_not_round_a_value_back_onto_its_limit(tmp_path):
    """A lot certificate's new-oil kv40 of 44.09 and a used 48.50 mm2/s is +10.0023 %, past the 10 %
    alert limit (ISO 3448 VG band, the rule's source); the tooltip showed it to 4 significant figures,
    "10 %", on an alert marker beside the line labelled "alert +10"."""
    results, _ = _graded(tmp_path, FOUND / "lot-viscosity.csv", HYDRAULIC)
    record = [json.loads(line) for line in results.read_text().splitlines()][-1]
    value = record["derived"]["kv40_change_pct"]
    assert value == round((48.50 - 44.09) / 44.09 * 100, 9) and value > 10 and record["grade"] == "alert"
    html = tmp_path / "report.html"
    assert run_cli("report", "--results", results, "--rules", HYDRAULIC, "--out", html).code == 0
    titles = [unescape(t) for t in re.findall(r"<title>([^<]*)</title>", html.read_text())]
    tip = next(t for t in titles if t.startswith("BP-7302") and "kv40_change_pct" in t)
    assert tip.endswith("kv40_change_pct 10.0023 %")


# -- every row rejected ---------------------------------------------------------------------------

def test_a_run_whose_every_row_is_rejected_gets_a_report_of_its_rejects_with_the_cautions(tmp_path):
    """The results file is empty; the report refused it ("no result records"), so the night whose lab
    export changed had no report at all, and no one read why."""
    results, rejects = _graded(tmp_path, FOUND / "all-rejected.csv", SITE)
    assert results.read_text() == ""
    html = tmp_path / "report.html"
    run = run_cli("report", "--results", results, "--rejects", rejects, "--out", html)
    assert run.code == 0, run.err
    text = _flat(html.read_text())
    for caution in CAUTIONS:
        assert text.count(caution) >= 2  # top and bottom, as every report
    assert "No sample was graded." in text
    for row, field, code in (("1", "water", "D004"), ("2", "sampled_on", "D015")):
        assert f"{row} BP-740{row} {field} {code}" in text
    assert "0 result(s), 0 flagged, 2 rejected row(s)" in run.err
    # no results and no rejects: still refused
    assert run_cli("report", "--results", results, "--out", tmp_path / "none.html").code == 2


def test_a_ledger_batch_whose_every_row_was_rejected_is_reported(tmp_path):
    db = tmp_path / "site.db"
    assert run_cli("grade", SAMPLES, "--rules", SITE, "--db", db, "--out", tmp_path / "a.jsonl").code == 0
    assert run_cli("grade", FOUND / "all-rejected.csv", "--rules", SITE, "--db", db,
                   "--out", tmp_path / "b.jsonl").code == 0
    html = tmp_path / "batch2.html"
    run = run_cli("report", "--db", db, "--batch", "2", "--out", html)
    assert run.code == 0, run.err  # was exit 2: "the ledger holds no results for batch 2"
    text = _flat(html.read_text())
    assert "No sample was graded." in text and all(c in text for c in CAUTIONS)
    assert "batch 2: " in text and "D004" in text and "D015" in text
    assert run_cli("report", "--db", db, "--batch", "3", "--out", tmp_path / "b3.html").code == 2  # no such batch


def test_compare_on_a_file_whose_every_row_is_rejected_says_so_with_the_cautions(tmp_path):
    """compare ended in an internal error (exit 1, a traceback) when no sample was graded."""
    run = run_cli("compare", SITE, SITE, "--samples", FOUND / "all-rejected.csv")
    assert run.code == 0, run.err
    assert "0 sample(s) graded under both (2 row(s) rejected); 0 moved" in run.out
    assert all(c in run.out for c in CAUTIONS)
    assert "internal error" not in run.err


# -- the CSV carries the cautions whatever the notice says ---------------------------------------

def test_the_csv_carries_the_cautions_when_the_site_notice_leaves_them_out(tmp_path):
    """tests/data/report/long-names.yaml's notice names no analyst and no resampling; the CSV's only
    caution was that notice."""
    run = run_cli("grade", DATA / "report" / "long-names.csv", "--rules", DATA / "report" / "long-names.yaml",
                  "--format", "csv")
    assert run.code == 0
    rows = list(csv.DictReader(io.StringIO(run.out)))
    assert rows and "resampling" not in rows[0]["notice"]
    assert all(row["cautions"] == " ".join(CAUTIONS) for row in rows)


def test_a_units_history_as_csv_carries_the_cautions(tmp_path):
    """history --format csv is opened in a spreadsheet like grade's CSV; it carried no caution."""
    db = tmp_path / "site.db"
    assert run_cli("grade", FOUND / "dirt-wear.csv", "--rules", FOUND / "dirt-wear.yaml", "--db", db,
                   "--out", tmp_path / "r.jsonl").code == 0
    run = run_cli("history", "SWP-4", "--db", db, "--format", "csv")
    assert run.code == 0
    rows = list(csv.DictReader(io.StringIO(run.out)))
    assert [r["sample_id"] for r in rows] == ["BP-7201", "BP-7202"]
    assert all(r["cautions"] == " ".join(CAUTIONS) for r in rows)


def test_check_says_the_cautions_after_its_verdicts_ok_or_failed(tmp_path):
    """A rule set found "ok" is valid, not right for the machine; check printed the verdict alone."""
    ok = run_cli("check", FOUND / "dirt-wear.yaml")
    assert ok.code == 0 and ": ok: rule set brackwater-gear-dirt" in ok.out
    assert ok.out.splitlines()[1:] == ["! " + c for c in CAUTIONS]
    broken = tmp_path / "broken.yaml"
    broken.write_text("ruleset: broken\nversion: 1\nclasses:\n  pump:\n    rules:\n      - id: w\n"
                      "        measure: wter\n        above: {watch: 100}\n        message: Water\n"
                      "        source: site practice\n", encoding="utf-8")
    failed = run_cli("check", broken)
    assert failed.code == 2 and "C003" in failed.err and all(c in failed.out for c in CAUTIONS)


# -- a forecast beyond an ester cap --------------------------------------------------------------

def test_a_forecast_past_a_cap_says_the_cap_keeps_the_grade(tmp_path):
    """HPU-3's ester fluid (HYD-46-E, carbonyl of its own, new oil 165 abs/cm): its direct carbonyl
    rise climbs towards the alert limit of 15 abs/cm, and the forecast said "reaches the alert limit
    about 2026-07-17" while the sample's own ester-carbonyl caveat holds carbonyl-rise at watch
    (the method line alone said "limits before any caveat's cap")."""
    samples = FOUND / "ester-carbonyl-rising.csv"
    run = run_cli("explain", "BP-7504", "--samples", samples, "--rules", HYDRAULIC)
    said = " ".join(run.out.split())
    assert run.code == 0
    assert ("carbonyl-rise: oxidation_rise reaches the alert limit (above 15 abs/cm) at about 4,630 oil hours"
            in said)
    assert ("But caveat ester-carbonyl, raised on this sample, caps rules on oxidation_rise at watch unless its "
            "exception holds (see the caveat): while the cap holds, crossing this limit grades watch, not alert."
            in said)
    results, _ = _graded(tmp_path, samples, HYDRAULIC)
    html = tmp_path / "report.html"
    assert run_cli("report", "--results", results, "--rules", HYDRAULIC, "--out", html).code == 0
    card = re.search(r"<ul class='todo forecasts'>.*?</ul>", html.read_text()).group(0)
    assert "crossing this limit grades watch, not alert" in _flat(card)
    db = tmp_path / "site.db"
    assert run_cli("grade", samples, "--rules", HYDRAULIC, "--db", db, "--out", tmp_path / "r2.jsonl").code == 0
    history = " ".join(run_cli("history", "HPU-3", "--db", db).out.split())
    assert "crossing this limit grades watch, not alert" in history
    # a mineral oil's forecast has no cap to tell of
    plain = " ".join(run_cli("explain", "BP-7104", "--samples", FOUND / "shear-down.csv", "--rules", HYDRAULIC)
                     .out.split())
    assert "reaches the alert limit (below -10%)" in plain and "caps rules on" not in plain
