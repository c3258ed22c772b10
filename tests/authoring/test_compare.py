"""sumpwise.authoring.compare: moving one limit moves a known set of samples, and nothing else.

tests/data/authoring/compare-new.yaml lowers acid-rise's watch limit from 0.2 to 0.15
mg KOH/g (new oil 0.10). By the contract's `above` (value > limit): P-02 (rise
0.17), P-03 (0.20, not above 0.2 before) and P-10 (0.19) move normal -> watch;
P-04 (0.15, not above 0.15) stays; P-06 (0.18) is already watch by viscosity
(49.0 vs 46.0 = +6.5 %); P-05 stays watch, P-07 alert, P-08 has no acid number,
P-09's class is unknown (unrated).
"""

from __future__ import annotations

from pathlib import Path

from sumpwise.authoring.compare import compare_rulesets, comparison_lines
from sumpwise.ruleset.compiler import load_ruleset
from sumpwise.intake.samples import read_samples

DATA = Path(__file__).resolve().parents[1] / "data" / "authoring"


def _compare(old, new):
    batch = read_samples(DATA / "compare-samples.csv")
    return compare_rulesets(load_ruleset(DATA / old), load_ruleset(DATA / new), batch)


def test_moving_one_limit_moves_the_known_samples():
    c = _compare("compare-old.yaml", "compare-new.yaml")
    assert c.graded == 10 and c.rejected == 0
    assert [(m.sample_id, m.before, m.after) for m in c.moves] == [
        ("P-02", "normal", "watch"), ("P-03", "normal", "watch"), ("P-10", "normal", "watch")]
    assert all([(ch.rule, ch.before, ch.after) for ch in m.changes] == [("acid-rise", "quiet", "watch")]
               for m in c.moves)
    assert {k: v for k, v in c.table.items()} == {
        ("normal", "normal"): 3, ("normal", "watch"): 3, ("watch", "watch"): 2, ("alert", "alert"): 1,
        ("unrated", "unrated"): 1}
    assert sum(c.table.values()) == c.graded


def test_the_reverse_change_moves_them_back():
    c = _compare("compare-new.yaml", "compare-old.yaml")
    assert [(m.sample_id, m.before, m.after) for m in c.moves] == [
        ("P-02", "watch", "normal"), ("P-03", "watch", "normal"), ("P-10", "watch", "normal")]


def test_a_rule_set_against_itself_moves_nothing():
    c = _compare("compare-old.yaml", "compare-old.yaml")
    assert c.moved == 0 and sum(c.table.values()) == 10


def test_report_lines_table_and_moves():
    lines = comparison_lines(_compare("compare-old.yaml", "compare-new.yaml"), "old.yaml", "new.yaml")
    assert lines[2] == "10 sample(s) graded under both (0 row(s) rejected); 3 moved to another grade"
    header = lines[4].split()
    assert header[-4:] == ["normal", "watch", "alert", "unrated"]
    assert lines[5].split() == ["normal", "3", "3", ".", "."]
    assert "  P-03 (pump): normal -> watch: acid-rise quiet -> watch" in lines



def test_a_row_grading_refuses_is_counted_and_the_moves_name_the_right_samples(tmp_path):
    """A row the reader keeps but grading refuses (an ISO 4406 code that cannot be read, D012)
    shifted every later position: the moves named the sample before the one that moved, and
    the counts said 0 rejected. The same file with such a row first must give the same moves."""
    text = (DATA / "compare-samples.csv").read_text().splitlines()
    header, rows = text[0], text[1:]
    columns = header.split(",")
    bad = dict.fromkeys(columns, "")
    bad.update(sample_id="P-00", **{"class": "pump"})
    broken = tmp_path / "with-a-bad-code.csv"
    broken.write_text("\n".join([header + ",iso4406", ",".join(bad[c] for c in columns) + ",18/16/x"]
                                + [row + "," for row in rows]) + "\n")
    plain = _compare("compare-old.yaml", "compare-new.yaml")
    found = compare_rulesets(load_ruleset(DATA / "compare-old.yaml"), load_ruleset(DATA / "compare-new.yaml"),
                             read_samples(broken))
    assert [m.sample_id for m in found.moves] == [m.sample_id for m in plain.moves] == ["P-02", "P-03", "P-10"]
    assert (found.graded, found.rejected) == (plain.graded, plain.rejected + 1)
    assert [(r.sample_id, r.code) for r in found.rejects] == [("P-00", "D012")]
