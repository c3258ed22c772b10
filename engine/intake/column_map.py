"""Column maps: how one lab's export maps onto the engine's names, checked against them.

A column map is YAML. Each key is an engine name (a measure, a field, `oil_changed`,
`comment`), or `file:` for how the file is written. An entry is one of:

    water: "H2O"                                   # the lab's column
    water: {column: "H2O", unit: "%", detection_limit: 0.01}
    an: {column: "TAN", quantitation_limit: 0.05}    # what a `<LOQ` cell is below
    class: {value: steam-turbine}                  # a constant for every row
    class: {column: Component, map: {"Pump Bearing Housing": centrifugal-pump}}
    oil_changed: {column: "Oil chg", true: [Y], false: [N]}
    oxidation: {column: "Ox", method: subtraction} # the FTIR convention of the lab's column
    file: {delimiter: ";", decimal: ",", encoding: cp1252, date_format: "%d.%m.%Y", sheet: Results}

An unknown name is an error at its line, with the nearest known names.
"""

from __future__ import annotations

import codecs
import difflib
import re
from dataclasses import dataclass, field
from pathlib import Path

from sumpwise.intake.header_units import SPELLINGS, named_unit
from sumpwise.ruleset.yaml_source import load_yaml
from sumpwise.vocabulary.measures import INPUT_MEASURES, KNOWN_FIELDS, REFERENCE_VALUES, UNIT_FAMILY, canonical_method
from sumpwise.vocabulary.problems import InvalidFile
from sumpwise.vocabulary.units import known_units

FLAG_FIELDS = ("oil_changed",)
# Names a map can give besides measures: fields, the oil-change flag, the lab's free text.
MAPPABLE_FIELDS = tuple(KNOWN_FIELDS) + FLAG_FIELDS + ("comment", "spectrum")
NUMERIC_NAMES = tuple(INPUT_MEASURES) + tuple(f"new_{name}" for name in REFERENCE_VALUES)
FILE_OPTIONS = ("delimiter", "decimal", "encoding", "date_format", "sheet")
DELIMITERS = (",", ";", "\t", "|")
DECIMAL_MARKS = (".", ",")
_ENTRY_KEYS = {"column", "unit", "value", "map", "true", "false", "detection_limit", "quantitation_limit", "method"}


_SEPARATORS = re.compile(r"[\s_-]+")
_BEFORE_DIGITS = re.compile(r"(?<=[^\W\d_])_(?=\d)")


def header_key(text) -> str:
    """A column name as names are compared, the one place they are normalised: casefolded, a
    byte-order mark and surrounding spaces dropped, each run of spaces, `-` and `_` one `_`, and
    none left between a letter and a digit (`Oil-Hours`, ` oil hours ` and `OIL_HOURS` are all
    `oil_hours`; `KV 40` is `kv40`, `ISO 4406` `iso4406`)."""
    return _BEFORE_DIGITS.sub("", _SEPARATORS.sub("_", str(text).replace("\ufeff", "").strip().casefold()))


def engine_name(header, names) -> tuple[str, str | None] | None:
    """(engine name, unit named) a header is read as among `names`, or None: the name itself, the
    name as header_key compares it (unit None), or the name of a measure followed by a unit of
    that measure and nothing else (`Water (ppm)`, `KV40 [cSt]`, `Oil Hours h`: header_units)."""
    by_key: dict = {}
    for name in names:
        by_key.setdefault(header_key(name), []).append(name)
    text = str(header).strip()
    found = by_key.get(header_key(text), [])
    if text in found or len(found) == 1:
        return (text if text in found else found[0]), None
    for split in _UNIT_SPLIT.finditer(text):
        found = by_key.get(header_key(text[:split.start()]), [])
        if len(found) == 1 and found[0] in SPELLINGS:
            unit = named_unit(found[0], text[split.start():], whole=True)
            if unit is not None:
                return found[0], unit
    return None


_UNIT_SPLIT = re.compile(r"\s*[(\[]|\s+")


def engine_columns(header: list, columns: "ColumnMap", known: set) -> tuple[dict, dict, dict, dict]:
    """How the file's columns not named in the map land on engine names (`known`, engine_name):
    ({header: engine name} to rename, {engine name: unit its header names}, {engine name:
    [headers]} that land on a name the map reads from another column (not read), {engine name:
    [headers]} landing on one name twice).

    A lab that writes `AN`, `Water` or `Water (ppm)` means `an` and `water`; read only on an exact
    name, the readings were left out and the sample graded without them (normal, no limit crossed)."""
    mapped = set(columns.columns.values())
    landing: dict = {}
    for name in header:
        found = engine_name(name, known) if name not in mapped else None
        if found is not None:
            landing.setdefault(found[0], []).append((name, found[1]))
    renames, units, shadowed, twice = {}, {}, {}, {}
    for target, spelled in landing.items():
        if target in columns.columns:  # the map reads this name from its own column: the map wins
            shadowed[target] = [name for name, _ in spelled]
        elif len(spelled) > 1:
            twice[target] = [name for name, _ in spelled]
        elif spelled[0][0] != target:
            renames[spelled[0][0]] = target
            if spelled[0][1] is not None:
                units[target] = spelled[0][1]
    return renames, units, shadowed, twice


@dataclass(frozen=True)
class ColumnMap:
    """A lab's column names and units mapped onto the engine's names (name -> lab column).

    `constants` give a value to every row; `translations` rewrite a column's values;
    `flags` add spellings of true/false; `detection_limits` and `quantitation_limits` are in the unit
    the column is read in (converted with its values);
    `methods` is the FTIR convention per measure; `options` how the file is written.
    """

    columns: dict = field(default_factory=dict)
    units: dict = field(default_factory=dict)
    constants: dict = field(default_factory=dict)
    translations: dict = field(default_factory=dict)
    flags: dict = field(default_factory=dict)
    detection_limits: dict = field(default_factory=dict)
    quantitation_limits: dict = field(default_factory=dict)
    methods: dict = field(default_factory=dict)
    options: dict = field(default_factory=dict)

    def option(self, name: str, default=None):
        return self.options.get(name, default)


def load_column_map(path, extra_names=(), measures=()) -> ColumnMap:
    """Read and check a column map; `extra_names` are measures and fields a rule set declares,
    `measures` the declared measures among them (they take a detection limit, as readings do)."""
    doc = load_yaml(Path(path))
    if not isinstance(doc.data, dict):
        raise InvalidFile([doc.problem((), "a column map must be a mapping of engine names to columns", code="M001")])
    known = set(NUMERIC_NAMES) | set(MAPPABLE_FIELDS) | set(extra_names)
    problems: list = []
    found = ColumnMap()
    for name, spec in doc.data.items():
        if name == "file":
            _file_options(doc, spec, found, problems)
            continue
        if name not in known:
            near = difflib.get_close_matches(str(name), sorted(known | {"file"}), n=3, cutoff=0.6)
            hint = f"did you mean {', '.join(near)}?" if near else "see the README's column map section"
            problems.append(doc.problem((name,), f"unknown engine name '{name}'", key=True, code="M004", hint=hint))
            continue
        if isinstance(spec, str) and spec:
            found.columns[name] = spec
            continue
        if isinstance(spec, dict):  # YAML reads a bare `true:`/`false:` key as a boolean
            spec = {(str(k).lower() if str(k).lower() in ("true", "false") else k): v for k, v in spec.items()}
        if not isinstance(spec, dict) or not spec or set(spec) - _ENTRY_KEYS:
            extra = sorted(set(spec) - _ENTRY_KEYS) if isinstance(spec, dict) else []
            problems.append(doc.problem((name,), f"'{name}' must map to a column name, or to a mapping of "
                                                 f"{', '.join(sorted(_ENTRY_KEYS))}"
                                                 + (f" (unknown: {', '.join(map(str, extra))})" if extra else ""),
                                        code="M002"))
            continue
        _entry(doc, name, spec, found, problems, tuple(NUMERIC_NAMES) + tuple(measures))
    first: dict = {}
    for name, column in found.columns.items():  # a column is read as one name: the last would win without a word
        if first.setdefault(column, name) != name:
            problems.append(doc.problem((name,), f"column '{column}' is already read as '{first[column]}'; a lab "
                                                 f"column can be read as one engine name only", code="M002"))
    if problems:
        raise InvalidFile(problems)
    return found


def _entry(doc, name: str, spec: dict, found: ColumnMap, problems: list, numeric: tuple) -> None:
    if "column" in spec and "value" in spec:
        problems.append(doc.problem((name,), f"'{name}' gives both a column and a constant value; give one",
                                    code="M002"))
        return
    if "column" in spec:
        if not isinstance(spec["column"], str) or not spec["column"]:
            problems.append(doc.problem((name, "column"), "the column name must be text", code="M002"))
            return
        found.columns[name] = spec["column"]
    if "value" in spec:
        value = spec["value"]
        if isinstance(value, (dict, list)) or value is None:
            problems.append(doc.problem((name, "value"), "a constant must be one plain value", code="M006"))
            return
        found.constants[name] = value
    if "map" in spec:
        table = spec["map"]
        if not isinstance(table, dict) or not table or any(isinstance(v, (dict, list)) for v in table.values()):
            problems.append(doc.problem((name, "map"), "`map` must translate lab values to engine values "
                                                       "({lab value: engine value, ...})", code="M006"))
        else:
            found.translations[name] = {str(k).strip(): v for k, v in table.items()}
    if "true" in spec or "false" in spec:
        if name not in FLAG_FIELDS:
            problems.append(doc.problem((name,), f"true/false spellings apply to {', '.join(FLAG_FIELDS)} only",
                                        code="M006"))
        else:
            spellings = {}
            for key, meaning in (("true", True), ("false", False)):
                words = spec.get(key, [])
                words = [words] if not isinstance(words, list) else words
                if any(isinstance(w, (dict, list)) or w is None for w in words):
                    problems.append(doc.problem((name, key), "spellings must be plain values", code="M006"))
                    return
                spellings.update({str(w).strip().casefold(): meaning for w in words})
            found.flags[name] = spellings
    if "unit" in spec:
        family = UNIT_FAMILY.get(name)
        if family is None:
            problems.append(doc.problem((name, "unit"), f"'{name}' has one fixed unit; units can be declared "
                                                        f"for: {', '.join(sorted(UNIT_FAMILY))}", code="M003"))
        elif spec["unit"] not in known_units(family):
            problems.append(doc.problem((name, "unit"), f"unknown unit {spec['unit']!r} for {name}; expected "
                                                        f"one of: {', '.join(known_units(family))}", code="M003"))
        else:
            found.units[name] = spec["unit"]
    for key, limits, said in (("detection_limit", found.detection_limits, "a detection limit"),
                              ("quantitation_limit", found.quantitation_limits, "a quantitation limit")):
        if key not in spec:
            continue
        limit = spec[key]
        if name not in numeric or isinstance(limit, bool) or not isinstance(limit, (int, float)) \
                or not limit > 0 or limit == float("inf"):
            problems.append(doc.problem((name, key), f"{said} is a finite number above 0, for a measure",
                                        code="M006"))
        else:
            limits[name] = float(limit)
    if "method" in spec:  # the one vocabulary of FTIR methods (direct, subtraction, differential)
        try:
            found.methods[name] = canonical_method(spec["method"])
        except ValueError as exc:
            problems.append(doc.problem((name, "method"), str(exc), code="M006"))


def _file_options(doc, spec, found: ColumnMap, problems: list) -> None:
    if not isinstance(spec, dict):
        problems.append(doc.problem(("file",), f"`file` must be a mapping of {', '.join(FILE_OPTIONS)}",
                                    code="M005"))
        return
    for key, value in spec.items():
        if key not in FILE_OPTIONS:
            near = difflib.get_close_matches(str(key), FILE_OPTIONS, n=2)
            problems.append(doc.problem(("file", key), f"unknown file option '{key}'", key=True, code="M005",
                                        hint=f"did you mean {', '.join(near)}?" if near else
                                        f"options: {', '.join(FILE_OPTIONS)}"))
        elif key == "delimiter" and value not in DELIMITERS:
            problems.append(doc.problem(("file", key), f"delimiter must be one of {DELIMITERS!r}", code="M005"))
        elif key == "decimal" and value not in DECIMAL_MARKS:
            problems.append(doc.problem(("file", key), "decimal must be '.' or ','", code="M005"))
        elif key == "encoding" and not _known_encoding(value):
            problems.append(doc.problem(("file", key), f"unknown encoding {value!r}; e.g. utf-8, cp1252, latin-1",
                                        code="M005"))
        elif key == "date_format" and (not isinstance(value, str) or "%" not in value):
            problems.append(doc.problem(("file", key), "date_format is a strftime pattern such as '%d/%m/%Y'",
                                        code="M005"))
        elif key == "sheet" and (not isinstance(value, (str, int)) or isinstance(value, bool)):
            problems.append(doc.problem(("file", key), "sheet is a sheet name or a 1-based number", code="M005"))
        else:
            found.options[key] = value
    if found.option("delimiter") == "," and found.option("decimal") == ",":
        problems.append(doc.problem(("file",), "a comma cannot be both the delimiter and the decimal mark",
                                    code="M005"))


def _known_encoding(name) -> bool:
    try:
        codecs.lookup(str(name))
    except LookupError:
        return False
    return isinstance(name, str)
