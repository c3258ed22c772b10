"""Read lab results (CSV or JSON Lines), rename and convert their columns, set bad rows aside.

Every row read ends up in one of two places here: accepted into the frame (indexed by
its 1-based data row) or rejected with its row, field and reason. Nothing is dropped
silently; a file that cannot be read at all is an InputError instead.
"""

from __future__ import annotations

import csv
import io
import json
import re
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from sumpwise.vocabulary.measures import INPUT_MEASURES, NOT_NEGATIVE, POSITIVE, REFERENCE_VALUES, domain_of
from sumpwise.vocabulary.problems import InputError, InvalidFile
from sumpwise.vocabulary.texts import TEXT_VOCABULARIES, canonical_texts
from sumpwise.vocabulary.measures import UNIT_FAMILY
from sumpwise.vocabulary.units import factor_to_canonical, known_units
from sumpwise.ruleset.yaml_source import load_yaml

REQUIRED_COLUMNS = ("sample_id", "class")

NUMERIC_COLUMNS = tuple(INPUT_MEASURES) + tuple(f"new_{name}" for name in REFERENCE_VALUES)

# Values that cannot be negative; viscosities cannot be zero either.


@dataclass(frozen=True)
class Reject:
    """A row that was not graded, and why. `row` is the 1-based data row (header excluded)."""

    row: int
    sample_id: str | None
    field: str
    reason: str
    code: str  # a D (data row) or F (spectrum) code of sumpwise.vocabulary.problems.PROBLEM_CODES


@dataclass(frozen=True)
class ColumnMap:
    """A lab's column names and units, mapped onto the engine's names (measure -> column)."""

    columns: dict = field(default_factory=dict)
    units: dict = field(default_factory=dict)


@dataclass(frozen=True)
class SampleBatch:
    """Accepted rows (index: data row), the rejects, and how many rows were read in all."""

    frame: pd.DataFrame
    rejects: tuple
    rows_read: int
    source: str

    @property
    def rejected_rows(self) -> int:
        return len({r.row for r in self.rejects})


def load_column_map(path) -> ColumnMap:
    """Read a column map: `measure: "Lab column"` or `measure: {column: "...", unit: "..."}`."""
    doc = load_yaml(Path(path))
    problems = []
    if not isinstance(doc.data, dict):
        raise InvalidFile([doc.problem((), "a column map must be a mapping of measure names to columns", code="M001")])
    columns, units = {}, {}
    for name, spec in doc.data.items():
        if isinstance(spec, str):
            columns[name] = spec
            continue
        if not isinstance(spec, dict) or set(spec) - {"column", "unit"} or not spec:
            problems.append(doc.problem((name,), f"'{name}' must map to a column name, or to "
                                                 f"{{column: ..., unit: ...}}", code="M002"))
            continue
        if "column" in spec:
            if not isinstance(spec["column"], str) or not spec["column"]:
                problems.append(doc.problem((name, "column"), "the column name must be text", code="M002"))
                continue
            columns[name] = spec["column"]
        if "unit" in spec:
            family = UNIT_FAMILY.get(name)
            if family is None:
                problems.append(doc.problem((name, "unit"), f"'{name}' has one fixed unit; units can be declared "
                                                            f"for: {', '.join(sorted(UNIT_FAMILY))}", code="M003"))
            elif spec["unit"] not in known_units(family):
                problems.append(doc.problem((name, "unit"), f"unknown unit {spec['unit']!r} for {name}; expected "
                                                            f"one of: {', '.join(known_units(family))}", code="M003"))
            else:
                units[name] = spec["unit"]
    if problems:
        raise InvalidFile(problems)
    return ColumnMap(columns, units)


_SKIPPED = re.compile(r"Skipping line (\d+): (.*)")


def _read_csv(text: str, numeric_columns: set, data: bytes | None = None) -> tuple[pd.DataFrame, list[tuple[int, str]]]:
    """Parse CSV in C; numeric columns are left to pandas' parser, text columns kept as text.

    Given the file's bytes too, pandas parses those (a third faster than re-encoding text).
    """
    ends = [at for at in (text.find("\n"), text.find("\r")) if at >= 0]  # \n, \r\n or a lone \r
    header = next(csv.reader([text[: min(ends, default=len(text))]]), [])
    names = [h.strip() for h in header]
    text_columns = {raw: object for raw, name in zip(header, names) if name not in numeric_columns}
    blanks = {raw: [""] for raw, name in zip(header, names) if name in numeric_columns}
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            source = io.StringIO(text) if data is None else io.BytesIO(data)
            frame = pd.read_csv(source, encoding="utf-8-sig", dtype=text_columns, keep_default_na=False,
                                na_values=blanks, on_bad_lines="warn", skipinitialspace=True)
        except pd.errors.EmptyDataError:
            raise InputError("the file is empty: expected a header row and data rows") from None
        except pd.errors.ParserError as exc:
            raise InputError(f"cannot read it as CSV: {exc}") from None
    skipped = []
    for warning in caught:
        for line, why in _SKIPPED.findall(str(warning.message)):
            skipped.append((int(line) - 1, f"cannot be read: {why.strip()}"))
    return frame, skipped


def _read_jsonl(text: str) -> tuple[pd.DataFrame, list[tuple[int, str]]]:
    records, skipped, rows = [], [], []
    row = 0
    for line in text.splitlines():
        if not line.strip():
            continue
        row += 1
        try:
            record = json.loads(line)
        except json.JSONDecodeError as exc:
            skipped.append((row, f"not valid JSON: {exc.msg} at column {exc.colno}"))
            continue
        if not isinstance(record, dict):
            skipped.append((row, "each line must be a JSON object"))
            continue
        records.append({k: ("" if v is None else v) for k, v in record.items()})
        rows.append(row)
    if row == 0:
        raise InputError("the file is empty: expected one JSON object a line")
    frame = pd.DataFrame.from_records(records) if records else pd.DataFrame()
    frame.attrs["rows"] = rows
    return frame, skipped


def read_samples(source, name: str | None = None, columns: ColumnMap | None = None, fmt: str | None = None,
                 numeric: tuple = ()) -> SampleBatch:
    """Read samples from a path or a text stream; `fmt` is csv or jsonl (guessed from the name).

    `numeric` names extra numeric columns (measures a rule set declares).
    """
    data = None
    if isinstance(source, (str, Path)):
        name = name or str(source)
        try:
            data = Path(source).read_bytes()
            text = data.decode("utf-8-sig")
        except (OSError, UnicodeDecodeError) as exc:
            raise InputError(f"{name}: cannot read the file: {exc}") from None
    else:
        name = name or "<stdin>"
        text = source.read().removeprefix("\ufeff")  # a byte order mark, as a file's utf-8-sig reading drops it
    fmt = fmt or ("jsonl" if name.endswith((".jsonl", ".ndjson", ".json")) else "csv")
    columns = columns or ColumnMap()
    wanted = set(NUMERIC_COLUMNS) | set(numeric)
    lab_names = {column: measure for measure, column in columns.columns.items()}
    numeric_lab = {c for c in wanted if c not in columns.columns} | {c for c, m in lab_names.items() if m in wanted}
    try:
        raw, skipped = _read_jsonl(text) if fmt == "jsonl" else _read_csv(text, numeric_lab, data)
    except InputError as exc:
        raise InputError(f"{name}: {exc}") from None
    return validate_samples(raw, skipped, name, columns, numeric)


def _row_numbers(raw: pd.DataFrame, skipped: list[tuple[int, str]]) -> np.ndarray:
    if "rows" in raw.attrs:
        return np.asarray(raw.attrs["rows"], dtype=np.int64)
    skipped_rows = np.array(sorted({row for row, _ in skipped}), dtype=np.int64)
    rows = np.arange(1, len(raw) + len(skipped_rows) + 1, dtype=np.int64)
    return rows[~np.isin(rows, skipped_rows)][: len(raw)]


def validate_samples(raw: pd.DataFrame, skipped: list[tuple[int, str]], name: str, columns: ColumnMap,
                     numeric: tuple = ()) -> SampleBatch:
    """Rename, convert and check rows; pure apart from its arguments."""
    rows = _row_numbers(raw, skipped)
    raw = raw.copy()
    raw.columns = [str(c).strip() for c in raw.columns]
    renames = {}
    for measure, column in columns.columns.items():
        if column not in raw.columns:
            raise InputError(f"{name}: the column map names column '{column}' for {measure}, but the file has "
                             f"no such column (it has: {', '.join(raw.columns)})")
        renames[column] = measure
    raw = raw.rename(columns=renames)
    missing = [c for c in REQUIRED_COLUMNS if c not in raw.columns]
    if missing:
        raise InputError(f"{name}: missing required column(s) {', '.join(missing)}; the file has: "
                         f"{', '.join(raw.columns) or 'no columns'}")
    raw.index = pd.Index(rows, name="row")

    numeric_names = [c for c in raw.columns if c in NUMERIC_COLUMNS or c in numeric]
    for column in raw.columns:
        if column not in numeric_names:
            raw[column] = _text_column(raw[column])

    rejects: list[Reject] = [Reject(row, None, "(row)", why, "D001") for row, why in skipped]
    sample_id = raw["sample_id"].fillna("")
    bad = np.zeros(len(raw), dtype=bool)

    def reject(mask, field_name: str, reasons, code: str) -> None:
        nonlocal bad
        mask = np.asarray(mask, dtype=bool)
        if not mask.any():
            return
        for row, sid, why in zip(raw.index[mask], sample_id[mask], np.broadcast_to(reasons, len(raw))[mask]):
            rejects.append(Reject(int(row), sid or None, field_name, str(why), code))
        bad |= mask

    reject(sample_id == "", "sample_id", "no sample id: every row needs one", "D002")
    dup = (sample_id.duplicated(keep="first") & (sample_id != "")).to_numpy()
    if dup.any():
        first_row = pd.Series(raw.index, index=raw.index).groupby(sample_id.to_numpy()).transform("first")
        reject(dup, "sample_id", ("sample id '" + sample_id + "' already seen at row "
                                  + first_row.astype(str)).to_numpy(dtype=object), "D003")

    for column in numeric_names:
        values, text, not_a_number = _number_column(raw[column])
        if not_a_number.any():
            reject(not_a_number, column, ("expected a number, found '" + text + "'").to_numpy(dtype=object), "D004")
        domain = domain_of(column)
        if domain == POSITIVE and (values <= 0).any():
            reject(values <= 0, column, _found("must be above 0, found ", raw[column], values <= 0), "D005")
        elif domain[0].low == 0 and domain[0].low_in and (values < 0).any():
            reject(values < 0, column, _found("cannot be negative, found ", raw[column], values < 0), "D005")
        if column in columns.units:
            values = values * factor_to_canonical(UNIT_FAMILY[column], columns.units[column])
        if (beyond := values > domain[-1].high).any():  # in canonical units: water above 100 %
            reject(beyond, column, _found(f"cannot be above {domain[-1].high:g} {INPUT_MEASURES.get(column, '')}, "
                                          f"found ", raw[column], beyond), "D005")
        raw[column] = values

    for column, canonical in TEXT_VOCABULARIES.items():  # closed vocabularies: canonical spelling, or reject
        if column in raw.columns:
            spelled, why = canonical_texts(raw[column], canonical)
            reject(why != "", column, why, "D011")
            raw[column] = spelled

    rejects.sort(key=lambda r: (r.row, r.field))
    accepted = raw[~bad]
    return SampleBatch(accepted, tuple(rejects), len(raw) + len({r for r, _ in skipped}), name)


_ASCII_SPACE = [c for c in map(chr, range(128)) if c.isspace()]


def _padded(joined: str) -> bool:
    """Whether a value of these \\x00-joined texts may need stripping (non-ASCII: assume so)."""
    if not joined.isascii() or joined[:1].isspace() or joined[-1:].isspace():
        return True
    return any(space in joined and (space + "\x00" in joined or "\x00" + space in joined)
               for space in _ASCII_SPACE)  # one fast single-character scan each, mostly


def _text_column(column: pd.Series) -> pd.Series:
    """Text as Python str or None: stripped, empty cells missing.

    Mostly the text is clean already, which one pass over it joined shows, and is kept
    as it is; otherwise each distinct value is cleaned once (codes repeat a lot).
    """
    values = column.to_numpy(dtype=object)
    present = ~pd.isna(values)
    try:
        joined = "\x00".join(values[present])
    except TypeError:  # not all text (JSON Lines numbers): spelled as text below
        joined = None
    if joined is not None and joined.count("\x00") == present.sum() - 1 and not _padded(joined):
        cleaned = values.copy()
        cleaned[~present | (values == "")] = None
        return pd.Series(cleaned, index=column.index, dtype=object)
    codes, uniques = pd.factorize(values, use_na_sentinel=True)
    cleaned = np.array([str(u).strip() or None for u in uniques] + [None], dtype=object)
    return pd.Series(cleaned[codes], index=column.index, dtype=object)


def _number_column(column: pd.Series) -> tuple[np.ndarray, pd.Series | None, np.ndarray]:
    """(float values, the text as written where not a number, cells that are not numbers)."""
    if column.dtype.kind in "fiu":
        return column.to_numpy(dtype=float), None, np.zeros(len(column), dtype=bool)
    original = column.astype(object)
    is_bool = original.map(lambda v: isinstance(v, bool)).to_numpy(dtype=bool)
    text = original.where(original.notna(), "").astype(str).str.strip()
    parsed = pd.to_numeric(text.where(~is_bool, "x"), errors="coerce").to_numpy(dtype=float)
    not_a_number = (text != "").to_numpy() & np.isnan(parsed)
    return parsed, text, not_a_number


def _found(prefix: str, column: pd.Series, mask: np.ndarray) -> np.ndarray:
    """Reasons quoting the offending cells; only the few offending cells are formatted."""
    reasons = np.full(len(column), "", dtype=object)
    for k in np.flatnonzero(mask):
        value = column.iat[k]
        reasons[k] = prefix + (f"{value:g}" if isinstance(value, float) else str(value).strip())
    return reasons
