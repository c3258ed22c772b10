"""A class can build on another class: same file or a parent, adding, replacing and dropping rules."""

from __future__ import annotations

import pandas as pd

from sumpwise.ruleset.compiler import check_ruleset, load_ruleset
from sumpwise.results.pipeline import grade
from sumpwise.render.narrative import explain_lines

PARENT = """ruleset: parent
version: 1
classes:
  hydraulic:
    rules:
      - {id: acid, measure: an, above: {watch: 0.5}, message: acid, source: "common practice, no source"}
      - {id: wet, measure: water, above: {watch: 500}, message: wet, source: "common practice, no source"}
      - {id: old, measure: oil_hours, above: {watch: 9000}, message: old, source: site practice}
"""


def _write(folder, name, text):
    path = folder / name
    path.write_text(text)
    return path


def test_a_class_extends_a_parent_class_adding_replacing_and_dropping(tmp_path):
    _write(tmp_path, "parent.yaml", PARENT)
    child = _write(tmp_path, "child.yaml", """ruleset: child
version: 1
extends: parent.yaml
classes:
  pump:
    extends: hydraulic
    drop: [old]
    rules:
      - {id: wet, measure: water, above: {watch: 200}, message: wetter, source: site practice}
      - {id: hot, measure: kv40_change_pct, outside: {watch: 5}, message: visc, source: site practice}
""")
    rs = load_ruleset(child)
    pump = {r.id: r for r in rs.rules_for("pump")}
    assert list(pump) == ["acid", "wet", "hot"]
    assert pump["wet"].steps == ((1, 200.0),)
    # The base class is untouched.
    assert [r.id for r in rs.rules_for("hydraulic")] == ["acid", "wet", "old"]
    assert rs.rules_for("hydraulic")[1].steps == ((1, 500.0),)


def test_a_class_extends_a_class_of_the_same_file_written_after_it(tmp_path):
    path = _write(tmp_path, "r.yaml", """ruleset: r
version: 1
classes:
  pump:
    extends: base
    rules:
      - {id: b, measure: an, above: {watch: 0.3}, message: b, source: site practice}
  base:
    rules:
      - {id: a, measure: water, above: {watch: 300}, message: a, source: site practice}
""")
    assert [r.id for r in load_ruleset(path).rules_for("pump")] == ["a", "b"]


def test_a_cycle_and_an_unknown_base_are_refused_with_their_lines(tmp_path):
    path = _write(tmp_path, "r.yaml", """ruleset: r
version: 1
classes:
  a:
    extends: b
  b:
    extends: a
  c:
    extends: hydrualic
  hydraulic: {}
""")
    found = [(p.line, p.code) for p in check_ruleset(path).problems if p.severity == "error"]
    assert (5, "R008") in found or (7, "R008") in found
    assert (9, "R007") in found
    unknown = next(p for p in check_ruleset(path).problems if p.code == "R007")
    assert unknown.hint == "did you mean 'hydraulic'?"


def test_a_declared_measure_carries_its_unit_into_records_and_explain(tmp_path):
    path = _write(tmp_path, "r.yaml", """ruleset: r
version: 1
measures: {iron: {unit: ppm}}
classes:
  gearbox:
    rules:
      - {id: iron-high, measure: iron, above: {watch: 100}, message: Iron is high, source: site practice}
""")
    rs = load_ruleset(path)
    graded = grade(pd.DataFrame([{"sample_id": "G1", "class": "gearbox", "iron": 150.0}]), rs)
    reason = graded.result(0).reasons[0]
    assert (reason.measure, reason.unit) == ("iron", "ppm")
    assert graded.result(0).to_record()["reasons"][0]["unit"] == "ppm"
    text = "\n".join(explain_lines(graded.result(0), rs.grades))
    assert "iron = 150 ppm" in text
