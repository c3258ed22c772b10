"""Read a rule-set file and the files it extends, and merge them into one resolved document.

Each file is schema-checked on its own, so an error points at the file and line that
holds it. Merging keeps, for every rule, caveat and lubricant, the document it came
from: its marks for later errors, its `units:` for converting its limits.
"""

from __future__ import annotations

import difflib
import os
from dataclasses import dataclass, field, replace
from pathlib import Path

from sumpwise.vocabulary.measures import INPUT_MEASURES, KNOWN_FIELDS, UNIT_FAMILY, unit_key
from sumpwise.vocabulary.problems import InvalidFile, Problem
from sumpwise.ruleset.schema import piece_of, schema_findings
from sumpwise.ruleset.yaml_source import YamlDocument, load_yaml

DEFAULT_GRADES = ("normal", "watch", "alert", "urgent")
# Files in one `extends` chain, the top one included: a site file over a few shipped ones is
# 2 or 3 deep; a chain of a thousand files would end in a RecursionError, not a problem.
MAX_EXTENDS_DEPTH = 32


@dataclass(frozen=True)
class Placed:
    """A piece of a rule-set document and the document and path it was written at."""

    data: object
    doc: YamlDocument
    path: tuple

    def problem(self, message: str, sub: tuple = (), key: bool = False, **extra) -> Problem:
        return self.doc.problem(self.path + tuple(sub), message, key=key, **extra)

    @property
    def units(self) -> dict:
        return self.doc.data.get("units", {}) if isinstance(self.doc.data, dict) else {}


@dataclass
class Resolved:
    """The merged rule set before compiling: plain data with provenance."""

    top: YamlDocument
    header: dict = field(default_factory=dict)
    header_marks: dict = field(default_factory=dict)
    grades: tuple = DEFAULT_GRADES
    lubricants: dict = field(default_factory=dict)  # code -> its Placed entries, the chain's oldest first
    classes: dict = field(default_factory=dict)
    rules: dict = field(default_factory=dict)
    caveats: dict = field(default_factory=dict)
    measures: dict = field(default_factory=dict)
    # file -> {declared measure: its unit} as that file and its parents declare it: the unit
    # the file's own limits on the measure are written in
    declared_units: dict = field(default_factory=dict)
    # (rule, the inherited rule of the same id it replaces), for the compiler's W016
    replaced: list = field(default_factory=list)
    noise_margins: dict = field(default_factory=dict)
    fields: dict = field(default_factory=dict)
    examples: list = field(default_factory=list)
    files: list = field(default_factory=list)
    class_places: dict = field(default_factory=dict)  # class name -> where it was last declared
    class_drops: dict = field(default_factory=dict)  # class name -> ids of top-level rules it drops
    # A file of the chain could not be read, or pieces were left out for schema errors: checks
    # that need the whole chain (drop, a class's base) would only report what that hides.
    incomplete: bool = False


def resolve_with_problems(path: Path) -> tuple[Resolved | None, list[Problem]]:
    """Load `path` and everything it extends, keeping on past problems so one run finds them all.

    Pieces with schema errors are left out of the merge (and so of the later checks); a
    file that cannot be read at all is a note naming what it hides. None only when the
    top file itself cannot be read as a rule set.
    """
    problems: list[Problem] = []
    resolved = _resolve(Path(path), (), {}, problems)
    return resolved, problems


def _extends_list(data: dict) -> list[tuple[str, tuple]]:
    value = data.get("extends", [])
    if isinstance(value, str):
        return [(value, ("extends",))]
    return [(item, ("extends", i)) for i, item in enumerate(value)]


def _sanitized(doc: YamlDocument, spoiled: set) -> YamlDocument:
    """The document without the keyed pieces that broke the schema (listed ones are skipped by index)."""
    if not spoiled:
        return doc
    data = dict(doc.data)
    for piece in sorted(spoiled, key=len):
        head = piece[0]
        if len(piece) == 1:
            data.pop(head, None)
        elif head in ("classes", "lubricants", "measures", "units", "noise_margins") and isinstance(data.get(head), dict):
            if head == "classes" and len(piece) == 4:
                continue  # one rule of a class: skipped by index
            data[head] = {k: v for k, v in data[head].items() if k != piece[1]}
    return replace(doc, data=data)


def _unit_readers(data: dict, spoiled: set) -> set:
    """The pieces whose limits are written in a unit the file's `units:` failed to give: without it
    their numbers cannot be read (0.05 under `water: percent` is not 0.05 ppm), so they are left
    out of the later checks with the unit's error, not checked, and warned about, in the wrong unit."""
    if ("units",) in spoiled:
        lost = set(UNIT_FAMILY)
    else:
        lost = {piece[1] for piece in spoiled if piece[0] == "units" and len(piece) == 2}
    if not lost:
        return set()
    pieces = set()
    classes = data.get("classes") if isinstance(data.get("classes"), dict) else {}
    for name, spec in classes.items():
        rules = spec.get("rules") if isinstance(spec, dict) else None
        for i, rule in enumerate(rules if isinstance(rules, list) else []):
            if _reads(rule) & lost:
                pieces.add(("classes", name, "rules", i))
    for key in ("rules", "caveats"):
        items = data.get(key) if isinstance(data.get(key), list) else []
        pieces |= {(key, i) for i, item in enumerate(items) if _reads(item) & lost}
    for key in ("lubricants", "noise_margins"):
        entries = data.get(key) if isinstance(data.get(key), dict) else {}
        pieces |= {(key, name) for name, entry in entries.items()
                   if (set(entry) if key == "lubricants" and isinstance(entry, dict) else {unit_key(name)}) & lost}
    return pieces


def _reads(item) -> set:
    """The `units:` keys of every measure a rule or caveat names, at any depth, as written."""
    found = set()
    if isinstance(item, dict):
        for key, value in item.items():
            if key == "measure" and isinstance(value, str):
                found.add(unit_key(value))
            elif key == "measures" and isinstance(value, list):
                found |= {unit_key(m) for m in value if isinstance(m, str)}
            else:
                found |= _reads(value)
    elif isinstance(item, list):
        for value in item:
            found |= _reads(value)
    return found


def _hidden(doc: YamlDocument, at: tuple, target: str, why: str) -> Problem:
    return doc.problem(at, f"'{target}' {why}, so nothing in it was checked, and problems in this file that "
                           f"depend on it (a dropped rule, a class it gives) are not reported",
                       severity="note", code="R009",
                       hint="fix that file first; the next run checks what it hides")


def _resolve(path: Path, stack: tuple, cache: dict, problems: list[Problem]) -> Resolved | None:
    key = path.resolve()
    if key in cache:
        return cache[key]
    try:
        doc = load_yaml(path, keep_going=True)
    except InvalidFile as exc:
        problems.extend(exc.problems)
        return None
    problems.extend(doc.problems)
    if not isinstance(doc.data, dict):
        problems.append(doc.problem((), "a rule set must be a mapping with at least `ruleset` and `version`", code="R001"))
        return None
    columns = set(doc.data) & (set(INPUT_MEASURES) | set(KNOWN_FIELDS))
    if "ruleset" not in doc.data and len(columns) * 2 >= len(doc.data):
        problems.append(doc.problem((), f"this is not a rule set: its keys are sample columns "
                                        f"({', '.join(sorted(columns)[:4])}, ...), as in a column map",
                                    code="R001", hint="give the column map with --columns and the rule set with --rules"))
        return None
    own_problems, spoiled = schema_findings(doc)
    problems.extend(own_problems)
    # a value the YAML problems are about (a key given twice, 0x10, .inf) leaves its piece out too
    spoiled |= {piece_of(path) for path in doc.spoiled} - {()}
    spoiled |= _unit_readers(doc.data, spoiled)
    doc_clean = _sanitized(doc, spoiled)
    skipped = {piece for piece in spoiled if piece[0] in ("rules", "caveats", "examples", "fields")
               or (piece[0] == "classes" and len(piece) == 4)}

    doc = doc_clean  # same file and marks; pieces that broke the schema are gone
    merged = Resolved(top=doc, incomplete=bool(spoiled))
    for target, at in _extends_list(doc_clean.data):
        parent_path = Path(os.path.normpath(path.parent / target))
        try:
            parent_path.resolve().is_file()
        except (OSError, ValueError) as exc:  # a name too long, or holding a NUL byte
            problems.append(doc.problem(at, f"extends names '{target[:80]}', which cannot be a file name: "
                                            f"{getattr(exc, 'strerror', None) or exc}", code="R003"))
            continue
        if len(stack) + 2 > MAX_EXTENDS_DEPTH:
            problems.append(doc.problem(at, f"extends goes more than {MAX_EXTENDS_DEPTH} files deep here "
                                            f"(a file extends one that extends another, and so on)", code="R010",
                                        hint="extend fewer files in a row: merge the middle ones"))
            merged.incomplete = True
            continue
        if parent_path.resolve() in stack + (key,):
            chain = " -> ".join(str(p) for p in stack + (key, parent_path.resolve()))
            problems.append(doc.problem(at, f"extends makes a cycle: {chain}", code="R002"))
            continue
        if not parent_path.is_file():
            near = [str(parent_path) + ext for ext in (".yaml", ".yml") if Path(str(parent_path) + ext).is_file()]
            problems.append(doc.problem(at, f"extends names '{target}', but there is no file {parent_path}", code="R003",
                                        hint=f"did you mean '{target}{near[0][len(str(parent_path)):]}'? (the rules "
                                             f"that file would give were not checked)" if near else
                                        "the rules that file would give were not checked"))
            merged.incomplete = True
            continue
        parent = _resolve(parent_path, stack + (key,), cache, problems)
        if parent is None:
            problems.append(_hidden(doc, at, target, "could not be read as a rule set"))
            merged.incomplete = True
        else:
            _overlay(merged, parent, problems)
    _add_own(merged, doc, doc.data, skipped, problems)
    cache[key] = merged
    return merged


def _overlay(merged: Resolved, parent: Resolved, problems: list[Problem]) -> None:
    """Lay an already-resolved parent over what earlier parents gave."""
    if merged.files and merged.grades != parent.grades:
        problems.append(parent.top.problem(("grades",), _ladder_mismatch(merged.grades, parent.grades), code="R005"))
    merged.grades = parent.grades
    merged.incomplete = merged.incomplete or parent.incomplete
    merged.header.update(parent.header)
    merged.header_marks.update(parent.header_marks)
    for code, entries in parent.lubricants.items():
        # the parent's view of the code comes last; an entry both have (a shared grandparent) once
        earlier = tuple(e for e in merged.lubricants.get(code, ()) if not any(e is p for p in entries))
        merged.lubricants[code] = earlier + entries
    merged.measures.update(parent.measures)
    merged.declared_units.update(parent.declared_units)
    merged.noise_margins.update(parent.noise_margins)
    merged.fields.update(parent.fields)
    for name, rules in parent.classes.items():
        target = merged.classes.setdefault(name, {})
        target.update(rules)
    merged.class_places.update(parent.class_places)
    for name, ids in parent.class_drops.items():
        merged.class_drops.setdefault(name, set()).update(ids)
    merged.rules.update(parent.rules)
    merged.caveats.update(parent.caveats)
    merged.replaced.extend(pair for pair in parent.replaced if not any(pair[0] is p[0] for p in merged.replaced))
    merged.files.extend(f for f in parent.files if f not in merged.files)


def _ladder_mismatch(a: tuple, b: tuple) -> str:
    return (f"all files of an extends chain must share one grade ladder; this file has "
            f"[{', '.join(b)}] but another has [{', '.join(a)}]")


def _by_id(items: list, doc: YamlDocument, base: tuple, problems: list[Problem], what: str,
           skipped: set = frozenset()) -> dict:
    """Items of one list by id, refusing an id given twice in the same list."""
    seen: dict[str, Placed] = {}
    for i, item in enumerate(items):
        if base + (i,) in skipped:
            continue
        placed = Placed(item, doc, base + (i,))
        ident = item["id"]
        if ident in seen:
            first = doc.mark(seen[ident].path + ("id",))
            problems.append(placed.problem(f"{what} id '{ident}' is used twice in this list "
                                           f"(first at line {first.line}); ids must be unique", ("id",), code="R004"))
            continue
        seen[ident] = placed
    return seen


def _add_own(merged: Resolved, doc: YamlDocument, data: dict, skipped: set, problems: list[Problem]) -> None:
    grades = tuple(data.get("grades", DEFAULT_GRADES))
    if merged.files and grades != merged.grades:
        where = ("grades",) if "grades" in data else ("ruleset",)
        problems.append(doc.problem(where, _ladder_mismatch(merged.grades, grades), code="R005"))
    merged.grades = grades
    for name in ("ruleset", "version", "title", "notice", "description"):
        if name in data:
            merged.header[name] = data[name]
            merged.header_marks[name] = Placed(data[name], doc, (name,))
    for code, lub in data.get("lubricants", {}).items():
        merged.lubricants[code] = merged.lubricants.get(code, ()) + (Placed(lub, doc, ("lubricants", code)),)
    for name, spec in data.get("measures", {}).items():
        merged.measures[name] = Placed(spec, doc, ("measures", name))
    for name, margin in data.get("noise_margins", {}).items():
        merged.noise_margins[name] = Placed(margin, doc, ("noise_margins", name))
    for i, name in enumerate(data.get("fields", [])):
        if ("fields", i) not in skipped:
            merged.fields[name] = Placed(name, doc, ("fields", i))

    _ClassBuilder(merged, doc, data.get("classes", {}), skipped, problems).build_all()
    own_rules = _by_id(data.get("rules", []), doc, ("rules",), problems, "rule", skipped)
    merged.replaced.extend((rule, merged.rules[ident]) for ident, rule in own_rules.items() if ident in merged.rules)
    merged.rules.update(own_rules)
    merged.caveats.update(_by_id(data.get("caveats", []), doc, ("caveats",), problems, "caveat", skipped))
    merged.examples = [Placed(item, doc, ("examples", i)) for i, item in enumerate(data.get("examples", []))
                       if ("examples", i) not in skipped]
    merged.top = doc
    merged.files.append(doc.file)
    merged.declared_units[doc.file] = {name: p.data.get("unit") for name, p in merged.measures.items()}


class _ClassBuilder:
    """One file's classes, each after the class it `extends` (of this file or a parent).

    A class with `extends: other` starts from the other class's rules as resolved so far,
    then any rules it had from a parent rule set, then its `drop`, then its own `rules`.
    """

    def __init__(self, merged: Resolved, doc: YamlDocument, specs: dict, skipped: set, problems: list[Problem]):
        self.merged, self.doc, self.specs, self.skipped, self.problems = merged, doc, specs, skipped, problems
        self.done: set = set()
        self.visiting: list = []

    def build_all(self) -> None:
        for name in self.specs:
            self.build(name)

    def build(self, name: str) -> bool:
        """Resolve class `name` of this file; False when it sits on a cycle of `extends`."""
        if name in self.done:
            return True
        if name in self.visiting:
            return False
        self.visiting.append(name)
        spec = self.specs[name]
        base = spec.get("extends")
        start: dict = {}
        if base is not None:
            start = self._base_rules(name, base)
        self.visiting.pop()
        self.done.add(name)
        self._apply(name, spec, start)
        return True

    def _base_rules(self, name: str, base: str) -> dict:
        at = ("classes", name, "extends")
        if base in self.specs and not self.build(base):
            cycle = " -> ".join([*self.visiting[self.visiting.index(base):], base])
            self.problems.append(self.doc.problem(at, f"class '{name}' extends '{base}', which leads back to it: "
                                                      f"a cycle ({cycle})", code="R008",
                                                  hint="a class can build on another, never on itself"))
            return {}
        if base not in self.merged.classes:
            if not self.merged.incomplete:
                known = sorted(set(self.merged.classes) | set(self.specs))
                close = difflib.get_close_matches(base, known, n=1)
                self.problems.append(self.doc.problem(
                    at, f"class '{name}' extends '{base}', but neither this file nor the rule sets it extends give "
                        f"a class '{base}' (classes: {', '.join(known) or 'none'})", code="R007",
                    hint=f"did you mean '{close[0]}'?" if close else ""))
            return {}
        return dict(self.merged.classes[base])

    def _apply(self, name: str, spec: dict, start: dict) -> None:
        doc = self.doc
        self.merged.class_places[name] = Placed(spec, doc, ("classes", name))
        target = {**start, **self.merged.classes.get(name, {})}
        for i, dropped in enumerate(spec.get("drop", [])):
            top = dropped in self.merged.rules or any(
                isinstance(rule, dict) and rule.get("id") == dropped for rule in self.doc.data.get("rules", []))
            if top:  # a top-level rule: this class no longer takes it
                self.merged.class_drops.setdefault(name, set()).add(dropped)
            if dropped in target:
                del target[dropped]
            elif not top and not self.merged.incomplete:
                gives = f"class '{spec['extends']}' or " if "extends" in spec else ""
                close = difflib.get_close_matches(dropped, sorted(target), n=1)
                self.problems.append(doc.problem(
                    ("classes", name, "drop", i), f"drop names rule '{dropped}', but neither {gives}an extended rule "
                    f"set gives class '{name}' a rule with that id, nor is it a top-level rule", code="R006",
                    hint=f"did you mean '{close[0]}'?" if close else ""))
        own = _by_id(spec.get("rules", []), doc, ("classes", name, "rules"), self.problems, "rule", self.skipped)
        self.merged.replaced.extend((rule, target[ident]) for ident, rule in own.items() if ident in target)
        target.update(own)
        self.merged.classes[name] = target
