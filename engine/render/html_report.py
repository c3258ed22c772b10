"""One self-contained HTML report of a graded batch: records in, HTML text out.

No scripts, fonts, images or links to anything outside the file: it opens from a USB
stick and prints. The report renders, it does not compute: every plotted value, grade,
oil change and next step is read from the records the engine wrote (`derived` and
`values`, `oil_changed` and the `oil-changed` caveat, the reasons, the forecasts a record
carries, the ISO 4406 code as the lab wrote it). The rule set, when
given, says which measures each class's rules read (those are plotted) and where its
ladder limits lie (those are drawn); without it the plots follow the records' findings.
Trend plots are inline SVG (svg_plot.py), always against the sample date.
"""

from __future__ import annotations

import csv
import io
import json
import re
from collections import Counter
from dataclasses import dataclass, field
from datetime import date
from functools import lru_cache
from html import escape

from sumpwise.version import engine_name
from sumpwise.derive.trends import unit_id_key
from sumpwise.vocabulary.cautions import CAUTIONS
from sumpwise.vocabulary.limit_tests import limit_phrase
from sumpwise.vocabulary.measures import measure_unit
from sumpwise.vocabulary.problems import InputError
from sumpwise.ruleset.model import LadderRule, RuleSet, condition_measures
from sumpwise.results.records import undecided_from_record
from sumpwise.render.narrative import forecast_cap, forecast_limit_phrase, gap_phrase, rounded, step_phrase
from sumpwise.render.table import FIRST_CAVEATS
from sumpwise.render.svg_plot import (LimitLine, Mark, Plot, Point, Projection, grade_look, marker_css, marker_icon,
                                      render_plot)

UNRATED = "unrated"
OIL_CHANGED_CAVEAT = "oil-changed"  # the caveat the engine raises on the first sample of a new charge

_REQUIRED = {"sample_id": str, "grade": str, "reasons": list, "caveats": list, "ruleset": dict, "engine": str}
# Keys a record may lack (older formats, the compact form) but that must have this type when present.
_OPTIONAL = {"notice": str, "values": dict, "derived": dict, "oil_changed": bool, "origin": dict, "iso4406": str,
             "forecasts": list, "comment": str}


def _json_objects(lines, name: str, what: str):
    """(line number, object) of each non-blank JSON Lines line; anything else is an InputError naming the line."""
    for number, line in enumerate(lines, 1):
        if not line.strip():
            continue
        try:
            found = json.loads(line)
        except json.JSONDecodeError as exc:
            raise InputError(f"{name}: line {number}: not a JSON object: {exc.msg} at column {exc.colno}") from None
        if not isinstance(found, dict):
            raise InputError(f"{name}: line {number}: expected a JSON object ({what}), found {type(found).__name__}")
        yield number, found


def parse_results(lines, name: str, one_ruleset: bool = True, allow_empty: bool = False) -> tuple:
    """Result records from JSON Lines text (as `grade` writes them), checked field by field.

    A results file must come from one rule set (`one_ruleset`); a ledger's records may come
    from several, because the ledger hands over each rule set with them. `allow_empty`: a
    file without records is no error (a run whose every row was rejected, reported from its rejects).
    """
    records = []
    for number, record in _json_objects(lines, name, "a result record"):
        for key, kind in _REQUIRED.items():
            if not isinstance(record.get(key), kind):
                found = "nothing" if key not in record else type(record[key]).__name__
                raise InputError(f"{name}: line {number}: field '{key}': expected {kind.__name__}, found {found}")
        for key, kind in _OPTIONAL.items():
            if key in record and record[key] is not None and not isinstance(record[key], kind):
                raise InputError(f"{name}: line {number}: field '{key}': expected {kind.__name__}, "
                                 f"found {type(record[key]).__name__}")
        for k, forecast in enumerate(record.get("forecasts") or ()):
            _check_forecast(forecast, f"{name}: line {number}", f"forecasts[{k}]")
        level = record.get("level", "absent")
        if not (level is None or (isinstance(level, int) and not isinstance(level, bool) and level >= 0)):
            raise InputError(f"{name}: line {number}: field 'level': expected a whole number >= 0 or null, "
                             f"found {level!r}")
        for key in ("id", "sha256"):
            if not isinstance(record["ruleset"].get(key), str):
                raise InputError(f"{name}: line {number}: field 'ruleset.{key}': expected text")
        first = records[0] if records else record
        if one_ruleset and record["ruleset"]["sha256"] != first["ruleset"]["sha256"]:
            raise InputError(f"{name}: line {number}: graded by rule set {record['ruleset']['id']} "
                             f"sha256 {record['ruleset']['sha256'][:12]}..., earlier lines by "
                             f"{first['ruleset']['id']} sha256 {first['ruleset']['sha256'][:12]}...; "
                             f"a report covers one rule set")
        records.append(record)
    if not records and not allow_empty:
        raise InputError(f"{name}: no result records in the file")
    return tuple(records)


_FORECAST_NUMBERS = ("limit", "value")
_FORECAST_TEXTS = ("rule", "measure", "grade")
_FORECAST_OPTIONAL = {"on": str, "on_low": str, "on_high": str, "at_hours": (int, float), "unit": str}


def _check_forecast(forecast, where: str, field: str) -> None:
    """A forecast as a record carries it (derive.forecast.Forecast.to_record): what the report reads."""
    if not isinstance(forecast, dict):
        raise InputError(f"{where}: field '{field}': expected an object, found {type(forecast).__name__}")
    for key in _FORECAST_TEXTS:
        if not isinstance(forecast.get(key), str):
            raise InputError(f"{where}: field '{field}.{key}': expected text, "
                             f"found {type(forecast.get(key)).__name__}")
    for key in _FORECAST_NUMBERS:
        if isinstance(forecast.get(key), bool) or not isinstance(forecast.get(key), (int, float)):
            raise InputError(f"{where}: field '{field}.{key}': expected a number, "
                             f"found {type(forecast.get(key)).__name__}")
    for key, kind in _FORECAST_OPTIONAL.items():
        value = forecast.get(key)
        if value is not None and (isinstance(value, bool) or not isinstance(value, kind)):
            raise InputError(f"{where}: field '{field}.{key}': expected {'a number' if kind != str else 'text'} "
                             f"or null, found {type(value).__name__}")


def parse_rejects(text: str, name: str) -> tuple:
    """Rejected rows as `grade --rejects` writes them: CSV (by the .csv name) or JSON Lines."""
    rows = []
    if name.lower().endswith(".csv"):
        reader = csv.DictReader(io.StringIO(text))
        missing = {"row", "field", "reason"} - set(reader.fieldnames or ())
        if missing:
            raise InputError(f"{name}: line 1: header lacks {', '.join(sorted(missing))}")
        for number, row in enumerate(reader, 2):
            rows.append(_reject(row, name, number))
        return tuple(rows)
    for number, row in _json_objects(text.splitlines(), name, "a rejected row"):
        rows.append(_reject(row, name, number))
    return tuple(rows)


def _reject(row: dict, name: str, number: int) -> dict:
    for key in ("row", "field", "reason"):
        if row.get(key) in (None, ""):
            raise InputError(f"{name}: line {number}: field '{key}': expected a value, found nothing")
    return {"file": row.get("file") or "", "row": str(row["row"]), "sample_id": row.get("sample_id") or "",
            "field": str(row["field"]), "code": str(row.get("code") or ""), "reason": str(row["reason"])}


# -- what the records say ----------------------------------------------------------------------

@dataclass(frozen=True)
class Ladder:
    """The grade ladder, lowest first: from the rule set, else the (level, grade) pairs the records show.

    Records need not show every grade (a quiet batch has no urgent sample, a batch may have no
    normal one); a level no record shows is named 'level N', so the ladder never has holes.
    """

    names: tuple

    @classmethod
    def of(cls, records, ruleset: RuleSet | None) -> "Ladder":
        if ruleset is not None:
            return cls(tuple(ruleset.grades))
        seen: dict[int, str] = {}
        for record in records:
            level = record.get("level")
            if level is None:
                continue
            if seen.setdefault(level, record["grade"]) != record["grade"]:
                raise InputError(f"records name level {level} both '{seen[level]}' and '{record['grade']}'; "
                                 f"they cannot come from one rule set")
        top = max(seen, default=-1)
        return cls(tuple(seen.get(level, f"level {level}") for level in range(top + 1)))

    def name(self, level: int | None) -> str:
        return UNRATED if level is None else self.names[level]

    def level(self, grade: str) -> int | None:
        """The level of a grade name, or None (unrated, or a grade no record placed on the ladder)."""
        return self.names.index(grade) if grade in self.names else None


def recorded_value(record: dict, measure: str):
    """The value the engine recorded for a measure on this sample, or None.

    `derived` (the derived measures the engine computed and graded), then `values` (the lab
    readings), then a reason or clause that names the measure (older records carry derived
    values only where a rule fired). Nothing is computed here.
    """
    for block in (record.get("derived"), record.get("values")):
        if block and measure in block:
            return _number_or_none(block[measure])
    for reason in record["reasons"]:
        if reason.get("measure") == measure:
            return _number_or_none(reason.get("value"))
        for clause in reason.get("clauses") or ():
            if clause.get("measure") == measure and clause.get("test") != "missing":
                return _number_or_none(clause.get("value"))
    return None


_BOUND = re.compile(r"^(<=|>=|<|>|\u2264|\u2265)\s*(\d+(?:\.\d*)?(?:[eE][-+]?\d+)?)$")


def recorded_bound(record: dict, measure: str):
    """(sign, bound) of a lab reading the record carries as written as a bound (`>5000` in `values`),
    else None. Only the record's own text is read; a comma in it is the lab's decimal mark (intake
    refuses a point where the mark is a comma, so the two never meet in one reading)."""
    text = (record.get("values") or {}).get(measure)
    if not isinstance(text, str):
        return None
    found = _BOUND.match(text.strip() if "." in text else text.strip().replace(",", "."))
    if not found:
        return None
    sign = {"\u2264": "<=", "\u2265": ">="}.get(found.group(1), found.group(1))
    return sign, float(found.group(2))


def _number_or_none(value):
    return float(value) if isinstance(value, (int, float)) and not isinstance(value, bool) else None


def starts_charge(record: dict) -> bool:
    """The engine marked this sample as the first of a new oil charge: the flag it read, or its caveat."""
    return record.get("oil_changed") is True or any(c.get("caveat") == OIL_CHANGED_CAVEAT for c in record["caveats"])


def _reason_measures(reason: dict) -> list[str]:
    if reason.get("measure"):
        return [reason["measure"]]
    return [c["measure"] for c in reason.get("clauses") or () if c.get("measure")]


def _day(text) -> int | None:
    """An ISO date as a day number (the plots' x), or None when there is none."""
    try:
        return date.fromisoformat(str(text)[:10]).toordinal()
    except ValueError:
        return None


def _sample_date(record: dict) -> int | None:
    return _day(record.get("sampled_on"))


def _sample_key(record: dict) -> tuple:
    return (record.get("sampled_on") or "9999", record["sample_id"])


# -- what each unit's plots show ---------------------------------------------------------------

@dataclass(frozen=True)
class Watched:
    """A measure a class's rules read, and what the report knows about it."""

    measure: str
    limits: tuple  # LimitLine, from the class's ladder rules on it
    worse: int  # +1 when a higher value is worse, -1 when lower is, 0 when both ways or unknown
    unit: str = ""


def watched_measures(ruleset: RuleSet | None, class_name: str, samples) -> list[Watched]:
    """The measures to plot for a unit, in rule order; oil hours are on every plot's tooltip instead.

    With the rule set: every measure its class's rules read. Without it: the measures the
    unit's findings name, then the derived measures its records carry.
    """
    if ruleset is not None:
        names: list[str] = []
        for rule in ruleset.rules_for(class_name):
            names.extend([rule.measure] if isinstance(rule, LadderRule) else condition_measures(rule.when))
    else:
        names = [m for s in samples for r in s["reasons"] for m in _reason_measures(r)]
        names += [m for s in samples for m, v in (s.get("derived") or {}).items() if v is not None]
    watched = []
    for name in dict.fromkeys(names):
        if name == "oil_hours":
            continue
        lines = tuple(limit_lines(ruleset, class_name, name)) if ruleset is not None else ()
        unit = ruleset.unit_of(name) if ruleset is not None else next(
            (r["unit"] for s in samples for r in s["reasons"] if r.get("measure") == name and r.get("unit")),
            measure_unit(name))
        watched.append(Watched(name, lines, _worse_way(ruleset, class_name, name, samples), unit))
    return watched


def _worse_way(ruleset: RuleSet | None, class_name: str, measure: str, samples) -> int:
    """Which way is worse for a measure: from the class's ladder rules, else from the tests its findings name."""
    if ruleset is not None:
        tests = {rule.test for rule in ruleset.rules_for(class_name)
                 if isinstance(rule, LadderRule) and rule.measure == measure}
    else:
        tests = {r.get("test") for s in samples for r in s["reasons"] if r.get("measure") == measure}
    if tests == {"above"}:
        return 1
    if tests == {"below"}:
        return -1
    return 0


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


def moving_worse(series: list, charge_start: int, worse: int) -> bool:
    """The last three recorded values of the current oil charge each moved the way the limits call worse.

    Two moves in a row, not one, so a single noisy reading does not call a trend.
    """
    if worse == 0:
        return False
    values = [v for v in series[charge_start:] if v is not None][-3:]
    return len(values) == 3 and all((b - a) * worse > 0 for a, b in zip(values, values[1:]))


@dataclass(frozen=True)
class UnitView:
    """One unit's samples in date order, the measures its rules read, and where it stands."""

    unit_id: str
    class_name: str
    lubricant: str
    samples: tuple
    watched: tuple  # Watched, flagged measures first
    series: dict  # measure -> the recorded value of each sample (None where the record has none)
    latest_level: int | None
    grade_move: str  # up, down, same, single sample
    rising: tuple  # measures whose recorded values are moving toward their limits
    worst_level: int | None
    flagged: int
    graded_by: tuple = ()  # the (id, version, sha256) of each rule set that graded the unit's samples, in order
    spellings: tuple = ()  # the unit id as each sample's record writes it, each spelling once, in date order
    ruleset: RuleSet | None = field(default=None, repr=False, compare=False)  # its latest sample's, when known

    @property
    def worsening(self) -> bool:
        return self.grade_move == "up" or bool(self.rising)

    @property
    def trend(self) -> str:
        """The trend column: what the grades and the values say, in words."""
        words = {"up": "grade up", "down": "grade down", "same": "grade steady", "single sample": "one sample"}
        text = words[self.grade_move]
        if self.rising:
            text += "; worsening: " + ", ".join(self.rising)
        return text


def _rank(level: int | None) -> float:
    """Unrated sits above the lowest grade: an unknown state needs a look, but less than a finding."""
    return 0.5 if level is None else float(level)


def _graded_by(record: dict) -> tuple:
    return (record["ruleset"]["id"], record["ruleset"].get("version"), record["ruleset"]["sha256"])


def unit_views(records, ruleset: RuleSet | None = None, rulesets: dict | None = None) -> list[UnitView]:
    """Units ordered for attention: latest grade, then worsening (grade or values) first, then the worst grade.

    With `rulesets` (by fingerprint), each unit's limits come from the rule set that graded its
    latest sample; otherwise from `ruleset`. Ids that differ only in case or surrounding spaces
    are one unit, as grading's trends take them (trends.unit_id_key); the unit is shown as its
    latest record writes it, with the other spellings.
    """
    by_unit: dict[str, list] = {}
    for record in records:
        by_unit.setdefault(_unit_key(record.get("unit_id")), []).append(record)
    views = []
    for samples in by_unit.values():
        samples = sorted(samples, key=_sample_key)
        latest = samples[-1]
        unit_id = latest.get("unit_id") or "(no unit)"
        class_name = latest.get("class") or ""
        own = rulesets.get(latest["ruleset"]["sha256"]) if rulesets else ruleset
        watched = watched_measures(own, class_name, samples)
        fired = [m for s in reversed(samples) for r in s["reasons"] for m in _reason_measures(r)]
        order = {m: k for k, m in enumerate(dict.fromkeys(fired))}
        watched = sorted(watched, key=lambda w: order.get(w.measure, len(order)))
        if len(samples) == 1:
            move = "single sample"
        else:
            before, now = _rank(samples[-2].get("level")), _rank(latest.get("level"))
            move = "up" if now > before else "down" if now < before else "same"
        series = {w.measure: [recorded_value(s, w.measure) for s in samples] for w in watched}
        charge = max([k for k, s in enumerate(samples) if starts_charge(s)], default=0)
        rising = tuple(w.measure for w in watched if moving_worse(series[w.measure], charge, w.worse))
        levels = [s["level"] for s in samples if s.get("level") is not None]
        views.append(UnitView(unit_id, class_name, latest.get("lubricant") or "", tuple(samples), tuple(watched),
                              series, latest.get("level"), move, rising, max(levels) if levels else None,
                              sum(1 for s in samples if (s.get("level") or 0) > 0),
                              tuple(dict.fromkeys(_graded_by(s) for s in samples)),
                              tuple(dict.fromkeys(s.get("unit_id") for s in samples if s.get("unit_id"))), own))
    return sorted(views, key=lambda v: (-_rank(v.latest_level), not v.worsening, -_rank(v.worst_level), v.unit_id))


def _unit_key(unit_id) -> str:
    """The unit a record belongs to, as grading groups it (trends.unit_id_key); '' for none or blank."""
    return unit_id_key(unit_id) if unit_id else ""


def _point_level(measure: str, record: dict, ladder: Ladder) -> int | None:
    """The grade the rules reading this measure gave the sample (the lowest grade when none fired)."""
    if record.get("level") is None:
        return None
    fired = [ladder.level(r["grade"]) for r in record["reasons"] if measure in _reason_measures(r)]
    fired = [level for level in fired if level is not None]
    return max(fired) if fired else 0


def _tooltip(record: dict, measure: str, value: float | None, unit: str) -> str:
    """The point's tooltip; `value` None for a reading written as a bound, quoted as the record has it."""
    hours = (record.get("values") or {}).get("oil_hours")
    parts = [record["sample_id"], record.get("sampled_on") or ""]
    if isinstance(hours, (int, float)) and not isinstance(hours, bool):
        parts.append(f"oil hours {hours:g}")
    code = f" (code as written {record['iso4406']})" if measure.startswith("iso4406_") and record.get("iso4406") else ""
    if value is None:
        shown = f"{str(record['values'][measure]).strip()}{(' ' + unit) if unit else ''} as written: a bound, not a value"
    else:
        shown = f"{_number(value)}{(' ' + unit) if unit else ''}"  # as the findings spell it: 10.0044, never 10
    return " · ".join(p for p in parts if p) + f": {measure} {shown}{code}"


def recorded_forecasts(records) -> list[dict]:
    """The forecasts the records carry (format 3: each on the sample it was made from; older
    records carry none), each with its unit and sample as the carrying record names them."""
    return [dict(f, unit_id=record.get("unit_id"), sample_id=record["sample_id"])
            for record in records for f in record.get("forecasts") or ()]


def projections(view: UnitView, measure: str, forecasts, ladder: Ladder, dates: dict) -> tuple:
    """The engine's forecasts for this unit and measure as lines to the limit (dated ones only:
    the x axis is the sample date). A forecast is a dict as derive.forecast.Forecast.to_record gives;
    `dates` maps the unit's sample ids to their day numbers."""
    drawn = []
    for f in forecasts:
        if _unit_key(f.get("unit_id")) != _unit_key(view.unit_id) or f.get("measure") != measure:
            continue
        x0, x1 = dates.get(f.get("sample_id")), _day(f.get("on"))
        if x0 is None or x1 is None:
            continue
        drawn.append(Projection(x0, float(f["value"]), x1, float(f["limit"]), ladder.level(f["grade"]) or 0,
                                forecast_text(f, _forecast_cap(view, f)), _day(f.get("on_low")), _day(f.get("on_high"))))
    return tuple(drawn)


def forecast_text(f: dict, capped: str = "") -> str:
    """A forecast in words, with its band and the number of samples it was fitted on (oil hours
    to 3 significant figures: the record keeps them in full); `capped`, what a cap on the sample
    says of the grade it names (narrative.forecast_cap)."""
    crossed = forecast_limit_phrase(f.get("test"), f["limit"], f.get("unit") or None, f.get("slope_per_1000h"))
    hours = f"{rounded(f['at_hours'])} oil hours" if f.get("at_hours") is not None else ""
    when = f"{f['on']} ({hours})" if f.get("on") and hours else f.get("on") or hours or "(no date or hours)"
    return (f"{f['rule']}: {f['measure']} reaches the {f['grade']} limit ({crossed}) about "
            f"{when}; band {f.get('on_low') or 'now'} to "
            f"{f.get('on_high') or 'beyond the horizon'}; fitted on {f.get('samples')} samples of this oil charge"
            + (f". But {capped}" if capped else ""))


def _forecast_cap(view: UnitView, f: dict) -> str:
    """What a cap raised on the forecast's sample says of the grade it names, from the unit's rule set."""
    carrier = next((s for s in view.samples if s["sample_id"] == f.get("sample_id")), None)
    if carrier is None:
        return ""
    return forecast_cap(f.get("measure"), f.get("grade"), [c.get("caveat") for c in carrier["caveats"]], view.ruleset)


def unit_plots(view: UnitView, ladder: Ladder, forecasts=()) -> list[Plot]:
    """One plot per watched measure, against the sample date; each oil charge is its own line."""
    samples = view.samples
    xs = [_sample_date(s) for s in samples]
    dates = dict(zip((s["sample_id"] for s in samples), xs))
    forecasts = [f for f in forecasts if _unit_key(f.get("unit_id")) == _unit_key(view.unit_id)]
    starts = [k for k in range(1, len(samples)) if starts_charge(samples[k])]
    bounds = [0] + starts + [len(samples)]
    marks = tuple(Mark((xs[k - 1] + xs[k]) / 2, "oil changed") for k in starts
                  if xs[k] is not None and xs[k - 1] is not None)
    undated = sum(1 for x in xs if x is None)
    plots = []
    for watched in view.watched:
        unit = watched.unit
        ys = view.series[watched.measure]
        runs = []
        for first, end in zip(bounds, bounds[1:]):
            run = tuple(Point(xs[k], ys[k], _point_level(watched.measure, samples[k], ladder),
                              _tooltip(samples[k], watched.measure, ys[k], unit))
                        for k in range(first, end) if ys[k] is not None and xs[k] is not None)
            if run:
                runs.append(run)
        written = tuple(Point(xs[k], b[1], _point_level(watched.measure, samples[k], ladder),
                              _tooltip(samples[k], watched.measure, None, unit), b[0])
                        for k, b in enumerate(recorded_bound(s, watched.measure) for s in samples)
                        if b is not None and xs[k] is not None)
        notes = []
        if undated and any(y is not None for y in ys):
            notes.append(f"{undated} sample(s) without a date not drawn")
        if any("derived" not in s and watched.measure not in (s.get("values") or {}) for s in samples):
            notes.append("these records carry this value only where a rule on it fired")
        note = "; ".join(notes)
        plots.append(Plot(watched.measure, unit, tuple(runs), watched.limits, marks, note,
                          projections(view, watched.measure, forecasts, ladder, dates), written))
    return plots


_CSS = """
@page { size: A4; margin: 11mm 11mm 11mm 11mm; }
* { box-sizing: border-box; }
html { color: #1f1f1c; background: #ffffff; }
body { margin: 0; font: 10.5pt/1.45 "DejaVu Sans", "Liberation Sans", Arial, sans-serif; }
.frame { width: 100%; border-collapse: collapse; }
.frame > thead td, .frame > tfoot td { padding: 0; }
.frame > tbody > tr > td { padding: 0; vertical-align: top; }
.wrap { max-width: 1180px; margin: 0 auto; padding: 0 22px; }
.band { border-bottom: 2px solid #4f7390; padding: 6px 0 5px; font-size: 8pt; color: #3b3b37;
        display: flex; justify-content: space-between; gap: 4px 12px; flex-wrap: wrap; }
.band.foot { border-bottom: 0; border-top: 1px solid #b9b5aa; margin-top: 14px; }
.band code { font-size: 7.5pt; word-break: break-all; }
.band .notice { flex-basis: 100%; font-size: 7.5pt; }
h1 { font-size: 19pt; font-weight: 600; margin: 14px 0 2px; letter-spacing: 0.01em; }
h2 { font-size: 13.5pt; font-weight: 600; margin: 20px 0 8px; padding-bottom: 3px;
     border-bottom: 1px solid #d8d4ca; }
h3 { font-size: 11.5pt; margin: 0; }
h4 { font-size: 9.5pt; margin: 8px 0 2px; letter-spacing: 0.02em; color: #3b3b37; }
.sub { color: #55534c; margin: 0 0 10px; }
.cautions { border: 1.5px solid #6b1d4a; background: #fbf6f8; padding: 8px 14px; margin: 12px 0; }
.cautions ul { margin: 4px 0 0 0; padding-left: 18px; }
.cautions strong { letter-spacing: 0.03em; }
.notice { font-size: 9pt; color: #44423c; }
table.grid { border-collapse: collapse; margin: 2px 0 8px; font-size: 9pt; }
table.grid th, table.grid td { border-bottom: 1px solid #e2dfd6; padding: 2px 9px 2px 0; text-align: left;
                               vertical-align: top; }
table.grid th { font-weight: 600; color: #3b3b37; border-bottom: 1.5px solid #8c887e; }
table.grid td.n, table.grid th.n { text-align: right; padding-left: 10px; }
.grade { white-space: nowrap; font-weight: 600; }
table.grid td.when { white-space: nowrap; }
table.attention { font-size: 8.5pt; }
table.earlier { font-size: 8.5pt; }
.mk { vertical-align: -2px; margin-right: 4px; }
.legend { display: flex; flex-wrap: wrap; gap: 6px 18px; font-size: 9pt; margin: 6px 0 10px; }
.stats { display: flex; flex-wrap: wrap; gap: 10px; margin: 6px 0 12px; }
.stat { border: 1px solid #d8d4ca; padding: 6px 12px; min-width: 110px; }
.stat b { display: block; font-size: 15pt; font-weight: 600; }
.unit { border-top: 1.5px solid #8c887e; padding-top: 8px; margin-top: 16px; }
.unit-head { display: flex; justify-content: space-between; align-items: baseline; flex-wrap: wrap; gap: 8px; }
.latest { border-left: 4px solid #b9b5aa; padding: 2px 0 2px 12px; margin: 6px 0 4px; }
.todo { margin: 4px 0 6px; padding-left: 20px; }
.todo li { margin: 1px 0; }
.plots { display: grid; grid-template-columns: repeat(4, 1fr); gap: 8px; margin: 6px 0; }
.plots figure { margin: 0; break-inside: avoid; }
.plots figcaption { font-size: 7.5pt; color: #55534c; }
svg.plot { width: 100%; height: auto; display: block; font-family: "DejaVu Sans", Arial, sans-serif; }
.reason-msg { color: #33322e; }
.src { color: #55534c; font-size: 8.5pt; }
.capped { font-weight: 400; color: #55534c; }
ul.tight { margin: 2px 0 4px; padding-left: 18px; }
.muted { color: #66645c; }
.warn { color: #6b3a00; }
@media print {
  body { font-size: 9pt; }
  .wrap { max-width: none; padding: 0; }
  h2, h4 { break-after: avoid; }
  .unit-head, .plots figure, .latest, tr { break-inside: avoid; }
  a { color: inherit; text-decoration: none; }
}
"""


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


@lru_cache(maxsize=256)
def _grade_cell(grade: str, level: int | None) -> str:
    return f'<span class="grade">{marker_icon(level)}{escape(grade)}</span>'


def _band(meta: dict, cls: str, notice: str) -> str:
    """The band printed at the top and the foot of every page; the foot carries the notice, once a page."""
    if len(meta["rulesets"]) == 1:
        parts = [f'<div class="band {cls}"><span>sumpwise report · rule set <b>{escape(meta["id"])}</b> '
                 f'version {escape(str(meta.get("version")))} · {escape(meta["engine"])}</span>'
                 f'<span>fingerprint sha256 <code>{escape(meta["sha256"])}</code></span>']
    else:
        parts = [f'<div class="band {cls}"><span>sumpwise report · {len(meta["rulesets"])} rule sets: '
                 + "; ".join(_ruleset_label(entry) for entry in meta["rulesets"])
                 + f' · {escape(meta["engine"])}</span>']
    if cls == "foot":
        parts.append(f'<span class="notice">Notice: {escape(notice)} {escape(CAUTIONS[0])}</span>')
    return "".join(parts) + "</div>"


def _ruleset_label(entry: tuple) -> str:
    """A rule set as the report names it: id, version, the start of its fingerprint."""
    rid, version, sha = entry
    return f"<b>{escape(rid)}</b> version {escape(str(version))} (sha256 <code>{escape(sha[:12])}</code>…)"


def _legend(ladder: Ladder) -> str:
    items = [f"<span>{_grade_cell(g, k)} <span class='muted'>{grade_look(k).shape_name}</span></span>"
             for k, g in enumerate(ladder.names)]
    items.append(f"<span>{_grade_cell(UNRATED, None)} <span class='muted'>{grade_look(None).shape_name}</span>"
                 f"</span>")
    return '<div class="legend" aria-label="grade markers">' + "".join(items) + "</div>"


def _summary(records, rejects, ladder: Ladder, rejects_given: bool) -> str:
    by_grade = Counter(r["grade"] for r in records)
    unrated = by_grade.get(UNRATED, 0)
    rejected_rows = len({(r["file"], r["row"]) for r in rejects})
    flagged = sum(1 for r in records if (r.get("level") or 0) > 0)
    lowest = ladder.names[0] if ladder.names else "the lowest grade"
    stats = [("samples graded", len(records) - unrated), (f"flagged (above {escape(lowest)})", flagged),
             ("unrated", unrated), ("rejected rows", rejected_rows if rejects_given else "not given")]
    parts = ['<div class="stats">'] + [f'<div class="stat"><b>{v}</b>{k}</div>' for k, v in stats] + ["</div>"]
    columns = list(ladder.names) + [UNRATED]
    table = Counter((r.get("class") or "(none)", r["grade"]) for r in records)
    classes = sorted({c for c, _ in table})
    parts.append('<table class="grid"><thead><tr><th>class</th>' + "".join(
        f'<th class="n">{_grade_cell(g, ladder.level(g))}</th>' for g in columns) + '<th class="n">all</th>'
        '</tr></thead><tbody>')
    for name in classes:
        cells = "".join(f'<td class="n">{table.get((name, g), 0)}</td>' for g in columns)
        total = sum(table.get((name, g), 0) for g in columns)
        parts.append(f"<tr><td>{escape(name)}</td>{cells}<td class='n'>{total}</td></tr>")
    totals = "".join(f'<td class="n"><b>{by_grade.get(g, 0)}</b></td>' for g in columns)
    parts.append(f"<tr><td><b>all classes</b></td>{totals}<td class='n'><b>{len(records)}</b></td></tr>")
    parts.append("</tbody></table>")
    short = Counter(c.get("caveat") for r in records for c in r["caveats"] if c.get("caveat") in FIRST_CAVEATS)
    if short:  # no silent pass: samples that may be graded on less than they should, counted for the batch
        parts.append("<p class='warn'><b>Graded on less than their rules:</b> " + escape("; ".join(
            f"{short[c]} sample(s) with caveat {c}" for c in FIRST_CAVEATS if short[c])) + " (each is listed on "
            "its unit's card)</p>")
    if not rejects_given:
        parts.append('<p class="muted">No rejects file was given (<code>--rejects</code>), so rows the grader '
                     'rejected are not counted here.</p>')
    return "".join(parts)


def _attention(views, ladder: Ladder) -> str:
    rows = []
    for v in views:
        latest = v.samples[-1]
        rows.append(f'<tr data-unit="{escape(v.unit_id)}"><td><a href="#unit-{escape(v.unit_id)}">'
                    f'{escape(v.unit_id)}</a></td><td>{escape(v.class_name)}</td>'
                    f"<td>{_grade_cell(latest['grade'], v.latest_level)}</td><td class='trend'>{escape(v.trend)}</td>"
                    f"<td>{_grade_cell(ladder.name(v.worst_level), v.worst_level)}</td>"
                    f"<td class='when'>{escape(latest['sample_id'])} · {escape(latest.get('sampled_on') or 'no date')}</td>"
                    f'<td class="n">{v.flagged}</td><td class="n">{len(v.samples)}</td>'
                    f"<td class='steps'>{escape('; '.join(text for text, _ in next_steps(latest)))}</td></tr>")
    return ('<p class="sub">Ordered by the grade of the latest sample, then units that are worsening (the grade '
            'went up from the sample before, or a watched value moved toward its limit in each of the last two '
            'samples of the current oil charge), then by the highest grade in the batch.</p>'
            '<table class="grid attention"><thead><tr><th>unit</th><th>class</th><th>latest grade</th>'
            '<th>trend</th><th>highest in batch</th><th>latest sample</th><th class="n">flagged</th>'
            '<th class="n">samples</th><th>what to do (latest sample)</th></tr></thead><tbody>' + "".join(rows)
            + "</tbody></table>")


def _reason_rows(record: dict, ladder: Ladder, units: dict) -> str:
    rows = []
    for reason in record["reasons"]:
        grade = _grade_cell(reason["grade"], ladder.level(reason["grade"]))
        if reason.get("capped_from"):
            grade += (f'<br><span class="capped">capped from {escape(reason["capped_from"])} by caveat '
                      f'{escape(reason.get("capped_by") or "")}</span>')
        if "measure" in reason:
            unit = reason.get("unit") or ""
            value = f'{escape(reason["measure"])} = <b>{escape(_number(reason.get("value")))}</b> {escape(unit)}'
            limit = escape(limit_text(reason.get("test"), reason.get("limit"), unit))
        else:
            clauses = reason.get("clauses") or []
            value = "<ul class='tight'>" + "".join(  # each clause's value with its measure's unit (vocabulary)
                f"<li>{escape(c.get('measure') or c.get('field') or '')} = <b>{escape(_number(c.get('value')))}"
                f"</b>{escape(_unit_after(c, units))}</li>" for c in clauses) + "</ul>"
            limit = "<ul class='tight'>" + "".join(
                f"<li>{escape('missing' if c.get('test') == 'missing' else limit_text(c.get('test'), c.get('limit'), _clause_unit(c, units)))}"
                f": {'holds' if c.get('held') else 'does not hold'}</li>" for c in clauses) + "</ul>"
        rows.append(f"<tr class='reason'><td><b>{escape(reason['rule'])}</b><br><span class='reason-msg'>"
                    f"{escape(reason.get('message') or '')}</span></td><td>{grade}</td><td>{value}</td>"
                    f"<td>{limit}</td><td class='src'>{escape(reason.get('source') or '')}</td></tr>")
    return ("<table class='grid reasons'><thead><tr><th>rule</th><th>grade</th><th>value</th><th>limit</th>"
            "<th>source</th></tr></thead><tbody>" + "".join(rows) + "</tbody></table>")


def _clause_unit(clause: dict, units: dict) -> str | None:
    """A clause's unit (a clause record names none): the unit the unit's plots give its measure (the
    grading rule set's, which knows the measures it declares, iron in ppm; without the rule set, a
    finding's), else the vocabulary's."""
    if not clause.get("measure"):
        return None
    return units.get(clause["measure"]) or measure_unit(clause["measure"]) or None


def _unit_after(clause: dict, units: dict) -> str:
    unit = _clause_unit(clause, units)
    return f" {unit}" if unit and isinstance(clause.get("value"), (int, float)) else ""


def next_steps(record: dict) -> list[tuple[str, str]]:
    """(what to do, which rule or caveat asks it) for a sample, highest finding first, each step once."""
    steps: dict[str, list[str]] = {}
    for item in record["reasons"] + record["caveats"]:
        step = item.get("next_step")
        if step:
            steps.setdefault(step_phrase(step["task"], step.get("within_days")), []).append(
                item.get("rule") or item.get("caveat") or "")
    return [(text, ", ".join(by)) for text, by in steps.items()]


def _latest(record: dict, ladder: Ladder, units: dict) -> str:
    """The latest sample of a unit: its findings, caveats, gaps and what to do."""
    level = record.get("level")
    values = record.get("values") or {}
    hours = values.get("oil_hours")
    facts = [f"sampled {record.get('sampled_on') or '(no date)'}"]
    if isinstance(hours, (int, float)) and not isinstance(hours, bool):
        facts.append(f"oil hours {hours:g}")
    if record.get("method") and record["method"] != "direct":
        facts.append(f"oxidation by {record['method']}")
    if record.get("iso4406"):
        facts.append(f"ISO 4406 {record['iso4406']} as written")
    origin = record.get("origin") or {}
    if origin.get("file"):
        facts.append(f"from {origin['file']}" + (f" row {origin['row']}" if origin.get("row") is not None else ""))
    if record.get("comment"):  # the lab's own remark, as written
        facts.append(f"lab comment: {record['comment']}")
    parts = [f'<article class="latest" data-sample="{escape(record["sample_id"])}" '
             f'style="border-left-color:{grade_look(level).colour}">',
             f'<h4>Latest sample {escape(record["sample_id"])}: {_grade_cell(record["grade"], level)} '
             f'<span class="muted">{escape(" · ".join(facts))}</span></h4>']
    if record["reasons"]:
        parts.append(_reason_rows(record, ladder, units))
    elif level is not None:
        parts.append('<p class="muted">No limit crossed.</p>')
    else:
        parts.append(f'<p class="muted">No grade: {escape(record.get("unrated_because") or "")}</p>')
    if record["caveats"]:
        parts.append("<div><b>Caveats</b><ul class='tight caveats'>" + "".join(
            f"<li class='caveat'><b>{escape(c.get('caveat') or '')}</b>: {escape(c.get('message') or '')}"
            + (f" <span class='src'>(source: {escape(c['source'])})</span>" if c.get("source") else "")
            + "</li>" for c in record["caveats"]) + "</ul></div>")
    gaps = record.get("not_evaluated") or []
    if gaps:
        parts.append("<div class='muted'>Not evaluated (a missing value is never a pass): " + escape("; ".join(
            gap_phrase(g.get("rule"), g.get("missing") or [], _undecided(g)) for g in gaps)) + "</div>")
    steps = next_steps(record)
    if steps:
        parts.append("<h4>What to do</h4><ul class='todo'>" + "".join(
            f"<li class='step'>{escape(text)} <span class='src'>({escape(by)})</span></li>" for text, by in steps)
            + "</ul>")
    elif (level or 0) > 0:
        parts.append("<p class='muted'>The rule set gives no next step for these findings.</p>")
    return "".join(parts) + "</article>"


def _undecided(gap: dict) -> list:
    """(measure, reading) of the readings that left a rule undecided, as a record gives them: a
    bound as written, or a rate's interval (format 4; a format-3 record words it)."""
    undecided = gap.get("undecided") if isinstance(gap.get("undecided"), dict) else {}
    return [(name, _reading(shown)) for name, shown in undecided.items()]


def _reading(shown):
    """A record's undecided reading; one not of a record's shapes is shown as text, never a traceback."""
    try:
        return undecided_from_record(shown)
    except (KeyError, TypeError, ValueError):
        return str(shown)


def _finding_text(reason: dict, units: dict) -> str:
    """One finding in a few words: the rule, its grade, the value and the limit it crossed, as the
    sample's own rule set set it (the plots draw the latest sample's limits)."""
    capped = (f" (capped from {reason['capped_from']} by caveat {reason.get('capped_by') or '(not named)'})"
              if reason.get("capped_from") else "")
    if "measure" in reason:
        crossed = (f", {limit_text(reason['test'], reason['limit'], reason.get('unit'))}"
                   if reason.get("test") and reason.get("limit") is not None else "")
        return (f"{reason['rule']} {reason['grade']}{capped}: {reason['measure']} {_number(reason.get('value'))}"
                f"{crossed}")
    held = ", ".join(f"{c.get('measure') or c.get('field')} {_number(c.get('value'))}{_unit_after(c, units)}"
                     for c in reason.get("clauses") or () if c.get("held"))
    return f"{reason['rule']} {reason['grade']}{capped}: {held}"


def _earlier(samples, ladder: Ladder, units: dict, several: bool = False) -> str:
    """Earlier flagged samples of a unit, newest first, one compact row each; an earlier sample that
    may be graded on less than it should (FIRST_CAVEATS: an unknown lubricant, ...) is listed too.
    `several`: the unit's samples were graded under several rule sets, so each row names its own."""
    rows = []
    for record in reversed(samples):
        if (record.get("level") or 0) <= 0 and not any(c.get("caveat") in FIRST_CAVEATS for c in record["caveats"]):
            continue
        hours = (record.get("values") or {}).get("oil_hours")
        rows.append(f"<tr class='earlier' data-sample='{escape(record['sample_id'])}'>"
                    f"<td class='when'>{escape(record.get('sampled_on') or '')}</td>"
                    f"<td class='when'>{escape(record['sample_id'])}</td>"
                    f"<td class='n'>{escape(f'{hours:g}' if isinstance(hours, (int, float)) else '')}</td>"
                    f"<td>{_grade_cell(record['grade'], record.get('level'))}</td>"
                    f"<td>{escape('; '.join(_finding_text(r, units) for r in record['reasons']))}</td>"
                    + (f"<td class='when'>{_ruleset_label(_graded_by(record))}</td>" if several else "")
                    + f"<td>{escape(', '.join(c.get('caveat') or '' for c in record['caveats']))}</td></tr>")
    if not rows:
        return ""
    return ("<h4>Earlier flagged samples, and any graded on less than their rules</h4><table class='grid earlier'><thead><tr><th>sampled</th><th>sample</th>"
            "<th class='n'>oil h</th><th>grade</th><th>findings (rule, grade: value, limit)</th>"
            + ("<th>graded under</th>" if several else "") + "<th>caveats</th></tr>"
            "</thead><tbody>" + "".join(rows) + "</tbody></table>")


def _sources(samples) -> str:
    """Each rule that fired on the unit and its source, once (the compact rows leave them out)."""
    seen: dict[str, str] = {}
    for record in samples:
        for reason in record["reasons"]:
            seen.setdefault(reason["rule"], reason.get("source") or "")
    if not seen:
        return ""
    return ("<p class='src sources'>Sources: " + "; ".join(
        f"<b>{escape(rule)}</b>: {escape(source)}" for rule, source in seen.items()) + "</p>")


def _unit_section(view: UnitView, ladder: Ladder, forecasts=()) -> str:
    plots = unit_plots(view, ladder, forecasts)
    mine = [f for f in forecasts if _unit_key(f.get("unit_id")) == _unit_key(view.unit_id)]
    changes = sum(1 for s in view.samples[1:] if starts_charge(s))
    latest = view.samples[-1]
    head = (f'<section class="unit" id="unit-{escape(view.unit_id)}" data-unit="{escape(view.unit_id)}">'
            f'<div class="unit-head"><h3>{escape(view.unit_id)} <span class="muted">· {escape(view.class_name)} · '
            f'{escape(view.lubricant)}</span></h3><span>latest {_grade_cell(latest["grade"], view.latest_level)}'
            f' · {escape(view.trend)} · {len(view.samples)} samples'
            + (f" · {changes} oil change(s)" if changes else "") + "</span></div>"
            + (f"<p class='muted spellings'>The lab wrote this unit's id {len(view.spellings)} ways ("
               + ", ".join(f"&lsquo;{escape(u)}&rsquo;" for u in view.spellings)
               + "): one unit, as grading takes it (case and surrounding spaces ignored); each sample "
                 "keeps its id as written</p>" if len(view.spellings) > 1 else ""))
    figures = "".join(f"<figure>{render_plot(p)}"
                      + (f"<figcaption>{escape(p.note)}</figcaption>" if p.note else "") + "</figure>" for p in plots)
    units = {w.measure: w.unit for w in view.watched}
    earlier = _earlier(view.samples[:-1], ladder, units, len(view.graded_by) > 1)
    if len(view.graded_by) > 1:
        earlier = ("<p class='muted graded-by'>This unit's samples were graded under "
                   f"{len(view.graded_by)} rule sets ("
                   + "; ".join(_ruleset_label(entry) for entry in view.graded_by)
                   + "); the limits drawn are those of " + _ruleset_label(view.graded_by[-1])
                   + ", which graded the latest sample; each sample's grade is the one its own rule set "
                   "gave.</p>" + earlier)
    ahead = ""
    if mine:
        ahead = ("<h4>When will it cross?</h4><ul class='todo forecasts'>" + "".join(
            f"<li class='forecast'>{escape(forecast_text(f, _forecast_cap(view, f)))}</li>" for f in mine) + "</ul>"
            f"<p class='src'>Method: {escape(str(mine[0].get('method') or ''))}</p>")
    return (head + _latest(latest, ladder, units) + ahead + (f'<div class="plots">{figures}</div>' if figures else "")
            + earlier + _sources(view.samples) + "</section>")


def _plot_key(ruleset: RuleSet | None) -> str:
    common = ("Every plot is against the sample date; a point's tooltip gives the sample, its oil hours and the "
              "value. Values are those the engine recorded (derived measures as it computed and graded them); a "
              "dotted vertical line marks an oil change the engine recorded, and each oil charge is its own line. "
              "Each point's marker is the grade the rules reading that measure gave the sample.")
    if ruleset is not None:
        return ("<p class='sub'>Each unit shows the measures its class's rules read, the ones with findings "
                "first; coloured dashed lines are the ladder limits, each labelled with its grade. " + common
                + "</p>")
    return ("<p class='sub'>No rule set was given (<code>--rules</code>), so no limits are drawn and the plots "
            "show the measures the unit's findings name, then the derived measures the records carry. "
            + common + "</p>")


def render_report(records, rejects=(), ruleset: RuleSet | None = None, title: str = "",
                  rejects_given: bool = True, rulesets: dict | None = None, corrected=()) -> str:
    """The whole report as one HTML document; `records` are result records as `grade` writes them.

    The engine's forecasts of when a unit's charge reaches a limit are those the records carry
    (recorded_forecasts); each is drawn on its unit's plot and listed in its card.
    Records graded under several rule sets need `rulesets`, every one of them by fingerprint
    (as a ledger hands them over); each unit is then drawn against its latest sample's own.
    `corrected`: (sample id, batch, author, reason) of records a later batch corrected (a report
    of one ledger batch shows what that batch recorded), named at the top.
    """
    if not records:
        if rejects:  # every row was rejected: the report says so, and which rows, with the cautions
            return rejects_only_report(rejects, ruleset, title)
        raise InputError("a report needs at least one result record")
    first = records[0]
    graded_by = list(dict.fromkeys(_graded_by(r) for r in records))
    meta = {"id": first["ruleset"]["id"], "version": first["ruleset"].get("version"),
            "sha256": first["ruleset"]["sha256"], "engine": first["engine"], "rulesets": graded_by}
    if rulesets is None:
        if len(graded_by) > 1:
            raise InputError(f"the records were graded under {len(graded_by)} rule sets; a report of them needs "
                             f"each rule set (a ledger gives them)")
        if ruleset is not None and ruleset.sha256 != meta["sha256"]:
            raise InputError(f"the rule set given ({ruleset.id} sha256 {ruleset.sha256[:12]}...) is not the one "
                             f"the results were graded with ({meta['id']} sha256 {meta['sha256'][:12]}...); its "
                             f"limits would be drawn wrongly")
    else:
        missing = [sha for _, _, sha in graded_by if sha not in rulesets]
        if missing:
            raise InputError(f"no rule set given for the records graded under sha256 {missing[0][:12]}...")
        ruleset = rulesets[meta["sha256"]] if len(graded_by) == 1 else None
    grade_names = {tuple(rs.grades) for rs in (rulesets or {}).values()}
    ladder = Ladder(grade_names.pop()) if len(grade_names) == 1 else Ladder.of(records, ruleset)
    notices = dict.fromkeys(r["notice"] for r in records if r.get("notice"))
    notice = " ".join(notices) or (ruleset.notice if ruleset is not None else
                                   "the records do not carry the rule set's notice; read it in the rule set")
    views = unit_views(records, ruleset, rulesets)
    forecasts = recorded_forecasts(records)
    heading = title or (ruleset.title if ruleset is not None else f"Graded samples, rule set {meta['id']}"
                        if len(graded_by) == 1 else f"Graded samples, {len(graded_by)} rule sets")
    dates = sorted(r["sampled_on"] for r in records if r.get("sampled_on"))
    span = f"samples from {dates[0]} to {dates[-1]}" if dates else "sample dates not given"
    unrated = [r for r in records if r.get("level") is None]
    cautions = _cautions_box()
    body = [f"<h1>{escape(heading)}</h1>",
            f'<p class="sub">{escape(span)} · {len(records)} result records · {len(views)} units</p>',
            *(["<p class='sub rulesets'>Graded under " + str(len(graded_by)) + " rule sets: "
               + "; ".join(_ruleset_label(entry) for entry in graded_by)
               + ". Each unit's limits are those of the rule set that graded its latest sample.</p>"]
              if len(graded_by) > 1 else []),
            cautions, f'<p class="notice">Notice of the rule set: {escape(notice)}</p>',
            *(["<p class='warn corrected'><b>Corrected since:</b> " + str(len(corrected)) + " sample(s) shown as "
               "this batch recorded them were corrected by a later batch; their current results differ: "
               + "; ".join(f"{escape(sid)} (batch {number}, by {escape(author or '(no author recorded)')}: "
                           f"{escape(reason or '(no reason recorded)')})" for sid, number, author, reason in corrected)
               + "</p>"] if corrected else []),
            "<h2>The batch</h2>", _legend(ladder), _summary(records, rejects, ladder, rejects_given),
            "<h2>Units needing attention first</h2>", _attention(views, ladder),
            "<h2>Units: latest findings, what to do, trends</h2>",
            _plot_key(ruleset or next(iter((rulesets or {}).values()), None))]
    body.extend(_unit_section(v, ladder, forecasts) for v in views)
    if unrated:
        body.append("<h2>Unrated samples</h2><table class='grid unrated'><thead><tr><th>sample</th><th>unit</th>"
                    "<th>class</th><th>why no grade</th></tr></thead><tbody>" + "".join(
                        f"<tr><td>{escape(r['sample_id'])}</td><td>{escape(r.get('unit_id') or '')}</td>"
                        f"<td>{escape(r.get('class') or '')}</td><td>{escape(r.get('unrated_because') or '')}</td>"
                        "</tr>" for r in unrated) + "</tbody></table>")
    if rejects:
        body.append(_rejects_table(rejects))
    body.append(cautions)
    return _document(heading, meta, notice, body)


def _document(heading: str, meta: dict, notice: str, body: list) -> str:
    """The HTML page: the band at the head and foot of every printed page, the body between."""
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
            f"<title>{escape(heading)} · sumpwise report</title><style>{_CSS}{marker_css()}</style></head><body>"
            "<table class=\"frame\" role=\"presentation\">"
            f"<thead><tr><td><div class=\"wrap\">{_band(meta, 'head', notice)}</div></td></tr></thead>"
            f"<tfoot><tr><td><div class=\"wrap\">{_band(meta, 'foot', notice)}</div></td></tr></tfoot>"
            f"<tbody><tr><td><main class=\"wrap\">{''.join(body)}</main></td></tr></tbody></table>"
            "</body></html>\n")


def _cautions_box() -> str:
    return ('<div class="cautions" role="note"><strong>Cautions</strong><ul>'
            + "".join(f"<li>{escape(c)}</li>" for c in CAUTIONS) + "</ul></div>")


def _rejects_table(rejects) -> str:
    """Rejected rows as the grader refused them: the file when the rejects name theirs (row 3 of which
    file), the problem code when they carry it (rejects files and ledgers do)."""
    files = any(r["file"] for r in rejects)
    codes = any(r.get("code") for r in rejects)
    return ("<h2>Rejected rows (not graded)</h2><table class='grid rejects'><thead><tr>"
            + ("<th>file</th>" if files else "") + "<th>row</th><th>sample</th><th>field</th>"
            + ("<th>code</th>" if codes else "") + "<th>why</th></tr></thead><tbody>" + "".join(
                "<tr>" + (f"<td>{escape(r['file'])}</td>" if files else "")
                + f"<td>{escape(r['row'])}</td><td>{escape(r['sample_id'])}</td><td>{escape(r['field'])}</td>"
                + (f"<td>{escape(r.get('code') or '')}</td>" if codes else "")
                + f"<td>{escape(r['reason'])}</td></tr>" for r in rejects) + "</tbody></table>")


def rejects_only_report(rejects, ruleset: RuleSet | None = None, title: str = "") -> str:
    """The report of a run in which every row was rejected: nothing was graded, so no grade, unit or
    plot is shown, only the rows refused and why, with the cautions (an empty results file beside a
    rejects file used to be refused, and the batch's readers got no report of what went wrong)."""
    if not rejects:
        raise InputError("a report needs at least one result record or rejected row")
    rows = len({(r["file"], r["row"]) for r in rejects})
    meta = ({"id": ruleset.id, "version": ruleset.version, "sha256": ruleset.sha256,
             "rulesets": [(ruleset.id, ruleset.version, ruleset.sha256)]} if ruleset is not None
            else {"id": "(not known: no result records)", "version": "-", "sha256": "-", "rulesets": [None]})
    meta["engine"] = engine_name()
    notice = ruleset.notice if ruleset is not None else "no result record carries the rule set's notice"
    heading = title or "Every row was rejected: nothing was graded"
    body = [f"<h1>{escape(heading)}</h1>",
            f'<p class="sub">0 result records · {rows} rejected row(s)</p>', _cautions_box(),
            f'<p class="notice">Notice of the rule set: {escape(notice)}</p>',
            "<p class='warn no-results'><b>No sample was graded.</b> Every row read was rejected; mend the rows "
            "below (or the column map) and grade them again. No grade in this report says a unit is healthy.</p>",
            _rejects_table(rejects), _cautions_box()]
    return _document(heading, meta, notice, body)
