"""Units a lab writes in a column's header (`Water (Karl Fischer) %`, `Visc 40C [mPa.s]`) or on a
units line under the header, read only to catch a column read in another unit.

A column map names a lab column for a measure; the values are then read in the measure's
canonical unit, or the map's `unit:`. When the header itself names a different unit, every
value of the column would be graded at the wrong scale (0.12 % water read as 0.12 ppm, a factor
of 10,000) or as another quantity (a dynamic viscosity in mPa.s read as a kinematic one, particles
per 100 mL read per mL): the file is refused with what to declare, never guessed.

Each measure is checked only against the spellings of its own quantity and a few clear foreign
ones (so `Visc 40C cSt` is not read as a temperature unit, nor `Oxid 1710 cm-1` as abs/cm).
Spellings: SI and the trade's usual ones (ASTM D445 reports mm2/s, also written cSt; ASTM D664
and D974 mg KOH/g; ASTM D6304 ppm or mass %; ISO 4406:1999 counts per mL; ASTM D7414 absorbance
per 0.1 mm; ASTM D2272 minutes); the foreign ones are common practice, no source.
"""

from __future__ import annotations

import re

from sumpwise.vocabulary.measures import INPUT_MEASURES, UNIT_FAMILY
from sumpwise.vocabulary.units import known_units

# (pattern on the normalised text, the unit as the engine (or, foreign, the trade) spells it).
_PERCENT = (r"%|\bpercent\b|\bpct\b", "%")
_PPM = (r"\bppm\b|\bmg/kg\b", "ppm")
_PER_01MM = (r"(?:\b(?:a|abs|au|absorbance))?/0[.,]1 ?mm\b|\bper 0[.,]1 ?mm\b", "abs/0.1mm")
_PER_CM = (r"\b(?:a|abs|au|absorbance)/cm\b(?![-^\u207b])|\bper cm\b(?![-^\u207b])", "abs/cm")
_KINEMATIC = (r"\bcst\b|\bmm2/s\b|\bmm\^2/s\b", "mm2/s")
_DYNAMIC = (r"\bcp\b|\bmpa\.? ?s\b|\bcentipoise\b", "mPa.s (a dynamic viscosity)")
_SAYBOLT = (r"\bsus\b|\bssu\b|\bsfs\b|\bsaybolt\b", "Saybolt seconds")
_ACID = (r"\bmg ?koh/g\b", "mg KOH/g")
_PER_100ML = (r"(?:/|\bper) ?100 ?ml\b", "/100mL")
_PER_10ML = (r"(?:/|\bper) ?10 ?ml\b", "/10mL")
_PER_ML = (r"(?:/|\bper) ?ml\b", "/mL")
_HOURS = (r"\b(?:h|hr|hrs|hour|hours)\b", "h")
_MINUTES = (r"\b(?:min|mins|minutes)\b", "min")
_OTHER_SPANS = (r"\b(?:days?|weeks?|months?|years?|km|kms|kilomet(?:er|re)s?|mi|miles?)\b",
                "a distance or calendar time")
_PPB = (r"\bppb\b", "ppb")
# A header that scales its values (`Oil hrs x1000`, `Oil age (kh)`, `Particles >4um (x1000)/mL`).
_MULTIPLE = (r"(?:\bx|\u00d7|\*) ?(?:1[ ,.]?000|10\^?\d+|1e\d+)(?!\d)|\bk(?:h|hrs?)\b|'000|\(k\)|\bthousands?\b",
             "a multiple of the unit (x1000)")

# A percent sign first: beside a measure's own unit (`KV40 cSt % chg`) it says the column is a change
# or a share, not the reading.
_VISCOSITY = (_PERCENT, _KINEMATIC, _DYNAMIC, _SAYBOLT)
_NUMBER = (_PERCENT, _ACID)
_ABSORBANCE = (_PERCENT, _PER_01MM, _PER_CM)
# A particle column named for a code or class holds scale numbers (18), not counts per mL.
_CODE = (r"\bcodes?\b|\bscale\b|\bclass(?:es)?\b|\bnas\b|\bas ?4059\b|\bsae\b", "a cleanliness code or class")
_COUNTS = (_CODE, _PER_100ML, _PER_10ML, _PER_ML)
# The spellings each measure is checked against, in the order tried (the first found is the unit).
SPELLINGS = {
    "kv40": _VISCOSITY, "kv100": _VISCOSITY, "an": _NUMBER, "bn": _NUMBER,
    "oxidation": _ABSORBANCE, "oxidation_differential": _ABSORBANCE, "nitration": _ABSORBANCE,
    "sulfation": _ABSORBANCE, "antiwear": _ABSORBANCE, "soot": _ABSORBANCE,
    "water": (_PPM, _PERCENT, _PPB), "oil_hours": (_HOURS, _OTHER_SPANS), "rpvot": (_PERCENT, _MINUTES, _HOURS),
    "particles_4um": _COUNTS, "particles_6um": _COUNTS, "particles_14um": _COUNTS,
}
SPELLINGS = {name: (_MULTIPLE, *table) for name, table in SPELLINGS.items()}
SPELLINGS.update({f"new_{name}": SPELLINGS[name] for name in ("kv40", "kv100", "an", "bn", "oxidation", "rpvot")})
_COMPILED = {name: tuple((re.compile(pattern), unit) for pattern, unit in table) for name, table in SPELLINGS.items()}


def _normalised(text: str) -> str:
    text = str(text).casefold().replace("\u00b2", "2").replace("\u00b5", "u").replace("\u03bc", "u")
    text = text.replace("\u00b7", ".").replace("\u22c5", ".")
    return re.sub(r"\s*/\s*", "/", re.sub(r"\s+", " ", text))


# What a percentage is a share of, written beside the sign on a units line (`% m/m`, `%(w/w)`,
# `wt %`, `Gew.-%`, `% v/v`): the cell still names %. ISO 80000-1 would have the quantity say it,
# not the unit; labs write it beside the sign (common practice, no source).
_SHARE_OF = re.compile(r"\b(?:m/m|w/w|v/v|wt|mass|vol|volume|weight|gew|by mass|by weight|by volume)\b")


# What is counted, written before a count's volume on a units line (`counts/100 mL`, `particles per
# mL`, `n/mL`, `#/mL`): the cell still names the volume (common practice, no source).
_COUNTED = re.compile(r"^(?:particle counts?|counts?|cts|particles?|n|#|no\.?|number)\s*(?=/|per\b)")


# The temperature a viscosity's unit is given at, after it on a units line (`cSt @ 40 °C`, `mPa.s at
# 40C`): the cell still names the unit (common practice, no source).
_AT_TEMPERATURE = re.compile(r"\s*(?:@|\bat\b)?\s*[(\[]?\d+ ?(?:\u00b0|\u00ba|deg\.?)? ?[cf][)\]]?$")


def named_unit(measure: str, text: str, whole: bool = False) -> str | None:
    """The unit `text` names for `measure` (a header; `whole`: a cell of a units line, which must be
    a unit and nothing else, brackets aside, a percentage's `m/m` or `wt` beside it, what a count
    counts before its volume and a viscosity's temperature after it), or None."""
    text = _normalised(text).strip()
    if whole:
        text = _AT_TEMPERATURE.sub("", _COUNTED.sub("", text.strip("[]() "))).strip("[]() ")
        if "%" in text and not _SHARE_OF.sub("", text).strip("[]()%.,- "):
            text = "%"
    for pattern, unit in _COMPILED.get(measure, ()):
        found = pattern.search(text)
        if found and (not whole or (found.start() == 0 and found.end() == len(text))):
            return unit
    return None


_SIZE = r"(\d+(?:[.,]\d+)?) ?(?:um|microns?)\b"
_SIZE_RANGE = re.compile(r"(\d+(?:[.,]\d+)?) ?(?:um)? ?(?:-|\u2013|\bto\b) ?" + _SIZE)


def size_conflict(measure: str, header: str) -> str | None:
    """Why a column of particle counts whose header names sizes cannot be read as `measure`
    (`particles_4um`): a size range is a differential count (ISO 4406:1999 codes take the count
    of particles of the size and larger), and another size is another count (`>5 um` is the
    older calibration's size; `>6 um(c)` mapped to particles_4um a map's slip). None when it can."""
    if not measure.startswith("particles_"):
        return None
    text = _normalised(header)
    size = measure.removeprefix("particles_").removesuffix("um")
    ranged = _SIZE_RANGE.search(text)
    if ranged:
        return (f"names the size range {ranged.group(0)!r}: a count within a range, but {measure} is the count "
                f"of particles of {size} um(c) and larger (ISO 4406); add the ranges up, or leave it out of the map")
    sizes = [found.replace(",", ".") for found in re.findall(_SIZE, text)]
    if sizes and not any(float(found) == float(size) for found in sizes):
        return (f"names particles of {' and '.join(sizes)} um, but {measure} counts particles of {size} um(c) "
                f"and larger: map the column of that size")
    return None


_TEMPERATURE = re.compile(r"(\d+) ?(?:\u00b0|\u00ba|deg\.?)? ?c\b")
_AT = {"kv40": 40, "kv100": 100, "new_kv40": 40, "new_kv100": 100}


def temperature_conflict(measure: str, header: str) -> str | None:
    """Why a viscosity column whose header names another temperature (`Visc 100C cSt` mapped to
    kv40) cannot be read as `measure`; None when it can (or names none)."""
    if measure not in _AT:
        return None
    named = {int(t) for t in _TEMPERATURE.findall(_normalised(header))}
    if named and _AT[measure] not in named:
        return (f"names {' and '.join(f'{t} °C' for t in sorted(named))}, but {measure} is the kinematic viscosity "
                f"at {_AT[measure]} °C: map the column of that temperature")
    return None


def readable_units(measure: str) -> list[str]:
    """The units a column of this measure (or of its new-oil value) can be read in."""
    measure = measure.removeprefix("new_")
    return known_units(UNIT_FAMILY[measure]) if measure in UNIT_FAMILY else [INPUT_MEASURES[measure]]


def unit_conflict(measure: str, named: str | None, read_in: str, where: str, column: str) -> str | None:
    """Why a column whose header or units line names `named` cannot be read in `read_in`; None when
    it can. `where` says where the unit was seen, `column` the map's entry to change."""
    if named is None or named == read_in:
        return None
    if named in readable_units(measure):
        return (f"{where} names the unit {named}, but {measure} is read in {read_in}: declare it in the column map "
                f"({measure}: {{column: {column!r}, unit: {named!r}}}) so the values are converted")
    return (f"{where} names {named}, which is not a unit {measure} can be read in ({', '.join(readable_units(measure))}): "
            f"convert the values, or leave the column out of the map; read as it is, every value would be graded "
            f"at the wrong scale")


def header_conflict(measure: str, header: str, read_in: str | None) -> str | None:
    """Why a column with this header cannot be read as `measure` in `read_in` (its unit, particle
    size or temperature says otherwise); None when nothing in the header contradicts it."""
    named = named_unit(measure, header) if measure in SPELLINGS else None
    why = unit_conflict(measure, named, read_in, f"the header of column {header!r}", header) if named else None
    other = size_conflict(measure, header) or temperature_conflict(measure, header)
    return why or (f"the header of column {header!r} {other}" if other else None)
