"""One self-contained HTML report of a graded batch: records in, HTML text out.

No scripts, fonts, images or links to anything outside the file: it opens from a USB
stick and prints. Trend plots are inline SVG (svg_plot.py). When the rule set is given,
the plots show the quantities its limits apply to (rise over new oil, change from new
oil), computed with the rule set's new-oil values, with the limits drawn as lines;
without it they show the lab values as reported and draw no limits.
"""

from __future__ import annotations

import csv
import io
import json
from collections import Counter
from dataclasses import dataclass
from datetime import date
from html import escape

from sumpwise.vocabulary.cautions import CAUTIONS
from sumpwise.vocabulary.limit_tests import limit_phrase
from sumpwise.vocabulary.problems import InputError
from sumpwise.ruleset.model import LadderRule, RuleSet
from sumpwise.render.svg_plot import LimitLine, Mark, Plot, Point, grade_look, marker_icon, render_plot

UNRATED = "unrated"

_REQUIRED = {"sample_id": str, "grade": str, "reasons": list, "caveats": list, "notice": str,
             "ruleset": dict, "engine": str}


@dataclass(frozen=True)
class Trend:
    """What one trend plot shows: the lab value, the derived measure its limits apply to."""

    raw: str
    derived: str
    derived_title: str
    derived_unit: str
    raw_title: str
    raw_unit: str


TRENDS = (
    Trend("oxidation", "oxidation_rise", "Oxidation rise over new oil", "abs/cm", "Oxidation (FTIR)", "abs/cm"),
    Trend("an", "an_rise", "Acid number rise over new oil", "mg KOH/g", "Acid number", "mg KOH/g"),
    Trend("kv40", "kv40_change_pct", "Viscosity change at 40 °C", "%", "Viscosity at 40 °C", "mm2/s"),
)


def parse_results(lines, name: str) -> tuple:
    """Result records from JSON Lines text (as `grade` writes them), checked field by field."""
    records = []
    for number, line in enumerate(lines, 1):
        if not line.strip():
            continue
        try:
            record = json.loads(line)
        except json.JSONDecodeError as exc:
            raise InputError(f"{name}: line {number}: not a JSON object: {exc.msg} at column {exc.colno}") from None
        if not isinstance(record, dict):
            raise InputError(f"{name}: line {number}: expected a JSON object (a result record), "
                             f"found {type(record).__name__}")
        for key, kind in _REQUIRED.items():
            if not isinstance(record.get(key), kind):
                found = "nothing" if key not in record else type(record[key]).__name__
                raise InputError(f"{name}: line {number}: field '{key}': expected {kind.__name__}, found {found}")
        level = record.get("level", "absent")
        if not (level is None or (isinstance(level, int) and not isinstance(level, bool) and level >= 0)):
            raise InputError(f"{name}: line {number}: field 'level': expected a whole number >= 0 or null, "
                             f"found {level!r}")
        for key in ("id", "sha256"):
            if not isinstance(record["ruleset"].get(key), str):
                raise InputError(f"{name}: line {number}: field 'ruleset.{key}': expected text")
        first = records[0] if records else record
        if record["ruleset"]["sha256"] != first["ruleset"]["sha256"]:
            raise InputError(f"{name}: line {number}: graded by rule set {record['ruleset']['id']} "
                             f"sha256 {record['ruleset']['sha256'][:12]}..., earlier lines by "
                             f"{first['ruleset']['id']} sha256 {first['ruleset']['sha256'][:12]}...; "
                             f"a report covers one rule set")
        records.append(record)
    if not records:
        raise InputError(f"{name}: no result records in the file")
    return tuple(records)


def parse_rejects(text: str, name: str) -> tuple:
    """Rejected rows as `grade --rejects` writes them: CSV (by the .csv name) or JSON Lines."""
    rows = []
    if name.endswith(".csv"):
        reader = csv.DictReader(io.StringIO(text))
        missing = {"row", "field", "reason"} - set(reader.fieldnames or ())
        if missing:
            raise InputError(f"{name}: line 1: header lacks {', '.join(sorted(missing))}")
        for number, row in enumerate(reader, 2):
            rows.append(_reject(row, name, number))
        return tuple(rows)
    for number, line in enumerate(text.splitlines(), 1):
        if not line.strip():
            continue
        try:
            row = json.loads(line)
        except json.JSONDecodeError as exc:
            raise InputError(f"{name}: line {number}: not a JSON object: {exc.msg} at column {exc.colno}") from None
        if not isinstance(row, dict):
            raise InputError(f"{name}: line {number}: expected a JSON object (a rejected row)")
        rows.append(_reject(row, name, number))
    return tuple(rows)


def _reject(row: dict, name: str, number: int) -> dict:
    for key in ("row", "field", "reason"):
        if row.get(key) in (None, ""):
            raise InputError(f"{name}: line {number}: field '{key}': expected a value, found nothing")
    return {"file": row.get("file") or "", "row": str(row["row"]), "sample_id": row.get("sample_id") or "",
            "field": str(row["field"]), "reason": str(row["reason"])}


@dataclass(frozen=True)
class UnitView:
    """One unit's samples in date order and where it stands."""

    unit_id: str
    class_name: str
    lubricant: str
    samples: tuple
    latest_level: int | None
    trend: str  # worsening, steady, improving, single sample
    worst_level: int | None
    flagged: int


_TREND_RANK = {"worsening": 2, "steady": 1, "single sample": 1, "improving": 0}


def _rank(level: int | None) -> float:
    """Unrated sits above the lowest grade: an unknown state needs a look, but less than a finding."""
    return 0.5 if level is None else float(level)


def _sample_key(record: dict) -> tuple:
    return (record.get("sampled_on") or "9999", record["sample_id"])


def unit_views(records) -> list[UnitView]:
    """Units ordered for attention: latest grade, then worsening first, then the batch's worst grade."""
    by_unit: dict[str, list] = {}
    for record in records:
        by_unit.setdefault(record.get("unit_id") or "(no unit)", []).append(record)
    views = []
    for unit_id, samples in by_unit.items():
        samples = sorted(samples, key=_sample_key)
        latest = samples[-1].get("level")
        if len(samples) == 1:
            trend = "single sample"
        else:
            before = _rank(samples[-2].get("level"))
            trend = "worsening" if _rank(latest) > before else "improving" if _rank(latest) < before else "steady"
        levels = [s["level"] for s in samples if s.get("level") is not None]
        views.append(UnitView(unit_id, samples[-1].get("class") or "", samples[-1].get("lubricant") or "",
                              tuple(samples), latest, trend, max(levels) if levels else None,
                              sum(1 for s in samples if (s.get("level") or 0) > 0)))
    return sorted(views, key=lambda v: (-_rank(v.latest_level), -_TREND_RANK[v.trend],
                                        -_rank(v.worst_level), v.unit_id))


def grade_names(records, ruleset: RuleSet | None) -> tuple:
    """The ladder: from the rule set, else the grades the records show, by level."""
    if ruleset is not None:
        return tuple(ruleset.grades)
    seen = {r["level"]: r["grade"] for r in records if r.get("level") is not None}
    return tuple(seen[level] for level in sorted(seen))


def _level_of(grades: tuple, grade: str) -> int | None:
    return grades.index(grade) if grade in grades else None


def _number(value) -> str:
    if value is None:
        return "missing"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        return f"{value:.6g}"
    if isinstance(value, list):
        return " to ".join(_number(v) for v in value)
    return str(value)


def limit_text(test: str | None, limit, unit: str | None = None) -> str:
    """A limit as words: 'above 0.2 mg KOH/g', 'between 40 and 60', 'one of a, b'."""
    return limit_phrase(test, limit, _number, unit)


def _x_axis(samples) -> tuple[str, list]:
    """Sample date when every sample has one, else oil hours, else the order in the batch."""
    try:
        return "date", [date.fromisoformat(str(s.get("sampled_on"))[:10]).toordinal() for s in samples]
    except ValueError:
        pass
    hours = [(s.get("values") or {}).get("oil_hours") for s in samples]
    if all(isinstance(h, (int, float)) for h in hours):
        return "hours", [float(h) for h in hours]
    return "order", [float(k + 1) for k in range(len(samples))]


def oil_changes(samples) -> list[int]:
    """Indexes of samples that start a new oil charge: flagged oil_changed, or oil hours going down."""
    starts = []
    for k in range(1, len(samples)):
        values, before = samples[k].get("values") or {}, samples[k - 1].get("values") or {}
        flagged = values.get("oil_changed") in (True, 1, "true", "yes")
        hours, prior = values.get("oil_hours"), before.get("oil_hours")
        went_down = isinstance(hours, (int, float)) and isinstance(prior, (int, float)) and hours < prior
        if flagged or went_down:
            starts.append(k)
    return starts


def _new_oil(ruleset: RuleSet, record: dict, name: str):
    lubricant = ruleset.lubricants.get(record.get("lubricant") or "")
    return getattr(lubricant, name) if lubricant is not None else None


def plotted_value(trend: Trend, record: dict, ruleset: RuleSet | None):
    """The y value of one sample on a trend plot, or None when it cannot be drawn."""
    values = record.get("values") or {}
    raw = values.get(trend.raw)
    if not isinstance(raw, (int, float)) or isinstance(raw, bool):
        return None
    subtraction = (record.get("method") or "direct") == "subtraction"
    if ruleset is None:
        return None if trend.raw == "oxidation" and subtraction else float(raw)
    for reason in record["reasons"]:
        if reason.get("measure") == trend.derived and isinstance(reason.get("value"), (int, float)):
            return float(reason["value"])
    new = 0.0 if trend.raw == "oxidation" and subtraction else _new_oil(ruleset, record, trend.raw)
    if new is None:
        return None
    if trend.derived == "kv40_change_pct":
        return round((raw - new) / new * 100.0, 9) if new else None
    return round(raw - new, 9)


def _point_level(trend: Trend, record: dict, grades: tuple) -> int | None:
    """The grade this plot's own rule gave the sample (the lowest grade when it did not fire)."""
    if record.get("level") is None:
        return None
    fired = [_level_of(grades, r["grade"]) for r in record["reasons"] if r.get("measure") == trend.derived]
    fired = [level for level in fired if level is not None]
    return max(fired) if fired else 0


def limit_lines(ruleset: RuleSet, class_name: str, measure: str) -> list[LimitLine]:
    """The ladder limits a class puts on a measure, one line per limit (two for ±)."""
    lines = []
    for rule in ruleset.rules_for(class_name):
        if not isinstance(rule, LadderRule) or rule.measure != measure:
            continue
        for level, limit in rule.steps:
            grade = ruleset.grades[level]
            if isinstance(limit, tuple):
                lines.extend(LimitLine(float(v), level, f"{grade} {v:g}") for v in limit)
            elif rule.test == "outside":
                lines.extend([LimitLine(float(limit), level, f"{grade} +{limit:g}"),
                              LimitLine(-float(limit), level, f"{grade} -{limit:g}")])
            else:
                lines.append(LimitLine(float(limit), level, f"{grade} {limit:g}"))
    return lines


def unit_plots(view: UnitView, ruleset: RuleSet | None, grades: tuple) -> list[Plot]:
    samples = view.samples
    x_kind, xs = _x_axis(samples)
    starts = oil_changes(samples)
    bounds = [0] + starts + [len(samples)]
    marks = ()
    if x_kind != "hours":
        marks = tuple(Mark((xs[k - 1] + xs[k]) / 2, "oil changed") for k in starts)
    plots = []
    for trend in TRENDS:
        ys = [plotted_value(trend, s, ruleset) for s in samples]
        runs = []
        for first, end in zip(bounds, bounds[1:]):
            run = tuple(Point(xs[k], ys[k], _point_level(trend, samples[k], grades),
                              f"{samples[k]['sample_id']} {samples[k].get('sampled_on') or ''}: {ys[k]:.4g}")
                        for k in range(first, end) if ys[k] is not None)
            if run:
                runs.append(run)
        skipped = sum(1 for s, y in zip(samples, ys) if y is None and
                      isinstance((s.get("values") or {}).get(trend.raw), (int, float)))
        note = f"{skipped} value(s) not drawn: " + (
            "no new-oil value in the rule set" if ruleset is not None else
            "subtraction readings are rises, not lab values") if skipped else ""
        if ruleset is not None:
            plots.append(Plot(trend.derived_title, trend.derived_unit, x_kind, tuple(runs),
                              tuple(limit_lines(ruleset, view.class_name, trend.derived)), marks, 0.0, note))
        else:
            plots.append(Plot(trend.raw_title, trend.raw_unit, x_kind, tuple(runs), (), marks, None, note))
    return plots


_CSS = """
@page { size: A4; margin: 12mm 12mm 12mm 12mm; }
* { box-sizing: border-box; }
html { color: #1f1f1c; background: #ffffff; }
body { margin: 0; font: 10.5pt/1.45 "DejaVu Sans", "Liberation Sans", Arial, sans-serif; }
.frame { width: 100%; border-collapse: collapse; }
.frame > thead td, .frame > tfoot td { padding: 0; }
.frame > tbody > tr > td { padding: 0 0 0 0; vertical-align: top; }
.wrap { max-width: 1180px; margin: 0 auto; padding: 0 22px; }
.band { border-bottom: 2px solid #4f7390; padding: 8px 0 6px; font-size: 8.5pt; color: #3b3b37;
        display: flex; justify-content: space-between; gap: 12px; flex-wrap: wrap; }
.band.foot { border-bottom: 0; border-top: 1px solid #b9b5aa; margin-top: 16px; }
.band code { font-size: 8pt; word-break: break-all; }
h1 { font-size: 19pt; font-weight: 600; margin: 14px 0 2px; letter-spacing: 0.01em; }
h2 { font-size: 13.5pt; font-weight: 600; margin: 22px 0 8px; padding-bottom: 3px;
     border-bottom: 1px solid #d8d4ca; }
h3 { font-size: 11.5pt; margin: 0 0 4px; }
.sub { color: #55534c; margin: 0 0 10px; }
.cautions { border: 1.5px solid #6b1d4a; background: #fbf6f8; padding: 8px 14px; margin: 12px 0; }
.cautions ul { margin: 4px 0 0 0; padding-left: 18px; }
.cautions strong { letter-spacing: 0.03em; }
.notice { font-size: 9pt; color: #44423c; }
table.grid { border-collapse: collapse; margin: 4px 0 10px; font-size: 9.5pt; }
table.grid th, table.grid td { border-bottom: 1px solid #e2dfd6; padding: 3px 9px 3px 0; text-align: left;
                               vertical-align: top; }
table.grid th { font-weight: 600; color: #3b3b37; border-bottom: 1.5px solid #8c887e; }
table.grid td.n, table.grid th.n { text-align: right; padding-left: 10px; }
.grade { white-space: nowrap; font-weight: 600; }
.mk { vertical-align: -2px; margin-right: 4px; }
.legend { display: flex; flex-wrap: wrap; gap: 6px 18px; font-size: 9pt; margin: 6px 0 10px; }
.stats { display: flex; flex-wrap: wrap; gap: 10px; margin: 6px 0 12px; }
.stat { border: 1px solid #d8d4ca; padding: 6px 12px; min-width: 110px; }
.stat b { display: block; font-size: 15pt; font-weight: 600; }
.unit { border-top: 1.5px solid #8c887e; padding-top: 10px; margin-top: 18px; }
.unit-head { display: flex; justify-content: space-between; flex-wrap: wrap; gap: 8px; }
.plots { display: grid; grid-template-columns: repeat(3, 1fr); gap: 10px; margin: 8px 0; }
.plots figure { margin: 0; break-inside: avoid; }
.plots figcaption { font-size: 8pt; color: #55534c; }
svg.plot { width: 100%; height: auto; display: block; font-family: "DejaVu Sans", Arial, sans-serif; }
.sample { border-left: 4px solid #b9b5aa; padding: 4px 0 4px 12px; margin: 10px 0 12px; break-inside: avoid; }
.sample .reason-msg { color: #33322e; }
.sample .src { color: #55534c; font-size: 9pt; }
.capped { font-weight: 400; color: #55534c; }
ul.tight { margin: 2px 0 4px; padding-left: 18px; }
.muted { color: #66645c; }
@media print {
  body { font-size: 9.5pt; }
  .wrap { max-width: none; padding: 0; }
  h2 { break-after: avoid; }
  .unit { break-before: auto; }
  .unit-head, .plots { break-inside: avoid; }
  a { color: inherit; text-decoration: none; }
}
"""


def _grade_cell(grade: str, level: int | None) -> str:
    return f'<span class="grade">{marker_icon(level)}{escape(grade)}</span>'


def _band(meta: dict, cls: str) -> str:
    return (f'<div class="band {cls}"><span>sumpwise report · rule set <b>{escape(meta["id"])}</b> '
            f'version {escape(str(meta.get("version")))} · {escape(meta["engine"])}</span>'
            f'<span>fingerprint sha256 <code>{escape(meta["sha256"])}</code></span>'
            + (f'<span class="muted">{escape(CAUTIONS[0])} Limits of the manufacturer, the supplier and the site '
               f'take precedence.</span>' if cls == "foot" else "") + '</div>')


def _legend(grades: tuple) -> str:
    items = [f"<span>{_grade_cell(g, k)} <span class='muted'>{grade_look(k).shape_name}</span></span>"
             for k, g in enumerate(grades)]
    items.append(f"<span>{_grade_cell(UNRATED, None)} <span class='muted'>{grade_look(None).shape_name}</span>"
                 f"</span>")
    return '<div class="legend" aria-label="grade markers">' + "".join(items) + "</div>"


def _summary(records, rejects, grades: tuple, rejects_given: bool) -> str:
    by_grade = Counter(r["grade"] for r in records)
    unrated = by_grade.get(UNRATED, 0)
    rejected_rows = len({(r["file"], r["row"]) for r in rejects})
    flagged = sum(1 for r in records if (r.get("level") or 0) > 0)
    stats = [("samples graded", len(records) - unrated), ("flagged (above " + escape(grades[0]) + ")"
              if grades else "flagged", flagged), ("unrated", unrated)]
    stats.append(("rejected rows", rejected_rows) if rejects_given else ("rejected rows", "not given"))
    parts = ['<div class="stats">'] + [f'<div class="stat"><b>{v}</b>{k}</div>' for k, v in stats] + ["</div>"]
    columns = list(grades) + [UNRATED]
    table = Counter((r.get("class") or "(none)", r["grade"]) for r in records)
    classes = sorted({c for c, _ in table})
    parts.append('<table class="grid"><thead><tr><th>class</th>' + "".join(
        f'<th class="n">{_grade_cell(g, _level_of(grades, g))}</th>' for g in columns) + '<th class="n">all</th>'
        '</tr></thead><tbody>')
    for name in classes:
        cells = "".join(f'<td class="n">{table.get((name, g), 0)}</td>' for g in columns)
        total = sum(table.get((name, g), 0) for g in columns)
        parts.append(f"<tr><td>{escape(name)}</td>{cells}<td class='n'>{total}</td></tr>")
    totals = "".join(f'<td class="n"><b>{by_grade.get(g, 0)}</b></td>' for g in columns)
    parts.append(f"<tr><td><b>all classes</b></td>{totals}<td class='n'><b>{len(records)}</b></td></tr>")
    parts.append("</tbody></table>")
    if not rejects_given:
        parts.append('<p class="muted">No rejects file was given (<code>--rejects</code>), so rows the grader '
                     'rejected are not counted here.</p>')
    return "".join(parts)


def _attention(views, grades: tuple) -> str:
    rows = []
    for v in views:
        latest = v.samples[-1]
        worst = grades[v.worst_level] if v.worst_level is not None else UNRATED
        rows.append(f'<tr><td><a href="#unit-{escape(v.unit_id)}">{escape(v.unit_id)}</a></td>'
                    f"<td>{escape(v.class_name)}</td>"
                    f"<td>{_grade_cell(latest['grade'], v.latest_level)}</td><td>{escape(v.trend)}</td>"
                    f"<td>{_grade_cell(worst, v.worst_level)}</td>"
                    f"<td>{escape(latest['sample_id'])} · {escape(latest.get('sampled_on') or 'no date')}</td>"
                    f'<td class="n">{v.flagged}</td><td class="n">{len(v.samples)}</td></tr>')
    return ('<p class="sub">Ordered by the grade of the latest sample, then worsening before steady before '
            'improving (latest sample against the one before), then by the highest grade in the batch.</p>'
            '<table class="grid attention"><thead><tr><th>unit</th><th>class</th><th>latest grade</th>'
            '<th>trend</th><th>highest in batch</th><th>latest sample</th><th class="n">flagged</th>'
            '<th class="n">samples</th></tr></thead><tbody>' + "".join(rows) + "</tbody></table>")


def _reason_rows(record: dict, grades: tuple) -> str:
    rows = []
    for reason in record["reasons"]:
        grade = _grade_cell(reason["grade"], _level_of(grades, reason["grade"]))
        if reason.get("capped_from"):
            grade += (f'<br><span class="capped">capped from {escape(reason["capped_from"])} by caveat '
                      f'{escape(reason.get("capped_by") or "")}</span>')
        if "measure" in reason:
            unit = reason.get("unit") or ""
            value = f'{escape(reason["measure"])} = <b>{escape(_number(reason.get("value")))}</b> {escape(unit)}'
            limit = escape(limit_text(reason.get("test"), reason.get("limit"), unit))
        else:
            clauses = reason.get("clauses") or []
            value = "<ul class='tight'>" + "".join(
                f"<li>{escape(c.get('measure') or c.get('field') or '')} = <b>{escape(_number(c.get('value')))}"
                f"</b></li>" for c in clauses) + "</ul>"
            limit = "<ul class='tight'>" + "".join(
                f"<li>{escape('missing' if c.get('test') == 'missing' else limit_text(c.get('test'), c.get('limit')))}"
                f": {'holds' if c.get('held') else 'does not hold'}</li>" for c in clauses) + "</ul>"
        rows.append(f"<tr class='reason'><td><b>{escape(reason['rule'])}</b><br><span class='reason-msg'>"
                    f"{escape(reason.get('message') or '')}</span></td><td>{grade}</td><td>{value}</td>"
                    f"<td>{limit}</td><td class='src'>{escape(reason.get('source') or '')}</td></tr>")
    return ("<table class='grid reasons'><thead><tr><th>rule</th><th>grade</th><th>value</th><th>limit</th>"
            "<th>source</th></tr></thead><tbody>" + "".join(rows) + "</tbody></table>")


def _sample_card(record: dict, grades: tuple) -> str:
    level = record.get("level")
    look = grade_look(level)
    values = record.get("values") or {}
    hours = values.get("oil_hours")
    facts = [f"class {record.get('class') or '(none)'}", f"lubricant {record.get('lubricant') or '(none)'}",
             f"sampled {record.get('sampled_on') or '(no date)'}"]
    if isinstance(hours, (int, float)):
        facts.append(f"oil hours {hours:g}")
    if record.get("method") and record["method"] != "direct":
        facts.append(f"oxidation by {record['method']}")
    parts = [f'<article class="sample" id="sample-{escape(record["sample_id"])}" '
             f'data-sample="{escape(record["sample_id"])}" style="border-left-color:{look.colour}">',
             f'<h3>{_grade_cell(record["grade"], level)} {escape(record["sample_id"])}</h3>',
             f'<div class="muted">{escape(" · ".join(facts))}</div>']
    if record["reasons"]:
        parts.append(_reason_rows(record, grades))
    if record["caveats"]:
        parts.append("<div><b>Caveats</b><ul class='tight caveats'>" + "".join(
            f"<li class='caveat'><b>{escape(c.get('caveat') or '')}</b>: {escape(c.get('message') or '')}"
            + (f" <span class='src'>(source: {escape(c['source'])})</span>" if c.get("source") else "")
            + "</li>" for c in record["caveats"]) + "</ul></div>")
    gaps = record.get("not_evaluated") or []
    if gaps:
        parts.append("<div class='muted'>Not evaluated (a missing value is never a pass): " + escape("; ".join(
            f"{g.get('rule')} lacks {', '.join(g.get('missing') or [])}" for g in gaps)) + "</div>")
    parts.append(f'<p class="notice">Notice: {escape(record["notice"])}</p></article>')
    return "".join(parts)


def _unit_section(view: UnitView, ruleset: RuleSet | None, grades: tuple) -> str:
    plots = unit_plots(view, ruleset, grades)
    changes = oil_changes(view.samples)
    head = (f'<section class="unit" id="unit-{escape(view.unit_id)}" data-unit="{escape(view.unit_id)}">'
            f'<div class="unit-head"><h3>{escape(view.unit_id)} <span class="muted">· {escape(view.class_name)} · '
            f'{escape(view.lubricant)}</span></h3><span>latest {_grade_cell(view.samples[-1]["grade"], view.latest_level)}'
            f' · {escape(view.trend)} · {len(view.samples)} samples'
            + (f" · {len(changes)} oil change(s)" if changes else "") + "</span></div>")
    figures = "".join(f"<figure>{render_plot(p)}<figcaption>{escape(p.note)}</figcaption></figure>" for p in plots)
    flagged = [s for s in reversed(view.samples) if (s.get("level") or 0) > 0]
    body = "".join(_sample_card(s, grades) for s in flagged)
    if not flagged:
        body = f'<p class="muted">No sample of this unit is above {escape(grades[0]) if grades else "the lowest grade"}.</p>'
    return head + f'<div class="plots">{figures}</div>' + body + "</section>"


def _plot_key(ruleset: RuleSet | None) -> str:
    if ruleset is not None:
        return ("<p class='sub'>Plots show the quantities the rule set's limits apply to: the rise of oxidation "
                "and acid number over new oil, and the change of viscosity at 40 °C from new oil in percent, "
                "computed with the new-oil values of the rule set's lubricants table (a subtraction reading is "
                "its own rise). Coloured dashed lines are the limits, each labelled with its grade; the grey "
                "line at 0 is new oil; a dotted vertical line marks an oil change (flagged, or oil hours going "
                "down). Each point's marker is the grade that plot's own rule gave the sample.</p>")
    return ("<p class='sub'>Plots show the lab values as reported; no rule set was given (<code>--rules</code>), "
            "so no limits are drawn. A dotted vertical line marks an oil change. Each point's marker is the "
            "grade that plot's own rule gave the sample.</p>")


def render_report(records, rejects=(), ruleset: RuleSet | None = None, title: str = "",
                  rejects_given: bool = True) -> str:
    """The whole report as one HTML document; `records` are result records as `grade` writes them."""
    if not records:
        raise InputError("a report needs at least one result record")
    first = records[0]
    meta = {"id": first["ruleset"]["id"], "version": first["ruleset"].get("version"),
            "sha256": first["ruleset"]["sha256"], "engine": first["engine"]}
    if ruleset is not None and ruleset.sha256 != meta["sha256"]:
        raise InputError(f"the rule set given ({ruleset.id} sha256 {ruleset.sha256[:12]}...) is not the one the "
                         f"results were graded with ({meta['id']} sha256 {meta['sha256'][:12]}...); its limits "
                         f"would be drawn wrongly")
    grades = grade_names(records, ruleset)
    views = unit_views(records)
    heading = title or (ruleset.title if ruleset is not None else f"Graded samples, rule set {meta['id']}")
    dates = sorted(r["sampled_on"] for r in records if r.get("sampled_on"))
    span = f"samples from {dates[0]} to {dates[-1]}" if dates else "sample dates not given"
    unrated = [r for r in records if r.get("level") is None]
    cautions = ('<div class="cautions" role="note"><strong>Cautions</strong><ul>'
                + "".join(f"<li>{escape(c)}</li>" for c in CAUTIONS) + "</ul></div>")
    body = [f"<h1>{escape(heading)}</h1>",
            f'<p class="sub">{escape(span)} · {len(records)} result records · {len(views)} units</p>',
            cautions, f'<p class="notice">Notice of the rule set: {escape(first["notice"])}</p>',
            "<h2>The batch</h2>", _legend(grades), _summary(records, rejects, grades, rejects_given),
            "<h2>Units needing attention first</h2>", _attention(views, grades),
            "<h2>Units: trends and flagged samples</h2>", _plot_key(ruleset)]
    body.extend(_unit_section(v, ruleset, grades) for v in views)
    if unrated:
        body.append("<h2>Unrated samples</h2><table class='grid unrated'><thead><tr><th>sample</th><th>unit</th>"
                    "<th>class</th><th>why no grade</th></tr></thead><tbody>" + "".join(
                        f"<tr><td>{escape(r['sample_id'])}</td><td>{escape(r.get('unit_id') or '')}</td>"
                        f"<td>{escape(r.get('class') or '')}</td><td>{escape(r.get('unrated_because') or '')}</td>"
                        "</tr>" for r in unrated) + "</tbody></table>")
    if rejects:
        body.append("<h2>Rejected rows (not graded)</h2><table class='grid rejects'><thead><tr><th>row</th>"
                    "<th>sample</th><th>field</th><th>why</th></tr></thead><tbody>" + "".join(
                        f"<tr><td>{escape(r['row'])}</td><td>{escape(r['sample_id'])}</td><td>{escape(r['field'])}"
                        f"</td><td>{escape(r['reason'])}</td></tr>" for r in rejects) + "</tbody></table>")
    body.append(cautions)
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
            f"<title>{escape(heading)} · sumpwise report</title><style>{_CSS}</style></head><body>"
            "<table class=\"frame\" role=\"presentation\">"
            f"<thead><tr><td><div class=\"wrap\">{_band(meta, 'head')}</div></td></tr></thead>"
            f"<tfoot><tr><td><div class=\"wrap\">{_band(meta, 'foot')}</div></td></tr></tfoot>"
            f"<tbody><tr><td><main class=\"wrap\">{''.join(body)}</main></td></tr></tbody></table>"
            "</body></html>\n")
