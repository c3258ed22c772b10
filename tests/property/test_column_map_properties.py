"""Properties of column maps: renaming a lab's columns through a map never changes a verdict, and
any map, however broken, is used or refused (exit 2), never a bug."""

from __future__ import annotations

import yaml
from hypothesis import assume, given, strategies as st

from conftest import run_cli
from sumpwise.intake.header_units import header_conflict
from sumpwise.vocabulary.measures import INPUT_MEASURES

from property_inputs import GEARBOX, HEADER, Graded, assert_no_bug, grade, sample_rows, to_csv

# Lab column names as exports spell them: spaces, units, punctuation, accents, digits first.
LAB_NAME = st.text(st.characters(codec="utf-8", categories=("L", "N", "Zs", "Pd", "Po")), min_size=1,
                   max_size=14).map(str.strip).filter(lambda s: s and s[0] not in "#\"'")


@given(rows=sample_rows(max_rows=6), names=st.lists(LAB_NAME, min_size=len(HEADER), max_size=len(HEADER),
                                                    unique_by=str.casefold))
def test_renamed_columns_through_a_map_give_the_same_verdicts(rows, names, tmp_path_factory):
    folder = tmp_path_factory.mktemp("map")
    lab = dict(zip(HEADER, names))
    # A name that says the column is in another unit (`%` for kv40) is refused by design
    # (tests/intake/test_export_scales.py); the property is about names that say nothing of the kind.
    assume(not any(header_conflict(m, n, INPUT_MEASURES.get(m)) for m, n in lab.items()))
    (folder / "columns.yaml").write_text(yaml.safe_dump(lab, allow_unicode=True), encoding="utf-8")
    (folder / "lab.csv").write_text(to_csv([{lab[k]: v for k, v in row.items()} for row in rows],
                                           header=[lab[k] for k in HEADER]), encoding="utf-8")
    renamed = Graded(run_cli("grade", folder / "lab.csv", "--rules", GEARBOX,
                             "--columns", folder / "columns.yaml"))
    assert_no_bug(renamed.code, renamed.err)
    plain = grade(to_csv(rows))
    assert renamed.code == plain.code == 0
    assert renamed.verdicts == plain.verdicts and renamed.counts == plain.counts


MAP_VALUE = st.one_of(st.text(max_size=10), st.integers(), st.floats(), st.none(), st.booleans(),
                      st.lists(st.text(max_size=4), max_size=2),
                      st.fixed_dictionaries({}, optional={"column": st.text(max_size=8),
                                                          "unit": st.sampled_from(["%", "ppm", "cSt", "mg KOH/g",
                                                                                   "abs/cm", "furlong", ""]),
                                                          "other": st.integers()}))


@given(rows=sample_rows(max_rows=3),
       mapping=st.dictionaries(st.sampled_from(list(HEADER) + ["spectrum", "bogus", ""]), MAP_VALUE, max_size=5))
def test_any_column_map_is_used_or_refused_never_a_bug(rows, mapping, tmp_path_factory):
    folder = tmp_path_factory.mktemp("map")
    (folder / "columns.yaml").write_text(yaml.safe_dump(mapping, allow_unicode=True) if mapping else "{}\n",
                                         encoding="utf-8")
    (folder / "lab.csv").write_text(to_csv(rows), encoding="utf-8")
    run = run_cli("grade", folder / "lab.csv", "--rules", GEARBOX, "--columns",
                  folder / "columns.yaml")
    assert_no_bug(run.code, run.err)
    if run.code == 2:
        assert "columns.yaml" in run.err or "lab.csv" in run.err
