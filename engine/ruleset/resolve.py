"""Read a rule-set file and the files it extends, and merge them into one resolved document.

Each file is schema-checked on its own, so an error points at the file and line that
holds it. Merging keeps, for every rule, caveat and lubricant, the document it came
from: its marks for later errors, its `units:` for converting its limits.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path

from sumpwise.vocabulary.problems import InvalidFile, Problem
from sumpwise.ruleset.schema import schema_problems
from sumpwise.ruleset.yaml_source import YamlDocument, load_yaml

DEFAULT_GRADES = ("normal", "watch", "alert", "urgent")


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
    lubricants: dict = field(default_factory=dict)
    classes: dict = field(default_factory=dict)
    rules: dict = field(default_factory=dict)
    caveats: dict = field(default_factory=dict)
    measures: dict = field(default_factory=dict)
    noise_margins: dict = field(default_factory=dict)
    fields: dict = field(default_factory=dict)
    examples: list = field(default_factory=list)
    files: list = field(default_factory=list)
    class_places: dict = field(default_factory=dict)  # class name -> where it was last declared


def resolve_ruleset(path: Path) -> Resolved:
    """Load `path` and everything it extends; raise InvalidFile with every problem found."""
    problems: list[Problem] = []
    resolved = _resolve(Path(path), (), {}, problems)
    if problems or resolved is None:
        raise InvalidFile(problems)
    return resolved


def _extends_list(doc: YamlDocument) -> list[tuple[str, tuple]]:
    value = doc.data.get("extends", [])
    if isinstance(value, str):
        return [(value, ("extends",))]
    return [(item, ("extends", i)) for i, item in enumerate(value)]


def _resolve(path: Path, stack: tuple, cache: dict, problems: list[Problem]) -> Resolved | None:
    key = path.resolve()
    if key in cache:
        return cache[key]
    try:
        doc = load_yaml(path)
    except InvalidFile as exc:
        problems.extend(exc.problems)
        return None
    if not isinstance(doc.data, dict):
        problems.append(doc.problem((), "a rule set must be a mapping with at least `ruleset` and `version`", code="R001"))
        return None
    own_problems = schema_problems(doc)
    if own_problems:
        problems.extend(own_problems)
        return None

    merged = Resolved(top=doc)
    for target, at in _extends_list(doc):
        parent_path = Path(os.path.normpath(path.parent / target))
        if parent_path.resolve() in stack + (key,):
            chain = " -> ".join(str(p) for p in stack + (key, parent_path.resolve()))
            problems.append(doc.problem(at, f"extends makes a cycle: {chain}", code="R002"))
            continue
        if not parent_path.is_file():
            problems.append(doc.problem(at, f"extends names '{target}', but there is no file {parent_path}", code="R003"))
            continue
        parent = _resolve(parent_path, stack + (key,), cache, problems)
        if parent is not None:
            _overlay(merged, parent, problems)
    _add_own(merged, doc, problems)
    cache[key] = merged
    return merged


def _overlay(merged: Resolved, parent: Resolved, problems: list[Problem]) -> None:
    """Lay an already-resolved parent over what earlier parents gave."""
    if merged.files and merged.grades != parent.grades:
        problems.append(parent.top.problem(("grades",), _ladder_mismatch(merged.grades, parent.grades), code="R005"))
    merged.grades = parent.grades
    merged.header.update(parent.header)
    merged.header_marks.update(parent.header_marks)
    merged.lubricants.update(parent.lubricants)
    merged.measures.update(parent.measures)
    merged.noise_margins.update(parent.noise_margins)
    merged.fields.update(parent.fields)
    for name, rules in parent.classes.items():
        target = merged.classes.setdefault(name, {})
        target.update(rules)
    merged.class_places.update(parent.class_places)
    merged.rules.update(parent.rules)
    merged.caveats.update(parent.caveats)
    merged.files.extend(f for f in parent.files if f not in merged.files)


def _ladder_mismatch(a: tuple, b: tuple) -> str:
    return (f"all files of an extends chain must share one grade ladder; this file has "
            f"[{', '.join(b)}] but another has [{', '.join(a)}]")


def _by_id(items: list, doc: YamlDocument, base: tuple, problems: list[Problem], what: str) -> dict:
    """Items of one list by id, refusing an id given twice in the same list."""
    seen: dict[str, Placed] = {}
    for i, item in enumerate(items):
        placed = Placed(item, doc, base + (i,))
        ident = item["id"]
        if ident in seen:
            first = doc.mark(seen[ident].path + ("id",))
            problems.append(placed.problem(f"{what} id '{ident}' is used twice in this list "
                                           f"(first at line {first.line}); ids must be unique", ("id",), code="R004"))
            continue
        seen[ident] = placed
    return seen


def _add_own(merged: Resolved, doc: YamlDocument, problems: list[Problem]) -> None:
    data = doc.data
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
        merged.lubricants[code] = Placed(lub, doc, ("lubricants", code))
    for name, spec in data.get("measures", {}).items():
        merged.measures[name] = Placed(spec, doc, ("measures", name))
    for name, margin in data.get("noise_margins", {}).items():
        merged.noise_margins[name] = Placed(margin, doc, ("noise_margins", name))
    for i, name in enumerate(data.get("fields", [])):
        merged.fields[name] = Placed(name, doc, ("fields", i))

    for name, spec in data.get("classes", {}).items():
        merged.class_places[name] = Placed(spec, doc, ("classes", name))
        target = merged.classes.setdefault(name, {})
        for i, dropped in enumerate(spec.get("drop", [])):
            if dropped in target:
                del target[dropped]
            else:
                problems.append(doc.problem(("classes", name, "drop", i),
                                            f"drop names rule '{dropped}', but no extended rule set gives "
                                            f"class '{name}' a rule with that id", code="R006"))
        own = _by_id(spec.get("rules", []), doc, ("classes", name, "rules"), problems, "rule")
        target.update(own)
    merged.rules.update(_by_id(data.get("rules", []), doc, ("rules",), problems, "rule"))
    merged.caveats.update(_by_id(data.get("caveats", []), doc, ("caveats",), problems, "caveat"))
    merged.examples = [Placed(item, doc, ("examples", i)) for i, item in enumerate(data.get("examples", []))]
    merged.top = doc
    merged.files.append(doc.file)
