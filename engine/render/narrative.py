"""The story of one verdict, in sentences a person reads: for the lead and for the auditor."""

from __future__ import annotations

import math
import textwrap

from sumpwise.vocabulary.cautions import CAUTIONS
from sumpwise.vocabulary.limit_tests import limit_phrase, unit_text
from sumpwise.vocabulary.measures import MEASURES, measure_unit
from sumpwise.intake.censored import number_text
from sumpwise.results.records import RateInterval, SampleResult
from sumpwise.render.safe_text import terminal_lines


def _number(value) -> str:
    if value is None:
        return "missing"
    if isinstance(value, list):
        return "[" + ", ".join(_number(v) for v in value) + "]"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        return f"{value:.6g}"
    return str(value)


def rounded(value, figures: int = 3) -> str:
    """A number for people: `figures` significant figures, never an exponent, thousands grouped
    (53348.339 -> 53,300; 276.614 -> 277; 0.04567 -> 0.0457). Records keep full precision."""
    if value is None:
        return "missing"
    value = float(value)
    if value == 0 or not math.isfinite(value):
        return f"{value:g}"
    digits = figures - 1 - math.floor(math.log10(abs(value)))
    value = round(value, digits)
    if digits <= 0:
        return f"{value:,.0f}"
    return f"{value:,.{digits}f}".rstrip("0").rstrip(".")


def step_phrase(task: str, within_days: int | None) -> str:
    """A next step in words: 'Resample (within 7 days of sampling)'."""
    if within_days is None:
        return task
    return f"{task} (within {within_days} day{'s' if within_days != 1 else ''} of sampling)"


def step_phrases(result) -> list[str]:
    """A result's next steps in words, each once, in the order its reasons and caveats ask them."""
    return phrases_of([x.next_step for x in result.reasons + result.caveats if x.next_step is not None])


def phrases_of(steps) -> list[str]:
    """Next steps in words, each once, in the order given."""
    return list(dict.fromkeys(step_phrase(s.task, s.within_days) for s in steps))


def _limit_phrase(test: str, limit, unit: str | None) -> str:
    return limit_phrase(test, limit, _number, unit)


def _clause_line(clause, units=measure_unit) -> str:
    name = clause.measure or clause.field
    held = "holds" if clause.held else "does not hold"
    # the measure's unit: the vocabulary's, or the one the rule set declares (iron: ppm); a clause record names none
    unit = (units(clause.measure) or None) if clause.measure else None
    shown = f"{_number(clause.value)} {unit}" if unit and clause.value is not None else _number(clause.value)
    if clause.test == "missing":
        wanted = "is missing" if clause.limit else "is present"
        return f"{name} {wanted}: {held} (value {shown})"
    return f"{name} = {shown}, test {_limit_phrase(clause.test, clause.limit, unit)}: {held}"


def _bound_note(reason) -> str:
    """A ladder finding on a reading the lab wrote as a bound beyond the limit (`>1500` above 1000):
    a higher step may be crossed too, undecided, so the grade is the least the rule gives."""
    value = reason.value.strip() if isinstance(reason.value, str) else ""
    way = {"above": (">", "\u2265"), "below": ("<", "\u2264")}.get(reason.test)
    if not way or not value.startswith(way):
        return ""
    side = "above" if reason.test == "above" else "below"
    return (f"The lab wrote a bound ({value}): the reading lies somewhere {side} it, so {reason.grade} is the least "
            f"this rule gives the sample.")


def gap_phrase(rule: str, missing, undecided) -> str:
    """Why a rule was not evaluated: the inputs it lacked, and readings that left it undecided, a
    bound as the lab wrote it (`<5`) or a rate's interval from a step within the noise margin."""
    told = "; ".join(_undecided_reading(name, shown) for name, shown in undecided)
    if not missing:
        return f"{rule}: {told}"
    return f"{rule}: lacks {', '.join(missing)}" + (f" ({told})" if told else "")


def _undecided_reading(name: str, shown) -> str:
    if isinstance(shown, RateInterval):
        said = (f"{_rate_number(shown.rate)}, [{_rate_number(shown.low)}, {_rate_number(shown.high)}] from a step "
                f"of {_rate_number(shown.step)} within its noise margin of {_rate_number(shown.margin)} over "
                f"{_rate_number(shown.hours)} h")
    else:  # a bound as the lab wrote it; a format-3 record or ledger says the interval in words
        said = f"written '{shown}'" if str(shown)[:1] in "<>\u2264\u2265" else str(shown)
    return f"{name} {said} does not decide it"


def _rate_number(value) -> str:
    """A number of a rate's interval, as the engine spells a bound (no binary noise)."""
    return "(none)" if value is None else value if isinstance(value, str) else number_text(value)


def undefined_phrase(names) -> str:
    """A derived measure a rule lacked although its inputs were there (the record names the
    measure then, not a reading): where that measure has no value, from the measure table."""
    said = [f"{name} has no value where {MEASURES[name].undefined_when}" for name in names
            if name in MEASURES and MEASURES[name].undefined_when]
    return f" ({'; '.join(said)})" if said else ""


def wrapper(width: int = 88):
    """Wraps a paragraph to `width`; a bullet ("- ") starts the first line only, continuation
    lines line up under its text."""
    def wrap(text: str, indent: str = "") -> list[str]:
        following = indent.replace("-", " ")
        return textwrap.wrap(text, width, initial_indent=indent, subsequent_indent=following) or [indent]
    return wrap


def forecast_limit_phrase(test: str, limit, unit: str | None, slope) -> str:
    """The limit a forecast meets, in words. A forecast on an `outside` rule records the one side
    the fit moves to, signed (-10 for a viscosity falling towards a 10 % band): it reads as that
    side, "below -10 %", never as "more than -10 % either side of zero"."""
    if test == "outside" and isinstance(limit, (int, float)) and not isinstance(limit, bool):
        falling = slope < 0 if isinstance(slope, (int, float)) and slope else limit < 0
        return limit_phrase("below" if falling else "above", limit, _number, unit)
    if not test:  # a record that names no test: the limit alone
        return f"{_number(limit)}{unit_text(unit)}"
    return _limit_phrase(test, limit, unit)


def forecast_cap(measure: str, grade: str, caveats, ruleset) -> str:
    """What a caveat raised on the forecast's sample says of the grade a forecast names: a forecast
    meets the rule's own limit (before any cap), and the caveat's cap holds the rule's grade below
    it (an ester oil's carbonyl forecast to reach the alert limit still grades watch). Words from the
    rule set's caps; '' when none applies or the rule set is not known."""
    if ruleset is None or grade not in ruleset.grades:
        return ""
    raised = set(caveats)
    for caveat in ruleset.caveats:
        cap = caveat.cap
        if (caveat.id in raised and cap is not None and measure in cap.measures
                and ruleset.grades.index(grade) > cap.level):
            held = ruleset.grades[cap.level]
            return (f"caveat {caveat.id}, raised on this sample, caps rules on {measure} at {held}"
                    + (" unless its exception holds (see the caveat): while the cap holds," if cap.unless is not None
                       else ":")
                    + f" crossing this limit grades {held}, not {grade}")
    return ""


def forecast_lines(forecasts, wrap=None, caveats=(), ruleset=None) -> list[str]:
    """The forecast paragraph: when the unit's current oil charge reaches each rule's next limit.

    `explain` and `history` both print it; `caveats` (ids raised on the sample the forecasts were
    made from) and its `ruleset` say where a cap keeps a forecast's grade out of reach."""
    if not forecasts:
        return []
    wrap = wrap or wrapper()
    lines = ["", "When will it cross? (this unit's current oil charge, fitted up to this sample):"]
    for f in forecasts:  # hours and the fit to 3 significant figures: the record keeps them in full
        unit = f" {f.unit}" if f.unit else ""
        low = f"{rounded(f.at_hours_low)} h" if f.at_hours_low is not None else "now"
        high = f"{rounded(f.at_hours_high)} h" if f.at_hours_high is not None else "beyond the horizon"
        when = f" (about {f.on}; {f.on_low or 'now'} to {f.on_high or 'later'})" if f.on else ""
        lines.extend(wrap(
            f"{f.rule}: {f.measure} reaches the {f.grade} limit "
            f"({forecast_limit_phrase(f.test, f.limit, f.unit or None, f.slope_per_1000h)}) "
            f"at about {rounded(f.at_hours)} oil hours, {rounded(f.hours_to_go)} h from this sample's "
            f"{_number(f.oil_hours)} h{when}; 95 % prediction band {low} to {high} (horizon "
            f"{rounded(f.horizon_hours)} h). Fit over {f.samples} samples: {rounded(f.slope_per_1000h)}{unit} per "
            f"1000 h, t = {rounded(f.slope_t)}."
            + (f" But {capped}." if (capped := forecast_cap(f.measure, f.grade, caveats, ruleset)) else ""), "  - "))
    lines.extend(wrap(f"Method: {forecasts[0].method}.", "  "))
    return lines


def explain_lines(result: SampleResult, grades: tuple, width: int = 88, forecasts=(), ruleset=None) -> list[str]:
    """The narrative of one sample's grade, reason by reason, with sources and cautions;
    `forecasts` (derive.forecast.Forecast, made from this sample; by default the result's own)
    add their paragraph. `ruleset`, the one that graded the sample, gives the units of the measures
    it declares (a clause names none) and its caveats' caps (a forecast beyond a cap says so)."""
    wrap = wrapper(width)
    units = ruleset.unit_of if ruleset is not None else measure_unit
    forecasts = forecasts or result.forecasts or ()

    lines = [f"Sample {result.sample_id}: unit {result.unit_id or '(none)'}, class {result.class_name or '(none)'}, "
             f"lubricant {result.lubricant or '(none)'}, sampled {result.sampled_on or '(date not given)'}"]
    read = ([f"Read from {result.file}, row {result.row}"] if result.row is not None else []) + (
        [f"ISO 4406 code as written {result.iso4406}"] if result.iso4406 else [])
    if read:
        lines.extend(wrap("; ".join(read) + ".", "  "))
    if result.comment:
        lines.extend(wrap(f"Lab comment: {result.comment}", "  "))
    if result.level is None:
        lines.append(f"Grade: {result.grade.upper()}: no grade could be given.")
        lines.extend(wrap(f"Why: {result.unrated_because}.", "  "))
    else:
        ladder = " < ".join(grades)
        lines.append(f"Grade: {result.grade.upper()} (level {result.level} on the ladder {ladder})")
    lines.append("")
    if result.reasons:
        lines.append("What fired, highest grade first:")
        for number, reason in enumerate(result.reasons, 1):
            head = f"{number}. {reason.rule}: {reason.grade}"
            if reason.capped_from:
                head += f" (would be {reason.capped_from}; capped by caveat {reason.capped_by})"
            lines.append("  " + head)
            lines.extend(wrap(reason.message.rstrip(".") + ".", "     "))
            if reason.measure:
                lines.extend(wrap(f"{reason.measure} = {_number(reason.value)} {reason.unit or ''}".rstrip()
                                  + f", {_limit_phrase(reason.test, reason.limit, reason.unit)} "
                                    f"(the {reason.grade if not reason.capped_from else reason.capped_from} limit).",
                                  "     "))
            bound = _bound_note(reason)
            if bound:
                lines.extend(wrap(bound, "     "))
            for clause in reason.clauses:
                lines.extend(wrap(_clause_line(clause, units), "     - "))
            lines.extend(wrap(f"Source: {reason.source}", "     "))
            if reason.next_step is not None:
                lines.extend(wrap(f"Next step: {step_phrase(reason.next_step.task, reason.next_step.within_days)}",
                                  "     "))
    elif result.level is not None:
        lines.append("No limit was crossed.")
    if result.caveats:
        lines.append("")
        lines.append("Caveats:")
        for caveat in result.caveats:
            lines.extend(wrap(f"{caveat.caveat}: {caveat.message}", "  - "))
            if caveat.unless_missing:
                lines.extend(wrap(f"Its cap stays in force because the exception that would lift it could not "
                                  f"be checked: it lacks {', '.join(caveat.unless_missing)}. Measure that before "
                                  f"trusting a capped grade.", "    "))
            if caveat.next_step is not None:
                lines.extend(wrap(f"Next step: {step_phrase(caveat.next_step.task, caveat.next_step.within_days)}",
                                  "    "))
    lines.extend(forecast_lines(forecasts, wrap, [c.caveat for c in result.caveats], ruleset))
    if result.not_evaluated:
        lines.append("")
        lines.append("Not evaluated (a missing value is never a pass):")
        for gap in result.not_evaluated:
            lines.extend(wrap(gap_phrase(gap.rule, gap.missing, gap.undecided) + undefined_phrase(gap.missing), "  - "))
    lines.append("")
    lines.append(f"Rule set {result.ruleset_id} version {result.ruleset_version}, "
                 f"sha256 {result.ruleset_sha256}; {result.engine}.")
    lines.extend(wrap(f"Notice: {result.notice}"))
    lines.append("")
    lines.extend(wrap("Cautions: " + " ".join(CAUTIONS)))
    return terminal_lines(lines)  # ids and values come from a lab's file
