"""One-pass checking keeps going past broken pieces, so it must never trip over them itself.

Every single-line deletion and every value swapped for a wrong type in the one-pass fixture
(one mistake of each kind, three parents) must end in problems or a clean rule set, never in
an exception: a traceback is a bug (exit 1), never the answer to a bad file.
"""

from __future__ import annotations

import re

import pytest

from conftest import ROOT
from sumpwise.ruleset.compiler import check_ruleset

FILES = [ROOT / "tests" / "data" / "rulesets" / "one-pass" / "child.yaml"]


def _variants(text: str):
    lines = text.splitlines()
    for i in range(len(lines)):
        yield "\n".join(lines[:i] + lines[i + 1:])
        swapped = re.sub(r"(:\s+)([^\s{\[#][^#]*)$", r"\1[1, {a: 2}]", lines[i])
        if swapped != lines[i]:
            yield "\n".join(lines[:i] + [swapped] + lines[i + 1:])


@pytest.mark.parametrize("source", FILES, ids=lambda p: p.name)
def test_no_variant_of_a_real_rule_set_raises(tmp_path, source):
    for parent in source.parent.glob("*.yaml"):
        (tmp_path / parent.name).write_text(parent.read_text())
    target = tmp_path / source.name
    count = 0
    for text in _variants(source.read_text()):
        target.write_text(text)
        checked = check_ruleset(target)  # must not raise
        assert checked.ruleset is not None or checked.errors
        count += 1
    assert count > 50


def test_an_example_value_that_is_not_a_single_value_is_a_schema_error(tmp_path):
    path = tmp_path / "r.yaml"
    path.write_text("ruleset: x\nversion: 1\nclasses:\n  a:\n    rules:\n      - {id: w, measure: water, "
                    "above: {watch: 5}, message: m, source: site practice}\nexamples:\n"
                    "  - {name: e, sample: {class: [1]}, expect: {grade: watch}}\n")
    checked = check_ruleset(path)
    assert [(p.line, p.code) for p in checked.errors] == [(8, "S003")]
