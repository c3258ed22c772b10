"""Caveats the engine raises itself (in no rule set): their shape, shared by every stage."""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class EngineCaveat:
    """A caveat the engine raises itself, in no rule set; its message is a per-sample column."""

    id: str
    message_column: str
    source: str
