"""docs/rule-language.md: its examples load and behave as written, and it cannot drift from the engine.

The tables marked "generated" must equal what tests/support/reference_tables.py builds from
the vocabulary (measure, limit-test, unit, caveat and problem-code tables); every key of the
editor schema must be described; every example is checked as `sumpwise check` would.
"""

from __future__ import annotations

import re

import pytest

from conftest import ROOT, run_cli
from support.reference_tables import TABLES
from sumpwise.authoring.examples import check_examples
from sumpwise.ruleset.compiler import check_ruleset
from sumpwise.ruleset.schema import ruleset_schema

REFERENCE = ROOT / "docs" / "rule-language.md"
TEXT = REFERENCE.read_text(encoding="utf-8")
EXAMPLES = re.findall(r"<!-- example: ([\w.-]+)(?:, fails: (\w+))? -->\n```yaml\n(.*?)```", TEXT, re.S)


@pytest.fixture(scope="module")
def written(tmp_path_factory):
    folder = tmp_path_factory.mktemp("reference")
    for name, _, body in EXAMPLES:
        (folder / name).write_text(body, encoding="utf-8")
    return folder


def test_the_reference_has_examples_of_both_kinds():
    assert len(EXAMPLES) >= 8
    assert any(fails for _, fails, _ in EXAMPLES) and any(not fails for _, fails, _ in EXAMPLES)


@pytest.mark.parametrize("name, fails", [(name, fails) for name, fails, _ in EXAMPLES])
def test_each_example_checks_as_written(written, name, fails):
    checked = check_ruleset(written / name)
    codes = [p.code for p in checked.errors]
    if fails:
        assert fails in codes, [p.render() for p in checked.problems]
        return
    assert codes == [], [p.render() for p in checked.problems]
    assert check_examples(checked.ruleset) == ()
    assert checked.ruleset.examples or name == "parent.yaml"
    run = run_cli("check", written / name)
    assert run.code == 0 and ": ok: " in run.out, run.err


@pytest.mark.parametrize("table", sorted(TABLES))
def test_generated_tables_match_the_vocabulary(table):
    found = re.search(rf"<!-- generated: {table} -->\n(.*?)\n<!-- end: {table} -->", TEXT, re.S)
    assert found, f"docs/rule-language.md has no generated table '{table}'"
    assert found.group(1) == TABLES[table](), (
        f"the '{table}' table differs from the vocabulary; regenerate it with "
        f"`python tests/support/reference_tables.py` and paste it")


def _schema_keys(node, found: set) -> set:
    if isinstance(node, dict):
        for key, value in node.get("properties", {}).items():
            found.add(key)
            _schema_keys(value, found)
        for value in node.values():
            _schema_keys(value, found)
    elif isinstance(node, list):
        for value in node:
            _schema_keys(value, found)
    return found


def test_every_key_of_the_editor_schema_is_described():
    keys = _schema_keys(ruleset_schema(), set())
    assert {"ruleset", "extends", "drop", "unless", "fires", "quiet", "reference_spectrum"} <= keys
    undescribed = sorted(key for key in keys if f"`{key}`" not in TEXT)
    assert undescribed == []


def test_the_readme_links_the_reference():
    assert "(docs/rule-language.md)" in (ROOT / "README.md").read_text(encoding="utf-8")
