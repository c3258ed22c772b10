"""Safe YAML loading that remembers where every value came from.

Plain loaders forget line numbers and silently keep the last of two equal keys;
both would leave the person writing limits guessing. Here every mapping key and
value keeps its 1-based line and column, and a repeated key is a problem naming
both lines.

A rule set may come from anyone, so loading is bounded whatever the content: the
limits below are checked on the raw text and on the parser's events, before any
value is built, so an alias bomb, a recursive alias or deep nesting ends in a
problem with its line instead of a hang or a RecursionError. Numbers must be
finite and text must be printable: a `.nan` limit would never be crossed, and a
control character would reach a terminal.
"""

from __future__ import annotations

import datetime as dt
import math
import re
from dataclasses import dataclass, field
from pathlib import Path

import yaml

from sumpwise.vocabulary.problems import InvalidFile, Problem, json_path


# Limits for one YAML file (the README's "Limits" section states them). The shipped
# rule sets are under 8 kB, 111 characters a line and 400 values each.
MAX_FILE_BYTES = 1_000_000
MAX_LINE_CHARS = 4_000
MAX_DEPTH = 64
MAX_VALUES = 50_000  # values after expanding every alias: bounds "billion laughs"

# C0 controls but tab, LF and CR; DEL and C1 controls but NEL; lone surrogates; non-characters.
_UNPRINTABLE = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\x7f-\x84\x86-\x9f\ud800-\udfff\ufffe\uffff]")


@dataclass(frozen=True)
class Mark:
    line: int
    column: int


@dataclass(frozen=True)
class YamlDocument:
    """A parsed YAML file: plain data plus the marks of each value and key by path."""

    file: str
    data: object
    value_marks: dict = field(repr=False)
    key_marks: dict = field(repr=False)
    # With keep_going: problems found in values the document still holds (a key given twice keeps
    # its first value, a number YAML 1.1 reads otherwise its YAML 1.1 value), and the paths of
    # those values, so a reader can leave out what they spoil and check the rest in the same run.
    problems: tuple = field(default=(), repr=False)
    spoiled: frozenset = field(default=frozenset(), repr=False)
    # path -> the text of a plain decimal fraction as written (`1.50`, which the value reads as 1.5),
    # for a value compared as text (a field condition), so it is compared as the author wrote it
    written: dict = field(default_factory=dict, repr=False)

    def mark(self, path: tuple, key: bool = False) -> Mark:
        """The mark of `path`, or of its nearest ancestor that has one."""
        marks = self.key_marks if key and path in self.key_marks else self.value_marks
        while path not in marks and path:
            path = path[:-1]
        return marks.get(path, Mark(1, 1))

    def problem(self, path: tuple, message: str, key: bool = False, **extra) -> Problem:
        mark = self.mark(tuple(path), key=key)
        return Problem(self.file, mark.line, mark.column, message, json_path(tuple(path)), **extra)


def _mark(node: yaml.Node) -> Mark:
    # PyYAML marks are 0-based; people count from 1, as PyYAML's own messages do.
    return Mark(node.start_mark.line + 1, node.start_mark.column + 1)


_PLAIN_TAGS = ("tag:yaml.org,2002:map", "tag:yaml.org,2002:seq")


class _TooBig(Exception):
    """A limit crossed while reading events: carries the problem to report."""

    def __init__(self, mark, message: str, code: str):
        self.mark, self.message, self.code = mark, message, code


# libyaml when present: the pure-Python parser is much slower, and loading time is one of
# the bounds. Both give nodes with marks; some error messages differ.
_LOADER = getattr(yaml, "CSafeLoader", yaml.SafeLoader)


def _check_events(text: str) -> None:
    """Walk the parser's events once, counting depth and values with aliases expanded.

    The parser is iterative, so this pass cannot recurse; the composer and the builder
    that follow do recurse and expand aliases, so they run only once this pass found
    the document within MAX_DEPTH and MAX_VALUES (raises _TooBig otherwise).
    """
    open_: list[list] = []  # per open collection: [anchor, values inside, height]
    sizes: dict = {}  # anchor -> (values, height) of the node it names
    total = 0
    for event in yaml.parse(text, Loader=_LOADER):
        if isinstance(event, yaml.CollectionStartEvent):
            if len(open_) >= MAX_DEPTH:
                raise _TooBig(event.start_mark, f"nesting deeper than {MAX_DEPTH} levels", "Y009")
            values, height = 1, 0
            open_.append([event.anchor, 0, 0])
            parent = open_[-2] if len(open_) > 1 else None
        elif isinstance(event, yaml.CollectionEndEvent):
            anchor, inside, height = open_.pop()
            if anchor is not None:
                sizes[anchor] = (inside + 1, height + 1)
            if open_:
                open_[-1][1] += inside  # the collection itself was counted at its start
                open_[-1][2] = max(open_[-1][2], height + 1)
            continue
        elif isinstance(event, yaml.ScalarEvent):
            values, height = 1, 0
            if event.anchor is not None:
                sizes[event.anchor] = (1, 0)
            parent = open_[-1] if open_ else None
        elif isinstance(event, yaml.AliasEvent):
            if any(entry[0] == event.anchor for entry in open_):
                raise _TooBig(event.start_mark, f"the alias *{event.anchor} refers to a value that holds it "
                                                "(a recursive alias)", "Y010")
            values, height = sizes.get(event.anchor, (1, 0))
            if len(open_) + height > MAX_DEPTH:
                raise _TooBig(event.start_mark, f"the alias *{event.anchor} nests values deeper than "
                                                f"{MAX_DEPTH} levels", "Y009")
            parent = open_[-1] if open_ else None
        else:
            continue
        total += values
        if total > MAX_VALUES:
            raise _TooBig(event.start_mark, f"more than {MAX_VALUES:,} values once aliases are expanded "
                                            "(an alias bomb?)", "Y009")
        if parent is not None:
            parent[1] += values
            parent[2] = max(parent[2], height)


class _Builder:
    def __init__(self, file: str, loader):
        self.file = file
        self.loader = loader
        self.value_marks: dict = {}
        self.key_marks: dict = {}
        self.problems: list[Problem] = []
        self.spoiled: set = set()  # paths of the values the problems are about
        self.written: dict = {}  # path -> a plain float's text as written

    def _report(self, problem: Problem, path: tuple) -> None:
        self.problems.append(problem)
        self.spoiled.add(path)

    def build(self, node: yaml.Node, path: tuple):
        self.value_marks[path] = _mark(node)
        if isinstance(node, (yaml.MappingNode, yaml.SequenceNode)) and node.tag not in _PLAIN_TAGS:
            raise yaml.constructor.ConstructorError(
                None, None, f"the tag {node.tag} is not allowed", node.start_mark)
        if isinstance(node, yaml.MappingNode):
            return self._mapping(node, path)
        if isinstance(node, yaml.SequenceNode):
            return [self.build(item, path + (i,)) for i, item in enumerate(node.value)]
        value = self._scalar(node, path)
        if isinstance(value, (dt.date, dt.datetime)):
            return value.isoformat()
        if isinstance(value, float) and not node.style:
            self.written[path] = node.value
        return value

    def _scalar(self, node: yaml.Node, path: tuple, key: bool = False):
        """Construct one scalar, refusing what would mislead later: non-finite numbers, unprintable text."""
        if node.tag == "tag:yaml.org,2002:value":  # YAML 1.1 reads a plain `=` as a "default value" marker
            return node.value
        try:
            value = self.loader.construct_object(node, deep=True)
        except (ValueError, OverflowError) as exc:  # e.g. an integer of more digits than Python converts
            raise yaml.constructor.ConstructorError(None, None, f"cannot be read as a value: {exc}",
                                                    node.start_mark) from None
        if isinstance(value, bytes):
            raise yaml.constructor.ConstructorError(None, None, "binary data is not allowed", node.start_mark)
        mark = _mark(node)
        plain = not node.style and isinstance(node, yaml.ScalarNode)  # None (pure Python) or "" (the C loader)
        if plain and isinstance(value, bool) and node.value.lower() not in ("true", "false"):
            return node.value  # YAML 1.1's yes/no/on/off are text here, as YAML 1.2 and people read them
        if plain and isinstance(value, (int, float)) and not isinstance(value, bool) \
                and (isinstance(value, int) or math.isfinite(value)) and not _DECIMAL.fullmatch(node.value):
            self._report(Problem(
                self.file, mark.line, mark.column,
                f"the number {_short(node.value)} is not written in plain decimal: YAML 1.1 reads it as {value!r} "
                f"(a leading 0 makes it octal, 0x hexadecimal, a colon base 60)", json_path(path), code="Y012",
                hint=COMMA_SPLIT if key else
                "write the number in decimal without leading zeros (200, 0.05), or quote it if it is text"), path)
        if isinstance(value, float) and not math.isfinite(value):
            self._report(Problem(self.file, mark.line, mark.column,
                                 f"a number must be finite, found {node.value!r}", json_path(path), code="Y007"), path)
        elif isinstance(value, int) and not isinstance(value, bool) and abs(value) > _LARGEST_INT:
            self._report(Problem(self.file, mark.line, mark.column,
                                 f"the number {_short(node.value)} is too large for a float", json_path(path),
                                 code="Y007"), path)
        elif isinstance(value, str) and _UNPRINTABLE.search(value):
            self._report(_unprintable(self.file, mark, value, json_path(path)), path)
        return value

    def _mapping(self, node: yaml.MappingNode, path: tuple) -> dict:
        result: dict = {}
        for key, key_node, value_node in self._entries(node, path):
            self.key_marks[path + (key,)] = _mark(key_node)
            result[key] = self.build(value_node, path + (key,))
        return result

    def _entries(self, node: yaml.MappingNode, path: tuple) -> list:
        """(key, key node, value node) of a mapping, merge keys resolved as YAML's `<<` defines them.

        A key written in the mapping wins over a merged one and, of the mappings merged, the first
        listed wins: `above: {<<: *base, alert: 20}` is the base ladder with another alert limit,
        not a key given twice. A key written twice in the mapping itself is a problem naming both
        lines, since a plain loader would silently keep the last.
        """
        merged: dict = {}
        own: dict = {}
        for key_node, value_node in node.value:
            if key_node.tag == _MERGE:
                sources = value_node.value if isinstance(value_node, yaml.SequenceNode) else [value_node]
                for source in sources:
                    if not isinstance(source, yaml.MappingNode):
                        raise yaml.constructor.ConstructorError(
                            None, None, "a merge key `<<` takes a mapping or a list of mappings", source.start_mark)
                    for key, merged_key, merged_value in self._entries(source, path):
                        merged.setdefault(key, (merged_key, merged_value))
                continue
            key = self._scalar(key_node, path, key=True) if isinstance(key_node, yaml.ScalarNode) else None
            if not isinstance(key, (str, int, float, bool)) or key is None:
                mark = _mark(key_node)
                self._report(Problem(self.file, mark.line, mark.column,
                                     "a mapping key must be a plain scalar", json_path(path), code="Y003"), path)
                continue
            key = str(key) if not isinstance(key, str) else key
            if key in own:
                first, mark = _mark(own[key][0]), _mark(key_node)
                self._report(Problem(
                    self.file, mark.line, mark.column,
                    f"key '{key}' is given twice in this mapping, at lines {first.line} and {mark.line}; keep one",
                    json_path(path + (key,)), code="Y004"), path + (key,))
                continue
            own[key] = (key_node, value_node)
        return [(key, key_node, value_node) for key, (key_node, value_node) in {**merged, **own}.items()]


_MERGE = "tag:yaml.org,2002:merge"
# `{watch: 1,000}` and `{watch: 0,2}`: inside braces a comma separates entries, so the digits after
# it become a key of their own (sumpwise.ruleset.schema says the same of such a key's empty value)
COMMA_SPLIT = ("inside {...} a comma separates entries, so a thousands separator (1,000) or a decimal "
                "comma (0,2) splits the number: write 1000 or 0.2")
_LARGEST_INT = int(1.7976931348623157e308)  # the largest finite float, as an integer
# A number as people write it: no leading zeros (0200 is octal 128 to YAML 1.1), no base prefix
# (0x, 0b), no base-60 colons (1:30 is 90); underscores as digit separators are read as written.
_DECIMAL = re.compile(r"[-+]?(?:(?:0|[1-9][0-9_]*)(?:\.[0-9_]*)?|\.[0-9_]+)(?:[eE][-+]?[0-9]+)?")


def _yaml_hint(text: str, mark, reason: str) -> str:
    """What a site lead most likely did, for the YAML errors people meet."""
    if "another document" in reason:
        return ("a rule set is one YAML document: remove the `---` line, or put the second part in a file "
                "of its own and name it under `extends`")
    lines = text.split("\n")
    line = lines[mark.line] if mark is not None and mark.line < len(lines) else ""
    if "tab character" in reason or "\t" in line[:len(line) - len(line.lstrip())]:
        return "indent with spaces: YAML does not allow tabs for indentation"
    at = line[mark.column:mark.column + 1] if mark is not None else ""
    if at in ("%", "@", "`"):
        example = "{water: '%'}" if at == "%" else f"'{at}...'"
        return f"a value that starts with {at} must be quoted in YAML, e.g. {example}"
    return _indicator_hint(text, mark)


def _indicator_hint(text: str, mark) -> str:
    """A plain value that starts with `*` or `&` is an alias or an anchor to YAML: an ISO 4406 code
    written `*/16/13` (a size not reported) fails to load with a message about alias names."""
    if mark is None:
        return ""
    lines = text.split("\n")
    if mark.line >= len(lines):
        return ""
    before = lines[mark.line][:mark.column + 1]
    found = re.search(r"(?:^|[\s\[{,:])([*&])[^\s,\]}]*$", before)
    if not found:
        return ""
    what = "an alias" if found.group(1) == "*" else "an anchor"
    return (f"a value that starts with '{found.group(1)}' is {what} to YAML: quote it, "
            f"e.g. {{watch: '*/16/13'}} for an ISO 4406 code with a size not reported")


def _short(text: str) -> str:
    return text if len(text) <= 24 else f"{text[:12]}...{text[-6:]} ({len(text)} characters)"


def _unprintable(file: str, mark: Mark, text: str, path: str) -> Problem:
    found = _UNPRINTABLE.search(text).group()
    return Problem(file, mark.line, mark.column,
                   f"text may not hold the control character or lone surrogate U+{ord(found):04X}",
                   path, code="Y008")


def _text_problem(text: str, file: str) -> Problem | None:
    """A limit the raw text crosses (size, line length, an unprintable character), with its line."""
    if len(text) > MAX_FILE_BYTES:
        return Problem(file, 0, 0, f"the file is larger than {MAX_FILE_BYTES:,} characters", code="Y009")
    for number, line in enumerate(text.split("\n"), start=1):
        if len(line) > MAX_LINE_CHARS:
            return Problem(file, number, MAX_LINE_CHARS + 1,
                           f"line {number} is longer than {MAX_LINE_CHARS:,} characters", code="Y009")
    found = _UNPRINTABLE.search(text)
    if found:
        line = text.count("\n", 0, found.start()) + 1
        column = found.start() - (text.rfind("\n", 0, found.start()) + 1) + 1
        return _unprintable(file, Mark(line, column), found.group(), "$")
    return None


def parse_yaml(text: str, file: str, keep_going: bool = False) -> YamlDocument:
    """Parse one YAML document safely and within the limits; raise InvalidFile listing the problems.

    With `keep_going`, problems in single values (a key given twice, a number that is not plain
    decimal or not finite) come back on the document instead, beside the paths they spoil; what
    stops the parse (not YAML, a limit crossed, a tag) is raised either way.
    """
    problem = _text_problem(text, file)
    if problem is not None:
        raise InvalidFile([problem])
    loader = None
    try:
        try:
            _check_events(text)
            loader = _LOADER(text)
            root = loader.get_single_node()
        except _TooBig as exc:
            raise InvalidFile([Problem(file, exc.mark.line + 1, exc.mark.column + 1, exc.message,
                                       code=exc.code)]) from None
        except yaml.MarkedYAMLError as exc:
            mark = exc.problem_mark or exc.context_mark
            line, column = (mark.line + 1, mark.column + 1) if mark else (0, 0)
            reason = exc.problem or exc.context or "not valid YAML"
            raise InvalidFile([Problem(file, line, column, f"not valid YAML: {reason}", code="Y001",
                                       hint=_yaml_hint(text, mark, reason))]) from None
        except yaml.YAMLError as exc:
            raise InvalidFile([Problem(file, 0, 0, f"not valid YAML: {exc}", code="Y001")]) from None
        if root is None:
            raise InvalidFile([Problem(file, 0, 0, "the file is empty", code="Y002")])
        builder = _Builder(file, loader)
        try:
            data = builder.build(root, ())
        except yaml.constructor.ConstructorError as exc:
            mark = exc.problem_mark
            raise InvalidFile([Problem(file, mark.line + 1 if mark else 0, mark.column + 1 if mark else 0,
                                       f"not a plain YAML value: {exc.problem}", code="Y005")]) from None
    finally:
        if loader is not None:
            loader.dispose()
    # a mapping merged in more than one place is read again at each: report its problems once
    problems = tuple({(p.line, p.column, p.code): p for p in builder.problems}.values())
    if problems and not keep_going:
        raise InvalidFile(list(problems))
    return YamlDocument(file, data, builder.value_marks, builder.key_marks, problems, frozenset(builder.spoiled),
                        builder.written)


def load_yaml(path: Path, keep_going: bool = False) -> YamlDocument:
    """Read and parse a YAML file; an unreadable, oversized or non-UTF-8 file is a problem, not a traceback."""
    try:
        with open(path, "rb") as handle:
            raw = handle.read(MAX_FILE_BYTES + 1)
    except (OSError, ValueError) as exc:  # ValueError: a NUL byte in the path
        raise InvalidFile([Problem(str(path), 0, 0, f"cannot read the file: {exc}", code="Y006")]) from None
    if len(raw) > MAX_FILE_BYTES:
        raise InvalidFile([Problem(str(path), 0, 0, f"the file is larger than {MAX_FILE_BYTES:,} bytes",
                                   code="Y009")])
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = raw.count(b"\n", 0, exc.start) + 1
        column = exc.start - (raw.rfind(b"\n", 0, exc.start) + 1) + 1
        raise InvalidFile([Problem(str(path), line, column,
                                   f"the byte 0x{raw[exc.start]:02X} is not UTF-8 (save the file as UTF-8)",
                                   code="Y011")]) from None
    return parse_yaml(text, str(path), keep_going)
