"""Grading from spectra: FTIR measures computed from the files a samples file names, by
direct reading or spectral subtraction, and the base stock told from the new-oil spectrum.

Spectra are synthetic (synthetic_spectra): Gaussian bands whose areas are known, so
the expected carbonyl rise follows from the area added. The unit relation checked is
ASTM D7412 §12.1-12.2 (abs/cm = abs/0.100 mm x 100), per reference/ftir.md.
"""

import json

import numpy as np
import pytest
from conftest import DATA, run_cli

from sumpwise import load_ruleset, read_samples
from sumpwise.results.pipeline import grade_batch
from sumpwise.vocabulary.problems import InputError
from synthetic_spectra import oil_spectrum, wavenumber_grid, write_jcampdx
from sumpwise.intake.sample_spectra import measure_sample_spectra, parse_references

RULES = """ruleset: ftir-test
version: 1
lubricants:
  MIN-46: {base_stock: mineral, kv40: 46.0, an: 0.1, oxidation: 0.0}
  SYN-46: {kv40: 46.0, an: 0.1, reference_spectrum: new-syn.jdx}
  EST-46: {base_stock: mineral, kv40: 46.0, an: 0.1, reference_spectrum: new-syn.jdx}
classes:
  pump:
    rules:
      - {id: carbonyl, measure: oxidation_rise, above: {watch: 8, alert: 15}, message: m, source: test fixture}
      - {id: carbonyl-differential, measure: oxidation_differential, above: {watch: 8, alert: 15}, message: m,
         source: test fixture}
caveats:
  - id: ester-carbonyl
    when: {field: base_stock_family, equals: ester}
    cap: {measures: [oxidation_rise, oxidation_differential], grade: watch}
    message: ester carbonyl
"""


@pytest.fixture
def site(tmp_path):
    x = wavenumber_grid()
    write_jcampdx(tmp_path / "new-min.jdx", x, oil_spectrum(x), form="AFFN")
    # the ester oil in a 0.025 mm cell (its carbonyl saturates 0.1 mm), said by ##PATH LENGTH=
    write_jcampdx(tmp_path / "new-syn.jdx", x, 0.25 * oil_spectrum(x, base_stock="ester"), form="DIF",
                  path_length="0.025 MM")
    write_jcampdx(tmp_path / "used-min.jdx", x, oil_spectrum(x, oxidation=0.12), form="DIFDUP")
    write_jcampdx(tmp_path / "used-syn.jdx", x, 0.25 * oil_spectrum(x, base_stock="ester", oxidation=0.20), form="SQZ",
                  path_length="0.025 MM")
    (tmp_path / "broken.jdx").write_text((tmp_path / "used-min.jdx").read_text()[:900])
    (tmp_path / "rules.yaml").write_text(RULES)
    (tmp_path / "samples.csv").write_text(
        "sample_id,unit_id,class,lubricant,spectrum\n"
        "S1,P1,pump,MIN-46,used-min.jdx\n"
        "S2,P2,pump,SYN-46,used-syn.jdx\n"
        "S3,P3,pump,MIN-46,broken.jdx\n"
        "S4,P4,pump,EST-46,\n")
    return tmp_path


def _grade(site, references=None):
    rs = load_ruleset(site / "rules.yaml")
    batch = measure_sample_spectra(read_samples(site / "samples.csv"), rs, references)
    return batch, grade_batch(batch, rs)


def test_subtraction_reading_is_the_added_carbonyl_in_abs_per_cm(site):
    batch, graded = _grade(site, {"MIN-46": site / "new-min.jdx"})
    s1 = graded.find("S1")
    # peak 0.12 absorbance added at 0.100 mm; x 100 to abs/cm (ASTM D7412 §12): 12, graded as the
    # differential measure only (the direct rule is not evaluated on it, issue 11)
    assert graded.measured.loc[1, "oxidation_differential"] == pytest.approx(12.0, abs=0.2)
    assert np.isnan(graded.measured.loc[1, "oxidation"])
    assert s1.method == "subtraction" and s1.reference_spectrum.endswith("new-min.jdx")
    assert s1.spectrum == "used-min.jdx"
    assert [r.rule for r in s1.reasons] == ["carbonyl-differential"] and s1.grade == "watch"


def test_direct_reading_is_converted_from_per_tenth_mm(site):
    batch, graded = _grade(site)
    s1 = graded.find("S1")
    assert s1.method == "direct" and s1.reference_spectrum is None
    # the new mineral oil of the synthetic set has a carbonyl 0.01 high: direct = 12 + 1 abs/cm
    assert graded.measured.loc[1, "oxidation"] == pytest.approx(13.0, abs=0.2)


def test_bad_spectrum_rejects_only_its_row(site):
    batch, graded = _grade(site)
    (reject,) = [r for r in batch.rejects if r.field == "spectrum"]
    assert reject.row == 3 and reject.sample_id == "S3"
    assert "broken.jdx" in reject.reason
    # S4 has no spectrum and no lab oxidation: read, but nothing to evaluate, so unrated
    assert graded.counts() == {"read": 4, "graded": 2, "unrated": 1, "rejected": 1}


def test_ester_inferred_from_the_reference_spectrum_where_none_is_declared(site):
    batch, graded = _grade(site)
    s2 = graded.find("S2")
    caveats = {c.caveat: c.message for c in s2.caveats}
    assert "ester-carbonyl" in caveats
    assert "ester carbonyl present (an ester base stock or an ester additive)" in caveats["base-stock-inferred"]
    assert "1740 cm-1" in caveats["base-stock-inferred"] or "cm-1" in caveats["base-stock-inferred"]
    assert s2.method == "subtraction"  # the rule set's reference_spectrum applies
    assert graded.measured.loc[2, "oxidation_differential"] == pytest.approx(20.0, abs=0.3)
    carbonyl = s2.reasons[0]
    assert carbonyl.capped_from == "alert" and carbonyl.grade == "watch"


def test_declared_base_stock_wins_and_a_conflict_is_a_caveat(site):
    batch, graded = _grade(site)
    s4 = graded.find("S4")
    caveats = {c.caveat: c.message for c in s4.caveats}
    assert "ester-carbonyl" not in caveats
    assert "the reference spectrum disagrees" in caveats["base-stock-conflict"]


def test_reference_option_spelling_is_checked():
    assert parse_references(["A=x.jdx"]) == {"A": __import__("pathlib").Path("x.jdx")}
    with pytest.raises(InputError, match="expected LUBRICANT=FILE"):
        parse_references(["no-equals-sign"])


def test_unreadable_reference_stops_the_run(site):
    rs = load_ruleset(site / "rules.yaml")
    with pytest.raises(InputError, match="new-oil reference spectrum for MIN-46"):
        measure_sample_spectra(read_samples(site / "samples.csv"), rs, {"MIN-46": site / "nowhere.jdx"})


def test_grade_command_with_references(site):
    run = run_cli("grade", site / "samples.csv", "--rules", site / "rules.yaml",
                  "--reference", f"MIN-46={site / 'new-min.jdx'}")
    assert run.code == 0, run.err
    records = {json.loads(line)["sample_id"]: json.loads(line) for line in run.out.splitlines()}
    assert records["S1"]["method"] == "subtraction"
    assert records["S1"]["spectrum"] == "used-min.jdx"
    assert "rejected F001: spectrum" in run.err and "1 rejected" in run.err


def test_canonical_form_keeps_the_reference_path_relative(site):
    rs = load_ruleset(site / "rules.yaml")
    assert json.loads(rs.canonical)["lubricants"]["SYN-46"]["reference_spectrum"] == "new-syn.jdx"
    assert DATA.exists()
