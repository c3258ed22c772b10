"""Problems found in a user's file, kept as data so tests assert on codes and fields, not sentences.

Every problem has a stable code from PROBLEM_CODES: the first letter says which input it
is about (Y YAML, S rule-set schema, R rule-set resolution, C rule-set meaning, W lint
warning, M column map, D data row, L ledger, F spectrum, E example), the digits never change meaning
once released. The README lists them; a new problem gets a new code.
"""

from __future__ import annotations

from dataclasses import dataclass

PROBLEM_CODES = {
    "Y001": "not valid YAML",
    "Y002": "the file is empty",
    "Y003": "a mapping key is not a plain scalar",
    "Y004": "a key is given twice in one mapping",
    "Y005": "a YAML tag or value that is not plain data",
    "Y006": "the file cannot be read",
    "Y007": "a number that is not finite (nan, inf) or too large for a float",
    "Y008": "a control character or lone surrogate in the text",
    "Y009": "a loading limit crossed: file size, line length, nesting depth or values after aliases",
    "Y010": "a recursive alias",
    "Y011": "a byte that is not UTF-8",
    "Y012": "a number not written in plain decimal (0200, 0x1F, 1:30), which YAML 1.1 reads otherwise",
    "S000": "the rule set breaks its schema in another way",
    "S001": "unknown key",
    "S002": "a required key is missing",
    "S003": "a value of the wrong type",
    "S004": "a value that is not one of the allowed ones",
    "S005": "a name or id that is not spelled as the language requires",
    "S006": "a key that is not a valid name",
    "S007": "a list of the wrong length",
    "S008": "an empty mapping or text",
    "S009": "a list repeats an item",
    "S010": "a number below its minimum",
    "S011": "a value of none of the allowed forms",
    "R001": "the document is not a rule set",
    "R002": "extends makes a cycle",
    "R003": "extends names a file that does not exist",
    "R004": "an id is used twice in one list",
    "R005": "grade ladders of the extended rule sets differ",
    "R006": "drop names a rule no extended rule set gives and no top-level rule has",
    "R007": "a class extends a class no file of the chain gives",
    "R008": "class extends makes a cycle",
    "R009": "a file that cannot be read hides what it would have checked (a note)",
    "R010": "an extends chain longer than the loading limit",
    "C001": "a grade that is not on the ladder",
    "C002": "a limit for the lowest grade",
    "C003": "unknown measure",
    "C004": "a rule that is neither a ladder nor a condition rule",
    "C005": "a pair not written [low, high]",
    "C006": "ladder limits out of order",
    "C007": "a limit without a source",
    "C008": "a malformed condition",
    "C009": "unknown field",
    "C010": "an example expects a grade that is not on the ladder",
    "C011": "a limit outside what the measure can take",
    "C012": "an example names a rule or caveat its class does not have",
    "C013": "a base stock or base stock family outside the vocabulary",
    "C014": "a noise margin for a measure without trend measures",
    "C015": "an ISO 4406 code that cannot be read",
    "C016": "a grade named unrated, the engine's word for a sample it could not grade",
    "C017": "a limit on a declared measure written in another unit than the rule set declares it",
    "C018": "an FTIR method outside the vocabulary in a `method` field condition",
    "C019": "a measure the engine already knows declared again under `measures:` or `fields:`",
    "W001": "a rule another rule always shadows",
    "W002": "a rule that can never fire",
    "W003": "a caveat that can never apply",
    "W004": "a cap whose exception can never hold",
    "W005": "a ladder limit no value reaches",
    "W006": "a ladder that skips a grade",
    "W007": "a grade no rule of a class can give",
    "W008": "a class with no rule on acid number, viscosity or oxidation",
    "W009": "a limit that looks written in the wrong unit",
    "W010": "a vague source",
    "W011": "a raw viscosity limit every oil crosses",
    "W012": "a lubricant whose ISO VG disagrees with its kv40",
    "W013": "two rule sets share id and version but differ",
    "W014": "a rule on a measure built on FTIR oxidation that an ester cap does not cover",
    "W015": "a caveat that names ester base stocks one by one instead of their family",
    "W016": "a rule that replaces an inherited one of the same id and gives a lower top grade than it did",
    "W017": "a rule replaced in one class that a class built on it still grades with",
    "W018": "a class or lubricant condition naming a class or code the rule set does not have",
    "M001": "the column map is not a mapping",
    "M002": "a column map entry that is not a column name",
    "M003": "a unit the measure cannot take",
    "M004": "a column map name that is not an engine name",
    "M005": "a file option (delimiter, decimal mark, encoding, date format, sheet) that cannot be used",
    "M006": "a constant, value translation, flag spelling, detection or quantitation limit or FTIR method that cannot be used",
    "D001": "a row that cannot be read",
    "D002": "a row without a sample id",
    "D003": "a sample id seen before in the same input",
    "D004": "a value that is not a number",
    "D005": "a value outside what the measure can take",
    "D006": "an oil-changed flag that is not yes or no",
    "D011": "a `method` or `base_stock` outside its closed vocabulary",
    "D012": "an ISO 4406 cleanliness code that cannot be read",
    "D013": "a row with more or fewer fields than the header",
    "D014": "a number that is not finite (nan, inf, an overflow)",
    "D015": "a date that is not ISO 8601 or does not fit the declared date format",
    "D016": "a list or object where one value was expected",
    "D017": "a key given twice with different values in one JSON object",
    "D018": "a value written in a unit other than the one its column is read in",
    "D019": "a summary line of an export (a statistic, limit or reference value such as Average, Max, Limit), not a sample",
    "D020": "a header line inside the data (exports joined end to end), or a row under one in another layout",
    "D021": "a viscosity at 100 °C not below the same oil's viscosity at 40 °C (columns swapped or misread)",
    "D022": "particle counts that rise with particle size (cumulative counts cannot: per size range, or swapped)",
    "D023": "a sampling date before 1900 or more than a year after the day it is read (a slip in the year)",
    "D024": "two columns of the header that read as one engine name (case, spaces, '-' and '_' aside)",
    "D025": "a reading written as a word that is no one value or bound (`trace`): not guessed",
    "D026": "a quoted cell that holds a line with a whole row's delimiters (a quote left open took the rows after it)",
    "F001": "a spectrum that cannot be used",
    "F002": "a spectrum whose C-H bend says its cell path length is far from the one assumed (none declared)",
    "E001": "an example that does not hold",
    "E002": "examples not run because the rule set has errors (a note)",
    "L001": "a sample id the ledger already recorded with other values",
}


@dataclass(frozen=True, order=True)
class Problem:
    """One error or warning in a rule set, column map or samples file.

    `line` and `column` are 1-based (0 when the problem belongs to the whole file);
    `path` is where in the document it sits, as a JSON-path-like string ("$.classes.x");
    `code` is its stable code (PROBLEM_CODES).
    """

    file: str
    line: int
    column: int
    message: str
    path: str = "$"
    severity: str = "error"
    hint: str = ""
    code: str = ""

    def __post_init__(self):
        if self.code not in PROBLEM_CODES:
            raise ValueError(f"problem code {self.code!r} is not in PROBLEM_CODES")

    def render(self) -> str:
        where = f"{self.file}:{self.line}:{self.column}" if self.line else self.file
        text = f"{where}: {self.severity} {self.code}: {self.message} (at {self.path})"
        if self.hint:
            text += f"\n    hint: {self.hint}"
        return text


class InvalidFile(Exception):
    """A user file that cannot be used; carries every problem found, not just the first."""

    def __init__(self, problems: list[Problem]):
        self.problems = sorted(problems, key=lambda p: (p.file, p.line, p.column, p.message))
        super().__init__("\n".join(p.render() for p in self.problems))


class InputError(Exception):
    """A samples file or stream that cannot be read at all (as opposed to one bad row)."""


def json_path(parts: tuple) -> str:
    text = "$"
    for part in parts:
        text += f"[{part}]" if isinstance(part, int) else f".{part}"
    return text
