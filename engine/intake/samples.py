"""Read lab results (CSV, JSON Lines, .xlsx), map and convert their columns, set bad rows aside.

Every row read ends up in one of two places here: accepted into the frame (indexed by
its row number, see readers.py) or rejected with its row, field and reason. Nothing is
dropped silently; a file that cannot be read at all is an InputError instead. Censored
readings (`<0.05`, `>5000`, `ND`) are kept as intervals beside the number (censored.py).
"""

from __future__ import annotations

import datetime as dt
import difflib
import itertools
import re

from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
import pandas as pd

from sumpwise.intake.censored import (BELOW_QUANTITATION_SPELLINGS, CENSORED_SUFFIX, NOT_DETECTED_SPELLINGS,
                                     WRITTEN_SUFFIX, read_censored)
from sumpwise.intake.column_map import (FLAG_FIELDS, MAPPABLE_FIELDS, NUMERIC_NAMES, ColumnMap, engine_columns,
                                        header_key, load_column_map)
from sumpwise.intake.dates import read_dates
from sumpwise.intake.header_lines import header_lines
from sumpwise.intake.header_units import (SPELLINGS, header_conflict, named_unit, readable_units, size_conflict,
                                          temperature_conflict, unit_conflict)
from sumpwise.intake.readers import (Preamble, check_header, decode, detect_decimal, detect_delimiter,
                                     is_utf8, line_ends, marked_encoding, marked_note, nested_cells, preamble, read_csv,
                                     read_jsonl, read_xlsx)
from sumpwise.intake.summary_rows import summary_rows
from sumpwise.vocabulary.measures import DECIMALS, INPUT_MEASURES, ISO4406_SIZES, POSITIVE, UNIT_FAMILY, domain_of
from sumpwise.vocabulary.problems import InputError, Problem, json_path
from sumpwise.vocabulary.texts import TEXT_VOCABULARIES, canonical_texts
from sumpwise.vocabulary.units import factor_to_canonical

__all__ = ["ColumnMap", "HeaderError", "Reject", "SampleBatch", "load_column_map", "read_samples", "validate_samples"]

REQUIRED_COLUMNS = ("sample_id", "class")

NUMERIC_COLUMNS = NUMERIC_NAMES

# Spellings of a yes/no flag every map accepts (case ignored), besides the map's own.
FLAG_SPELLINGS = {"y": True, "n": False, "yes": True, "no": False, "true": True, "false": False, "1": True,
                  "0": False, "t": True, "f": False}


class HeaderError(InputError):
    """A samples file whose header cannot be read as columns (D024), with the problem records: an
    InputError, so a run of several files says it and grades the others."""

    def __init__(self, problems: list):
        self.problems = tuple(problems)
        super().__init__("\n".join(p.render() for p in self.problems))


@dataclass(frozen=True)
class Reject:
    """A row that was not graded, and why. `row` is the 1-based data row (header excluded)."""

    row: int
    sample_id: str | None
    field: str
    reason: str
    code: str  # a D (data row) or F (spectrum) code of sumpwise.vocabulary.problems.PROBLEM_CODES


@dataclass(frozen=True)
class SampleBatch:
    """Accepted rows (index: data row), the rejects, and how many rows were read in all."""

    frame: pd.DataFrame
    rejects: tuple
    rows_read: int
    source: str
    notes: tuple = ()  # what the reader detected or left unused, said once on standard error
    layout_break: tuple | None = None  # (row, columns moved) of a header line in another layout still in force
    percent_water: int | None = None  # the row of a water reading that read as a percentage (for later chunks)
    more: bool | None = None  # a chunk of a file: whether the file goes on after it (None: not known)

    @property
    def rejected_rows(self) -> int:
        return len({r.row for r in self.rejects})


def read_samples(source, name: str | None = None, columns: ColumnMap | None = None, fmt: str | None = None,
                 numeric: tuple = (), layout_break: tuple | None = None,
                 percent_water: int | None = None) -> SampleBatch:
    """Read samples from a path or a stream; `fmt` is csv, jsonl or xlsx (guessed from the name).

    A file and the same bytes on a stream give the same rows, numbers and rejects.
    `numeric` names extra numeric columns (measures a rule set declares); `layout_break` and
    `percent_water` are for a chunk of a file (validate_samples).
    """
    if isinstance(source, (str, Path)):
        name = name or str(source)
        try:
            data = Path(source).read_bytes()
        except OSError as exc:
            raise InputError(f"{name}: cannot read the file: {exc.strerror or exc}") from None
    else:
        name = name or "<stdin>"
        stream = getattr(source, "buffer", source)
        data = stream.read()
        if isinstance(data, str):
            data = data.encode("utf-8")
    columns = columns or ColumnMap()
    suffix = name.lower().rsplit(".", 1)[-1] if "." in name else ""
    fmt = fmt or {"jsonl": "jsonl", "ndjson": "jsonl", "json": "jsonl", "xlsx": "xlsx"}.get(suffix, "csv")
    lab_numeric = lab_numeric_columns(columns, numeric)
    marked = None if columns.option("encoding") or fmt == "xlsx" else marked_encoding(data[:4])
    encoding = columns.option("encoding") or marked
    try:
        if fmt == "xlsx":
            raw = read_xlsx(data, columns.option("sheet"))
        elif fmt == "jsonl":
            raw = read_jsonl(data, lab_numeric, encoding)
        else:
            text = decode(data, encoding)
            utf8 = is_utf8(encoding)
            above = header_preamble(text, columns, numeric)
            if above.skip:  # a `sep=;` line or a title above the header: the rest is read as the file
                text, utf8 = text[line_ends(text, above.skip)[-1]:], False
            if above.delimiter:
                columns = replace(columns, options={**columns.options, "delimiter": above.delimiter})
            decimal = columns.option("decimal") or detected_decimal(text, columns.option("delimiter"), lab_numeric)
            raw = read_csv(text, lab_numeric, columns.option("delimiter"), decimal, data if utf8 else None)
            if above.note:
                raw.notes.insert(0, above.note)
            if columns.option("decimal") is None and decimal != ".":
                raw.notes.append(f"detected the decimal mark {decimal!r} from the data")
                # every cell is read with it, the ones the CSV parser left as text (`<0,05`) too
                columns = replace(columns, options={**columns.options, "decimal": decimal})
    except InputError as exc:
        raise InputError(f"{name}: {exc}") from None
    if marked:
        raw.notes.insert(0, marked_note(marked))
    return validate_samples(raw.frame, raw.skipped, name, columns, numeric, rows=raw.rows, notes=raw.notes,
                            layout_break=layout_break, percent_water=percent_water)


def header_preamble(text: str, columns: ColumnMap, numeric: tuple = ()) -> Preamble:
    """The lines above a CSV file's header (readers.preamble), the header told by the names this map
    and the engine read."""
    names = set(NUMERIC_COLUMNS) | set(MAPPABLE_FIELDS) | set(REQUIRED_COLUMNS) | set(numeric)
    names = (names - set(columns.columns)) | set(columns.columns.values())
    return preamble(text, columns.option("delimiter"), names, columns.columns.get("sample_id", "sample_id"))


def lab_numeric_columns(columns: ColumnMap, numeric: tuple = ()) -> set:
    """The file's own names of the columns read as numbers (the map's lab columns, or engine names)."""
    wanted = set(NUMERIC_COLUMNS) | set(numeric)
    return {c for c in wanted if c not in columns.columns} | {c for m, c in columns.columns.items() if m in wanted}


def detected_decimal(text: str, delimiter: str | None, numeric: set | None = None) -> str:
    """The decimal mark the data show (readers.detect_decimal), found once here so that the cells
    the CSV parser leaves as text are read with the same mark as the numbers it parses (and
    so that the chunks of a file all take the mark its first chunk shows)."""
    head = text[: 1 << 16].splitlines()
    if not head:
        return "."
    return detect_decimal(head, delimiter or detect_delimiter(head[0]), numeric)


def _row_numbers(raw: pd.DataFrame, skipped: list) -> np.ndarray:
    """Rows of a frame given without numbers (the Python API): 1, 2, ... around the skipped."""
    skipped_rows = np.array(sorted({s[0] for s in skipped}), dtype=np.int64)
    rows = np.arange(1, len(raw) + len(skipped_rows) + 1, dtype=np.int64)
    return rows[~np.isin(rows, skipped_rows)][: len(raw)]


# Words labs head a measure's column with that spelling alone does not bring near its engine name
# (`Moisture`, `H2O`, `TBN`, `Visc 40`): hints only, the column is never read on them (ASTM D6304 names
# water content, D664 and D974 acid number, D2896 base number, D445 kinematic viscosity; the short
# forms are common practice, no source).
_TRADE_WORDS = tuple((re.compile(pattern, re.IGNORECASE), name) for pattern, name in (
    (r"\b(?:moisture|h2o|karl ?fischer|kf)\b", "water"),
    (r"\b(?:tbn|base ?number)\b", "bn"),
    (r"\b(?:tan|acid ?number|neutrali[sz]ation ?number)\b", "an"),
    (r"\b(?:kv|visc\w*|v)\W*40\b", "kv40"),
    (r"\b(?:kv|visc\w*|v)\W*100\b", "kv100"),
))


def unused_columns_note(unused: list, unread: set) -> str:
    """Columns nobody reads, said once: a misspelt `wter` must not vanish without a word."""
    named = []
    for column in unused:
        near = difflib.get_close_matches(column.lower(), sorted(unread), n=1, cutoff=0.75)
        near = near or [name for pattern, name in _TRADE_WORDS if name in unread and pattern.search(column)][:1]
        named.append(f"{column} (did you mean {near[0]}?)" if near else column)
    return f"lab columns not used: {', '.join(named)}"


def validate_samples(raw: pd.DataFrame, skipped: list, name: str, columns: ColumnMap, numeric: tuple = (),
                     rows: np.ndarray | None = None, notes=(), layout_break: tuple | None = None,
                     percent_water: int | None = None,
                     today: dt.date | None = None) -> SampleBatch:
    """Map, convert and check rows; pure apart from its arguments and the day it runs (`today`,
    read from the clock when not given: a sampling date far after it is a slip in the year).

    `skipped` holds (row, reason[, code[, field]]) of rows the reader could not use; `rows` the row
    number of each frame row (1, 2, ... when not given); `layout_break` a header line in another
    layout that an earlier part of the file left in force (see header_lines.py); `percent_water`
    the row (in this part's numbering) of a water reading an earlier part read as a percentage.
    """
    columns = columns or ColumnMap()
    skipped = [(*s, *("D001", "(row)")[len(s) - 2:]) for s in skipped]  # code and field where not given
    rows = _row_numbers(raw, skipped) if rows is None else np.asarray(rows, dtype=np.int64)
    notes = list(notes)
    try:
        check_header(list(raw.columns))
    except InputError as exc:
        raise InputError(f"{name}: {exc}") from None
    raw = raw.copy(deep=False)  # copy-on-write (pandas 3): the caller's frame stays as it was, nothing copied now
    raw.columns = [str(c).strip() for c in raw.columns]
    raw.index = pd.Index(rows, name="row")
    renames = {}
    for measure, column in columns.columns.items():
        if column not in raw.columns:
            read = f"; {'; '.join(notes)}" if notes else ""  # e.g. which sheet of a workbook was read
            raise InputError(f"{name}: the column map names column '{column}' for {measure}, but the file has "
                             f"no such column (it has: {', '.join(raw.columns)}){read}")
        renames[column] = measure
    known = set(NUMERIC_COLUMNS) | set(MAPPABLE_FIELDS) | set(numeric)
    matched, units, shadowed, twice = engine_columns(list(raw.columns), columns, known)
    if twice:
        raise HeaderError([Problem(name, 0, 0, f"columns {' and '.join(map(repr, spelled))} are both read as "
                                               f"{target} (column names are compared without case, spaces, '-' "
                                               f"or '_'): a column is read from one header only",
                                   path=json_path(("header", target)), code="D024",
                                   hint=f"rename or drop one, or name the one to read in a column map "
                                        f"({target}: {spelled[0]!r})")
                           for target, spelled in twice.items()])
    if matched:
        notes.append("read " + ", ".join(f"column {lab!r} as {target}" + (f" in {units[target]}" if target in units
                                                                           else "") for lab, target in matched.items())
                     + " (column names are compared without case, spaces, '-' or '_'; a unit after a name is the "
                       "column's)")
    lab_of = {target: lab for lab, target in matched.items()}
    for target, unit in units.items():  # the unit a header names is the column's: read in it, or refused
        read_in = _read_in(target, columns)
        if unit != read_in and unit in readable_units(target):
            columns = replace(columns, units={**columns.units, target: unit})
        elif unit != read_in:
            raise InputError(f"{name}: " + unit_conflict(target, unit, read_in, f"the header of column "
                                                                              f"{lab_of[target]!r}", lab_of[target]))
    renames.update(matched)
    mapped = set(renames)
    header = {renames.get(c, c): c for c in raw.columns}  # each column's name in the file's header
    _check_header_units(name, columns)
    clash = [c for spelled in shadowed.values() for c in spelled]
    raw = raw.drop(columns=clash).rename(columns=renames)
    if clash:
        notes.append(f"columns {', '.join(clash)} not used: the column map reads these names from other columns")
    for measure, value in columns.constants.items():
        if measure in raw.columns:
            notes.append(f"column {measure} not used: the column map gives it the value {value!r} for every row")
        raw[measure] = str(value) if measure not in NUMERIC_COLUMNS and measure not in numeric else value
        header.pop(measure, None)
    methods = sorted(set(columns.methods.values()))
    if len(methods) > 1 and "method" not in raw.columns:
        raise InputError(f"{name}: the column map declares FTIR methods {' and '.join(methods)} for different "
                         f"columns, but a sample has one method: map a `method` column instead")
    if methods and "method" not in raw.columns:
        raw["method"] = methods[0]
    labs = {measure: lab for lab, measure in renames.items()}  # the file's name of each column renamed
    unit_columns = _unit_columns(list(raw.columns), labs)
    qualifiers = _qualifier_columns(list(raw.columns), labs, [c for c in raw.columns if c in NUMERIC_COLUMNS
                                                                 or c in numeric])
    beside = set(unit_columns.values()) | set(qualifiers.values())
    unused = [c for c in raw.columns if c not in known and c not in mapped and c not in beside]
    if unused:
        notes.append(unused_columns_note(unused, known - set(raw.columns)))
    missing = [c for c in REQUIRED_COLUMNS if c not in raw.columns]
    if missing:
        detected = [n for n in notes if not n.startswith("lab columns not used")]  # which sheet was read, ...
        read = f"; {'; '.join(detected)}" if detected else ""
        raise InputError(f"{name}: missing required column(s) {', '.join(missing)}; the file has: "
                         f"{', '.join(raw.columns) or 'no columns'}{read}")

    rejects: list[Reject] = [Reject(row, None, where, why, code) for row, why, code, where in skipped]
    numeric_names = [c for c in raw.columns if c in NUMERIC_COLUMNS or c in numeric]
    for column in raw.columns:
        nested = nested_cells(raw[column])
        if nested.any():
            ids = raw["sample_id"].to_numpy(dtype=object)[nested]
            rejects.extend(Reject(int(r), sid if isinstance(sid, str) and sid.strip() else None, column,
                                  "a list or object where one value was expected", "D016")
                           for r, sid in zip(raw.index[nested], ids))
            raw.loc[nested, column] = None
    bad = np.zeros(len(raw), dtype=bool)
    if rejects:
        bad |= np.isin(raw.index, [r.row for r in rejects if r.field != "(row)"])
    for column in raw.columns:
        if column not in numeric_names:
            raw[column] = _text_column(raw[column])
    sample_id = raw["sample_id"].fillna("")
    ids = pd.factorize(sample_id.to_numpy(dtype=object))  # once: for repeated ids and ids that are labels
    repeated = pd.Series(ids[0]).duplicated(keep="first").to_numpy()
    summary = summary_rows(raw, set(numeric_names), ids)
    if len(summary.at):  # rejected as what they are, and kept out of every other check (a second `Average` is no D003)
        rejects.extend(Reject(int(raw.index[k]), None, field_name, why, "D019")
                       for k, field_name, why in zip(summary.at, summary.fields, summary.reasons()))
        kept = np.ones(len(raw), dtype=bool)
        kept[summary.at] = False
        raw, bad, sample_id, repeated = raw[kept], bad[kept], sample_id[kept], repeated[kept]
    for column, table in columns.translations.items():
        if column in raw.columns:
            raw[column] = _translated(raw[column], table)

    def reject(mask, field_name: str, reasons, code: str) -> None:
        nonlocal bad
        mask = np.asarray(mask, dtype=bool)
        if not mask.any():
            return
        for row, sid, why in zip(raw.index[mask], sample_id[mask], np.broadcast_to(reasons, len(raw))[mask]):
            rejects.append(Reject(int(row), sid or None, field_name, str(why), code))
        bad |= mask

    no_id = (sample_id == "").to_numpy()
    reject(no_id, "sample_id", "no sample id: every row needs one", "D002")
    dup = repeated & ~no_id
    if dup.any():
        first_row = pd.Series(raw.index, index=raw.index).groupby(sample_id.to_numpy()).transform("first")
        reject(dup, "sample_id", ("sample id '" + sample_id + "' already seen at row "
                                  + first_row.astype(str)).to_numpy(dtype=object), "D003")

    for measure, unit_column in unit_columns.items():
        why = _row_units(measure, raw[unit_column], columns, labs.get(measure, measure))
        reject(why != "", measure, why, "D018")

    decimal = columns.option("decimal", ".")
    for measure, qualifier in qualifiers.items():
        raw[measure] = _qualified(raw[measure], raw[qualifier], decimal)
    header_names = {header_key(name) for name in header.values()}
    written_cells, named = {}, np.zeros(len(raw), dtype=bool)  # the cells of number columns that are not numbers
    for column in numeric_names:
        factor = factor_to_canonical(UNIT_FAMILY[column], columns.units[column]) if column in columns.units else 1.0
        values, text, not_a_number = _number_column(raw[column], decimal)
        carried = np.zeros(len(raw), dtype=bool)  # cells read with their unit (`8 ppm`): they say theirs
        if text is not None and not_a_number.any():
            written_cells[column] = text.to_numpy(dtype=object)
            named |= _header_names(written_cells[column], not_a_number, header_names)
            if column in SPELLINGS:  # `45.2 cSt`: read where the unit is the column's, refused where not
                refused, codes, reasons, carried = _unit_cells(column, values, text, not_a_number, decimal,
                                                      _read_in(column, columns), labs.get(column, column))
                for code in ("D018", "D004"):
                    reject(refused & (codes == code), column, reasons, code)
                not_a_number &= ~refused
            grouped = _grouped_numbers(text, not_a_number, decimal)
            if (read := ~np.isnan(grouped)).any():
                values, not_a_number = np.where(read, grouped, values), not_a_number & ~read
        percent = None
        if text is not None and not_a_number.any():
            percent = _percent_cells(values, text, not_a_number, decimal, columns.units.get(column) == "%")
            if percent.any():
                reasons = _found("written as a percentage (", text, percent, quoted=True)
                reasons[percent] += (f"), but {column} is read in {_read_in(column, columns, 'its own unit')}; a "
                                     f"water column in % needs unit: '%' in the column map")
                reject(percent, column, reasons, "D018")
                not_a_number &= ~percent
        infinite = np.isinf(values)
        if text is not None and not_a_number.any():
            at = np.flatnonzero(not_a_number)
            codes, spellings = pd.factorize(text.to_numpy(dtype=object)[at])  # a few: `<0,05`, `ND`, ...
            folded = [str(cell).casefold().strip("+-") for cell in spellings]
            infinite[at[np.isin(folded, ("nan", "inf", "infinity"))[codes]]] = True
        if infinite.any():
            reject(infinite, column, _found("expected a finite number, found ", raw[column], infinite), "D014")
            values = np.where(infinite, np.nan, values)
            not_a_number &= ~infinite
        censored = held = None
        if not_a_number.any():
            limit, quantified = columns.detection_limits.get(column), columns.quantitation_limits.get(column)
            cells = read_censored(text.to_numpy(dtype=object), not_a_number, decimal, factor,
                                  None if limit is None else limit * factor,
                                  None if quantified is None else quantified * factor)
            if cells.ambiguous.any():
                reject(cells.ambiguous, column, _found("", text, cells.ambiguous, quoted=True) + (
                    ": a word for a reading seen but not measured, which labs write both for 'below the reporting "
                    "limit' and for 'detected, small': not guessed; ask the lab for the number or its bound "
                    "(<0.05), or write ND if nothing was detected"), "D025")
            if cells.bad.any():
                _check_units_line(name, column, columns, labs.get(column, column), text, cells.bad, raw.index)
                reasons = _found("expected a number or a censored reading such as <0.05, found ", text, cells.bad,
                                 quoted=True)
                formula = cells.bad & (np.strings.startswith(text.fillna("").to_numpy(dtype=str), "="))
                reasons[formula] = _found("", text, formula, quoted=True)[formula] + (
                    ": a formula whose result the workbook does not hold (saved by a program that does not "
                    "calculate); open and save it in a spreadsheet, or export the values")
                other = "." if decimal != "." else ","  # `1.500` where ',' is the mark, `1,250` where '.' is
                pointed = cells.bad & ~formula & (np.strings.find(text.fillna("").to_numpy(dtype=str), other) >= 0)
                reasons[pointed] = _found("", text, pointed, quoted=True)[pointed] + (
                    f": the decimal mark is {decimal!r}, so a {other!r} could be a thousands separator or a slip; "
                    f"the value is not guessed")
                reject(cells.bad, column, reasons, "D004")
            if cells.held.any():
                censored, held = cells.censored, cells.held
        domain = domain_of(column)
        if domain == POSITIVE and (values <= 0).any():
            reject(values <= 0, column, _found("must be above 0, found ", raw[column], values <= 0), "D005")
        elif domain[0].low == 0 and domain[0].low_in and (values < 0).any():
            reject(values < 0, column, _found("cannot be negative, found ", raw[column], values < 0), "D005")
        if column == "water" and column not in columns.units:
            stated = carried.copy()  # rows whose unit column (or cell, `8 ppm`) says ppm
            if column in unit_columns:
                cells = raw[unit_columns[column]].to_numpy(dtype=object)
                codes, spellings = pd.factorize(cells)  # a few spellings
                stated |= np.array([named_unit(column, str(cell), whole=True) == "ppm" for cell in spellings] + [False],
                                   dtype=bool)[codes]
            scale = _percent_sized(values, censored, held, text, bad,
                                   named_unit("water", labs.get(column, column)) == "ppm", percent, stated,
                                   percent_water is not None)
            if scale is not None:
                tiny, low, ambiguous, first, strong = scale
                row = int(raw.index[first]) if first is not None else percent_water
                if percent_water is None and strong:
                    percent_water = row  # handed on to the file's later chunks
                lab = labs.get(column, column)
                said = tiny | low | ambiguous
                reasons = _found("", raw[column], said, quoted=True)
                reasons[tiny] += _BELOW_KARL_FISCHER.format(lab=lab)
                reasons[low] += (_BESIDE_PERCENTAGES if strong or first is None else _NO_PPM_BESIDE).format(
                    lab=lab, row=row)
                reasons[ambiguous] += _PERCENT_OR_PPM.format(lab=lab, row=row)
                reject(said, column, reasons, "D018")
        if factor != 1.0:
            values = np.round(values * factor, DECIMALS)  # no binary noise: 0.07 % is 700 ppm exactly
        if (beyond := values > domain[-1].high).any():  # in canonical units: water above 100 %
            reject(beyond, column, _found(f"cannot be above {domain[-1].high:g} {INPUT_MEASURES.get(column, '')}, "
                                          f"found ", raw[column], beyond), "D005")
        raw[column] = values
        if censored is not None:
            raw[column + CENSORED_SUFFIX] = pd.Series(censored, index=raw.index, dtype=object)
            written = np.where(held, text.to_numpy(dtype=object), None)
            if factor != 1.0:  # a bound in the lab's unit beside the engine's unit would misread: spell it converted
                at = np.flatnonzero(held)  # the censored cells only
                codes, spellings = pd.factorize(written[at])  # each spelling once: a few
                bound = np.array([str(cell)[:1] in "<>\u2264\u2265" for cell in spellings], dtype=bool)[codes]
                written[at[bound]] = censored[at[bound]]
            raw[column + WRITTEN_SUFFIX] = pd.Series(written, index=raw.index, dtype=object)

    # Two readings of one sample that physics orders; a row already refused keeps its one reason.
    for cold, hot in VISCOSITY_PAIRS:  # viscosity falls as the oil warms (ASTM D341): kv100 below kv40
        if cold in raw.columns and hot in raw.columns:
            upside = _out_of_order(raw, cold, hot, np.greater_equal) & ~bad
            reject(upside, hot, _order_reasons(raw, cold, hot, upside, "mm²/s is not below", (
                "mm²/s: an oil's viscosity falls as it warms (ASTM D341), so the two columns are swapped or one is "
                "misread; the sample is not graded")), "D021")
    counted = [f"particles_{size}" for size in ISO4406_SIZES if f"particles_{size}" in raw.columns]
    for small, large in itertools.combinations(counted, 2):  # cumulative counts never rise with size (ISO 4406)
        rising = _out_of_order(raw, small, large, np.greater) & ~bad
        reject(rising, large, _order_reasons(raw, small, large, rising, "per mL is above", (
            "per mL: counts at a size include every larger particle (ISO 4406), so these are counts per size range "
            "or in another order; the sample is not graded")), "D022")

    if "sampled_on" in raw.columns:
        dates = read_dates(raw["sampled_on"].to_numpy(dtype=object), columns.option("date_format"))
        if dates.swapped is not None:
            at, cell = dates.swapped
            raise InputError(f"{name}: row {int(raw.index[at])}, sampled_on: {cell!r} does not fit the declared "
                             f"date_format {columns.option('date_format')!r} but fits it with day and month swapped: "
                             f"the lab writes the other order, or both, so a date such as 03/04 cannot be read "
                             f"safely; declare the order the file uses")
        reject(dates.bad, "sampled_on", dates.reasons, "D015")
        written = pd.Series(dates.text, index=raw.index, dtype=object)
        last = (today or dt.date.today()) + dt.timedelta(days=LATEST_DAYS_AHEAD)
        latest, beyond = last.isoformat(), (last + dt.timedelta(days=1)).isoformat()
        iso = written.fillna("").to_numpy(dtype=str)  # ISO text: its order is date order, a time after the date
        slip = (iso != "") & ((iso < EARLIEST_DATE) | (iso >= beyond)) & ~dates.bad
        reject(slip, "sampled_on", _found("", raw["sampled_on"].astype(object), slip, quoted=True) + (
            f" is before {EARLIEST_DATE[:4]} or more than a year after the day it was read (later than {latest}): "
            f"a slip in the year (0026 or 2062 for 2026) would put the sample out of its unit's order"), "D023")
        raw["sampled_on"] = written
    for flag in FLAG_FIELDS:
        if flag in raw.columns:
            raw[flag] = _flag_text(raw[flag], columns.flags.get(flag, {}))

    for column, canonical in TEXT_VOCABULARIES.items():  # closed vocabularies: canonical spelling, or reject
        if column in raw.columns:
            spelled, why = canonical_texts(raw[column], canonical)
            reject(why != "", column, why, "D011")
            raw[column] = spelled

    if named.any() or layout_break is not None:
        candidates = np.flatnonzero(named)
        cells = {column: (written_cells[column][candidates] if column in written_cells else
                          np.full(len(candidates), None, dtype=object) if column in numeric_names else
                          raw[column].to_numpy(dtype=object)[candidates]) for column in header}
        lines = header_lines(raw.index.to_numpy(), candidates, cells, header, layout_break)
        layout_break = lines.open_break
        if len(lines.rejected):  # one reason a row: what else its cells hold does not matter
            gone = set(raw.index[lines.rejected].tolist())
            rejects = [r for r in rejects if r.row not in gone] + [
                Reject(int(raw.index[k]), None, "(row)", why, "D020") for k, why in zip(lines.rejected, lines.reasons)]
            bad[lines.rejected] = True
    rejects.sort(key=lambda r: (r.row, r.field))
    accepted = raw[~bad]
    read = len(raw) + len(summary.at) + len({s[0] for s in skipped})
    return SampleBatch(accepted, tuple(rejects), read, name, tuple(notes), layout_break=layout_break,
                       percent_water=percent_water)


# Why a water reading between 0 and 1 in a column read in ppm is rejected: no Karl Fischer titration
# reports so little (ASTM D6304 1.1: from 10 mg/kg), so it is a percentage under a header that does
# not say so; read as ppm, 0.12 % (1200 ppm) would grade as 0.12 ppm, 10,000 times too dry.
_BELOW_KARL_FISCHER = (" ppm is below what a Karl Fischer titration reports (ASTM D6304: from 10 mg/kg): a "
                       "percentage? the column is read in ppm; declare water: {{column: {lab!r}, unit: '%'}} in the "
                       "column map, or correct the export")


# Why a water reading from 1 to 10 ppm is rejected in a column that holds a reading below 1 (a
# percentage, above): 1.5 there is 1.5 % (15,000 ppm, free water) far more likely than 1.5 ppm, which
# is below what a Karl Fischer titration reports as well; read as ppm, the wettest sample graded normal.
_BESIDE_PERCENTAGES = (" ppm is below what a Karl Fischer titration reports (ASTM D6304: from 10 mg/kg), and "
                       "column {lab!r} holds readings that read as percentages (row {row}): a "
                       "percentage too? declare water: {{column: {lab!r}, unit: '%'}} in the column map, or "
                       "correct the export")


# Why a water reading from 1 to 10 ppm is rejected in a column most of whose readings are so and none
# above 100 ppm: below what Karl Fischer reports as ppm, and nothing in the column says it is in ppm,
# while every reading of it could be a percentage (a column of 2, 5 and 12: a wet sample's 12 % graded
# normal as 12 ppm).
_NO_PPM_BESIDE = (" ppm is below what a Karl Fischer titration reports (ASTM D6304: from 10 mg/kg), as most of "
                  "column {lab!r} is, and none of it is above 100 ppm to say it is in ppm: a percentage? declare water: "
                  "{{column: {lab!r}, unit: '%'}} in the column map (unit: ppm if it is ppm), or correct the export")


# Why a water reading from 10 to 100 is rejected in a column that reads as percentages (a reading
# below 1, or below 10 with none above 100): it is a reading Karl Fischer reports in ppm and a
# percentage a wet sample has (emulsified or free water), and which one is not guessed; read as ppm,
# a 12 % reading (120,000 ppm, far above any urgent step) graded normal as 12 ppm.
_PERCENT_OR_PPM = (" could be ppm or a percentage, and column {lab!r} holds readings that read as percentages "
                   "(row {row}): which one is not guessed; declare water: {{column: {lab!r}, unit: '%'}} in the "
                   "column map (unit: ppm if it is ppm), or correct the export")


def _percent_sized(values: np.ndarray, censored: np.ndarray | None, held: np.ndarray | None,
                   written: pd.Series | None, bad: np.ndarray, header_says_ppm: bool,
                   signed: np.ndarray | None, stated: np.ndarray, earlier: bool = False) -> tuple | None:
    """Where a water column read in ppm (no unit declared) reads as percentages: (tiny, low,
    ambiguous, first, strong), the rows below 1, from 1 to 10 and from 10 to 100 to reject, the
    first row that gives the column away (None when an earlier chunk of the file did: `earlier`)
    and whether a reading below 1 or a percent sign did; None when nothing does. A censored cell
    counts by the bound the lab wrote (`<0.05` ppm is no bound Karl Fischer writes either), an `ND`
    not: its bound is the map's detection limit, not a reading of the column (`written`: the
    cells as text, stripped).
    Cells written with a percent sign (`signed`, rejected already) give the column away as well.
    Karl Fischer reports from 10 mg/kg (ASTM D6304 §1.1), so a reading below 1 is a percentage, and
    one below 10 is one too when most readings of the column are below 10 and none is above 100 (no
    percentage is; a dry column of 8, 25, 40 and 60 ppm is ppm, common practice, no source); beside
    them, 10 to 100 is either. A header that names ppm (`Water ppm`) says what 10 to 100 is: there
    only a reading below 1, and one below 10 beside it, is rejected; so does a row's unit column
    (`stated`: the rows whose unit cell names ppm), for its row."""
    sized = values
    if held is not None and held.any():
        at = np.flatnonzero(held)
        spelled = written.to_numpy(dtype=object)[at].astype(str)
        at = at[~np.isin(np.strings.lower(spelled), NOT_DETECTED_SPELLINGS + BELOW_QUANTITATION_SPELLINGS)]  # the map's limit
        codes, spellings = pd.factorize(censored[at])  # a few: `<0.05`, `>1000`
        sized = values.copy()
        sized[at] = np.array([float(str(cell).lstrip("<>=")) for cell in spellings], dtype=float)[codes]
    with np.errstate(invalid="ignore"):
        sized = np.where(bad, np.nan, sized)  # a row rejected already is not asked
        tiny = (sized > 0) & (sized < 1)
        below = (sized > 0) & (sized < 10)
        signed = signed if signed is not None and signed.any() else None
        strong = tiny.any() or signed is not None  # what an earlier chunk hands on too
        weak = 2 * int((below & ~stated).sum()) > int((sized > 0).sum())  # most readings under Karl Fischer's 10
        if not (strong or earlier or (not header_says_ppm and weak and not (sized > 100).any())):
            return None
        ambiguous = (sized >= 10) & (sized <= 100) & ~stated & (not header_says_ppm)
    if not strong and not earlier:  # the column gives itself away by readings below 10 alone
        below &= ~stated
    first = tiny if tiny.any() else signed if signed is not None else None if earlier else below
    return tiny, below & ~tiny, ambiguous, None if first is None else int(np.argmax(first)), strong


def _header_names(text: np.ndarray, not_a_number: np.ndarray, names: set) -> np.ndarray:
    """Cells that are a name of the file's header, among those that are not numbers (each distinct
    text looked at once: a few)."""
    at = np.flatnonzero(not_a_number)
    codes, spellings = pd.factorize(text[at])
    found = np.zeros(len(text), dtype=bool)
    found[at] = np.array([header_key(cell) in names for cell in spellings] + [False], dtype=bool)[codes]
    return found


def _out_of_order(raw: pd.DataFrame, first: str, second: str, wrong) -> np.ndarray:
    """Rows whose `second` reading stands to the `first` as `wrong` says it never can; a
    censored cell (a bound, not a reading) and a missing one decide nothing."""
    plain = [raw[c + CENSORED_SUFFIX].isna().to_numpy() if c + CENSORED_SUFFIX in raw.columns
             else np.ones(len(raw), dtype=bool) for c in (first, second)]
    return wrong(raw[second].to_numpy(dtype=float), raw[first].to_numpy(dtype=float)) & plain[0] & plain[1]


def _order_reasons(raw: pd.DataFrame, first: str, second: str, rows: np.ndarray, relation: str, why: str):
    """`second X <relation> first Y <why>` for the rows, quoting both cells."""
    reasons = _found(f"{second} ", raw[second], rows)
    reasons[rows] += _found(f" {relation} {first} ", raw[first], rows)[rows] + f" {why}"
    return reasons


# Sampling dates outside these are a slip in the year (0026, 2062 for 2026): a date after the day
# the file is read, by more than a year of lab turnaround and clock skew, or before 1900 (our choice,
# no source; a file of next year's plan is no samples file).
EARLIEST_DATE = "1900-01-01"
LATEST_DAYS_AHEAD = 366

# Viscosities of one oil at 40 and 100 °C, in the same unit (mm²/s) once converted.
VISCOSITY_PAIRS = (("kv40", "kv100"), ("new_kv40", "new_kv100"))


def _read_in(measure: str, columns: ColumnMap, otherwise: str | None = None) -> str:
    """The unit a column of this measure is read in: the map's `unit:`, else the canonical one
    (`otherwise` for a measure a rule set declares)."""
    return columns.units.get(measure) or INPUT_MEASURES.get(measure.removeprefix("new_"), otherwise)


def _unit_columns(names: list, labs: dict) -> dict:
    """{measure: column} of the columns that give a measure's unit row by row, named after its
    column (`water unit`, `Water (KF)_units`, `unit water`): LIMS exports write them beside results."""
    found = {}
    for measure in SPELLINGS:
        lab = str(labs.get(measure, measure))
        spelled = {header_key(form.format(lab=lab, word=word)) for word in ("unit", "units", "(unit)", "[unit]")
                   for form in ("{lab} {word}", "{word} {lab}")}
        for name in names:
            if header_key(name) in spelled:
                found[measure] = name
    return found


# A result's qualifier column, named after the result's column (`Water qualifier`, `TAN_qual`,
# `Visc 40C <>`), as LIMS exports write the `<` of a result below the reporting limit apart from
# its number; and the qualifiers that make the number a bound (common practice, no source).
_QUALIFIER_WORDS = ("qualifier", "qual", "qual.", "operator", "modifier", "sign", "prefix", "flag", "<>", "< >")
_BOUNDS = {"<": "<", "<=": "<=", "\u2264": "\u2264", ">": ">", ">=": ">=", "\u2265": "\u2265",
           "nd": "<", "n.d.": "<", "bdl": "<", "<dl": "<", "<lod": "<", "<loq": "<", "<rl": "<"}


def _qualifier_columns(names: list, labs: dict, numeric_names: list) -> dict:
    """{measure: column} of the columns that give a result's qualifier (`<`, `>`) row by row."""
    found = {}
    for measure in numeric_names:
        lab = str(labs.get(measure, measure))
        spelled = {header_key(form.format(lab=lab, word=word)) for word in _QUALIFIER_WORDS
                   for form in ("{lab} {word}", "{word} {lab}", "{lab} ({word})", "{lab} [{word}]")}
        for name in names:
            if header_key(name) in spelled:
                found[measure] = name
    return found


def _qualified(values: pd.Series, qualifier: pd.Series, decimal: str) -> pd.Series:
    """The result column with each qualified number written as the bound it is (`<` and 0.05 as
    `<0.05`, in the file's decimal mark), for the censored reading to read: taken as the plain
    number, a `>1000` ppm water (the top of the method's range) was 1000, not above the 1000 ppm
    urgent step. Other qualifiers (`=`, a lab's H or L flag) leave the number as it is."""
    codes, uniques = pd.factorize(qualifier.to_numpy(dtype=object), use_na_sentinel=True)
    marks = np.array([_BOUNDS.get(str(u).strip().casefold(), "") for u in uniques] + [""], dtype=object)[codes]
    cells = values.to_numpy(dtype=object)
    at = np.flatnonzero(marks != "")
    out = None
    for k in at:
        cell = cells[k]
        if isinstance(cell, float) and np.isfinite(cell):
            text = repr(cell).replace(".", decimal)
        elif isinstance(cell, (int, float)) and not isinstance(cell, bool) and np.isfinite(cell):
            text = str(cell)
        elif isinstance(cell, str) and cell.strip() and cell.strip()[0] not in "<>\u2264\u2265":
            text = cell.strip()
        else:
            continue  # no number to bound, or written as a bound already
        if out is None:
            out = cells.copy()
        out[k] = marks[k] + text
    return values if out is None else pd.Series(out, index=values.index, dtype=object)


def _row_units(measure: str, units: pd.Series, columns: ColumnMap, lab: str) -> np.ndarray:
    """Why each row's unit (from its unit column) cannot be read in the column's unit; "" where it
    can, or where the row gives none. A unit not recognised is not assumed to agree."""
    codes, spellings = pd.factorize(units.to_numpy(dtype=object), use_na_sentinel=True)
    read_in = _read_in(measure, columns)
    why = []
    for cell in spellings:
        named = named_unit(measure, str(cell), whole=True)
        if named is None:
            why.append(f"the row's unit {str(cell)!r} is not one {measure} is known in; it is read in {read_in}")
        else:
            why.append(unit_conflict(measure, named, read_in, f"the row's unit column ({units.name!r})",
                                     lab) or "")
    return np.array(why + [""], dtype=object)[codes]


def _percent_cells(values: np.ndarray, text: pd.Series, not_a_number: np.ndarray, decimal: str,
                   in_percent: bool) -> np.ndarray:
    """Cells written with a percent sign (`0.12%`, `<0,01 %`, and a workbook cell shown as a
    percentage, which readers.read_xlsx spells so): in a column read in %, the sign is dropped
    (the number is read into `values`, a censored one left in `text` without it, both in place);
    in any other column they are returned, to be rejected: 0.12 % read as ppm is 10,000 times
    too small."""
    at = np.flatnonzero(not_a_number)
    codes, spellings = pd.factorize(text.to_numpy(dtype=object)[at])  # each spelling once: `<0.05`, `ND`, ...
    signed = np.array([str(cell).endswith("%") and bool(str(cell)[:-1].strip()) for cell in spellings] + [False],
                      dtype=bool)[codes]
    found = np.zeros(len(values), dtype=bool)
    if not signed.any():
        return found
    if not in_percent:
        found[at[signed]] = True
        return found
    k = at[signed]
    written = text.to_numpy(dtype=object)[k].astype(str)
    stripped = pd.Series(np.strings.strip(np.strings.rstrip(written, "%")).astype(object), dtype=object)
    parsed, _, still = _number_column(stripped, decimal)  # the same rules as any cell (a '.' where ',' is the mark)
    still |= np.isinf(parsed)  # `inf%`: left to the finite-number check as written
    values[k[~still]] = parsed[~still]
    not_a_number[k[~still]] = False
    text.iloc[k] = np.where(still, stripped.to_numpy(dtype=object), None)  # a censored `<0.01%` read on as `<0.01`
    return found


# A reading with its unit written after it in the cell (`45.2 cSt`, `0.35 mg KOH/g`, `<0.05 mg KOH/g`,
# `1 250 /mL`), as LIMS exports and hand-kept sheets write it: a number or a bound, then text that starts
# like a unit (a letter, `/`, a micro sign, a bracket). A percent sign is _percent_cells' to read.
_WITH_UNIT = re.compile(r"((?:<=|>=|<|>|\u2264|\u2265)?\s*[+-]?(?:\d[\d.,\u00a0\u202f ]*|[.,]\d+)(?:[eE][+-]?\d+)?)"
                        r"\s*([A-Za-z\u00b5\u03bc/#\[(].*)")


def _unit_cells(measure: str, values: np.ndarray, text: pd.Series, not_a_number: np.ndarray, decimal: str,
                read_in: str, lab: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Cells that carry their unit, among those that are not numbers (each distinct text looked at once).

    Where the cell's unit is the one the column is read in (cSt and mm2/s are one unit, ASTM D445),
    the number is read into `values` (a bound is left in `text` without its unit, for the censored
    reading), both in place. Where it is another unit (`0.12 %` in a ppm column is _percent_cells'), the
    cell is returned as refused, D018, saying what the column is read in: read as the bare number, 120 ppm
    in a % column is graded 10,000 times too wet. Text after a number that is no unit of any measure (a
    lab's `X` flag) is refused D004. Returns (refused, code, reason, read: the cells read with their
    unit), aligned with the column."""
    n = len(values)
    refused, codes_out, reasons = np.zeros(n, dtype=bool), np.full(n, "", dtype=object), np.full(n, "", dtype=object)
    carried = np.zeros(n, dtype=bool)
    at = np.flatnonzero(not_a_number)
    if not len(at):
        return refused, codes_out, reasons, carried
    codes, spellings = pd.factorize(text.to_numpy(dtype=object)[at])
    parts = pd.Series(spellings, dtype=object).astype(str).str.extract(f"^{_WITH_UNIT.pattern}$")
    found = parts[1].notna().to_numpy()
    if not found.any():
        return refused, codes_out, reasons, carried
    # each distinct unit once (a column holds a few: `cSt`, `mm2/s`), not each distinct cell
    unit_codes, units = pd.factorize(parts[1].where(parts[1].notna(), None).to_numpy(dtype=object))
    verdicts = [_cell_unit(measure, str(unit), read_in) for unit in units]
    kind = np.array([v[0] for v in verdicts] + [""], dtype=object)[unit_codes]  # "" agrees, else a code
    agrees = found & (kind == "")
    number_of = parts[0].str.strip().to_numpy(dtype=object)  # the cell without its unit
    code_of, why_of = np.where(found, kind, "").astype(object), np.full(len(spellings), "", dtype=object)
    for k in np.flatnonzero(code_of != ""):  # the refused spellings only, for their reasons
        why_of[k] = f"{str(spellings[k])!r}: " + verdicts[unit_codes[k]][1].replace(_LAB, repr(lab))
    refused[at] = (code_of != "")[codes]
    codes_out[at], reasons[at] = code_of[codes], why_of[codes]
    agree = at[agrees[codes]]
    carried[agree] = True
    if len(agree):  # each distinct number once, by the same rules as any cell (a '.' where ',' is the mark)
        parsed, _, still = _number_column(pd.Series(number_of[agrees], dtype=object), decimal)
        number, bound = np.full(len(spellings), np.nan), np.zeros(len(spellings), dtype=bool)
        number[agrees], bound[agrees] = parsed, still
        row_bound = bound[codes][agrees[codes]]
        values[agree[~row_bound]] = number[codes][agrees[codes]][~row_bound]
        not_a_number[agree[~row_bound]] = False
        left = np.where(bound, number_of, None)[codes][agrees[codes]]  # a bound read on without its unit
        text.iloc[agree] = left
    return refused, codes_out, reasons, carried


_LAB = "\x00lab\x00"  # where _cell_unit's reason names the lab's column


def _cell_unit(measure: str, unit: str, read_in: str) -> tuple[str, str]:
    """("", "") when a cell's unit is the one its column is read in, else (code, why), `_LAB` in the
    why standing for the lab's name of the column."""
    named = named_unit(measure, unit, whole=True)
    other = temperature_conflict(measure, unit) or size_conflict(measure, unit)  # `46.1 cSt @ 100 °C` in kv40
    if other:
        return "D018", f"the cell {other}"
    if named == read_in:
        return "", ""
    if named in readable_units(measure):
        return "D018", (f"the cell is in {named}, but column {_LAB} is read in {read_in}; a cell is not converted "
                        f"on its own: write the column in one unit and declare it in the column map "
                        f"({measure}: {{column: {_LAB}, unit: ...}})")
    if named is not None or any(named_unit(other, unit, whole=True) for other in SPELLINGS):
        return "D018", (f"the cell names {named or repr(unit.strip())}, which is not a unit {measure} can be read in "
                        f"({', '.join(readable_units(measure))}); column {_LAB} is read in {read_in}: a value of "
                        f"another quantity, or in another unit, is not graded")
    return "D004", (f"expected a number in {read_in}, found text after the number ({unit.strip()!r}) that is no "
                    f"unit {measure} is read in")


def _check_header_units(name: str, columns: ColumnMap) -> None:
    """A mapped column whose header names another unit than it is read in (`Water (Karl Fischer) %`
    mapped without `unit: '%'`), particle counts of another size or a viscosity at another
    temperature, is refused: every value of it would be graded at the wrong scale."""
    why = [header_conflict(measure, column, _read_in(measure, columns) if measure in SPELLINGS else None)
           for measure, column in columns.columns.items()]
    if any(why):
        raise InputError(f"{name}: " + "; ".join(w for w in why if w))


def _check_units_line(name: str, column: str, columns: ColumnMap, lab: str, text: pd.Series, bad: np.ndarray,
                      rows: pd.Index) -> None:
    """A units line under the header (`%` under `water`) that names another unit than the column is
    read in refuses the file; one that agrees is rejected as the text it is. Only cells that are
    neither numbers nor censored readings are looked at (a few)."""
    if column not in SPELLINGS:
        return
    at = np.flatnonzero(bad)
    codes, spellings = pd.factorize(text.to_numpy(dtype=object)[at])
    for k, cell in enumerate(spellings):
        where = f"row {int(rows[at[np.argmax(codes == k)]])}, a units line under the header,"
        why = unit_conflict(column, named_unit(column, str(cell), whole=True), _read_in(column, columns),
                            f"{where} in column {lab!r}", lab)
        if why:
            raise InputError(f"{name}: {why}")


def _translated(column: pd.Series, table: dict) -> pd.Series:
    """Lab values rewritten by the map's table (each distinct value once); others kept as written."""
    codes, uniques = pd.factorize(column.to_numpy(dtype=object), use_na_sentinel=True)
    out = np.array([None if table.get(u, u) is None else str(table.get(u, u)) for u in uniques] + [None],
                   dtype=object)
    return pd.Series(out[codes], index=column.index, dtype=object)


def _flag_text(column: pd.Series, own: dict) -> pd.Series:
    """A yes/no flag as `true`/`false` where its spelling is known; other spellings are left for
    the trend stage to reject with the row."""
    spellings = {**FLAG_SPELLINGS, **own}
    codes, uniques = pd.factorize(column.astype(object).to_numpy(dtype=object), use_na_sentinel=True)
    out = []
    for u in uniques:
        meaning = spellings.get(str(u).strip().casefold())
        out.append(u if meaning is None else ("true" if meaning else "false"))
    return pd.Series(np.array(out + [None], dtype=object)[codes], index=column.index, dtype=object)


_ASCII_SPACE = [c for c in map(chr, range(128)) if c.isspace()]


def _padded(joined: str) -> bool:
    """Whether a value of these \\x00-joined texts may need stripping (non-ASCII: assume so)."""
    if not joined.isascii() or joined[:1].isspace() or joined[-1:].isspace():
        return True
    return any(space in joined and (space + "\x00" in joined or "\x00" + space in joined)
               for space in _ASCII_SPACE)  # one fast single-character scan each, mostly


def _has_empty(joined: str, any_present: bool) -> bool:
    """Whether one of the \\x00-joined texts is empty: two separators side by side, or one at an end."""
    return any_present and (not joined or joined[0] == "\x00" or joined[-1] == "\x00" or "\x00\x00" in joined)


def _text_column(column: pd.Series) -> pd.Series:
    """Text as Python str or None: stripped, empty cells missing.

    Mostly the text is clean already, which one pass over it joined shows, and is kept
    as it is; otherwise each distinct value is cleaned once (codes repeat a lot).
    """
    values = column.to_numpy(dtype=object)
    try:
        joined, present = "\x00".join(values), None  # every cell is text, so none is missing (None, NaN raise)
    except TypeError:
        present = ~pd.isna(values)
        try:
            joined = "\x00".join(values[present])
        except TypeError:  # not all text (JSON Lines numbers): spelled as text below
            joined = None
    count = len(values) if present is None else int(present.sum())
    if joined is not None and joined.count("\x00") == count - 1 and not _padded(joined):
        cleaned = values.copy()
        if present is not None:
            cleaned[~present] = None
        if _has_empty(joined, count > 0):  # found by one scan of the joined text, not a comparison a cell
            cleaned[cleaned == ""] = None
        return pd.Series(cleaned, index=column.index, dtype=object)
    codes, uniques = pd.factorize(values, use_na_sentinel=True)
    cleaned = np.array([str(u).strip() or None for u in uniques] + [None], dtype=object)
    return pd.Series(cleaned[codes], index=column.index, dtype=object)


_NUMBER_LEADS = np.array([ord(c) for c in "0123456789.-+"], dtype=np.uint32)


def _first_characters(text: np.ndarray) -> np.ndarray:
    """Each cell's first character as its code point (0 for an empty cell), read from the
    fixed-width array's buffer: a slice of every cell would copy the column."""
    if text.dtype.itemsize == 0 or not len(text):
        return np.zeros(len(text), dtype=np.uint32)
    return np.ascontiguousarray(text).view(np.uint32).reshape(len(text), -1)[:, 0]


def _with_decimal_point(text: np.ndarray, decimal: str) -> np.ndarray:
    """The fixed-width texts with their decimal mark written as '.': one character for another,
    swapped in the array's buffer (np.strings.replace takes four times as long)."""
    if decimal == "." or not len(text) or text.dtype.itemsize == 0:
        return text
    if len(decimal) != 1:
        return np.strings.replace(text, decimal, ".")
    swapped = text.copy()
    points = swapped.view(np.uint32)
    points[points == ord(decimal)] = ord(".")
    return swapped


def _number_column(column: pd.Series, decimal: str = ".") -> tuple[np.ndarray, pd.Series | None, np.ndarray]:
    """(float values, the text as written where not a number, cells that are not numbers).

    Text cells are handled with numpy's string functions (C loops): stripped, the decimal
    mark swapped, and cells that start like a number converted in one call.
    """
    if column.dtype.kind in "fiu":
        return column.to_numpy(dtype=float), None, np.zeros(len(column), dtype=bool)
    values = column.to_numpy(dtype=object)
    present = pd.notna(values)
    kind = pd.api.types.infer_dtype(values, skipna=True)
    if kind in ("string", "empty", "floating", "integer", "mixed-integer-float"):
        is_bool = np.zeros(len(values), dtype=bool)
    else:
        is_bool = np.fromiter((isinstance(v, bool) for v in values), dtype=bool, count=len(values))
    text = np.strings.strip(np.where(present & ~is_bool, values, "").astype(str))
    spelled = _with_decimal_point(text, decimal)
    looks = np.isin(_first_characters(spelled), _NUMBER_LEADS)
    if decimal != ".":  # a '.' written where ',' is the decimal mark (`1.500`) is not read: 1.5 or 1500?
        written = present if kind == "string" else np.fromiter((isinstance(v, str) for v in values), dtype=bool,
                                                               count=len(values))
        looks &= ~(written & (np.strings.find(text, ".") >= 0))
    parsed = np.full(len(values), np.nan)
    try:
        cells = spelled[looks].tolist()  # Python's float() a cell: twice numpy's own parse, and what it accepts
        parsed[looks] = np.fromiter(map(float, cells), dtype=float, count=len(cells))
    except ValueError:  # a cell like `1.2.3` or `12 ppm`: each distinct text converted once, bad ones NaN
        codes, uniques = pd.factorize(spelled[looks].astype(object))
        parsed[looks] = pd.to_numeric(pd.Series(uniques, dtype=object), errors="coerce").to_numpy(dtype=float)[codes]
    not_a_number = ((text != "") | is_bool) & np.isnan(parsed)
    shown = np.full(len(values), None, dtype=object)  # the text of the cells that are not numbers only
    shown[not_a_number] = text[not_a_number]
    if is_bool.any():  # JSON true/false in a number column: not a number, quoted as written
        shown[is_bool] = [str(v).lower() for v in values[is_bool]]
    return parsed, pd.Series(shown, index=column.index, dtype=object), not_a_number


def _grouped_numbers(text: pd.Series, not_a_number: np.ndarray, decimal: str) -> np.ndarray:
    """Numbers written with thousands groups that cannot be read two ways (NaN elsewhere): the
    other mark between groups of three digits and the decimal mark after them (`1.234,5` where
    ',' is the mark, `1,234.5` where '.' is), or a space between groups (`1 234,5`, `12 500`: no
    file writes a space for its decimal mark). `1.234` alone stays unread where ',' is the mark (a
    thousands separator, or a slip?). Only the cells that are not numbers are looked at (a few)."""
    other = "." if decimal == "," else ","
    mark, group = re.escape(decimal), re.escape(other)
    pattern = re.compile(rf"[+-]?\d{{1,3}}(?:(?:{group}\d{{3}})+{mark}\d+|(?:[ \u00a0\u202f]\d{{3}})+(?:{mark}\d+)?)")
    values = np.full(len(text), np.nan)
    at = np.flatnonzero(not_a_number)
    codes, spellings = pd.factorize(text.to_numpy(dtype=object)[at])
    read = [float(re.sub(rf"[{group} \u00a0\u202f]", "", cell).replace(decimal, "."))
            if isinstance(cell, str) and pattern.fullmatch(cell) else np.nan for cell in spellings]
    values[at] = np.array(read + [np.nan], dtype=float)[codes]
    return values


def _found(prefix: str, column: pd.Series, mask: np.ndarray, quoted: bool = False) -> np.ndarray:
    """Reasons quoting the offending cells; only the few offending cells are formatted."""
    reasons = np.full(len(column), "", dtype=object)
    for k in np.flatnonzero(mask):
        value = column.iat[k]
        value = f"{value:g}" if isinstance(value, float) else str(value).strip()
        reasons[k] = prefix + (f"'{value}'" if quoted else value)
    return reasons
