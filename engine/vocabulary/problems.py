"""Problems found in a user's file, kept as data so tests assert on fields, not sentences."""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True, order=True)
class Problem:
    """One error or warning in a rule set, column map or samples file.

    `line` and `column` are 1-based (0 when the problem belongs to the whole file);
    `path` is where in the document it sits, as a JSON-path-like string ("$.classes.x").
    """

    file: str
    line: int
    column: int
    message: str
    path: str = "$"
    severity: str = "error"
    hint: str = ""

    def render(self) -> str:
        where = f"{self.file}:{self.line}:{self.column}" if self.line else self.file
        text = f"{where}: {self.severity}: {self.message} (at {self.path})"
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
