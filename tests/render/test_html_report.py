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
from sumpwise.render.html_report import (Ladder, limit_lines, parse_rejects, parse_results, recorded_bound,
                                         recorded_value, render_report, starts_charge, unit_plots, unit_views)
from sumpwise.render.svg_plot import _LOOKS, UNRATED_LOOK, date_ticks, nice_ticks, render_plot

ROOT = Path(__file__).resolve().parents[2]
SCENARIO = ROOT / "scenarios" / "brackwater"
RULES = SCENARIO / "site.yaml"
DATA = ROOT / "tests" / "data" / "report"


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


def _sections(html: str) -> dict[str, str]:
    """Each unit's section of the report, by unit id."""
    parts = html.split('<section class="unit" id="unit-')[1:]
    return {part.split('"', 1)[0]: part.split("</section>", 1)[0] for part in parts}


def _flat(html: str) -> str:
    return " ".join(" ".join(parse(html).text).split())


def test_every_flagged_sample_is_there_with_every_reason_and_its_source(graded):
    tree = parse(graded["html"])
    sections = _sections(graded["html"])
    flagged = [r for r in graded["records"] if (r["level"] or 0) > 0]
    assert len(flagged) > 50  # the demo batch has many findings; the check below must cover them
    for record in flagged:
        unit_text = _flat(sections[record["unit_id"]])
        if record["sample_id"] in tree.articles:  # the unit's latest sample: every detail
            text = " ".join(" ".join(tree.articles[record["sample_id"]]).split())
            for reason in record["reasons"]:
                assert reason["rule"] in text and " ".join(reason["source"].split()) in text
                if "measure" in reason:
                    shown = reason["limit"] if isinstance(reason["limit"], list) else [reason["limit"]]
                    assert all(f"{float(v):.6g}" in text for v in shown)
            for caveat in record["caveats"]:
                assert " ".join(caveat["message"].split()) in text
        else:  # an earlier flagged sample: one compact row, the sources once per unit
            row = sections[record["unit_id"]].split(f"data-sample='{record['sample_id']}'", 1)[1].split("</tr>")[0]
            row_text = _flat("<tr " + row)
            assert record["grade"] in row_text
            for reason in record["reasons"]:
                assert reason["rule"] in row_text
                if "measure" in reason:
                    assert reason["measure"] in row_text and f"{float(reason['value']):.6g}" in row_text
            for caveat in record["caveats"]:
                assert caveat["caveat"] in row_text
        for reason in record["reasons"]:
            assert " ".join(reason["source"].split()) in unit_text, (record["sample_id"], reason["rule"])
    latest_ids = set(tree.articles)
    assert len(latest_ids) == len({r["unit_id"] for r in graded["records"]})  # one card per unit


def test_the_notice_is_printed_once_a_page_not_once_a_sample(graded):
    html = graded["html"]
    notice = graded["records"][0]["notice"]
    foot = html.split("<tfoot>", 1)[1].split("</tfoot>", 1)[0]
    assert notice in foot  # the foot band repeats on every printed page
    assert html.count(notice) == 2  # the foot band and the report's opening


def test_each_unit_lists_what_to_do_from_its_latest_findings(graded):
    sections = _sections(graded["html"])
    site = yaml.safe_load(RULES.read_text())
    water = next(r for r in site["classes"]["steam-turbine"]["rules"] if r["id"] == "water")
    task = water["next_step"]["task"]
    for unit in {r["unit_id"] for r in graded["records"]}:
        samples = sorted((r for r in graded["records"] if r["unit_id"] == unit), key=lambda r: r["sampled_on"])
        fired = {x["rule"] for x in samples[-1]["reasons"]}
        text = _flat(sections[unit].split("<h4>What to do</h4>", 1)[-1].split("</ul>", 1)[0])
        if samples[-1]["unit_id"].startswith("ST-") and "water" in fired:
            assert task in text and f"within {water['next_step']['within_days']} days" in text
        steps = [x["next_step"]["task"] for x in samples[-1]["reasons"] + samples[-1]["caveats"] if x.get("next_step")]
        for step in steps:
            assert step in text, (unit, step)
        if not steps:
            assert "<h4>What to do</h4>" not in sections[unit]
        row = graded["html"].split(f'<tr data-unit="{unit}">', 1)[1].split("</tr>", 1)[0]
        assert all(step in _flat(row) for step in steps), (unit, steps)  # the attention table says it too
    # the demo's latest samples ask for at least one step (AC-3's ester caveat asks for an RPVOT)
    assert any("<h4>What to do</h4>" in section for section in sections.values())


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


def _class_reads(ruleset, class_name: str) -> list[str]:
    """Measures a class's rules read, straight from the compiled rules (oil hours go on the tooltip)."""
    from sumpwise.ruleset.model import LadderRule, condition_measures
    names = []
    for rule in ruleset.rules_for(class_name):
        names += [rule.measure] if isinstance(rule, LadderRule) else condition_measures(rule.when)
    return [n for n in dict.fromkeys(names) if n != "oil_hours"]


def test_each_unit_plots_what_its_class_rules_read_flagged_first_with_the_site_limits(graded):
    ruleset = load_ruleset(RULES)
    views = {v.unit_id: v for v in unit_views(graded["records"], ruleset)}
    sections = _sections(graded["html"])
    for unit, view in views.items():
        labels = [a["aria-label"].split(" (")[0] for tag, a in parse(sections[unit]).tags
                  if tag == "svg" and a.get("class") == "plot"]
        assert sorted(labels) == sorted(_class_reads(ruleset, view.class_name)), unit
        fired = [m for r in view.samples[-1]["reasons"]
                 for m in ([r["measure"]] if "measure" in r else [c["measure"] for c in r["clauses"] if "measure" in c])
                 if m != "oil_hours"]
        if fired:
            assert labels[0] in fired, (unit, labels, fired)  # the latest findings' measures come first
    # the demo site's seawater leak is plotted on the steam turbines (the issue: water was never plotted)
    assert "water" in [w.measure for w in views["ST-2"].watched]
    site = yaml.safe_load(RULES.read_text())
    acid = next(r for r in site["classes"]["steam-turbine"]["rules"] if r["id"] == "acid-rise")
    drawn = sorted((line.level, line.y) for line in limit_lines(ruleset, "steam-turbine", "an_rise"))
    assert drawn == [(ruleset.grades.index(g), float(v)) for g, v in acid["above"].items()]
    water = next(r for r in site["classes"]["steam-turbine"]["rules"] if r["id"] == "water")
    on_plot = next(w for w in views["ST-2"].watched if w.measure == "water").limits
    assert sorted(line.y for line in on_plot) == sorted(float(v) for v in water["above"].values())
    # gas-turbine visc-drift: outside ±5 watch, ±10 alert (rules/gas-turbine.yaml), drawn as two lines each
    shipped = yaml.safe_load((ROOT / "rules" / "gas-turbine.yaml").read_text())
    drift = next(r for r in shipped["classes"]["gas-turbine"]["rules"] if r["id"] == "visc-drift")
    ys = sorted(line.y for line in limit_lines(ruleset, "gas-turbine", "kv40_change_pct"))
    expected = sorted([float(v) for v in drift["outside"].values()] + [-float(v) for v in drift["outside"].values()])
    assert ys == expected


def test_every_plotted_value_is_the_engines_own_and_the_x_axis_is_the_date(graded):
    from sumpwise import grade, read_samples
    ruleset = load_ruleset(RULES)
    batch = grade(read_samples(SCENARIO / "samples.csv"), ruleset)
    engine = batch.measured.set_index("sample_id")
    records = {r["sample_id"]: r for r in graded["records"]}
    ladder = Ladder.of(graded["records"], ruleset)
    checked = 0
    for view in unit_views(graded["records"], ruleset):
        for plot in unit_plots(view, ladder):
            for point in (p for run in plot.runs for p in run):
                sample = point.label.split(" · ")[0]
                assert point.x == date.fromisoformat(records[sample]["sampled_on"]).toordinal()
                assert point.y == pytest.approx(float(engine.at[sample, plot.title]), abs=1e-12), (sample, plot.title)
                checked += 1
            drawn = {p.label.split(" · ")[0] for run in plot.runs for p in run}
            carried = {s["sample_id"] for s in view.samples if recorded_value(s, plot.title) is not None}
            assert drawn == carried  # every value a record carries is drawn, and nothing else
    assert checked > 400


def test_the_plot_uses_the_rows_own_new_oil_value_as_the_engine_did(tmp_path):
    # The case: the lubricants table says new an 0.04, the row's own new_an says 0.07; the engine
    # grades an_rise = 0.09 - 0.07 = 0.02 (the row wins: README, "New-oil values"), never 0.05.
    rules = DATA / "new-an.yaml"
    results = tmp_path / "r.jsonl"
    code, _, err = cli("grade", DATA / "new-an.csv", "--rules", rules, "--out", results)
    assert code == 0, err
    records = parse_results(results.read_text().splitlines(), "r.jsonl")
    ruleset = load_ruleset(rules)
    (view,) = unit_views(records, ruleset)
    plot = next(p for p in unit_plots(view, Ladder.of(records, ruleset)) if p.title == "an_rise")
    points = {p.label.split(" · ")[0]: p.y for run in plot.runs for p in run}
    assert points["N2"] == pytest.approx(0.35 - 0.07)  # fired: the reason's value
    quiet = next(r for r in records if r["sample_id"] == "N1")
    if "derived" in quiet:  # records that carry the engine's derived values: drawn as graded
        assert points["N1"] == pytest.approx(0.02)
    else:  # older records: not drawn rather than recomputed from the lubricants table
        assert "N1" not in points
    assert all(abs(y - 0.05) > 1e-9 for y in points.values())


def test_oil_changes_are_the_ones_the_engine_recorded(graded):
    views = {v.unit_id: v for v in unit_views(graded["records"], load_ruleset(RULES))}
    # scenarios/brackwater/README.md: ST-2 changed 18 July, BP-0182 first after; AC-1 in May, BP-0111
    for unit, first_after in (("ST-2", "BP-0182"), ("AC-1", "BP-0111")):
        samples = views[unit].samples
        assert [s["sample_id"] for s in samples if starts_charge(s)] == [first_after]
        plots = unit_plots(views[unit], Ladder.of(graded["records"], None))
        for plot in plots:
            assert len(plot.marks) == 1
            if len(plot.runs) == 2:  # values on both sides of the change: two lines, split at the change
                before, after = plot.runs
                assert max(p.x for p in before) < plot.marks[0].x < min(p.x for p in after)
    sections = _sections(graded["html"])
    drawn = [p for p in unit_plots(views["ST-2"], Ladder.of(graded["records"], None)) if p.runs]
    assert sections["ST-2"].count('class="event"') == len(drawn) > 0


def test_an_oil_change_flag_is_drawn_from_the_record(tmp_path):
    records = [_record("F1", "2026-01-05", 0, {"water": 80.0}), _record("F2", "2026-02-05", 0, {"water": 90.0}),
               dict(_record("F3", "2026-03-05", 0, {"water": 30.0}), oil_changed=True)]
    (view,) = unit_views(records, load_ruleset(DATA / "new-an.yaml"))
    plot = next(p for p in unit_plots(view, Ladder.of(records, None)) if p.title == "water")
    assert [len(run) for run in plot.runs] == [2, 1] and len(plot.marks) == 1


def test_units_needing_attention_come_first(graded):
    views = unit_views(graded["records"], load_ruleset(RULES))
    ranks = [(-1 if v.latest_level is None else v.latest_level) for v in views]
    top = max(r["level"] or 0 for r in graded["records"])
    assert views[0].latest_level == top
    graded_ranks = [r for r in ranks if r >= 0]
    assert graded_ranks == sorted(graded_ranks, reverse=True)


def _record(sample_id, sampled_on, level, values, grade=None, reasons=(), unit="U-1"):
    grades = ("normal", "watch", "alert", "urgent")
    return {"sample_id": sample_id, "unit_id": unit, "class": "steam-turbine", "lubricant": "TURB-46-M",
            "sampled_on": sampled_on, "values": values, "method": "direct",
            "grade": grade or grades[level], "level": level, "reasons": list(reasons), "caveats": [],
            "not_evaluated": [], "notice": "n", "ruleset": {"id": "r", "version": 1, "sha256": "ab"}, "engine": "e"}


def test_the_trend_column_follows_the_values_not_only_the_grades(tmp_path):
    # water climbs 40, 60, 85 ppm under a watch limit of 100: the grade stays normal, the values do not
    rules = DATA / "new-an.yaml"
    ruleset = load_ruleset(rules)
    climbing = [_record(f"W{k}", f"2026-0{k}-01", 0, {"water": w}, unit="ST-9") for k, w in ((1, 40.0), (2, 60.0),
                                                                                          (3, 85.0))]
    noisy = [_record(f"Q{k}", f"2026-0{k}-01", 0, {"water": w}, unit="ST-8") for k, w in ((1, 40.0), (2, 70.0),
                                                                                       (3, 55.0))]
    views = {v.unit_id: v for v in unit_views(climbing + noisy, ruleset)}
    assert views["ST-9"].grade_move == "same" and views["ST-9"].rising == ("water",)
    assert "worsening: water" in views["ST-9"].trend
    assert views["ST-8"].rising == () and views["ST-8"].trend == "grade steady"
    assert [v.unit_id for v in unit_views(climbing + noisy, ruleset)] == ["ST-9", "ST-8"]


@pytest.mark.parametrize("levels", [[0], [2], [1, 3], [2, 2, 3]])
def test_any_valid_results_render_without_the_rule_set(levels, tmp_path):
    # issue 10: one sample; issue 14: results that do not hold every grade from the lowest up
    names = {0: "normal", 1: "watch", 2: "alert", 3: "urgent"}
    reason = {"rule": "water", "measure": "water", "value": 500.0, "unit": "ppm", "test": "above", "limit": 300,
              "grade": "alert", "message": "m", "source": "s"}
    records = [_record(f"L{k}", f"2026-0{k + 1}-01", level, {"water": 500.0},
                       reasons=[dict(reason, grade=names[level])] if level else ()) for k, level in enumerate(levels)]
    path = tmp_path / "few.jsonl"
    path.write_text("".join(json.dumps(r) + "\n" for r in records))
    code, _, err = cli("report", "--results", path, "--out", tmp_path / "few.html")
    assert code == 0, err
    html = (tmp_path / "few.html").read_text()
    for level in levels:
        assert names[level] in html
    ladder = Ladder.of(parse_results(path.read_text().splitlines(), "few.jsonl"), None)
    assert ladder.names[max(levels)] == names[max(levels)] and len(ladder.names) == max(levels) + 1


def test_a_one_sample_file_renders_from_the_real_grader(tmp_path):
    one = tmp_path / "one.csv"
    lines = (SCENARIO / "samples.csv").read_text().splitlines()
    one.write_text(lines[0] + "\n" + lines[1] + "\n")
    results = tmp_path / "one.jsonl"
    assert cli("grade", one, "--rules", RULES, "--out", results)[0] == 0
    for extra in ((), ("--rules", RULES)):
        code, _, err = cli("report", "--results", results, "--out", tmp_path / "one.html", *extra)
        assert code == 0, err


def test_without_the_rule_set_the_plots_follow_the_findings_and_draw_no_limits(graded, tmp_path):
    out = tmp_path / "raw.html"
    code, _, err = cli("report", "--results", graded["results"], "--out", out)
    assert code == 0, err
    html = out.read_text()
    assert 'class="limit"' not in html and "no limits are drawn" in html
    assert "rows the grader rejected are not counted" in html
    views = {v.unit_id: v for v in unit_views(graded["records"])}
    fired = {m for s in views["ST-2"].samples for r in s["reasons"] if "measure" in r for m in [r["measure"]]}
    assert fired <= {w.measure for w in views["ST-2"].watched}


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
    html = report.read_text()
    records = [json.loads(x) for x in (tmp_path / "brackwater-results.jsonl").read_text().splitlines()]
    for record in records:
        if (record["level"] or 0) > 0:
            assert f"data-sample=\"{record['sample_id']}\"" in html or f"data-sample='{record['sample_id']}'" in html
    # the demo grades in-process, so its report draws the engine's own forecasts, each in its unit's card
    from sumpwise import grade, read_samples
    ruleset = load_ruleset(RULES)
    forecasts = grade(read_samples(SCENARIO / "samples.csv", None, None, None, ruleset.measures), ruleset).forecasts
    dated = [f for f in forecasts if f.on]
    assert dated  # scenarios/brackwater/README.md walks through SWP-3's iron forecast
    sections = _sections(html)
    for unit in {f.unit_id for f in dated}:
        mine = [f for f in dated if f.unit_id == unit]
        assert sections[unit].count('class="projection"') == len(mine), unit
        for f in mine:
            assert f"{f.rule}: {f.measure} reaches the {f.grade} limit" in _flat(sections[unit])


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


def test_a_forecast_is_drawn_from_the_last_sample_to_the_limit_it_reaches(graded):
    # The forecast's numbers are given here in the shape derive.forecast.Forecast.to_record writes; the
    # report only places them: from the unit's latest sample to the limit on the forecast's date.
    ruleset = load_ruleset(RULES)
    view = next(v for v in unit_views(graded["records"], ruleset) if v.unit_id == "ST-1")
    latest = view.samples[-1]
    ahead = {"unit_id": "ST-1", "sample_id": latest["sample_id"], "rule": "water", "measure": "water",
             "unit": "ppm", "grade": "alert", "test": "above", "limit": 300.0, "samples": 5, "value": 120.0,
             "on": "2027-03-01", "on_low": "2027-01-15", "on_high": None, "method": "a stated method"}
    undated = dict(ahead, on=None, on_low=None, rule="acid-rise", measure="an_rise")
    ladder = Ladder.of(graded["records"], ruleset)
    plots = {p.title: p for p in unit_plots(view, ladder, [ahead, undated])}
    (drawn,) = plots["water"].projections
    assert (drawn.x0, drawn.y0) == (date.fromisoformat(latest["sampled_on"]).toordinal(), 120.0)
    assert (drawn.x1, drawn.y1) == (date(2027, 3, 1).toordinal(), 300.0)
    assert drawn.x_low == date(2027, 1, 15).toordinal() and drawn.x_high is None
    assert drawn.level == ruleset.grades.index("alert")
    assert plots["an_rise"].projections == ()  # no date to place it on an axis of dates
    # the report draws the forecasts the records carry: this one alone, on the latest sample's record, as `grade`
    # puts a forecast on the sample it was made from (the engine's own forecasts taken off)
    records = [dict(r, forecasts=[ahead] if r["sample_id"] == latest["sample_id"] else [])
               for r in graded["records"]]
    html = render_report(records, (), ruleset)
    section = _sections(html)["ST-1"]
    assert section.count('class="projection"') == 1
    assert "water reaches the alert limit (above 300 ppm) about 2027-03-01" in _flat(section)
    assert all('class="projection"' not in s for unit, s in _sections(html).items() if unit != "ST-1")


def test_without_the_rule_set_the_way_to_worse_comes_from_the_findings():
    # water 320 ppm crossed an `above` limit of 300 (alert); then 120, 150, 190 ppm after a fix: normal but climbing
    finding = {"rule": "water", "measure": "water", "value": 320.0, "unit": "ppm", "test": "above", "limit": 300,
               "grade": "alert", "message": "m", "source": "s"}
    records = [_record("A1", "2026-01-01", 2, {"water": 320.0}, reasons=[finding])]
    records += [_record(f"A{k}", f"2026-0{k}-01", 0, {"water": w}) for k, w in ((2, 120.0), (3, 150.0), (4, 190.0))]
    (view,) = unit_views(records)
    assert view.rising == ("water",) and view.grade_move == "same"
    falling = records[:1] + [_record(f"B{k}", f"2026-0{k}-01", 0, {"water": w})
                             for k, w in ((2, 190.0), (3, 150.0), (4, 120.0))]
    assert unit_views(falling)[0].rising == ()


def test_records_that_name_one_level_twice_are_refused_not_drawn_wrongly(tmp_path):
    records = [_record("C1", "2026-01-01", 1, {"water": 150.0}), _record("C2", "2026-02-01", 1, {"water": 160.0},
                                                                           grade="caution")]
    path = tmp_path / "mixed.jsonl"
    path.write_text("".join(json.dumps(r) + "\n" for r in records))
    code, _, err = cli("report", "--results", path, "--out", tmp_path / "mixed.html")
    assert code == 2 and "level 1 both 'watch' and 'caution'" in err


def test_text_from_the_records_is_escaped_in_steps_and_findings():
    hostile = "<script>alert(1)</script>"
    finding = {"rule": "water", "measure": "water", "value": 500.0, "unit": "ppm", "test": "above", "limit": 300,
               "grade": "alert", "message": hostile, "source": hostile, "next_step": {"task": hostile}}
    records = [_record("H1", "2026-01-01", 2, {"water": 500.0}, reasons=[finding], unit=hostile)]
    html = render_report(records)
    assert "<script>" not in html and "&lt;script&gt;" in html


def test_an_oil_change_flagged_in_the_samples_file_is_drawn(tmp_path):
    # issue 10: a change flagged with `oil_changed` (oil hours still climbing, so only the flag says so)
    results = tmp_path / "r.jsonl"
    code, _, err = cli("grade", DATA / "oil-change.csv", "--rules", DATA / "new-an.yaml", "--out", results)
    assert code == 0, err
    records = parse_results(results.read_text().splitlines(), "r.jsonl")
    ruleset = load_ruleset(DATA / "new-an.yaml")
    (view,) = unit_views(records, ruleset)
    water = next(p for p in unit_plots(view, Ladder.of(records, ruleset)) if p.title == "water")
    assert [[p.label.split(" · ")[0] for p in run] for run in water.runs] == [["A", "B"], ["C"]]
    assert len(water.marks) == 1 and water.marks[0].label == "oil changed"


def test_condition_clauses_show_each_value_and_limit_with_its_measures_unit():
    # BP-0412 of the rule-language draft: young-oil-oxidising holds on oil_hours 1500 h (below 2000 h) and
    # oxidation_rise 19 abs/cm (above 10 abs/cm); the units are the measure table's (engine/vocabulary/measures.py)
    from sumpwise import grade, read_samples
    from sumpwise.render.jsonl import dumps
    ruleset = load_ruleset(ROOT / "tests" / "data" / "rulesets" / "draft.yaml")
    record = json.loads(dumps(grade(read_samples(ROOT / "tests" / "data" / "samples" / "draft-record.csv"), ruleset)
                              .result(0).to_record()))
    html = _flat(render_report([record], (), ruleset))
    assert "oil_hours = 1500 h" in html and "below 2000 h: holds" in html
    assert "oxidation_rise = 19 abs/cm" in html and "above 10 abs/cm: holds" in html


def test_the_latest_sample_shows_the_lab_comment_and_what_an_undecided_reading_was(tmp_path):
    # The invented semicolon export (tests/data/samples/lab-semicolon.csv) carries a remarks column
    # and censored readings: BP-S3's oil hours '>20000' and carbonyl '<1' leave carbonyl-rising-fast
    # undecided. Issue 12: a lab's comment reaches the record, explain and the report; a reading
    # written as a bound is present, so the report names it as written, as explain does.
    export, cmap = ROOT / "tests/data/samples/lab-semicolon.csv", ROOT / "tests/data/samples/lab-semicolon.yaml"
    results, report = tmp_path / "results.jsonl", tmp_path / "report.html"
    assert cli("grade", export, "--columns", cmap, "--rules", RULES, "--out", results)[0] == 0
    assert cli("report", "--results", results, "--rules", RULES, "--out", report)[0] == 0
    tree = _Tree()
    tree.feed(report.read_text())
    latest = " ".join(tree.articles["BP-S3"])
    assert "lab comment: oil changed last week" in latest
    assert "oil_hours written '>20000'" in latest and "oxidation written '<1'" in latest


def test_a_reading_written_as_a_bound_is_drawn_as_a_bound_not_left_off(tmp_path):
    # ST-1 in lab-semicolon.csv (invented): BP-S1's water '<50' and BP-S2's '>5000', which fires the
    # site's urgent water rule. The plot must show both (at the bound, an arrow pointing the way the
    # reading lies, the tooltip quoting it as written and saying it is a bound), never an empty
    # panel; no line joins a bound, since it is not a value.
    export, cmap = ROOT / "tests/data/samples/lab-semicolon.csv", ROOT / "tests/data/samples/lab-semicolon.yaml"
    results = tmp_path / "results.jsonl"
    assert cli("grade", export, "--columns", cmap, "--rules", RULES, "--out", results)[0] == 0
    records = parse_results(results.read_text().splitlines(), "results.jsonl")
    ruleset = load_ruleset(RULES)
    (view,) = [v for v in unit_views(records, ruleset) if v.unit_id == "ST-1"]
    water = next(p for p in unit_plots(view, Ladder.of(records, ruleset)) if p.title == "water")
    assert [(b.y, b.bound, b.level) for b in water.bounds] == [(50.0, "<", 0), (5000.0, ">", 3)]
    assert water.bounds[1].label.endswith("water >5000 ppm as written: a bound, not a value")
    assert [p.y for run in water.runs for p in run] == []
    svg = render_plot(water)
    assert svg.count('class="bound"') == 2 and "no values recorded" not in svg
    # a decimal-comma export's bound as written ('<0,05': intake refuses a point there) and the forms
    # that are not bounds (a word, a decimal comma beside a point)
    assert recorded_bound({"values": {"an": "<0,05"}}, "an") == ("<", 0.05)
    assert recorded_bound({"values": {"an": "\u22651,5"}}, "an") == (">=", 1.5)
    assert [recorded_bound({"values": {"an": t}}, "an") for t in ("ND", "<1.000,5", None, 0.05)] == [None] * 4


def test_a_sample_graded_on_less_than_it_should_is_in_the_report_even_when_not_latest(tmp_path):
    # Issue 12's misspelt lubricant code: U1's 'TURB-46M' leaves its new-oil values missing, so an
    # acid number of 0.5 (a rise of 0.43 on TURB-46-M's 0.07, urgent above 0.4 at this site) grades
    # normal. U2, the unit's next sample, is the card's latest. The report must still show U1 with
    # its caveat (the unit's earlier samples) and count the caveat for the batch.
    samples = tmp_path / "unk.csv"
    samples.write_text("sample_id,unit_id,class,lubricant,sampled_on,oil_hours,an,water\n"
                       "U1,ST-1,steam-turbine,TURB-46M,2026-03-01,38000,0.5,50\n"
                       "U2,ST-1,steam-turbine,TURB-46-M,2026-03-15,38300,0.1,50\n", encoding="utf-8")
    results, report = tmp_path / "results.jsonl", tmp_path / "report.html"
    assert cli("grade", samples, "--rules", RULES, "--out", results)[0] == 0
    assert cli("report", "--results", results, "--rules", RULES, "--out", report)[0] == 0
    html = report.read_text()
    tree = parse(html)
    rows = [attrs for tag, attrs in tree.tags if tag == "tr" and attrs.get("data-sample") == "U1"]
    assert rows, "U1 is not in ST-1's table of earlier samples"
    text = " ".join(tree.text)
    assert "unknown-lubricant" in text and "1 sample(s) with caveat unknown-lubricant" in text


def test_a_noisy_rate_is_worded_from_the_records_numbers_in_format_4_and_kept_as_said_in_format_3(tmp_path):
    # The resample fixture (tests/data/derive_found4, invented): B-603's iron rate 100 per 1000 h
    # from a step of 2 ppm within its 2 ppm margin. A format-4 record holds the interval as numbers;
    # the report words them as explain does. A format-3 record (0.6.0) held the sentence itself.
    found = ROOT / "tests/data/derive_found4"
    results, report, samples = tmp_path / "results.jsonl", tmp_path / "report.html", tmp_path / "upto-b603.csv"
    samples.write_text("".join((found / "resample.csv").read_text().splitlines(keepends=True)[:4]))  # B-603 latest
    assert cli("grade", samples, "--rules", found / "rules.yaml", "--out", results)[0] == 0
    records = [json.loads(line) for line in results.read_text().splitlines()]
    (gap,) = [g for r in records if r["sample_id"] == "B-603" for g in r["not_evaluated"] if g["rule"] == "iron-rate"]
    assert gap["undecided"] == {"iron_step_per_1000h": {"rate": 100.0, "interval": [0.0, 200.0], "step": 2.0,
                                                        "margin": 2.0, "hours": 20.0}}
    sentence = "iron_step_per_1000h 100, [0, 200] from a step of 2 within its noise margin of 2 over 20 h"
    for rewrite in (lambda r: r, lambda r: {**r, "format": 3, "not_evaluated": [
            {**g, "undecided": {"iron_step_per_1000h": sentence.split(" ", 1)[1]}} if g.get("undecided") else g
            for g in r["not_evaluated"]]}):
        results.write_text("".join(json.dumps(rewrite(r)) + "\n" for r in records))
        assert cli("report", "--results", results, "--rules", found / "rules.yaml", "--out", report)[0] == 0
        tree = _Tree()
        tree.feed(report.read_text())
        assert sentence + " does not decide it" in " ".join(" ".join(tree.articles["B-603"]).split())
