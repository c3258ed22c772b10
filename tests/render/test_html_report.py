"""The HTML report, parsed: every flagged sample and reason is there, nothing points outside the file.

The report is built by the real command line from the Brackwater Point demo data (invented
data, used here only as input); the checks compare the HTML against the result records
and against the rule-set YAML read directly with yaml.safe_load.
"""

from __future__ import annotations

import calendar
import io
import json
import subprocess
import sys
from datetime import date
from html.parser import HTMLParser
from pathlib import Path

import pytest
import yaml

from sumpwise.cli.main import main
from sumpwise.ruleset.compiler import load_ruleset
from sumpwise.vocabulary.problems import InputError
from sumpwise.render.html_report import TRENDS, limit_lines, oil_changes, parse_rejects, parse_results, plotted_value, unit_views
from sumpwise.render.svg_plot import _LOOKS, UNRATED_LOOK, date_ticks, nice_ticks

ROOT = Path(__file__).resolve().parents[2]
SCENARIO = ROOT / "scenarios" / "brackwater"
RULES = SCENARIO / "site.yaml"


def cli(*argv) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    code = main([str(a) for a in argv], io.StringIO(""), out, err)
    return code, out.getvalue(), err.getvalue()


@pytest.fixture(scope="module")
def graded(tmp_path_factory) -> dict:
    folder = tmp_path_factory.mktemp("report")
    results, rejects, report = folder / "results.jsonl", folder / "rejects.jsonl", folder / "report.html"
    code, _, err = cli("grade", SCENARIO / "samples.csv", "--rules", RULES, "--out", results, "--rejects", rejects)
    assert code == 0, err
    code, _, err = cli("report", "--results", results, "--rejects", rejects, "--rules", RULES, "--out", report)
    assert code == 0, err
    records = [json.loads(line) for line in results.read_text().splitlines()]
    return {"folder": folder, "results": results, "rejects": rejects, "html": report.read_text(),
            "records": records}


class _Tree(HTMLParser):
    """Tags with attributes, and the text inside each <article data-sample=...>."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict]] = []
        self.articles: dict[str, list[str]] = {}
        self.open_article: str | None = None
        self.depth = 0
        self.text: list[str] = []
        self.style = ""
        self.in_style = False

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        self.tags.append((tag, attrs))
        if tag == "style":
            self.in_style = True
        if tag == "article":
            self.open_article, self.depth = attrs["data-sample"], 0
            self.articles[self.open_article] = []
        elif self.open_article and tag == "article":
            self.depth += 1

    def handle_endtag(self, tag):
        if tag == "style":
            self.in_style = False
        if tag == "article" and self.open_article:
            self.open_article = None

    def handle_data(self, data):
        self.text.append(data)
        if self.in_style:
            self.style += data
        if self.open_article:
            self.articles[self.open_article].append(data)


def parse(html: str) -> _Tree:
    tree = _Tree()
    tree.feed(html)
    tree.close()
    return tree


def test_every_flagged_sample_is_there_with_every_reason_and_its_source(graded):
    tree = parse(graded["html"])
    flagged = [r for r in graded["records"] if (r["level"] or 0) > 0]
    assert len(flagged) > 50  # the demo batch has many findings; the check below must cover them
    for record in flagged:
        assert record["sample_id"] in tree.articles, record["sample_id"]
        text = " ".join(" ".join(tree.articles[record["sample_id"]]).split())
        assert record["grade"] in text
        for reason in record["reasons"]:
            assert reason["rule"] in text
            assert " ".join(reason["source"].split()) in text, (record["sample_id"], reason["rule"])
            if "measure" in reason:
                assert reason["measure"] in text
                limit = reason["limit"]
                shown = [limit] if not isinstance(limit, list) else limit
                assert all(f"{float(v):.6g}" in text for v in shown)
        for caveat in record["caveats"]:
            assert " ".join(caveat["message"].split()) in text
        assert " ".join(record["notice"].split()) in text
    normal = {r["sample_id"] for r in graded["records"] if r["level"] == 0}
    assert not normal & set(tree.articles)


def test_nothing_outside_the_file_is_referenced(graded):
    tree = parse(graded["html"])
    names = {tag for tag, _ in tree.tags}
    # elements that load or run something from elsewhere; media players are covered by `src` below
    assert not names & {"script", "link", "img", "iframe", "object", "embed", "image", "use", "audio", "source"}
    for tag, attrs in tree.tags:
        assert "src" not in attrs and "srcset" not in attrs, tag
        for key, value in attrs.items():
            if key in ("href", "xlink:href"):
                assert value.startswith("#"), (tag, value)
            if key == "xmlns":
                assert value == "http://www.w3.org/2000/svg"
            elif value and ("http:" in value or "https:" in value or "//" in value):
                pytest.fail(f"{tag} {key}={value!r} points outside the file")
            if key.startswith("on"):
                pytest.fail(f"{tag} has an event handler {key}")
    assert "url(" not in tree.style and "@import" not in tree.style and "@font-face" not in tree.style


def test_summary_counts_match_the_records_and_rejects(graded):
    text = " ".join(" ".join(parse(graded["html"]).text).split())
    records = graded["records"]
    unrated = sum(1 for r in records if r["level"] is None)
    flagged = sum(1 for r in records if (r["level"] or 0) > 0)
    rejected = len(graded["rejects"].read_text().splitlines())
    assert rejected == 4  # scenarios/brackwater/README.md lists four rejected rows
    assert f"{len(records) - unrated} samples graded" in text
    assert f"{flagged} flagged" in text
    assert f"{unrated} unrated" in text
    assert f"{rejected} rejected rows" in text


def test_rule_set_and_engine_are_in_the_repeated_header_and_footer(graded):
    html = graded["html"]
    record = graded["records"][0]
    head = html.split("<thead>", 1)[1].split("</thead>", 1)[0]
    foot = html.split("<tfoot>", 1)[1].split("</tfoot>", 1)[0]
    for band in (head, foot):
        assert record["ruleset"]["id"] in band and record["ruleset"]["sha256"] in band
        assert f"version {record['ruleset']['version']}" in band and record["engine"] in band


def test_cautions_are_on_the_report(graded):
    from sumpwise.vocabulary.cautions import CAUTIONS
    text = " ".join(" ".join(parse(graded["html"]).text).split())
    for caution in CAUTIONS:
        assert caution in text


def test_each_unit_has_three_plots_and_the_site_limits_are_drawn(graded):
    tree = parse(graded["html"])
    units = {r["unit_id"] for r in graded["records"]}
    plots = [a for tag, a in tree.tags if tag == "svg" and a.get("class") == "plot"]
    assert len(plots) == 3 * len(units)
    assert any("Acid number rise" in a["aria-label"] for a in plots)
    site = yaml.safe_load(RULES.read_text())
    acid = next(r for r in site["classes"]["steam-turbine"]["rules"] if r["id"] == "acid-rise")
    ruleset = load_ruleset(RULES)
    drawn = sorted((line.level, line.y) for line in limit_lines(ruleset, "steam-turbine", "an_rise"))
    assert drawn == [(ruleset.grades.index(g), float(v)) for g, v in acid["above"].items()]
    # gas-turbine visc-drift: outside ±5 watch, ±10 alert (rules/gas-turbine.yaml), drawn as two lines each
    shipped = yaml.safe_load((ROOT / "rules" / "gas-turbine.yaml").read_text())
    drift = next(r for r in shipped["classes"]["gas-turbine"]["rules"] if r["id"] == "visc-drift")
    ys = sorted(line.y for line in limit_lines(ruleset, "gas-turbine", "kv40_change_pct"))
    expected = sorted([float(v) for v in drift["outside"].values()] + [-float(v) for v in drift["outside"].values()])
    assert ys == expected


def test_plotted_rise_is_the_lab_value_less_the_site_new_oil_value(graded):
    ruleset = load_ruleset(RULES)
    new_an = yaml.safe_load(RULES.read_text())["lubricants"]["TURB-46-M"]["an"]
    acid = next(t for t in TRENDS if t.raw == "an")
    st1 = [r for r in graded["records"] if r["unit_id"] == "ST-1" and r["values"].get("an") is not None]
    for record in st1:
        assert plotted_value(acid, record, ruleset) == pytest.approx(record["values"]["an"] - new_an, abs=1e-9)
    # a subtraction reading is its own rise (scenarios/brackwater/README.md: BP-0260 reads 41.0)
    oxidation = next(t for t in TRENDS if t.raw == "oxidation")
    split = next(r for r in graded["records"] if r["sample_id"] == "BP-0260")
    assert split["method"] == "subtraction"
    assert plotted_value(oxidation, split, ruleset) == pytest.approx(split["values"]["oxidation"])


def test_oil_changes_are_found_where_the_scenario_says(graded):
    views = {v.unit_id: v for v in unit_views(graded["records"])}
    # scenarios/brackwater/README.md: ST-2 changed 18 July, BP-0182 first after; AC-1 in May, BP-0111
    for unit, first_after in (("ST-2", "BP-0182"), ("AC-1", "BP-0111")):
        samples = views[unit].samples
        assert [samples[k]["sample_id"] for k in oil_changes(samples)] == [first_after]
    tree = parse(graded["html"])
    assert sum(1 for tag, a in tree.tags if tag == "g" and a.get("class") == "event") >= 6  # 2 changes x 3 plots


def test_units_needing_attention_come_first(graded):
    views = unit_views(graded["records"])
    ranks = [(-1 if v.latest_level is None else v.latest_level) for v in views]
    top = max(r["level"] or 0 for r in graded["records"])
    assert views[0].latest_level == top
    graded_ranks = [r for r in ranks if r >= 0]
    assert graded_ranks == sorted(graded_ranks, reverse=True)


def test_without_the_rule_set_the_plots_show_lab_values_and_no_limits(graded, tmp_path):
    out = tmp_path / "raw.html"
    code, _, err = cli("report", "--results", graded["results"], "--out", out)
    assert code == 0, err
    html = out.read_text()
    assert 'class="limit"' not in html and "no limits are drawn" in html
    assert "rows the grader rejected are not counted" in html


def test_a_rule_set_other_than_the_grading_one_is_refused(graded, tmp_path):
    code, _, err = cli("report", "--results", graded["results"], "--rules", ROOT / "rules" / "gearbox.yaml",
                       "--out", tmp_path / "x.html")
    assert code == 2
    assert "is not the one the results were graded with" in err
    assert not (tmp_path / "x.html").exists()


def test_bad_result_lines_are_named_by_line_and_field():
    good = json.dumps({"sample_id": "A", "grade": "normal", "level": 0, "reasons": [], "caveats": [],
                       "notice": "n", "ruleset": {"id": "r", "version": 1, "sha256": "ab"}, "engine": "e"})
    with pytest.raises(InputError, match=r"r\.jsonl: line 2: not a JSON object"):
        parse_results([good, "{oops"], "r.jsonl")
    with pytest.raises(InputError, match=r"line 1: field 'reasons': expected list, found nothing"):
        parse_results([good.replace('"reasons": [], ', "")], "r.jsonl")
    with pytest.raises(InputError, match=r"line 1: field 'level'"):
        parse_results([good.replace('"level": 0', '"level": "high"')], "r.jsonl")
    with pytest.raises(InputError, match=r"line 2: graded by rule set r sha256 cd"):
        parse_results([good, good.replace('"ab"', '"cd"')], "r.jsonl")
    with pytest.raises(InputError, match="no result records"):
        parse_results(["", "  "], "r.jsonl")
    with pytest.raises(InputError, match=r"x\.csv: line 1: header lacks reason"):
        parse_rejects("file,row,field\n", "x.csv")
    assert parse_rejects("file,row,sample_id,field,reason\nf,7,S1,kv40,bad\n", "x.csv")[0]["row"] == "7"


def test_demo_writes_the_report(tmp_path):
    code, out, err = cli("demo", "--out", tmp_path)
    assert code == 0, err
    report = tmp_path / "brackwater-report.html"
    assert f"report: {report}" in out
    tree = parse(report.read_text())
    records = [json.loads(x) for x in (tmp_path / "brackwater-results.jsonl").read_text().splitlines()]
    assert {r["sample_id"] for r in records if (r["level"] or 0) > 0} <= set(tree.articles)


def test_report_runs_as_a_subprocess(graded, tmp_path):
    out = tmp_path / "sub.html"
    done = subprocess.run([sys.executable, "-m", "sumpwise", "report", "--results", str(graded["results"]),
                           "--rules", str(RULES), "--out", str(out)], cwd=ROOT, capture_output=True, text=True,
                          timeout=120)
    assert done.returncode == 0, done.stderr
    assert "flagged" in done.stderr and out.read_text().startswith("<!DOCTYPE html>")
    missing = subprocess.run([sys.executable, "-m", "sumpwise", "report", "--results", str(tmp_path / "none.jsonl"),
                              "--out", str(out)], cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert missing.returncode == 2 and "none.jsonl: no such file" in missing.stderr


def _luminance(colour: str) -> float:
    """Relative luminance, WCAG 2.1 (W3C Recommendation), definition of 'relative luminance'."""
    def channel(c: int) -> float:
        s = c / 255
        return s / 12.92 if s <= 0.04045 else ((s + 0.055) / 1.055) ** 2.4
    r, g, b = (int(colour[k:k + 2], 16) for k in (1, 3, 5))
    return 0.2126 * channel(r) + 0.7152 * channel(g) + 0.0722 * channel(b)


def test_grade_looks_differ_by_shape_and_meet_non_text_contrast():
    looks = list(_LOOKS) + [UNRATED_LOOK]
    assert len({look.shape for look in looks}) == len(looks)
    assert len({look.colour for look in looks}) == len(looks)
    assert len({look.dashes for look in looks}) == len(looks)
    for look in looks:
        # WCAG 2.1 success criterion 1.4.11, non-text contrast: at least 3:1 against the (white) background
        assert (1.0 + 0.05) / (_luminance(look.colour) + 0.05) >= 3.0, look


@pytest.mark.parametrize("low, high", [(0, 0.49), (-10, 10), (1.4, 45.7), (0.003, 0.0071), (120, 120)])
def test_nice_ticks_are_one_two_five_steps_covering_the_range(low, high):
    # the 1-2-5 tick step: common practice, no source
    ticks = nice_ticks(low, high, 6)
    step = ticks[1] - ticks[0]
    mantissa = step / 10 ** __import__("math").floor(__import__("math").log10(step))
    assert round(mantissa, 6) in (1.0, 2.0, 5.0)
    assert ticks[0] <= low and ticks[-1] >= high
    assert len(ticks) <= 8


def test_date_ticks_fall_on_month_starts():
    first, last = date(2026, 1, 5).toordinal(), date(2026, 12, 31).toordinal()
    ticks = date_ticks(first, last, 6)
    # month starts checked against the standard library calendar
    for ordinal, label in ticks:
        day = date.fromordinal(ordinal)
        assert day.day == 1 and label == f"{day.year}-{day.month:02d}"
        assert calendar.monthrange(day.year, day.month)[1] >= 28
    assert [date.fromordinal(t).month for t, _ in ticks] == [3, 5, 7, 9, 11]
