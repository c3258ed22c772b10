"""YAML loading: safe, with 1-based marks, and a repeated key is an error naming both lines."""

import time

import pytest

from sumpwise.vocabulary.problems import InvalidFile
from sumpwise.ruleset import yaml_source
from sumpwise.ruleset.yaml_source import load_yaml, parse_yaml


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


# Hostile input: every limit ends in a problem with a code and a line, never a hang or a RecursionError.


def _only_problem(text, file="f.yaml"):
    with pytest.raises(InvalidFile) as caught:
        parse_yaml(text, file)
    (problem,) = caught.value.problems
    return problem


def test_an_alias_bomb_is_refused_quickly_at_its_line():
    laughs = "a: &a [lol, lol, lol, lol, lol, lol, lol, lol, lol]\n"
    for prev, name in zip("abcdefgh", "bcdefghi"):
        laughs += f"{name}: &{name} [" + ", ".join([f"*{prev}"] * 9) + "]\n"
    assert len(laughs.encode()) < 600  # 9**9 values once expanded
    started = time.perf_counter()
    problem = _only_problem(laughs)
    assert time.perf_counter() - started < 5  # generous: it stops after about 10**5 values
    assert problem.code == "Y009" and 1 < problem.line <= 9


def test_a_merge_key_bomb_is_bounded_too():
    text = "a0: &a0 {x: 1, y: 2}\n"
    for i in range(1, 40):
        text += f"a{i}: &a{i} {{<<: [*a{i-1}, *a{i-1}]}}\n"
    assert _only_problem(text).code == "Y009"


def test_a_recursive_alias_is_refused_with_its_line():
    problem = _only_problem("ruleset: loop\nlubricants: &x\n  OIL-1: *x\n")
    assert (problem.code, problem.line) == ("Y010", 3)


def test_nesting_of_a_few_hundred_levels_is_refused_without_recursion_error():
    for text in ("rules: " + "[" * 400 + "]" * 400 + "\n",
                 "rules: " + "{a: " * 400 + "1" + "}" * 400 + "\n",
                 "".join("  " * i + f"k{i}:\n" for i in range(300)) + "  " * 300 + "x\n"):
        problem = _only_problem(text)
        assert problem.code == "Y009" and problem.line >= 1


def test_an_alias_cannot_nest_past_the_depth_limit_either():
    deep = "[" * 40 + "1" + "]" * 40
    problem = _only_problem(f"a: &a {deep}\nb: [[[[[[[[[[[[[[[[[[[[[[[[[[*a]]]]]]]]]]]]]]]]]]]]]]]]]]\n")
    assert (problem.code, problem.line) == ("Y009", 2)


def test_the_limits_let_the_largest_allowed_nesting_through():
    depth = yaml_source.MAX_DEPTH
    doc = parse_yaml("[" * depth + "1" + "]" * depth + "\n", "f.yaml")
    assert doc.data is not None


@pytest.mark.parametrize("literal", [".nan", ".NaN", ".inf", "-.inf", "+.Inf", "1.0e+999", "-2.5e+400"])
def test_non_finite_numbers_are_refused_with_file_line_and_path(literal):
    problem = _only_problem(f"classes:\n  gearbox:\n    water: {{above: {{watch: {literal}}}}}\n", "site.yaml")
    assert (problem.code, problem.file, problem.line) == ("Y007", "site.yaml", 3)
    assert problem.path == "$.classes.gearbox.water.above.watch"


def test_an_integer_too_large_for_a_float_is_refused():
    problem = _only_problem("a:\n  b: 1" + "0" * 400 + "\n")
    assert (problem.code, problem.line, problem.path) == ("Y007", 2, "$.a.b")
    assert parse_yaml("a: 123456789012345678901234567890\n", "f.yaml").data["a"] == 123456789012345678901234567890


@pytest.mark.parametrize("escaped, code_point", [("\\0", 0), ("\\e[31m", 0x1B), ("\\ud800", 0xD800),
                                                 ("\\x9b", 0x9B), ("\\a", 7)])
def test_control_characters_and_lone_surrogates_in_text_are_refused(escaped, code_point):
    problem = _only_problem(f'ruleset: x\nmessage: "Water {escaped} high"\n')
    if code_point == 0xD800 and problem.code == "Y001":  # libyaml refuses the escape itself
        assert problem.line == 2
        return
    assert (problem.code, problem.line, problem.path) == ("Y008", 2, "$.message")
    assert f"U+{code_point:04X}" in problem.message


def test_a_raw_nul_byte_is_refused_at_its_line_and_column():
    problem = _only_problem("ruleset: x\ntitle: Brackwater \x00 Point\n")
    assert (problem.code, problem.line, problem.column) == ("Y008", 2, 19)


def test_a_control_character_in_a_key_is_refused():
    assert _only_problem('"a\\x1bb": 1\n').code == "Y008"


def test_tabs_newlines_and_accents_are_still_welcome():
    doc = parse_yaml('a: "tab\\there"\nb: |\n  two\n  lines\nc: Brackwater Pointe, café\n', "f.yaml")
    assert doc.data == {"a": "tab\there", "b": "two\nlines\n", "c": "Brackwater Pointe, café"}


def test_a_line_longer_than_the_limit_is_refused_with_its_number():
    problem = _only_problem("a: 1\nb: " + "x" * yaml_source.MAX_LINE_CHARS + "\n")
    assert (problem.code, problem.line) == ("Y009", 2)


def test_a_file_larger_than_the_limit_is_refused_before_parsing(tmp_path):
    path = tmp_path / "big.yaml"
    path.write_text("# " + "x" * 70 + "\n" * 1 + ("a: 1\n" * (yaml_source.MAX_FILE_BYTES // 5 + 1)))
    with pytest.raises(InvalidFile) as caught:
        load_yaml(path)
    assert caught.value.problems[0].code == "Y009"


def test_a_byte_that_is_not_utf8_is_reported_with_its_line_and_column(tmp_path):
    path = tmp_path / "latin1.yaml"
    path.write_bytes("ruleset: x\ntitle: café\n".encode("latin-1"))
    with pytest.raises(InvalidFile) as caught:
        load_yaml(path)
    (problem,) = caught.value.problems
    assert (problem.code, problem.line, problem.column) == ("Y011", 2, 11)
    assert "0xE9" in problem.message


@pytest.mark.parametrize("name", ["dir", "nul\x00name.yaml", "x" * 5000 + ".yaml"])
def test_a_path_that_cannot_be_read_is_a_problem(tmp_path, name):
    (tmp_path / "dir").mkdir()
    with pytest.raises(InvalidFile) as caught:
        load_yaml(tmp_path / name)
    assert caught.value.problems[0].code == "Y006"


@pytest.mark.parametrize("text, line", [("a: 1\nsampled: 2026-02-30\n", 2), ("d: !!timestamp 2026-13-45\n", 1),
                                        ("a: !!binary aGVsbG8=\n", 1)])
def test_a_value_that_cannot_be_built_is_a_problem_with_its_line(text, line):
    """Found by hand while bounding the loader: an impossible date raised ValueError (exit 1)."""
    problem = _only_problem(text)
    assert (problem.code, problem.line) == ("Y005", line)
