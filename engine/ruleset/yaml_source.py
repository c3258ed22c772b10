"""Safe YAML loading that remembers where every value came from.

Plain loaders forget line numbers and silently keep the last of two equal keys;
both would leave the person writing limits guessing. Here every mapping key and
value keeps its 1-based line and column, and a repeated key is a problem naming
both lines.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, field
from pathlib import Path

import yaml

from sumpwise.vocabulary.problems import InvalidFile, Problem, json_path


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


class _Builder:
    def __init__(self, file: str, loader: yaml.SafeLoader):
        self.file = file
        self.loader = loader
        self.value_marks: dict = {}
        self.key_marks: dict = {}
        self.problems: list[Problem] = []

    def build(self, node: yaml.Node, path: tuple):
        self.value_marks[path] = _mark(node)
        if isinstance(node, (yaml.MappingNode, yaml.SequenceNode)) and node.tag not in _PLAIN_TAGS:
            raise yaml.constructor.ConstructorError(
                None, None, f"the tag {node.tag} is not allowed", node.start_mark)
        if isinstance(node, yaml.MappingNode):
            return self._mapping(node, path)
        if isinstance(node, yaml.SequenceNode):
            return [self.build(item, path + (i,)) for i, item in enumerate(node.value)]
        value = self.loader.construct_object(node, deep=True)
        if isinstance(value, (dt.date, dt.datetime)):
            return value.isoformat()
        return value

    def _mapping(self, node: yaml.MappingNode, path: tuple) -> dict:
        self.loader.flatten_mapping(node)
        result: dict = {}
        first_seen: dict = {}
        for key_node, value_node in node.value:
            key = self.loader.construct_object(key_node, deep=True)
            if not isinstance(key, (str, int, float, bool)) or key is None:
                mark = _mark(key_node)
                self.problems.append(Problem(self.file, mark.line, mark.column,
                                             "a mapping key must be a plain scalar", json_path(path), code="Y003"))
                continue
            key = str(key) if not isinstance(key, str) else key
            if key in first_seen:
                mark = _mark(key_node)
                self.problems.append(Problem(
                    self.file, mark.line, mark.column,
                    f"key '{key}' is given twice in this mapping, at lines "
                    f"{first_seen[key].line} and {mark.line}; keep one",
                    json_path(path + (key,)), code="Y004"))
                continue
            first_seen[key] = _mark(key_node)
            self.key_marks[path + (key,)] = _mark(key_node)
            result[key] = self.build(value_node, path + (key,))
        return result


def parse_yaml(text: str, file: str) -> YamlDocument:
    """Parse one YAML document safely; raise InvalidFile listing every problem found."""
    loader = yaml.SafeLoader(text)
    try:
        try:
            root = loader.get_single_node()
        except yaml.MarkedYAMLError as exc:
            mark = exc.problem_mark or exc.context_mark
            line, column = (mark.line + 1, mark.column + 1) if mark else (0, 0)
            reason = exc.problem or exc.context or "not valid YAML"
            raise InvalidFile([Problem(file, line, column, f"not valid YAML: {reason}", code="Y001")]) from None
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
        loader.dispose()
    if builder.problems:
        raise InvalidFile(builder.problems)
    return YamlDocument(file, data, builder.value_marks, builder.key_marks)


def load_yaml(path: Path) -> YamlDocument:
    """Read and parse a YAML file; an unreadable file is a problem, not a traceback."""
    try:
        text = Path(path).read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise InvalidFile([Problem(str(path), 0, 0, f"cannot read the file: {exc}", code="Y006")]) from None
    return parse_yaml(text, str(path))
