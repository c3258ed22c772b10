"""The measures rules can read: lab readings, and the values derived from them.

This is the one table of what a measure is: its canonical unit, its unit family (the
`units:` key a rule set may restate), the values it can take at all, whether a low value
is the bad one, what it is computed from, and whether the trend measures are built on it.
Every stage reads it: intake validates rows against the domains, derive computes the
derived measures, the compiler resolves names and units, lint reasons on the domains,
records and renderers take units and meanings from here.
"""

from __future__ import annotations

from dataclasses import dataclass

from sumpwise.vocabulary.intervals import EVERYTHING, INF, Span

# The values a measure can take at all. Intake rejects a reading outside its domain, so a
# limit test outside it can never hold (lint says so).
ANY = EVERYTHING
NOT_NEGATIVE = (Span(0.0, INF, low_in=True),)
POSITIVE = (Span(0.0, INF),)
# (used - new) / new x 100 with both viscosities above zero lies above -100 %.
ABOVE_MINUS_100 = (Span(-100.0, INF),)
# Water is a share of the sample: at most 100 % (1 000 000 ppm).
WATER_DOMAIN = (Span(0.0, 1_000_000.0, low_in=True, high_in=True),)


@dataclass(frozen=True)
class Repeatability:
    """A test method's published repeatability r = factor x (mean of the two results + offset).

    Two results on the same oil by the same operator differ by more than r in only one case in
    twenty, so a step between two samples no larger than r is not counted as a rise.
    """

    factor: float
    offset: float
    source: str


# Figures checked against the published text (see the README's trends section).
D664_USED = Repeatability(0.117, 0.0, "ASTM D664 15.1.1, used oils, buffer end point: r = 0.117 X")
ISO3104_FORMULATED = Repeatability(0.0026, 0.0, "ISO 3104 14.2 (ASTM D445), formulated oils at 40 and 100 C: "
                                                "r = 0.0026 x; used oils are expected to be poorer (D445 17.3)")


@dataclass(frozen=True)
class Measure:
    """One measure a rule can name.

    `needs` names the columns it is computed from (empty for a lab reading), so "not
    evaluated" can say what was missing; `scale_of` names the reading whose `units:` entry
    limits on it are written in; `family` is a lab reading's unit family, when a rule set
    or column map may give it in another unit.
    """

    name: str
    unit: str
    meaning: str
    needs: tuple[str, ...] = ()
    scale_of: str | None = None
    family: str | None = None
    domain: tuple = ANY
    low_is_bad: bool = False
    reference: bool = False  # a new-oil value exists (`new_<name>`, or the lubricants table)
    trended: bool = False  # the unit's trend measures (`<name>_step`, ...) are built on it
    repeatability: Repeatability | None = None  # a published figure: a smaller step is not a rise
    # Where a derived measure has no value although its inputs are present, said where a rule
    # it left unevaluated is explained ("lacks vi" alone leaves a reader looking for a reading).
    undefined_when: str = ""


def _reading(name, unit, meaning, **facts) -> Measure:
    facts.setdefault("scale_of", name)
    return Measure(name, unit, meaning, **facts)


# Lab readings, as a samples file gives them (after unit conversion to the canonical unit).
READINGS = (
    _reading("kv40", "mm2/s", "kinematic viscosity at 40 C", domain=POSITIVE, reference=True, trended=True,
             repeatability=ISO3104_FORMULATED),
    _reading("kv100", "mm2/s", "kinematic viscosity at 100 C", domain=POSITIVE, reference=True, trended=True,
             repeatability=ISO3104_FORMULATED),
    _reading("an", "mg KOH/g", "acid number", domain=NOT_NEGATIVE, reference=True, trended=True,
             repeatability=D664_USED),
    _reading("bn", "mg KOH/g", "base number", domain=NOT_NEGATIVE, low_is_bad=True, reference=True, trended=True),
    _reading("oxidation", "abs/cm", "FTIR oxidation by direct trend: carbonyl peak height, 1800-1670 cm-1, "
             "on the used oil itself (ASTM D7414 Procedure A)", family="absorbance", reference=True, trended=True),
    _reading("oxidation_differential", "abs/cm", "FTIR oxidation by differential trend: carbonyl peak height, "
             "1800-1670 cm-1, after subtracting the new oil (ASTM D7414 Procedure B, D7418); a row gives it "
             "as `oxidation` with `method` subtraction or differential", scale_of="oxidation", trended=True),
    _reading("nitration", "abs/cm", "FTIR nitration", family="absorbance", trended=True),
    _reading("sulfation", "abs/cm", "FTIR sulfation", family="absorbance", trended=True),
    _reading("antiwear", "abs/cm", "FTIR anti-wear additive (phosphate)", family="absorbance", trended=True),
    _reading("soot", "abs/cm", "FTIR soot", family="absorbance", trended=True),
    _reading("water", "ppm", "water", family="water", domain=WATER_DOMAIN, trended=True),
    _reading("oil_hours", "h", "hours on the oil charge", domain=NOT_NEGATIVE),
    _reading("rpvot", "min", "RPVOT oxidation stability", domain=NOT_NEGATIVE, low_is_bad=True, reference=True,
             trended=True),
    # Particle counts per mL at the three ISO 4406 sizes (optical counter calibrated to ISO 11171).
    _reading("particles_4um", "/mL", "particles >= 4 um(c) per mL", domain=NOT_NEGATIVE, trended=True),
    _reading("particles_6um", "/mL", "particles >= 6 um(c) per mL", domain=NOT_NEGATIVE, trended=True),
    _reading("particles_14um", "/mL", "particles >= 14 um(c) per mL", domain=NOT_NEGATIVE, trended=True),
)


def _derived(name, unit, needs, meaning, scale_of=None, **facts) -> Measure:
    return Measure(name, unit, meaning, needs=needs, scale_of=scale_of, **facts)


_NO_HOURS = "the oil has 0 hours (no rate over no time)"

# Measures derived from one sample's own values (and its new-oil reference).
ROW_DERIVED = (
    _derived("kv40_change_pct", "%", ("kv40", "new_kv40"), "(used - new) / new x 100, viscosity at 40 C",
             domain=ABOVE_MINUS_100),
    _derived("kv100_change_pct", "%", ("kv100", "new_kv100"), "(used - new) / new x 100, viscosity at 100 C",
             domain=ABOVE_MINUS_100),
    _derived("an_rise", "mg KOH/g", ("an", "new_an"), "acid number used - new"),
    _derived("oxidation_rise", "abs/cm", ("oxidation", "new_oxidation"),
             "FTIR oxidation by direct trend, used - new-oil reading (a differential reading is "
             "oxidation_differential, never this)", scale_of="oxidation"),
    _derived("vi", "", ("kv40", "kv100"), "viscosity index, ASTM D2270",
             undefined_when="kv100 is below 2 mm2/s, the lower end of ASTM D2270 (section 1.2)"),
    _derived("oxidation_rise_per_1000h", "abs/cm per 1000 h", ("oxidation", "new_oxidation", "oil_hours"),
             "oxidation rise / oil hours x 1000", scale_of="oxidation", undefined_when=_NO_HOURS),
    _derived("oxidation_differential_per_1000h", "abs/cm per 1000 h", ("oxidation_differential", "oil_hours"),
             "differential oxidation / oil hours x 1000", scale_of="oxidation", undefined_when=_NO_HOURS),
    _derived("an_rise_per_1000h", "mg KOH/g per 1000 h", ("an", "new_an", "oil_hours"),
             "acid number rise / oil hours x 1000", undefined_when=_NO_HOURS),
    _derived("bn_retained_pct", "%", ("bn", "new_bn"), "base number / new-oil base number x 100",
             domain=NOT_NEGATIVE, low_is_bad=True, undefined_when="the new oil's base number is 0"),
    _derived("rpvot_retained_pct", "%", ("rpvot", "new_rpvot"), "RPVOT / new-oil RPVOT x 100",
             domain=NOT_NEGATIVE, low_is_bad=True, undefined_when="the new oil's RPVOT is 0"),
    _derived("bn_minus_an", "mg KOH/g", ("bn", "an"), "base number - acid number of the same sample (engine oils)",
             low_is_bad=True),
)


# ISO 4406 scale numbers, one per size: from the code as the lab wrote it (the text field
# `iso4406`), or else from the particle count (sumpwise.derive.cleanliness).
ISO4406_SIZES = ("4um", "6um", "14um")
ISO4406_TOP = 28  # the published table's last row; a count above it is given 29 (the standard writes >28)


def read_iso4406(text: str) -> tuple:
    """A cleanliness code as labs write it -> (scale number or None) at >= 4, 6 and 14 um(c).

    `18/16/13` (spaces around the solidi, or hyphens, en or em dashes for them, `18-16-13`, read alike);
    the two-number form `16/13` (>= 6 and >= 14 um(c) only) or `-/16/13`; `-` or
    `*` for a size not reported; `>28` (beyond the standard's table) is 29, as scale_numbers
    gives a count above 2,500,000 per mL. A number written `>=7` or with the sign U+2265 (fewer than 20
    particles counted) gives that number here; iso4406_parts says which were so written,
    since the true code may be higher. Raises ValueError saying what was expected.
    """
    return tuple(number for number, _ in iso4406_parts(text))


def iso4406_parts(text: str) -> list:
    """A readable code's three sizes as (scale number or None, written `>=n` or with U+2265):
    fewer than 20 particles counted, so the true number is n or higher (ISO 4406:1999; a
    censored value, not the number n). Raises ValueError as read_iso4406 does."""
    written = str(text).strip()
    hyphens = "/" not in written and "-" in written and any(c.isdigit() for c in written)
    if "/" not in written:  # `18–16–13`: ISO 4406 writes solidi (18/16/13); an en or em dash is a typographic slip
        written = written.replace("\u2013", "/").replace("\u2014", "/")  # (common practice, no source)
        # `18-16-13`: hyphens between numbers only; where one stands alone it may mean a size not reported
        # (`-16-13`, `18--13`), so such a code is refused rather than guessed
        written = written.replace("-", "/") if hyphens else written
    parts = [part.strip() for part in written.split("/")]
    if hyphens and "" in parts:
        raise ValueError(f"the ISO 4406 code '{text}' has a hyphen where a number should be: with hyphens between "
                         f"the numbers, a size not reported cannot be told from a separator; write solidi "
                         f"(-/16/13 or 18/-/13)")
    if len(parts) == 2:
        parts = ["-"] + parts
    if len(parts) != 3:
        raise ValueError(f"expected an ISO 4406 code such as 18/16/13, 16/13 or -/16/13, found '{text}'")
    found = []
    for part in parts:
        if part in ("-", "*"):
            found.append((None, False))
            continue
        if part.replace(" ", "") == f">{ISO4406_TOP}":  # the standard's spelling beyond its table: 29 here
            found.append((ISO4406_TOP + 1, False))
            continue
        digits = part.removeprefix(">=").removeprefix("\u2265").strip()
        if not digits.isdigit() or int(digits) > ISO4406_TOP + 1:
            raise ValueError(f"expected scale numbers 0 to {ISO4406_TOP + 1}, '-' or '*' in an ISO 4406 code "
                             f"such as 18/16/13, found '{text}'")
        found.append((int(digits), digits != part))
    if all(number is None for number, _ in found):
        raise ValueError(f"the ISO 4406 code '{text}' reports no size")
    _check_cumulative(text, found)
    return found


def _check_cumulative(text: str, found: list) -> None:
    """Counts are cumulative (particles >= 4 um(c) include those >= 6 and >= 14), so a scale
    number never rises with size (ISO 4406:1999): `14/16/18`, written smallest last, would be
    graded on 18 at 14 um(c). A smaller size written `>=n` may truly be higher: no contradiction."""
    for k in range(len(found)):
        for larger in range(k + 1, len(found)):
            (small, small_open), (big, _) = found[k], found[larger]
            if small is not None and big is not None and big > small and not small_open:
                raise ValueError(f"the ISO 4406 code '{text}' rises with particle size ({small} at >= "
                                 f"{ISO4406_SIZES[k][:-2]} um(c), {big} at >= {ISO4406_SIZES[larger][:-2]} um(c)): "
                                 f"counts at a size include every larger particle, so its numbers cannot rise; "
                                 f"written in another order?")

CLEANLINESS = tuple(
    _derived(f"iso4406_{size}", "", ("iso4406", f"particles_{size}"),
             f"ISO 4406 scale number at >= {size[:-2]} um(c): the lab's code, or from particles_{size}",
             domain=NOT_NEGATIVE, trended=True)
    for size in ISO4406_SIZES)

TREND_SUFFIXES = ("_step_per_1000h", "_step", "_rising")


def _trend_measures(reading: Measure) -> tuple[Measure, ...]:
    """Trend measures compare a sample with its unit's previous sample (sumpwise.derive.trends).

    `previous_<name>` and `hours_since_previous` are columns of the measured frame, so "not
    evaluated" can say that the previous sample was lacking (first sample, oil change, or a
    trend break).
    """
    name, unit, previous = reading.name, reading.unit, f"previous_{reading.name}"
    return (
        _derived(f"{name}_step", unit, (name, previous), f"{name} minus the unit's previous sample's {name}",
                 scale_of=reading.scale_of, low_is_bad=reading.low_is_bad),
        _derived(f"{name}_step_per_1000h", f"{unit} per 1000 h", (name, previous, "hours_since_previous"),
                 f"{name}_step / oil hours between the two samples x 1000", scale_of=reading.scale_of,
                 low_is_bad=reading.low_is_bad,
                 undefined_when="the oil hours did not rise since the previous sample (no rate over no time)"),
        _derived(f"{name}_rising", "", (name, previous), f"consecutive rises of {name} ending at this sample",
                 domain=NOT_NEGATIVE),
    )


MEASURES: dict[str, Measure] = {m.name: m for m in READINGS + ROW_DERIVED + CLEANLINESS}
# The readings a ledger's form-1 batches keep in typed columns (its table columns: keep this list as it is).
TREND_BASES = ("kv40", "kv100", "an", "bn", "oxidation", "nitration", "sulfation", "antiwear", "soot", "water",
               "rpvot")
# Every measure the trend measures are built on; declared measures get them too (declared_trend_measure).
TRENDED = tuple(m.name for m in READINGS + CLEANLINESS if m.trended)
for _trended_measure in READINGS + CLEANLINESS:
    if _trended_measure.trended:
        MEASURES.update((m.name, m) for m in _trend_measures(_trended_measure))

# Views of the table, for the stages that need one slice of it.
INPUT_MEASURES = {m.name: m.unit for m in READINGS}
REFERENCE_VALUES = tuple(m.name for m in READINGS if m.reference)
ROW_MEASURES = {m.name: m for m in ROW_DERIVED}
CLEANLINESS_MEASURES = {m.name: m for m in CLEANLINESS}
TREND_MEASURES = {name: m for name, m in MEASURES.items()
                  if m.needs and name not in ROW_MEASURES and name not in CLEANLINESS_MEASURES}
DERIVED_MEASURES = {**ROW_MEASURES, **CLEANLINESS_MEASURES, **TREND_MEASURES}
UNIT_FAMILY = {m.name: m.family for m in READINGS if m.family}

# Text columns a `field:` condition may read without the rule set declaring them.
# `iso4406` is the cleanliness code as the lab wrote it (18/16/13); derive reads it into numbers.
KNOWN_FIELDS = ("sample_id", "unit_id", "class", "lubricant", "base_stock", "base_stock_family", "method", "lab",
                "sampled_on", "iso4406")

# FTIR trend approaches (ASTM D7418): `method` of a row. "differential" is D7418's word for
# spectral subtraction; both are read as the canonical "subtraction". Anything else is refused.
METHODS = {"direct": "direct", "subtraction": "subtraction", "differential": "subtraction",
           "spectral-subtraction": "subtraction"}
# Every measure that reads FTIR oxidation, by the convention its value was obtained in: a
# rule's limits on one are never compared with a reading in the other.
OXIDATION_CONVENTIONS = {
    "direct": ("oxidation", "oxidation_rise", "oxidation_rise_per_1000h", "oxidation_step",
               "oxidation_step_per_1000h", "oxidation_rising"),
    "subtraction": ("oxidation_differential", "oxidation_differential_per_1000h", "oxidation_differential_step",
                    "oxidation_differential_step_per_1000h", "oxidation_differential_rising"),
}


def canonical_method(text: str) -> str:
    """The canonical FTIR method of a row's `method` text; ValueError naming what is accepted."""
    key = str(text).strip().lower().replace(" ", "-").replace("_", "-")
    if key not in METHODS:
        raise ValueError(f"unknown FTIR method {text!r}: expected direct, subtraction or differential "
                         "(differential is ASTM D7418's word for spectral subtraction)")
    return METHODS[key]

# Differences of decimal lab values carry binary noise (0.22 - 0.07 = 0.15000000000000002),
# which would make "above 0.15" fire on a value that is exactly 0.15. Round it away.
DECIMALS = 9


def trend_base(name: str) -> str | None:
    """The measure a trend measure's name is built on (`iron_step` -> `iron`), else None."""
    for suffix in TREND_SUFFIXES:
        if name.endswith(suffix) and len(name) > len(suffix):
            return name[: -len(suffix)]
    return None


def declared_trend_measures(declared) -> dict[str, Measure]:
    """The trend measures of a rule set's declared measures (`measures:`), by name.

    A declared measure's unit is the rule set's to give, so its trend measures carry none.
    A name the rule set declares itself is its own input column, not a trend measure.
    """
    out: dict[str, Measure] = {}
    for name in declared:
        if name in MEASURES:
            continue
        out.update((m.name, m) for m in _trend_measures(Measure(name, "", f"declared measure {name}"))
                   if m.name not in declared)
    return out


def _lookup(measure: str) -> Measure | None:
    known = MEASURES.get(measure)
    if known is None and trend_base(measure):
        known = declared_trend_measures((trend_base(measure),)).get(measure)
    return known


def measure_needs(measure: str) -> tuple[str, ...]:
    """The columns a measure is computed from (itself, for a reading or a declared measure)."""
    known = _lookup(measure)
    return known.needs if known and known.needs else (measure,)


def unit_key(measure: str) -> str | None:
    """The `units:` key whose unit a limit on this measure is written in, if any."""
    known = _lookup(measure)
    return known.scale_of if known else measure


def measure_unit(measure: str) -> str:
    """The canonical unit of a measure ('' for a declared measure, whose unit the rule set gives)."""
    known = MEASURES.get(measure)
    return known.unit if known else ""


def domain_of(measure: str) -> tuple:
    """The values a measure can take at all (a `new_<reading>` column shares its reading's)."""
    known = _lookup(measure.removeprefix("new_"))
    return known.domain if known else ANY
