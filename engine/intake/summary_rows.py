"""Summary rows of a lab export: statistics, limits and reference values written among the samples.

Lab exports end with, or interleave, rows such as `Average`, `Std. Dev.`, `Count`, `Limit` or
`Typical new oil`. Such a row holds numbers in the measure columns, so graded as a sample it
would take a grade (a `Limit` row of water 500 ppm grades watch or alert), or come out unrated
as a sample without a class; either way a line that is not a sample would be counted and
trended as one. Such rows are rejected (D019), each naming the column and the label found.

A row is a summary row when its sample id is a summary label, whatever else the row holds (a
lone `Max` or `Limit` line that repeats a unit and a date, as a per-unit footer does), or when
another text cell of it is a label (a label column beside an empty or counted id) and it has no
sample id, or neither a date nor a unit of its own (an empty cell, or the label itself). Labels
are matched on the whole cell, case, spaces and punctuation aside (`Std. Dev.` is `std dev`,
`Max:` is `max`), and a trailing note in brackets is ignored (`Mean (n=12)`); a sample id that is
a label numbered or named for its group (`Average 2`, `Max of 3`, `Average for HPU-2`) is one too.
A sample id that only contains such a word (`MAX-PUMP-03`, `Average-line-2`) is a sample, and so is
a sample whose unit is named `Max` or `Average 2`, as long as it has its id and its date. On a
row without a sample id, a spreadsheet's subtotal line (`HPU-1 Average`, `Grand Total`) is
found too. Only rows lacking an id, a date or a unit, or whose id may be a label (no digit, a
space, a bracket at the end), are looked at closely, so the usual export, every row dated and naming its unit, costs
a few numpy passes over its distinct ids.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
import pandas as pd

# What a label says the row is, and the labels (as labs write them; matched as label_key gives
# them). Common practice, no source: the statistic and limit lines spreadsheet and LIMS exports
# write, in English and a few other languages labs export in.
_LABELS = {
    "a statistic over other rows": (
        "average", "avg", "mean", "mean value", "average value", "arithmetic mean", "median", "mode",
        "min", "minimum", "max", "maximum", "min/max", "range", "std dev", "std. dev.", "stdev", "std",
        "standard deviation", "sd", "s.d.", "sigma", "variance", "var", "cv", "rsd", "% rsd",
        "coefficient of variation", "count", "n", "no. of samples", "number of samples",
        "total", "sum", "subtotal", "grand total",
        "mittelwert", "durchschnitt", "summe", "anzahl", "gesamt", "standardabweichung", "stabw", "std. abw.",
        "moyenne", "somme", "nombre", "écart type", "écart-type", "promedio", "media", "suma",
        "desviación estándar", "std deviation", "standard dev", "avg value", "median value", "max value",
        "maximum value", "min value", "minimum value", "percentile"),
    "a limit": (
        "limit", "limits", "limit value", "alarm limit", "warning limit", "caution limit",
        "critical limit", "action limit", "condemning limit", "upper limit",
        "lower limit", "ucl", "lcl", "usl", "lsl", "spec", "specification", "spec limit", "target",
        "threshold", "alert level", "warning level", "alarm level", "action level",
        "grenzwert", "warngrenze", "limite", "límite"),
    "a reference value": (
        "typical", "typical new oil", "typical values", "typical value", "new oil", "new oil typical",
        "fresh oil", "reference", "reference oil", "reference value", "baseline", "new oil baseline",
        "frischöl", "neuöl", "huile neuve", "aceite nuevo", "typical new", "new oil value", "new oil reference",
        "fresh oil reference"),
}
# Page footers and report lines a printed export repeats (`Page 1 of 3`, `Printed on 2026-03-02
# by ...`, `End of report`): patterns, not labels, since they carry numbers. Looked for only on
# rows with no class, as a footer has none (common practice, no source).
_FOOTER = re.compile(r"(page\s*\d+(\s*(of|/)\s*\d+)?|\d+\s*of\s*\d+\s*pages?|end of (the )?report"
                     r"|(printed|exported|generated|created)(\s+(on|at|by)\b.*)?|report (printed|generated|created)\b.*"
                     r"|confidential\b.*)", re.IGNORECASE)
FOOTER = "a page footer or report line"
# Severity words alone (`Warning`, `Critical`) are left out: a lab's status column writes them
# on samples. `n` is a label only as a sample id (`N` is also a yes/no flag), and only on a row
# without a date or a unit (a one-letter id `N` names samples too).
_ID_ONLY = ("n",)
_BRACKETED_TAIL = re.compile(r"\s*[(\[][^()\[\]]*[)\]]\s*$")
_NOT_A_LETTER_OR_DIGIT = re.compile(r"[\W_]+")


# A label numbered or named for its group as a statistic line is (`Average 2`, `Mean of 3`, `Std dev
# #2`, `Total: 12`, `Average for HPU-1`, `Max of all samples`): the label, a space (or `#`, `:`), then
# an optional `of`, `no.`, `n=` and a number and nothing else, or `for`, `of`, `over`, `per` and
# anything. A label joined to a code by `-` (`MAX-PUMP-03`, `Average-line-2`) or followed by other
# words (`MEAN CREEK PUMP`) is an id. Common practice, no source.
_NUMBERED = re.compile(r"(?P<label>[^\d-]*?[^\d\s-])(?:(?:\s+|\s*[#:]\s*)(?:(?:of|no\.?|nr\.?|n\s*=)\s*)?\d{1,4}"
                       r"|\s+(?:for|of|over|per)\s+\S.*)", re.IGNORECASE)


def label_key(cell) -> str:
    """A cell as a label is compared: casefolded, a trailing bracketed note dropped, only letters
    and digits kept (`Std. Dev.` -> `stddev`, `Mean (n=12)` -> `mean`)."""
    text = _BRACKETED_TAIL.sub("", str(cell).strip())
    return _NOT_A_LETTER_OR_DIGIT.sub("", text.casefold())


SUMMARY_LABELS = {label_key(label): what for what, labels in _LABELS.items() for label in labels}
_ELSEWHERE = {key: what for key, what in SUMMARY_LABELS.items() if key not in _ID_ONLY}


# A sample id that is a limit's grade or kind and the word limit or level (`Alert limit`, `Reject
# limit`, `Upper warning limit`, `Action level`), or a percentile (`95th percentile`): a limit or a
# statistic line, as no sample id is (common practice, no source). Free text that ends in `limit`
# (a rule set's example named `iron above its watch limit`) is no such line.
_LIMIT_WORDS = re.compile(r"(?:(?:upper|lower|max|maximum|min|minimum)\.?\s+)?(?:alert|watch|urgent|reject|"
                          r"rejection|control|trend|warning|alarm|action|severe|abnormal|caution|critical|"
                          r"condemning|marginal|max|min|upper|lower)\.?\s+(?:limits?|levels?|thresholds?)",
                          re.IGNORECASE)
_PERCENTILE = re.compile(r"\d{1,2}(?:st|nd|rd|th)? ?percentile|percentile ?\d{1,2}", re.IGNORECASE)


def id_label(cell) -> str | None:
    """What a sample id says its row is when it is a label, a numbered one (`Average 2`), a limit
    named by its last word or a percentile, else None."""
    text = str(cell).strip()
    kind = SUMMARY_LABELS.get(label_key(text))
    if kind is None and (numbered := _NUMBERED.fullmatch(text)):
        kind = _ELSEWHERE.get(label_key(numbered.group("label")))
    if kind is None and _LIMIT_WORDS.fullmatch(_BRACKETED_TAIL.sub("", text).rstrip(" .:")):
        kind = "a limit"
    if kind is None and _PERCENTILE.fullmatch(_BRACKETED_TAIL.sub("", text).rstrip(" .:")):
        kind = "a statistic over other rows"
    return kind
# Columns that hold a closed vocabulary or a flag, where no label is looked for.
_NOT_LABELS = ("sample_id", "oil_changed", "method", "base_stock", "iso4406", "spectrum")


@dataclass(frozen=True)
class SummaryRows:
    """Positions of the summary rows in the frame, with the field and cell that give each away and
    what else of the row says it is no sample (`lacks`: "" when the label is its sample id)."""

    at: np.ndarray
    fields: list
    cells: list
    kinds: list
    lacks: list

    def reasons(self) -> list:
        return [f"{cell!r} is a summary label ({kind})" + (f" and the row has {lacks}" if lacks else "")
                + ": a summary line of the export, not a sample; not graded"
                for cell, kind, lacks in zip(self.cells, self.kinds, self.lacks)]


NO_ID = "no sample id"
NO_DATE_OR_UNIT = "no date or unit of its own"


def summary_rows(raw: pd.DataFrame, numeric: set, ids: tuple | None = None) -> SummaryRows:
    """The rows of `raw` (text cleaned: str or None) that are summary lines (see the module);
    `ids`: pd.factorize of the sample ids, when the caller has it."""
    n = len(raw)
    date = _present(raw, "sampled_on", n)
    unit = _present(raw, "unit_id", n)
    no_id = ~_present(raw, "sample_id", n)
    ids = _labels(raw["sample_id"].to_numpy(dtype=object), id_label, ids)
    looked = np.flatnonzero(~(date & unit) | no_id | (ids != None))  # noqa: E711 (numpy element-wise)
    if not len(looked):
        return SummaryRows(np.empty(0, dtype=np.int64), [], [], [], [])
    found = {}  # position -> (field, cell, kind, what the row lacks besides)
    for k in looked[ids[looked] != None]:  # noqa: E711
        cell = raw["sample_id"].iat[k]
        if date[k] and unit[k] and label_key(cell) in _ID_ONLY:
            continue  # `N` beside a date and a unit is a sample's id as much as a count's label
        found[int(k)] = ("sample_id", cell, ids[k], "")
    plain = ~np.isin(looked, list(found))  # the others: a label elsewhere, with no id, or no date or unit
    labels = {column: _labels(raw[column].to_numpy(dtype=object)[looked], _ELSEWHERE)
              for column in ("sampled_on", "unit_id") if column in raw.columns}
    own = np.ones(len(looked), dtype=bool)  # no date or unit of its own: an empty cell, or the label itself
    for column in ("sampled_on", "unit_id"):
        present = (date if column == "sampled_on" else unit)[looked]
        own &= ~present | (labels[column] != None if column in labels else False)  # noqa: E711
    lacks = np.where(no_id[looked], NO_ID, np.where(own, NO_DATE_OR_UNIT, ""))
    plain &= lacks != ""
    for column in raw.columns:
        if column in _NOT_LABELS or column in numeric or not plain.any():
            continue
        kinds = labels.get(column)
        if kinds is None:
            kinds = _labels(raw[column].to_numpy(dtype=object)[looked], _ELSEWHERE)
        subtotals = _subtotals(raw[column].to_numpy(dtype=object)[looked], plain & no_id[looked])
        kinds = np.where(kinds != None, kinds, subtotals)  # noqa: E711
        for k in np.flatnonzero(plain & (kinds != None)):  # noqa: E711
            found[int(looked[k])] = (column, raw[column].iat[looked[k]], kinds[k], lacks[k])
            plain[k] = False
    _footers(raw, numeric, looked[~_present(raw, "class", n)[looked]], found)
    at = np.array(sorted(found), dtype=np.int64)
    return SummaryRows(at, *(list(part) for part in zip(*(found[k] for k in at))) if len(at) else ([],) * 4)


# The line a spreadsheet's subtotal command writes under each group: the group's value and the
# function (`HPU-1 Average`, `HPU-1 Total`, `Grand Max`), the row's other text cells left empty, so
# without a sample id (spreadsheet subtotal wording, from memory). Looked for only on rows without
# a sample id: a unit named `Line Max` on a sample keeps its grade.
_SUBTOTAL = re.compile(r"\S.*\s(total|average|count|count nums|max|min|product|std ?dev|std ?devp|var|varp)",
                       re.IGNORECASE)
SUBTOTAL = "a spreadsheet subtotal line"


def _subtotals(cells: np.ndarray, looked: np.ndarray) -> np.ndarray:
    """SUBTOTAL where a cell (at `looked`, a few) is a subtotal line's label, else None."""
    kinds = np.full(len(cells), None, dtype=object)
    at = np.flatnonzero(looked)
    if len(at):
        matched = pd.Series(cells[at], dtype=object).str.strip().str.fullmatch(_SUBTOTAL)  # not text: NaN
        kinds[at[matched.eq(True).to_numpy(dtype=bool)]] = SUBTOTAL
    return kinds


def _footers(raw: pd.DataFrame, numeric: set, rows: np.ndarray, found: dict) -> None:
    """Add to `found` the rows (positions, no class) whose text cell is a page footer or report line."""
    rows = rows[~np.isin(rows, list(found))]
    for column in raw.columns:
        if not len(rows) or column in numeric or column in _NOT_LABELS[1:]:
            continue
        cells = raw[column].iloc[rows]
        hit = cells.notna().to_numpy() & cells.astype(str).str.strip().str.fullmatch(_FOOTER).fillna(False).to_numpy()
        for k in np.flatnonzero(hit):
            found[int(rows[k])] = (column, cells.iat[k], FOOTER, "no class")
        rows = rows[~hit]


def _present(raw: pd.DataFrame, column: str, n: int) -> np.ndarray:
    """Rows with a value in the column (none when the file has no such column)."""
    if column not in raw.columns:
        return np.zeros(n, dtype=bool)
    return pd.notna(raw[column].to_numpy(dtype=object))


def _labels(cells: np.ndarray, known, factorized: tuple | None = None) -> np.ndarray:
    """What each cell says its row is (`known`: a dict of label keys, or id_label), None where it is no label. Each
    distinct text is keyed once (`factorized`: the cells' pd.factorize, when known); when there
    are many (ids), only those that may be labels (_may_be_labels)."""
    codes, uniques = factorized or pd.factorize(cells, use_na_sentinel=True)
    kinds = np.full(len(uniques) + 1, None, dtype=object)  # the last for a missing cell
    at = np.arange(len(uniques))
    if len(uniques) > 1000:
        at = at[_may_be_labels(uniques)]
    for k in at:
        kinds[k] = known(uniques[k]) if callable(known) else known.get(label_key(uniques[k]))
    return kinds[codes]


def _may_be_labels(texts) -> np.ndarray:
    """Which texts may be labels: those without a digit (no label has one), ending in a bracket (a
    note such as `(n=12)`), holding a space after a first word that begins a label (`Average 2`,
    `Max of 3`), or a number after `#` or `:` (`Total:12`). A few numpy passes over their
    characters, joined: sample ids have digits among other characters, and seldom a label's word
    before a space (`HY-2026-0803`, `BW 104233`)."""
    points = _code_points(texts)
    if points is None:  # not all text, or a text holds the separator
        return np.ones(len(texts), dtype=bool)
    ends = np.flatnonzero(points == 0)
    starts = np.concatenate([[0], ends[:-1] + 1])  # at its separator when a text is empty: no digit
    digit = ((points >= ord("0")) & (points <= ord("9"))).view(np.uint8)
    last = points[np.maximum(ends - 1, 0)] * (ends > starts)
    candidates = (np.maximum.reduceat(digit, starts) == 0) | (last == ord(")")) | (last == ord("]"))
    spaced = np.maximum.reduceat(((points == ord(" ")) | (points == ord("\t"))).view(np.uint8), starts) == 1
    at = np.flatnonzero(spaced & ~candidates)
    candidates[at] = np.isin(_first_words(points, starts[at]), _LABEL_WORDS)
    marked = np.maximum.reduceat(((points == ord("#")) | (points == ord(":"))).view(np.uint8), starts) == 1
    for k in np.flatnonzero(marked & ~candidates):  # a few: ids seldom hold `#` or `:`
        candidates[k] = _MARKED_NUMBER.fullmatch(texts[k]) is not None
    return candidates


def _code_points(texts) -> np.ndarray | None:
    """The texts' characters joined, each text ended by a 0 (None when one is not text or holds a 0)."""
    try:
        joined = "\x00".join(texts)
    except TypeError:
        return None
    points = (np.frombuffer(joined.encode("ascii"), dtype=np.uint8) if joined.isascii() else
              np.frombuffer(joined.encode("utf-32-le", "surrogatepass"), dtype=np.uint32))
    points = np.append(points, 0)
    return points if np.count_nonzero(points == 0) == len(texts) else None


_MARKED_NUMBER = re.compile(r"\D*[#:]\s*\d+")  # `Total:12`, `Average#2`
_WORD = 18  # the letters of a label's first word at most (`standardabweichung`)


def _first_words(points: np.ndarray, starts: np.ndarray) -> np.ndarray:
    """A key of the first word of each text starting at `starts` (its leading letters, case folded;
    Latin-1 letters too): its length and first three letters, 0 for none or one longer than any
    label's. Equal words key alike; two that differ further only let a text through to the exact
    check. Only the first letters of each text are looked at."""
    chars = points[np.minimum(starts[:, None] + np.arange(_WORD + 1), len(points) - 1)].astype(np.uint32)
    upper = ((chars >= 65) & (chars <= 90)) | ((chars >= 192) & (chars <= 222) & (chars != 215))
    chars[upper] += 32
    letter = ((chars >= 97) & (chars <= 122)) | (chars >= 223)
    length = np.where(letter.all(axis=1), _WORD + 1, np.argmin(letter, axis=1))  # the separator 0 ends a text
    chars[np.arange(_WORD + 1) >= length[:, None]] = 0
    key = length.astype(np.uint64)
    for k in range(3):  # 16 bits each: a code point beyond them only makes two words alike
        key = (key << np.uint64(16)) | (chars[:, k] & 0xFFFF).astype(np.uint64)
    return np.where((length == 0) | (length > _WORD), np.uint64(0), key)


def _label_words() -> np.ndarray:
    """The first words of the labels, hashed as _first_words hashes a text's (none empty)."""
    labels = [label for labels in _LABELS.values() for label in labels]
    points = _code_points(labels)
    ends = np.flatnonzero(points == 0)
    words = _first_words(points, np.concatenate([[0], ends[:-1] + 1]))
    return np.unique(words[words != 0])


_LABEL_WORDS = _label_words()
