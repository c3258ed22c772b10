"""Schema errors come back as plain sentences with file:line:column, all at once, sorted."""

import pytest

from sumpwise.ruleset.compiler import load_ruleset
from sumpwise.vocabulary.problems import InvalidFile
from sumpwise.ruleset.schema import ruleset_schema


def _problems(tmp_path, text):
    path = tmp_path / "rs.yaml"
    path.write_text(text)
    with pytest.raises(InvalidFile) as caught:
        load_ruleset(path)
    return caught.value.problems


def test_schema_is_draft_2020_12():
    assert ruleset_schema()["$schema"] == "https://json-schema.org/draft/2020-12/schema"


def test_every_schema_error_is_reported_with_its_line(tmp_path):
    problems = _problems(tmp_path, (
        "ruleset: Bad_Id\n"             # 1: pattern
        "version: 1\n"
        "colour: blue\n"                # 3: unknown key
        "classes:\n"
        "  x:\n"
        "    rules:\n"
        "      - id: r1\n"              # 7: missing message and source
        "        measure: an_rise\n"
        "        above: {watch: high}\n"  # 9: type
    ))
    lines = [p.line for p in problems]
    assert lines == sorted(lines)
    text = "\n".join(p.render() for p in problems)
    assert "rs.yaml:1:10: error S005: \"Bad_Id\" is not an id of lower-case letters, digits and '-'" in text
    assert "rs.yaml:3:1: error S001: unknown key 'colour'" in text
    assert "this mapping needs the key 'message'" in text
    assert "this mapping needs the key 'source'" in text
    assert "expected a number here, found text \"high\"" in text
    assert "$.classes.x.rules[0].above.watch" in text


def test_unknown_key_gets_a_did_you_mean_hint(tmp_path):
    problems = _problems(tmp_path, "ruleset: a\nversion: 1\nnotise: x\n")
    assert problems[0].hint == "did you mean 'notice'?"


def test_unit_must_be_known(tmp_path):
    problems = _problems(tmp_path, "ruleset: a\nversion: 1\nunits: {oxidation: abs/mm}\n")
    assert "expected one of: abs/cm, abs/0.1mm" in problems[0].message
    assert problems[0].line == 3


def test_a_file_that_is_not_a_mapping(tmp_path):
    problems = _problems(tmp_path, "- just\n- a list\n")
    assert "must be a mapping" in problems[0].message
