"""Short views of a SampleResult that tests compare: what fired, what was not evaluated, which caveats."""

from __future__ import annotations


def caveats_of(result) -> list:
    """The caveat ids, without few-rules-evaluated (which many trend fixtures also raise)."""
    return [c.caveat for c in result.caveats if c.caveat != "few-rules-evaluated"]


def fired(result) -> set:
    return {(r.rule, r.grade) for r in result.reasons}


def unevaluated(result) -> set:
    return {n.rule for n in result.not_evaluated}
