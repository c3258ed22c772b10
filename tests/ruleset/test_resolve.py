"""`extends`: relative paths, merge by id, drop, cycles, one ladder per chain."""

import pytest

from sumpwise.ruleset.compiler import load_ruleset
from sumpwise.vocabulary.problems import InvalidFile

PARENT = """ruleset: parent
version: 1
lubricants:
  OIL-A: {base_stock: mineral, an: 0.1}
classes:
  pump:
    rules:
      - {id: acid, measure: an_rise, above: {watch: 0.2}, message: acid, source: "common practice, no source"}
      - {id: wet, measure: water, above: {watch: 500}, message: wet, source: "common practice, no source"}
      - {id: old, measure: oil_hours, above: {watch: 9000}, message: old, source: site practice}
"""


def _write(folder, name, text):
    path = folder / name
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(text)
    return path


def test_child_replaces_by_id_drops_and_adds(tmp_path):
    _write(tmp_path, "base/parent.yaml", PARENT)
    child = _write(tmp_path, "site/child.yaml", """ruleset: child
version: 2
extends: ../base/parent.yaml
classes:
  pump:
    drop: [old]
    rules:
      - {id: wet, measure: water, above: {watch: 200}, message: wetter, source: site practice}
      - {id: visc, measure: kv40_change_pct, outside: {watch: 5}, message: visc, source: site practice}
""")
    rs = load_ruleset(child)
    rules = {r.id: r for r in rs.rules_for("pump")}
    assert list(rules) == ["acid", "wet", "visc"]
    assert rules["wet"].steps == ((1, 200.0),) and rules["wet"].source == "site practice"
    assert rs.lubricants["OIL-A"].an == 0.1
    assert (rs.id, rs.version) == ("child", 2)
    assert len(rs.files) == 2


def test_drop_of_an_id_no_parent_gives_is_an_error(tmp_path):
    _write(tmp_path, "parent.yaml", PARENT)
    child = _write(tmp_path, "child.yaml", "ruleset: c\nversion: 1\nextends: [parent.yaml]\n"
                                           "classes:\n  pump:\n    drop: [nope]\n")
    with pytest.raises(InvalidFile) as caught:
        load_ruleset(child)
    assert "drop names rule 'nope'" in caught.value.problems[0].message
    assert caught.value.problems[0].line == 6


def test_cycle_is_an_error(tmp_path):
    _write(tmp_path, "a.yaml", "ruleset: a\nversion: 1\nextends: [b.yaml]\n")
    _write(tmp_path, "b.yaml", "ruleset: b\nversion: 1\nextends: [a.yaml]\n")
    with pytest.raises(InvalidFile) as caught:
        load_ruleset(tmp_path / "a.yaml")
    assert "extends makes a cycle" in caught.value.problems[0].message


def test_missing_parent_file_is_an_error_with_its_line(tmp_path):
    child = _write(tmp_path, "c.yaml", "ruleset: c\nversion: 1\nextends:\n  - nowhere.yaml\n")
    with pytest.raises(InvalidFile) as caught:
        load_ruleset(child)
    problem = caught.value.problems[0]
    assert problem.line == 4 and "no file" in problem.message


def test_chain_must_share_one_ladder(tmp_path):
    _write(tmp_path, "p.yaml", "ruleset: p\nversion: 1\ngrades: [ok, bad]\n")
    child = _write(tmp_path, "c.yaml", "ruleset: c\nversion: 1\nextends: [p.yaml]\n")
    with pytest.raises(InvalidFile) as caught:
        load_ruleset(child)
    assert "share one grade ladder" in caught.value.problems[0].message


def test_duplicate_rule_id_in_one_list_is_an_error(tmp_path):
    path = _write(tmp_path, "d.yaml", """ruleset: d
version: 1
classes:
  pump:
    rules:
      - {id: acid, measure: an_rise, above: {watch: 0.2}, message: a, source: site practice}
      - {id: acid, measure: an_rise, above: {watch: 0.3}, message: b, source: site practice}
""")
    with pytest.raises(InvalidFile) as caught:
        load_ruleset(path)
    problem = caught.value.problems[0]
    assert problem.line == 7 and "used twice" in problem.message and "line 6" in problem.message


def test_parent_errors_point_at_the_parent_file(tmp_path):
    _write(tmp_path, "p.yaml", "ruleset: p\nversion: 1\nbogus: 1\n")
    child = _write(tmp_path, "c.yaml", "ruleset: c\nversion: 1\nextends: [p.yaml]\n")
    with pytest.raises(InvalidFile) as caught:
        load_ruleset(child)
    assert caught.value.problems[0].file.endswith("p.yaml")
