"""Rule-set YAML is read as people write it, not by YAML 1.1's older rules.

Up to engine 0.3.3 PyYAML's YAML 1.1 resolution applied: `above: {watch: 0200}` was octal, a
128 ppm limit, so 150 ppm of water graded watch against a limit written as 200; `1:30` was 90
(base 60); and `{field: topped_up, equals: yes}` compared with the text "true", so a sample whose
lab wrote `yes` never matched and 300 ppm of water on a topped-up pump graded normal. YAML 1.2
(the current YAML specification, core schema) reads only true/false as booleans and has no
base-60 or leading-zero octal numbers. Water figures: limits.md, common practice, no source
(caution above 200 ppm).
"""

import pandas as pd
import pytest

from sumpwise import grade, load_ruleset
from sumpwise.ruleset.compiler import check_ruleset
from sumpwise.ruleset.yaml_source import parse_yaml

PUMPS = """\
ruleset: pumps
version: 1
fields: [topped_up]
classes:
  pump:
    rules:
      - id: water
        measure: water
        above: {watch: WATCH, alert: 500}
        message: Water in the oil
        source: common practice, no source
      - id: topped-and-wet
        when:
          all:
            - {field: topped_up, equals: yes}
            - {measure: water, above: 200}
        grade: alert
        message: Water after a top-up; check the top-up drum
        source: site practice
"""


def _write(tmp_path, watch):
    path = tmp_path / "pumps.yaml"
    path.write_text(PUMPS.replace("WATCH", watch), encoding="utf-8")
    return path


def _samples():
    return pd.DataFrame([{"sample_id": f"P-{i}", "unit_id": "CWP-1", "class": "pump", "water": w, "topped_up": t}
                         for i, (w, t) in enumerate([(150, "no"), (300, "yes"), (300, "Yes"), (300, "no")])])


def test_yes_in_a_field_condition_is_the_text_yes(tmp_path):
    graded = grade(_samples(), load_ruleset(_write(tmp_path, "200")))
    assert [r.grade for r in graded.results()] == ["normal", "alert", "alert", "watch"]
    assert {r.rule for r in graded.result(1).reasons} == {"water", "topped-and-wet"}


@pytest.mark.parametrize("written, yaml_1_1", [("0200", 128), ("0x1F", 31), ("3:20", 200), ("0b11", 3)])
def test_a_number_yaml_1_1_reads_otherwise_is_an_error_at_its_place(tmp_path, written, yaml_1_1):
    problems = [p for p in check_ruleset(_write(tmp_path, written)).problems if p.code == "Y012"]
    assert [(p.line, p.column, p.path) for p in problems] == [(9, 24, "$.classes.pump.rules[0].above.watch")]
    assert repr(yaml_1_1) in problems[0].message


@pytest.mark.parametrize("text, value", [("200", 200), ("0.05", 0.05), ("-0.5", -0.5), ("1_000", 1000),
                                         ("2.5e+3", 2500.0), (".5", 0.5), ("0", 0), ("'0200'", "0200")])
def test_plain_decimal_numbers_and_quoted_text_read_as_written(text, value):
    assert parse_yaml(f"a: {text}\n", "f.yaml").data["a"] == value


@pytest.mark.parametrize("word", ["yes", "No", "on", "OFF"])
def test_yaml_1_1_boolean_words_are_text_and_true_false_stay_booleans(word):
    data = parse_yaml(f"a: {word}\nb: true\nc: False\n{word}: 1\n", "f.yaml").data
    assert data == {"a": word, "b": True, "c": False, word: 1}


def test_missing_yes_is_refused_rather_than_read_as_true(tmp_path):
    path = tmp_path / "gaps.yaml"
    path.write_text("ruleset: gaps\nversion: 1\nclasses:\n  pump:\n    rules:\n      - id: no-water\n"
                    "        when: {measure: water, missing: yes}\n        grade: watch\n"
                    "        message: No water result\n        source: site practice\n", encoding="utf-8")
    assert [(p.code, p.line) for p in check_ruleset(path).errors] == [("S003", 7)]
