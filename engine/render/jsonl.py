"""Write graded samples as JSON Lines: one object a sample, the same bytes for the same input.

Building a dict and calling json.dumps for each of a million rows would cost more than
all of the grading. Instead each piece of a record is rendered once per distinct state,
with placeholders for per-row values, using the same record classes as the Python API:
the record's skeleton once, each rule's reason once per (grade, capped-from, clauses)
state, each gap once per pattern of missing inputs, each caveat once. Each template is
filled once a row by one %-format call; the filled pieces of a block are laid out in
line order in one flat array and joined by a single str.join, so no line is built by
repeated concatenation. A test checks that every line equals json of the per-record
API, byte for byte.
"""

from __future__ import annotations

import json
import re
from dataclasses import replace

import numpy as np
import pandas as pd

from sumpwise.evaluation.evaluator import NOT_EVALUATED
from sumpwise.results.facts import distinct_rows
from sumpwise.results.records import (FORMS, FULL, UNRATED, ColumnArrays, GradedBatch, build_result,
                                      caveat_at, condition_inputs, gap_at, gap_states, reason_at, record_shape_groups)

JOINED_ROWS = 8192  # lines joined into one bytes object: about 10 MB of full records

_TOKEN = re.compile(r'"\\u0000sw(\d+)\\u0000"')
_ESCAPED = re.compile(r'["\\\x00-\x1f]')


class _Placeholder:
    def __init__(self, index: int):
        self.token = f"\x00sw{index}\x00"


class _Piece:
    """A stand-in list item whose JSON is a placeholder: where the reasons, caveats, gaps go."""

    def __init__(self, placeholder: _Placeholder):
        self.placeholder = placeholder

    def to_record(self, form=None):  # forecasts' to_record takes no form
        return self.placeholder


class _TemplateValues:
    """Hands out a placeholder for each per-row value a record piece asks for."""

    def __init__(self):
        self.wanted: list[tuple[str, str]] = []

    def slot(self, kind: str, name: str) -> _Placeholder:
        self.wanted.append((kind, name))
        return _Placeholder(len(self.wanted) - 1)

    def number(self, name: str, i: int):
        return self.slot("number", name)

    def text(self, name: str, i: int):
        return self.slot("text", name)

    def flag(self, name: str, i: int):
        return self.slot("flag", name)

    def row(self, i: int):
        return self.slot("row", "row")


def dumps(record: dict) -> str:
    """The one JSON spelling sumpwise uses: key order as built, these separators, UTF-8."""
    return json.dumps(record, ensure_ascii=False, separators=(", ", ": "), default=lambda p: p.token,
                      allow_nan=False)


def _template(text: str, values: _TemplateValues) -> tuple[list[str], list]:
    pieces = _TOKEN.split(text)
    return pieces[0::2], [values.wanted[int(k)] for k in pieces[1::2]]


def _encoded(texts, errors: str) -> list[bytes]:
    """UTF-8 bytes of each text, in three C-level calls (join, encode, split) instead of one
    encode a text; JSON literals never hold a raw NUL (json.dumps escapes it)."""
    return "\x00".join(texts).encode("utf-8", errors).split(b"\x00")


class _Column:
    """A column's literals for some rows, or the one literal all those rows share (`same`): a
    shared literal (a column the file lacks, one method, no date) is written into the form once
    instead of passed to every row's %-call."""

    def __init__(self, literals: np.ndarray | None, same: bytes | None = None):
        self.literals, self.same = literals, same

    def array(self, n: int) -> np.ndarray:
        return self.literals if self.same is None else np.full(n, self.same, dtype=object)

    def take(self, local: np.ndarray) -> "_Column":
        return self if self.same is not None else _Column(self.literals[local])


def _shared(codes: np.ndarray, table) -> _Column | None:
    """The column as one literal when all its rows hold the same value (or all are missing)."""
    if len(table) == 1:  # no value at all: the table holds only null
        return _Column(None, table[-1])
    if len(table) == 2 and codes.min(initial=0) >= 0:
        return _Column(None, table[0])
    return None


def _quoted(texts, errors: str) -> list[bytes]:
    """JSON string literals of texts as UTF-8 bytes: quotes put around them all
    in one pass when none needs escaping (the usual case), json.dumps of each otherwise."""
    try:
        joined = "\x00".join(texts)
    except TypeError:  # a value that is not str (a caller's own frame): spelled as str, as records do
        texts = [str(t) for t in texts]
        joined = "\x00".join(texts)
    if joined.count("\x00") == len(texts) - 1 and not _ESCAPED.search(joined.replace("\x00", "")):
        return ('"' + joined.replace("\x00", '"\x00"') + '"').encode("utf-8", errors).split(b"\x00")
    return _encoded([json.dumps(t, ensure_ascii=False) for t in texts], errors)


def _text_literals(values: np.ndarray, errors: str) -> _Column:
    """JSON string literals (or null) for a column of str-or-None, as UTF-8 bytes."""
    if not len(values):
        return _Column(np.empty(0, dtype=object))
    codes, uniques = pd.factorize(values, use_na_sentinel=True)
    if len(uniques) < len(values) // 2:
        table = (_quoted([str(u) for u in uniques], errors) if len(uniques) else []) + [b"null"]
        return _shared(codes, table) or _Column(np.array(table, dtype=object)[codes])
    present = codes >= 0
    literal = np.empty(len(values), dtype=object)
    literal[:] = _quoted(np.where(present, values, "").astype(object).tolist(), errors)
    literal[~present] = b"null"
    return _Column(literal)


def _number_literals(values: np.ndarray) -> _Column:
    """JSON number literals (or null), spelled as Python's float repr, each distinct value once
    (-0.0 is spelled 0.0, as records.RowValues gives it: factorize takes the two as one value)."""
    codes, uniques = pd.factorize(values + 0.0, use_na_sentinel=True)
    table = np.empty(len(uniques) + 1, dtype=object)
    table[:] = ",".join(map(repr, uniques.tolist())).encode().split(b",") + [b"null"] if len(uniques) else [b"null"]
    table[:-1][~np.isfinite(uniques)] = b"null"
    return _shared(codes, table) or _Column(table[codes])


def _integer_literals(values: np.ndarray) -> np.ndarray:
    """Decimal literals of integers: one bytes %-format over them all, split (half numpy's
    conversion to fixed-width bytes and back to objects)."""
    literals = np.empty(len(values), dtype=object)
    if len(values):
        literals[:] = (b"%d," * len(values) % tuple(values.tolist()))[:-1].split(b",")
    return literals


class _Literals:
    """JSON literals of a column as UTF-8 bytes, for the rows asked (one block at a time, so memory
    stays bounded by the block, not the batch), from the batch's arrays (each column converted once)."""

    def __init__(self, columns: ColumnArrays, errors: str):
        self.columns, self.errors = columns, errors

    def get(self, kind: str, name: str, rows: np.ndarray) -> _Column:
        if kind == "row":  # the sample's row in its file (records.RowValues.row)
            index = self.columns.index
            return _Column(None, b"null") if index is None else _Column(_integer_literals(index[rows]))
        if kind == "flag":
            values = self.columns.number(name)
            flags = np.zeros(len(rows), dtype=bool) if values is None else values[rows] == 1.0
            if flags.all() or not flags.any():
                return _Column(None, b"true" if len(flags) and flags[0] else b"false")
            return _Column(np.where(flags, b"true", b"false").astype(object))
        values = self.columns.number(name) if kind == "number" else self.columns.text(name)
        if values is None:
            return _Column(None, b"null")
        literals = (_number_literals(values[rows]) if kind == "number"
                    else _text_literals(values[rows], self.errors))
        written = self.columns.written(name) if kind == "number" else None
        if written is not None:  # censored readings, as the lab wrote them
            shown = written[rows]
            here = pd.notna(shown)
            if here.any():
                literals = _Column(literals.array(len(rows)).copy())
                literals.literals[here] = _text_literals(shown[here], self.errors).array(int(here.sum()))
        return literals


def states(columns: list[np.ndarray]) -> tuple[np.ndarray, np.ndarray]:
    """(first index of each distinct state, state of each row) for rows described by int columns."""
    return distinct_rows(np.stack(columns, axis=1).astype(np.int8))


class _Group:
    """Rows of a block that share one piece of their lines: a template filled once a row,
    placed at `slot` of each of those rows' lines (list items get a separator unless first)."""

    def __init__(self, slot: int, rows: np.ndarray, template: tuple[list[str], list], listed: bool):
        self.slot, self.rows, self.template, self.listed = slot, rows, template, listed


class _Block:
    """One block of rows: literals of each column once, and the groups that make its lines."""

    def __init__(self, literals: _Literals, rows: np.ndarray):
        self.literals, self.rows, self.errors = literals, rows, literals.errors
        self.raw: dict = {}  # per-row texts the records' own fields take (grade, level, ...)
        self.groups: list[_Group] = []
        self.whole: dict = {}  # (kind, name) -> literals of every row of the block, once converted

    def literal(self, kind: str, name: str, local: np.ndarray) -> _Column:
        """Literals of these rows only: many columns are read by a few rows' reasons."""
        if kind == "raw":
            return self.raw[name].take(local)
        if (kind, name) in self.whole:  # reasons and clauses repeat the record's own values
            return self.whole[kind, name].take(local)
        literals = self.literals.get(kind, name, self.rows[local])
        if len(local) == len(self.rows):
            self.whole[kind, name] = literals
        return literals

    def add(self, slot: int, local: np.ndarray, template: tuple[list[str], list], listed: bool = False) -> None:
        self.groups.append(_Group(slot, local, template, listed))

    def _filled(self, template: tuple[list[str], list], local: np.ndarray, lead: str):
        """The template's text for each of these rows: one C-level %-format call a row, on bytes
        (bytes formatting finds each `%` with memchr; str formatting reads the form a character
        at a time, which for forms of mostly fixed text costs a third more). A literal all these
        rows share goes into the form; the form is the whole text when no literal differs."""
        chunks, wanted = template
        parts, columns = [(lead + chunks[0]).encode("utf-8", self.errors)], []
        for (kind, name), chunk in zip(wanted, chunks[1:]):
            column, text = self.literal(kind, name, local), chunk.encode("utf-8", self.errors)
            if column.same is not None:
                parts[-1] += column.same + text
            else:
                columns.append(column.literals.tolist())
                parts.append(text)
        if not columns:
            return parts[0]
        form = b"%s".join(part.replace(b"%", b"%%") for part in parts)
        return [form % args for args in zip(*columns)]

    def text(self, lists: list[range]) -> list[bytes]:
        """Lay the pieces out in line order and join them, JOINED_ROWS lines at a time.

        Groups are placed in slot order, so each row's next piece goes after the pieces it
        already has: a running count a row gives every piece its place in one flat array
        (no line is built by repeated concatenation, and no rows x slots matrix is made). The
        first item of each list (reasons, caveats, gaps) in a row is written without the separator.
        Joined a few megabytes at a time, the memory of one join is reused by the next; a
        block's hundred megabytes at once would be new pages each time (half the join's cost).
        """
        n = len(self.rows)
        groups = sorted(self.groups, key=lambda group: group.slot)  # stable: rated and unrated parts keep apart
        count = np.zeros(n, dtype=np.int64)
        for group in groups:
            count[group.rows] += 1
        starts = np.cumsum(count) - count  # where each row's first piece goes
        place = starts.copy()
        flat = np.empty(int(count.sum()), dtype=object)
        listed = np.zeros((len(lists), n), dtype=bool)  # a row has an item in the list already
        for group in groups:
            at = place[group.rows]
            place[group.rows] += 1
            if not group.listed:
                flat[at] = self._filled(group.template, group.rows, "")
                continue
            within = next(k for k, span in enumerate(lists) if group.slot in span)
            later = listed[within, group.rows]
            listed[within, group.rows] = True
            for lead, mask in (("", ~later), (", ", later)):
                if mask.any():
                    flat[at[mask]] = self._filled(group.template, group.rows[mask], lead)
        pieces = flat.tolist()
        cuts = starts[::JOINED_ROWS].tolist() + [len(pieces)]
        return [b"".join(pieces[a:b]) for a, b in zip(cuts, cuts[1:])]


def _split_at_lists(template: tuple[list[str], list]) -> tuple[list, list[str]]:
    """A record skeleton cut where its lists (reasons, caveats, gaps) go: the parts, the list names;
    the last part ends the line."""
    chunks, wanted = template
    parts, names, start = [], [], 0
    for k, (kind, name) in enumerate(wanted):
        if kind == "list":
            parts.append((chunks[start:k + 1], wanted[start:k]))
            names.append(name)
            start = k + 1
    parts.append((chunks[start:-1] + [chunks[-1] + "\n"], wanted[start:]))
    return parts, names


class _Writer:
    def __init__(self, batch: GradedBatch, form: str = FULL, errors: str = "strict"):
        if form not in FORMS:
            raise ValueError(f"no record form {form!r}; expected one of {', '.join(FORMS)}")
        self.batch, self.form, self.errors = batch, form, errors
        self.literals = _Literals(batch.columns, errors)
        self.out = batch.outcome
        self.templates: dict = {}  # (kind, index, state...) -> template of a reason, gap or caveat
        self.skeletons: dict = {}
        rules, top = len(self.out.slots), len(batch.ruleset.grades) - 1
        self.list_sizes = {"reasons": top * rules, "caveats": self.out.caveats.shape[1], "gaps": rules}
        self.list_slots: dict = {}  # list name -> its items' slots in the line, set with the first skeleton
        carried = sorted(batch.forecast_rows.items())  # the rows whose records carry forecasts, in order
        self.forecast_rows = np.array([row for row, _ in carried], dtype=np.int64)
        self.forecast_texts = [", ".join(dumps(f.to_record()) for f in found).encode("utf-8", errors)
                               for _, found in carried]
        self.part_slots: list = []  # skeleton part p -> its slot

    def _reason_state(self, j: int, rows: np.ndarray) -> list[np.ndarray]:
        """What decides the shape of slot j's reason: final and raw level, capping caveat, clauses."""
        out, rs = self.out, self.batch.ruleset
        final, raw = out.final[rows, j], out.raw[rows, j]
        columns = [final, raw]
        rule = out.slots[j].rule
        capped_by = np.full(len(rows), -1, dtype=np.int8)
        for k in reversed(range(len(rs.caveats))):
            cap = rs.caveats[k].cap
            if cap is not None and rule.reads & cap.measures:
                capped_by[out.capping[rows, k] & (final == cap.level) & (raw != final)] = k
        columns.append(capped_by)
        if j in out.leaves:
            members, found = out.leaves[j]
            at = np.searchsorted(members, rows)
            for truth, known in found:
                columns.append(truth[at].astype(np.int8) + 2 * known[at].astype(np.int8))
        return columns

    def _by_state(self, block: _Block, local: np.ndarray, key: tuple, columns: list, piece, slot) -> None:
        """Add list items for these rows, grouped by state (the int columns): each state's
        template is built once, from its first row, by `piece(row, values)`, a record class;
        `slot(state)` says where in the line it goes."""
        rows = block.rows[local]
        first, state = states(columns)
        for s, rep in enumerate(rows[first]):
            found = tuple(int(c[first[s]]) for c in columns)
            if key + found not in self.templates:
                values = _TemplateValues()
                self.templates[key + found] = _template(dumps(piece(int(rep), values).to_record(self.form)), values)
            block.add(slot(found), local[state == s], self.templates[key + found], True)

    def _reasons(self, block: _Block, j: int, local: np.ndarray) -> None:
        """Slot j's reasons, listed highest grade first, then in rule order."""
        top, base, rules = len(self.batch.ruleset.grades) - 1, self.list_slots["reasons"].start, len(self.out.slots)
        self._by_state(block, local, ("reason", j), self._reason_state(j, block.rows[local]),
                       lambda rep, values: reason_at(self.batch, rep, j, values),
                       lambda found: base + (top - found[0]) * rules + j)  # found[0]: the final level

    def _gaps(self, block: _Block, j: int, local: np.ndarray) -> None:
        self._by_state(block, local, ("gap", j), gap_states(self.batch, j, block.rows[local]),
                       lambda rep, values: gap_at(self.batch, rep, j, values),
                       lambda found: self.list_slots["gaps"].start + j)

    def _caveats(self, block: _Block, k: int, local: np.ndarray) -> None:
        """Caveat k's notes: one shape, or, for a cap whose `unless` may go unchecked, one
        shape per pattern of the inputs that exception lacked."""
        rows = block.rows[local]
        columns = [np.zeros(len(rows), dtype=bool)]
        caveats = self.batch.ruleset.caveats
        if k < len(caveats) and caveats[k].cap is not None and caveats[k].cap.unless is not None:
            unchecked = self.out.unchecked[rows, k]
            columns = [unchecked] + [self._missing(name)[rows] & unchecked
                                     for name in condition_inputs(caveats[k].cap.unless)]
        self._by_state(block, local, ("caveat", k), columns, lambda rep, values: caveat_at(self.batch, rep, k, values),
                       lambda found: self.list_slots["caveats"].start + k)

    def _missing(self, name: str) -> np.ndarray:
        """Each row's missing cell of an input (all missing when the column is absent), found once."""
        return self.batch.columns.missing(name)

    def _skeleton(self, rep: int, unrated: bool) -> list:
        """The record's own parts around its lists, once for rated and once for unrated rows."""
        if unrated not in self.skeletons:
            values = _TemplateValues()
            result = build_result(self.batch, rep, values)
            pieces = {name: (_Piece(values.slot("list", name)),) for name in ("reasons", "caveats", "gaps")}
            result = replace(result, grade=values.slot("raw", "grade"), level=values.slot("raw", "level"),
                             reasons=pieces["reasons"], caveats=pieces["caveats"],
                             not_evaluated=pieces["gaps"],
                             unrated_because=values.slot("raw", "unrated_because") if unrated else None,
                             forecasts=(_Piece(values.slot("raw", "forecasts")),) if self.batch.forecasts_made
                             else None)
            parts, names = _split_at_lists(_template(dumps(result.to_record(self.form)), values))
            if not self.list_slots:
                self._lay_out(names)
            elif names != list(self.list_slots):
                raise RuntimeError("rated and unrated records list their reasons, caveats and gaps in another order")
            self.skeletons[unrated] = parts
        return self.skeletons[unrated]

    def _lay_out(self, names: list[str]) -> None:
        """Slots of a line, in order: part 0, the first list's items, part 1, ..., the last part."""
        slot = 0
        for name in names:
            self.part_slots.append(slot)
            self.list_slots[name] = range(slot + 1, slot + 1 + self.list_sizes[name])
            slot = self.list_slots[name].stop
        self.part_slots.append(slot)

    def block_text(self, rows: np.ndarray) -> list[bytes]:
        out, rs = self.out, self.batch.ruleset
        block = _Block(self.literals, rows)
        level = out.level[rows]
        unrated = level < 0
        names = list(rs.grades) + [UNRATED]
        block.raw["grade"] = _Column(np.array([json.dumps(n).encode() for n in names], dtype=object)[level])
        block.raw["level"] = _Column(np.array([str(k).encode() for k in range(len(rs.grades))] + [b"null"],
                                              dtype=object)[level])
        because = np.full(len(rows), b"", dtype=object)
        if unrated.any():
            because[unrated] = self._unrated_sentences(rows[unrated])
        block.raw["unrated_because"] = _Column(because)
        block.raw["forecasts"] = self._forecast_items(rows)
        for is_unrated in (False, True):
            members = np.flatnonzero(unrated == is_unrated)
            if len(members):
                parts = self._skeleton(int(rows[members[0]]), is_unrated)
                for slot, part in zip(self.part_slots, parts):
                    block.add(slot, members, part)

        final = np.ascontiguousarray(out.final[rows].T)  # a rule's outcomes side by side: one read a rule
        for j in range(len(final)):
            fired = np.flatnonzero(final[j] > 0)
            if len(fired):
                self._reasons(block, j, fired)
            gaps = np.flatnonzero(final[j] == NOT_EVALUATED)
            if len(gaps):
                self._gaps(block, j, gaps)
        caveats = np.ascontiguousarray(out.caveats[rows].T)
        for k in range(len(caveats)):
            noted = np.flatnonzero(caveats[k])
            if len(noted):
                self._caveats(block, k, noted)
        return block.text(list(self.list_slots.values()))

    def _forecast_items(self, rows: np.ndarray) -> _Column:
        """The items of each row's `forecasts` list: empty but for each unit's latest sample."""
        carriers, texts = self.forecast_rows, self.forecast_texts
        if not len(rows) or not len(carriers):  # rows: a block, in order
            return _Column(None, b"")
        items = np.full(len(rows), b"", dtype=object)
        start, stop = np.searchsorted(carriers, [rows[0], rows[-1] + 1])
        inside = carriers[start:stop]
        at = np.searchsorted(rows, inside)
        here = rows[np.minimum(at, len(rows) - 1)] == inside
        items[at[here]] = np.array(texts[start:stop], dtype=object)[here]
        return _Column(items)

    def _unrated_sentences(self, members: np.ndarray) -> np.ndarray:
        representatives, group_of, _ = record_shape_groups(self.batch, members)
        table = [json.dumps(self.batch.result(int(rep)).unrated_because,
                            ensure_ascii=False).encode("utf-8", self.errors) for rep in representatives]
        return np.array(table, dtype=object)[group_of]


def block_renderer(batch: GradedBatch, form: str = FULL, errors: str = "strict"):
    """A function giving the JSON Lines of rows start..stop of the batch as UTF-8 bytes (a list of
    pieces to write in order): blocks can be rendered in any order, or by two processes.

    `form` is the record form (records.FORMS); `errors` the encoder's handling of a lone
    surrogate (a JSON Lines input may carry one): "strict" refuses it, as a UTF-8 text stream would.
    """
    writer = _Writer(batch, form, errors)
    return lambda start, stop: writer.block_text(np.arange(start, stop))


def jsonl_bytes(batch: GradedBatch, block: int = 100_000, form: str = FULL, errors: str = "strict"):
    """Yield the JSON Lines of the batch as UTF-8 bytes, a block of rows at a time, in input order
    (`form`, `errors`: as block_renderer's)."""
    render = block_renderer(batch, form, errors)
    n = len(batch)
    for start in range(0, n, block):
        yield from render(start, min(n, start + block))


def jsonl_lines(batch: GradedBatch, block: int = 100_000, form: str = FULL):
    """Yield the JSON Lines text of the batch, a block of rows at a time, in input order.

    `form` is the record form (records.FORMS).
    """
    for text in jsonl_bytes(batch, block, form, "surrogatepass"):  # str in, the same str out
        yield text.decode("utf-8", "surrogatepass")


def write_jsonl(batch: GradedBatch, stream, form: str = FULL) -> None:
    """Write the batch's records to a text stream; use write_jsonl_bytes for a binary one."""
    for text in jsonl_lines(batch, form=form):
        stream.write(text)


def write_jsonl_bytes(batch: GradedBatch, stream, form: str = FULL) -> None:
    """Write the batch's records as UTF-8 to a binary stream: no decoding and encoding again of each block."""
    for data in jsonl_bytes(batch, form=form):
        stream.write(data)
