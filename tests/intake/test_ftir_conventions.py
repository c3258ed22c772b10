"""FTIR readings keep their convention; base stocks are a closed vocabulary; references are per sample (issue 11).

Sources beside each check: ASTM D7418 (direct and differential trend, the two approaches,
confirmed), ASTM D7414 1.4.1 (direct results per 0.1 mm, confirmed), ASTM D7412 12.1-12.2
(abs/cm = abs/0.1 mm x 100, confirmed). Spectra are synthetic (synthetic_spectra) with
realistic carbonyl heights: 0.01 new mineral oil, 0.05-0.5 used, 2.0 (saturated) new ester.
"""

import numpy as np
import pytest

from sumpwise import load_ruleset, read_samples
from sumpwise.authoring.lint import lint_ruleset
from sumpwise.intake.sample_spectra import measure_sample_spectra
from sumpwise.intake.spectra.ester import detect_ester, resolve_base_stock
from sumpwise.intake.spectra.spectrum import make_spectrum
from sumpwise.results.pipeline import grade_batch
from sumpwise.vocabulary.base_stocks import BaseStockError, base_stock_family, canonical_base_stock
from sumpwise.vocabulary.problems import InvalidFile
from synthetic_spectra import gaussian, oil_spectrum, wavenumber_grid, write_jcampdx

X = wavenumber_grid()

RULES = """ruleset: conventions
version: 1
lubricants:
  MIN-46: {base_stock: mineral, kv40: 46.0, an: 0.1, oxidation: 1.0}
  OTHER-46: {base_stock: mineral, kv40: 46.0, an: 0.1}
  POE-46: {base_stock: polyol-ester, kv40: 46.0, an: 0.1, oxidation: 50.0}
classes:
  pump:
    rules:
      - {id: carbonyl-rise, measure: oxidation_rise, above: {watch: 8, alert: 15}, message: m, source: test fixture}
      - {id: carbonyl-differential, measure: oxidation_differential, above: {watch: 8, alert: 15}, message: m,
         source: test fixture}
caveats:
  - id: ester-carbonyl
    when: {field: base_stock_family, equals: ester}
    cap: {measures: [oxidation, oxidation_rise, oxidation_differential], grade: watch}
    message: ester carbonyl
    source: test fixture
"""


def _grade(folder, samples, references=None):
    (folder / "rules.yaml").write_text(RULES)
    (folder / "samples.csv").write_text(samples)
    rs = load_ruleset(folder / "rules.yaml")
    batch = measure_sample_spectra(read_samples(folder / "samples.csv"), rs, references)
    return batch, grade_batch(batch, rs)


@pytest.mark.parametrize("text, canonical, family", [
    ("POE", "polyol-ester", "ester"), ("Polyol Ester", "polyol-ester", "ester"), ("diester", "diester", "ester"),
    ("pao+ester", "pao+ester", "ester"), ("ester+mineral", "mineral+ester", "ester"), ("PAO", "pao", "hydrocarbon"),
    ("phosphate ester", "phosphate-ester", "phosphate-ester"), ("polyalkylene glycol", "pag", "pag")])
def test_base_stock_spellings_read_to_one_name_and_family(text, canonical, family):
    assert canonical_base_stock(text) == canonical and base_stock_family(canonical) == family


def test_unknown_base_stock_is_refused_naming_it():
    with pytest.raises(BaseStockError, match="'synthetic'"):
        canonical_base_stock("synthetic")


def test_rows_with_an_unknown_method_or_base_stock_are_rejected_with_row_and_field(tmp_path):
    batch, graded = _grade(tmp_path, "sample_id,class,lubricant,oxidation,method,base_stock\n"
                                     "A,pump,MIN-46,20,differential,\n"
                                     "B,pump,MIN-46,20,spectral,\n"
                                     "C,pump,MIN-46,20,direct,synthetic\n"
                                     "D,pump,MIN-46,20,direct,POE\n")
    rejects = {(r.row, r.field, r.code) for r in batch.rejects}
    assert rejects == {(2, "method", "D011"), (3, "base_stock", "D011")}
    assert graded.find("A").method == "subtraction"  # D7418's "differential" is spectral subtraction
    assert graded.counts()["read"] == 4 and graded.counts()["rejected"] == 2


def test_unknown_base_stock_in_a_rule_set_is_an_error_with_its_line(tmp_path):
    path = tmp_path / "rules.yaml"
    path.write_text(RULES.replace("base_stock: polyol-ester", "base_stock: synthetic"))
    with pytest.raises(InvalidFile) as caught:
        load_ruleset(path)
    assert any(p.line == 6 and "synthetic" in p.message for p in caught.value.problems)


def test_a_differential_reading_is_never_graded_by_a_direct_limit_and_the_reverse(tmp_path):
    # the case: an ester's differential reading of 40 must not become a direct rise of 40 - 50
    _, graded = _grade(tmp_path, "sample_id,class,lubricant,oxidation,method\n"
                                 "D,pump,MIN-46,12,direct\n"
                                 "S,pump,MIN-46,12,subtraction\n"
                                 "E,pump,POE-46,40,differential\n")
    direct, differential, ester = graded.find("D"), graded.find("S"), graded.find("E")
    assert [r.rule for r in direct.reasons] == ["carbonyl-rise"]  # rise 11
    assert "carbonyl-differential" in {n.rule for n in direct.not_evaluated}
    assert [r.rule for r in differential.reasons] == ["carbonyl-differential"]
    assert "carbonyl-rise" in {n.rule for n in differential.not_evaluated}
    # the class grades both conventions, so neither reading goes ungraded: no caveat on every FTIR sample
    assert "ftir-other-convention" not in {c.caveat for c in direct.caveats + differential.caveats}
    assert [(r.rule, r.grade, r.capped_from) for r in ester.reasons] == [("carbonyl-differential", "watch", "alert")]


def test_a_reading_no_rule_of_its_convention_grades_is_said_on_the_sample(tmp_path):
    (tmp_path / "rules.yaml").write_text(RULES.replace(
        "      - {id: carbonyl-differential, measure: oxidation_differential, above: {watch: 8, alert: 15}, message: m,\n"
        "         source: test fixture}\n", ""))
    (tmp_path / "samples.csv").write_text("sample_id,class,lubricant,oxidation,an,method\n"
                                          "S,pump,MIN-46,40,0.1,differential\n")
    rs = load_ruleset(tmp_path / "rules.yaml")
    graded = grade_batch(measure_sample_spectra(read_samples(tmp_path / "samples.csv"), rs, None), rs)
    result = graded.find("S")
    notes = {c.caveat: c.message for c in result.caveats}
    assert "carbonyl-rise are written for direct-trend readings" in notes["ftir-other-convention"]
    assert "carbonyl-rise" in {n.rule for n in result.not_evaluated}


def test_ester_caveat_matches_every_member_of_the_family(tmp_path):
    _, graded = _grade(tmp_path, "sample_id,class,lubricant,oxidation,base_stock\n"
                                 + "".join(f"{k},pump,MIN-46,30,{b}\n" for k, b in
                                           enumerate(["POE", "diester", "pao+ester", "mineral+ester", "ester"])))
    for k in range(5):
        result = graded.find(str(k))
        assert result.grade == "watch" and [c.caveat for c in result.caveats][:1] == ["ester-carbonyl"], k


@pytest.fixture
def spectra(tmp_path):
    write_jcampdx(tmp_path / "new-min.jdx", X, oil_spectrum(X), form="AFFN")
    # another formulation's new oil, with much more carbonyl: the wrong reference for MIN-46's used oil
    write_jcampdx(tmp_path / "new-other.jdx", X, oil_spectrum(X, oxidation=0.3), form="AFFN")
    write_jcampdx(tmp_path / "used.jdx", X, oil_spectrum(X, oxidation=0.12), form="SQZ")
    write_jcampdx(tmp_path / "ester-01mm.jdx", X, oil_spectrum(X, "ester", oxidation=0.1), form="DIF")
    return tmp_path


def test_each_sample_is_read_against_its_own_reference_even_sharing_a_file(spectra):
    refs = {"MIN-46": spectra / "new-min.jdx", "OTHER-46": spectra / "new-other.jdx"}
    batch, graded = _grade(spectra, "sample_id,class,lubricant,spectrum\n"
                                    "M,pump,MIN-46,used.jdx\nO,pump,OTHER-46,used.jdx\n", refs)
    m, o = graded.find("M"), graded.find("O")
    assert m.reference_spectrum.endswith("new-min.jdx") and o.reference_spectrum.endswith("new-other.jdx")
    # D7412 12.1-12.2: 0.12 absorbance gained at 0.1 mm is 12 abs/cm
    assert graded.measured.loc[1, "oxidation_differential"] == pytest.approx(12.0, abs=0.1)
    # O: a band 0.12 - 0.30 = -0.18 high (sigma 14): area -0.18 x 14 x sqrt(2 pi) = -6.3 absorbance x cm-1,
    # far below zero: the reference does not match; not evaluated, and said
    assert np.isnan(graded.measured.loc[2, "oxidation_differential"])
    notes = {c.caveat: c.message for c in o.caveats}
    assert "reference does not match this oil" in notes["reference-mismatch"] and "-6.3" in notes["reference-mismatch"]
    assert "carbonyl-differential" in {n.rule for n in o.not_evaluated}


def test_a_saturated_band_is_not_measured_with_a_caveat_and_a_thinner_cell_is_read(spectra):
    # the new ester's carbonyl (2.0 at 0.1 mm) is above the band file's 1.5 saturation threshold
    write_jcampdx(spectra / "ester-thin.jdx", X, 0.25 * oil_spectrum(X, "ester", oxidation=0.1), form="DIF",
                  path_length="0.025 MM")
    write_jcampdx(spectra / "ester-diluted.jdx", X, 0.25 * oil_spectrum(X, "ester", oxidation=0.1), form="DIF")
    _, graded = _grade(spectra, "sample_id,class,lubricant,spectrum,dilution,path_length_mm\n"
                                "T,pump,POE-46,ester-01mm.jdx,,\n"
                                "U,pump,POE-46,ester-thin.jdx,,\n"
                                "V,pump,POE-46,ester-diluted.jdx,4,\n"
                                "W,pump,POE-46,ester-diluted.jdx,,0.025\n"
                                "X,pump,POE-46,ester-diluted.jdx,,inf\n")
    saturated = graded.find("T")
    notes = {c.caveat: c.message for c in saturated.caveats}
    assert "oxidation: not measured: saturated" in notes["ftir-band-not-measured"]
    assert "dilute the sample or use a thinner cell" in notes["ftir-band-not-measured"]
    assert np.isnan(graded.measured.loc[1, "oxidation"])
    # the same oil in a 0.025 mm cell (##PATH LENGTH=), diluted 1:4 in a 0.1 mm cell, or a 0.025 mm cell
    # given by the row, reads the same direct height at 0.1 mm: the ester's own carbonyl, 2.0 at 1740 (plus
    # the 0.1 gained at 1712, 0.0135 of which reaches 1740: exp(-0.5 (28/14)^2) = 0.135)
    for row in (2, 3, 4):
        assert graded.measured.loc[row, "oxidation"] == pytest.approx(graded.measured.loc[2, "oxidation"], rel=1e-5)
    assert graded.measured.loc[2, "oxidation"] == pytest.approx(100 * (1.995 + 0.0135), rel=0.005)
    (reject,) = [r for r in graded.rejects if r.sample_id == "X"]
    assert reject.field == "path_length_mm" and "finite" in reject.reason


def test_ester_carbonyl_inference_wording_threshold_and_phosphate_esters():
    ester = detect_ester(make_spectrum("new-ester.jdx", X, oil_spectrum(X, "ester"), "1/CM", "ABSORBANCE"))
    assert ester.inferred and "ester carbonyl present (an ester base stock or an ester additive)" in ester.sentence
    # a mineral oil with a polymethacrylate viscosity modifier: a carbonyl near 1730, 0.5 high at 0.1 mm
    # (our estimate of a few percent of PMA; see the band file) stays below the 1.5 threshold
    pma = oil_spectrum(X) + gaussian(X, 1730, 0.5 * 12 * np.sqrt(2 * np.pi), 12)
    modified = detect_ester(make_spectrum("new-pma.jdx", X, pma, "1/CM", "ABSORBANCE"))
    assert not modified.inferred and 0.4 < modified.peak_absorbance < 0.6
    # a phosphate ester has no carbonyl: declared as such with none in the spectrum is no conflict
    mineral = detect_ester(make_spectrum("new-pe.jdx", X, oil_spectrum(X), "1/CM", "ABSORBANCE"))
    assert not resolve_base_stock("phosphate ester", mineral).conflict
    assert resolve_base_stock("POE", mineral).conflict  # a polyol ester without its carbonyl is
    assert resolve_base_stock("mineral", ester).conflict


def test_lint_warns_when_an_ester_cap_leaves_an_oxidation_measure_uncovered(tmp_path):
    text = RULES.replace("      - {id: carbonyl-rise,", "      - {id: carbonyl-step, measure: oxidation_step, above: "
                         "{watch: 5}, message: m, source: test fixture}\n      - {id: carbonyl-rise,")
    (tmp_path / "rules.yaml").write_text(text)
    warnings = [p for p in lint_ruleset(load_ruleset(tmp_path / "rules.yaml")) if p.code == "W014"]
    assert len(warnings) == 1 and "oxidation_step" in warnings[0].message and "carbonyl-step" in warnings[0].message


@pytest.mark.parametrize("measure, limit, warned", [
    ("oxidation", 400, False), ("oxidation", 600, True),  # a direct reading: 5 absorbance at 0.1 mm is 500
    ("oxidation_differential", 100, False), ("oxidation_differential", 200, True),  # a gain beyond saturation
    ("oxidation_rise", 200, True)])
def test_lint_plausibility_per_convention(tmp_path, measure, limit, warned):
    text = RULES.replace("measure: oxidation_rise, above: {watch: 8, alert: 15}",
                         f"measure: {measure}, above: {{watch: {limit - 1}, alert: {limit}}}")
    (tmp_path / "rules.yaml").write_text(text)
    codes = [p.code for p in lint_ruleset(load_ruleset(tmp_path / "rules.yaml"))]
    assert ("W009" in codes) == warned


def test_a_lab_column_mapped_to_the_differential_measure_is_a_differential_reading(tmp_path):
    # a lab that reports "Ox diff" (differential, abs/cm) says its convention through the column map
    from sumpwise import load_column_map

    (tmp_path / "rules.yaml").write_text(RULES)
    (tmp_path / "cm.yaml").write_text('oxidation_differential: {column: "Ox diff"}\n')
    (tmp_path / "s.csv").write_text("sample_id,class,lubricant,Ox diff\nA,pump,MIN-46,12\n")
    rs = load_ruleset(tmp_path / "rules.yaml")
    graded = grade_batch(read_samples(tmp_path / "s.csv", columns=load_column_map(tmp_path / "cm.yaml")), rs)
    result = graded.find("A")
    assert result.method == "subtraction" and [r.rule for r in result.reasons] == ["carbonyl-differential"]


def test_lint_warns_when_an_ester_caveat_lists_members_instead_of_the_family(tmp_path):
    # the case: `in: [ester, mineral+ester]` let polyol-ester, diester and POE rows escape
    text = RULES.replace("when: {field: base_stock_family, equals: ester}",
                         "when: {field: base_stock, in: [ester, mineral+ester]}")
    (tmp_path / "rules.yaml").write_text(text)
    warnings = [p for p in lint_ruleset(load_ruleset(tmp_path / "rules.yaml")) if p.code == "W015"]
    assert len(warnings) == 1 and "ester, mineral+ester" in warnings[0].message
