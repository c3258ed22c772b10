"""Check a rule-set document against the shipped JSON Schema and say what is wrong in plain words.

jsonschema reports paths; people fixing a file want a line number and a sentence
that says what was expected, and they want every mistake at once.
"""

from __future__ import annotations

import difflib
import json
import re
from functools import lru_cache
from importlib import resources

import jsonschema

from sumpwise.vocabulary.problems import Problem
from sumpwise.ruleset.yaml_source import COMMA_SPLIT, YamlDocument


@lru_cache(maxsize=1)
def ruleset_schema() -> dict:
    """The rule-set JSON Schema (draft 2020-12) shipped inside the package."""
    text = resources.files("sumpwise.ruleset").joinpath("ruleset.schema.json").read_text(encoding="utf-8")
    return json.loads(text)


@lru_cache(maxsize=1)
def _validator() -> jsonschema.Draft202012Validator:
    schema = ruleset_schema()
    jsonschema.Draft202012Validator.check_schema(schema)
    return jsonschema.Draft202012Validator(schema)


def schema_findings(doc: YamlDocument) -> tuple[list[Problem], set]:
    """Every schema violation, and the pieces of the document they spoil.

    A spoiled piece (a rule, a caveat, a lubricant, a class, a top-level key) is left out
    of the later checks, so the rest of the file is still checked in the same run. A value
    the YAML reading already reported (doc.spoiled: `-.inf`, `0x10`) is not reported again.
    """
    problems: list[Problem] = []
    spoiled: set = set()
    for error in _validator().iter_errors(doc.data):
        path = tuple(error.absolute_path)
        if any(bad and path[:len(bad)] == bad for bad in doc.spoiled):
            spoiled.add(piece_of(path))
            continue
        problems.extend(_explain(doc, error))
        if error.validator == "additionalProperties" and isinstance(error.instance, dict):
            allowed = (error.schema or {}).get("properties", {}) if isinstance(error.schema, dict) else {}
            spoiled.update(piece_of(path + (key,)) for key in error.instance if key not in allowed)
        else:
            spoiled.add(piece_of(path))
    spoiled.discard(())
    return problems, spoiled


_KEYED = ("classes", "lubricants", "measures", "units", "noise_margins")
_LISTED = ("rules", "caveats", "examples", "fields")


def piece_of(path: tuple) -> tuple:
    """The smallest piece of a rule-set document that is checked on its own and holds `path`."""
    if not path:
        return ()
    if path[0] == "classes" and len(path) >= 4 and path[2] == "rules":
        return path[:4]
    if path[0] in _KEYED + _LISTED and len(path) >= 2:
        return path[:2]
    return path[:1]


_WRITTEN_NUMBER = re.compile(r"\s*([-+]?(?:\d[\d_]*(?:\.\d*)?|\.\d+))([eE][-+]?\d+)?\s*(.*)")


def _number_hint(value, expected) -> str:
    """Why text that reads as a number to people is text to YAML: `1e3` (YAML 1.1 wants a dot in
    a float), `5%` or `500 ppm` (a unit beside the number)."""
    types = [expected] if isinstance(expected, str) else list(expected)
    if not isinstance(value, str) or "number" not in types:
        return ""
    found = _WRITTEN_NUMBER.fullmatch(value)
    if not found:
        return ""
    number, exponent, unit = found.groups()
    if re.fullmatch(r",\d+", unit) and not exponent:
        thousands = len(unit) == 4 and number.lstrip("+-")[:1] not in ("0", "")
        return (f"YAML numbers take a decimal point and no separators: write {number}.{unit[1:]} for a decimal "
                f"comma" + (f", {number}{unit[1:]} for a thousands separator" if thousands else ""))
    if unit:
        return (f"write the number alone ({number}); a limit is in its measure's unit, or in the unit this "
                f"file's `units:` gives (water: ppm or %, FTIR: abs/cm or abs/0.1mm)")
    if exponent:
        dotted = number if "." in number else f"{number}.0"
        signed = exponent if exponent[1] in "+-" else f"{exponent[0]}+{exponent[1:]}"
        return (f"YAML reads {value.strip()} as text: a number with an exponent needs a dot and a signed "
                f"exponent (write {dotted}{signed}, or {float(value.replace('_', '')):g})")
    return ""


# Spellings of the units the rule-set language knows (water content by mass: ASTM D6304 reports
# mg/kg; percent by mass); the language keeps one spelling of each.
_SAME_UNIT = {"mg/kg": "ppm", "ppmw": "ppm", "ppm w/w": "ppm", "% w/w": "%", "wt%": "%", "mass %": "%",
              "percent": "%"}


def _kind(value) -> str:
    if isinstance(value, bool):
        return "true/false"
    if isinstance(value, (int, float)):
        return "a number"
    if isinstance(value, str):
        return "text"
    if isinstance(value, list):
        return "a list"
    if isinstance(value, dict):
        return "a mapping"
    if value is None:
        return "nothing (null)"
    return type(value).__name__


_TYPE_WORDS = {"object": "a mapping", "array": "a list", "string": "text", "number": "a number",
               "integer": "a whole number", "boolean": "true or false"}


def _expected_types(types) -> str:
    if isinstance(types, str):
        types = [types]
    return " or ".join(_TYPE_WORDS.get(t, t) for t in types)


def _shown(value) -> str:
    text = json.dumps(value, ensure_ascii=False, default=str)
    return text if len(text) <= 40 else text[:37] + "..."


def _explain(doc: YamlDocument, error: jsonschema.ValidationError) -> list[Problem]:
    path = tuple(error.absolute_path)
    value = error.instance
    kind = error.validator
    schema = error.schema if isinstance(error.schema, dict) else {}

    if kind == "additionalProperties":
        allowed = sorted(schema.get("properties", {}))
        out = []
        for key in sorted(set(value) - set(allowed)):
            close = difflib.get_close_matches(key, allowed, n=1)
            hint = f"did you mean '{close[0]}'?" if close else ""
            out.append(doc.problem(path + (key,), f"unknown key '{key}'; expected one of: {', '.join(allowed)}",
                                   key=True, hint=hint, code="S001"))
        return out
    if kind == "required":
        # one error per missing key, and its message names it: "'source' is a required property"
        missing = [k for k in error.validator_value if k not in value and repr(k) in error.message] or \
            [k for k in error.validator_value if k not in value][:1]
        return [doc.problem(path, f"this mapping needs the key '{k}'", code="S002") for k in missing]
    if kind == "type":
        hint = _number_hint(value, error.validator_value)
        if value is None and path and str(path[-1]).isdigit():
            hint = COMMA_SPLIT  # `{watch: 0,2}` is {watch: 0, 2: null}
        return [doc.problem(path, f"expected {_expected_types(error.validator_value)} here, found {_kind(value)} "
                                  f"{_shown(value)}", code="S003", hint=hint)]
    if kind == "enum":
        options = ", ".join(str(v) for v in error.validator_value)
        same = _SAME_UNIT.get(str(value).strip().lower()) if path[:1] == ("units",) else None
        return [doc.problem(path, f"expected one of: {options}; found {_shown(value)}", code="S004",
                            hint=f"{value} is {same}: write {same!r}" if same in error.validator_value else "")]
    if kind == "pattern":
        if "+" in error.validator_value:
            what = "a base stock name such as mineral, pao, ester or mineral+ester"
        elif error.validator_value == "\\S":
            what = "text with more than spaces in it"
        elif "A-Z" in error.validator_value:
            what = "a name of letters, digits and '_' that does not start with a digit"
        else:
            what = "an id of lower-case letters, digits and '-'"
        return [doc.problem(path, f"{_shown(value)} is not {what}", code="S005")]
    if kind == "propertyNames":
        return [doc.problem(path + (str(value),), f"{_shown(value)} is not a valid name here: use lower-case letters, "
                                                  f"digits and '-'", key=True, code="S006")]
    if kind in ("minItems", "maxItems") and schema.get("minItems") == schema.get("maxItems") == 2:
        return [doc.problem(path, f"expected a pair [low, high], found {_shown(value)}", code="S007")]
    if kind == "minItems":
        return [doc.problem(path, f"expected a list of at least {error.validator_value} item(s)", code="S007")]
    if kind == "maxItems":
        return [doc.problem(path, f"expected a list of at most {error.validator_value} item(s)", code="S007")]
    if kind == "minProperties":
        return [doc.problem(path, "this mapping must not be empty", code="S008")]
    if kind == "minLength":
        return [doc.problem(path, "this text must not be empty", code="S008")]
    if kind == "uniqueItems":
        return [doc.problem(path, "this list repeats an item", code="S009")]
    if kind == "minimum":
        return [doc.problem(path, f"expected a number of at least {error.validator_value}, found {_shown(value)}", code="S010")]
    if kind == "exclusiveMinimum":
        return [doc.problem(path, f"expected a number above {error.validator_value}, found {_shown(value)}", code="S010")]
    if kind in ("oneOf", "anyOf"):
        choices = [_describe(s) for s in error.validator_value]
        return [doc.problem(path, f"expected {' or '.join(choices)}, found {_kind(value)} {_shown(value)}", code="S011")]
    return [doc.problem(path, error.message, code="S000")]


def _describe(schema: dict) -> str:
    if schema.get("type") == "array" and schema.get("minItems") == schema.get("maxItems") == 2:
        return "a pair [low, high]"
    if schema.get("type") == "array":
        return "a list"
    return _expected_types(schema.get("type", "value"))
