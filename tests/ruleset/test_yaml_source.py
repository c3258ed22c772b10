"""YAML loading: safe, with 1-based marks, and a repeated key is an error naming both lines."""

import pytest

from sumpwise.vocabulary.problems import InvalidFile
from sumpwise.ruleset.yaml_source import parse_yaml


def test_marks_are_one_based_lines_and_columns():
    doc = parse_yaml("a: 1\nb:\n  c: [x, y]\n", "f.yaml")
    assert doc.data == {"a": 1, "b": {"c": ["x", "y"]}}
    assert doc.mark(("a",)) == doc.value_marks[("a",)]
    assert (doc.mark(("b", "c", 1)).line, doc.mark(("b", "c", 1)).column) == (3, 10)
    assert doc.mark(("b",), key=True).line == 2


def test_mark_of_an_unknown_path_falls_back_to_its_nearest_ancestor():
    doc = parse_yaml("a:\n  b: 1\n", "f.yaml")
    assert doc.mark(("a", "b", "nope")).line == 2


def test_duplicate_key_names_both_lines():
    with pytest.raises(InvalidFile) as caught:
        parse_yaml("rules:\n  x: 1\n  y: 2\n  x: 3\n", "dup.yaml")
    (problem,) = caught.value.problems
    assert (problem.file, problem.line, problem.column) == ("dup.yaml", 4, 3)
    assert "lines 2 and 4" in problem.message
    assert problem.path == "$.rules.x"


def test_every_duplicate_is_reported_not_just_the_first():
    with pytest.raises(InvalidFile) as caught:
        parse_yaml("a: 1\na: 2\nb: {c: 1, c: 2}\n", "dup.yaml")
    assert [p.line for p in caught.value.problems] == [2, 3]


def test_invalid_yaml_reports_its_line():
    with pytest.raises(InvalidFile) as caught:
        parse_yaml("a: [1, 2\nb: 3\n", "bad.yaml")
    assert caught.value.problems[0].line >= 2
    assert "not valid YAML" in caught.value.problems[0].message


def test_python_tags_are_refused_not_run():
    with pytest.raises(InvalidFile) as caught:
        parse_yaml("a: !!python/object/apply:os.system ['echo hi']\n", "evil.yaml")
    assert "not a plain YAML value" in caught.value.problems[0].message


def test_dates_become_iso_text_and_empty_file_is_an_error():
    assert parse_yaml("d: 2026-03-01\n", "f.yaml").data == {"d": "2026-03-01"}
    with pytest.raises(InvalidFile):
        parse_yaml("# nothing\n", "empty.yaml")
