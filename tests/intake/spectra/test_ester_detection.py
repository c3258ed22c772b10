"""Ester base stock inference from a new-oil spectrum.

Source: ester carbonyl bands at 1770-1725 cm-1 (Tribology
Transactions 55 (2012) 872, per ftir.md, confirmed). The 0.5 abs/0.1 mm
threshold is the packaged band file's choice (no published source); the
synthetic spectra are invented for the test.
"""

import pytest

from sumpwise.intake.spectra.ester import detect_ester, resolve_base_stock
from sumpwise.intake.spectra.spectrum import make_spectrum
from synthetic_spectra import oil_spectrum, wavenumber_grid

X = wavenumber_grid()


def _spectrum(base_stock, name):
    return make_spectrum(name, X, oil_spectrum(X, base_stock), "1/CM", "ABSORBANCE")


def test_synthetic_ester_new_oil_is_inferred_with_its_evidence():
    evidence = detect_ester(_spectrum("ester", "new-ester.jdx"))
    assert evidence.inferred
    assert 1725 <= evidence.peak_position_cm1 <= 1770
    assert evidence.peak_position_cm1 == pytest.approx(1740, abs=2)
    assert evidence.threshold == 1.5  # the band file's figure, justified there
    # the synthetic ester's carbonyl (2.0 high at 0.1 mm) saturates: present, by saturation
    assert "new-ester.jdx" in evidence.sentence and "saturated" in evidence.sentence
    assert "ester carbonyl present (an ester base stock or an ester additive)" in evidence.sentence


def test_synthetic_mineral_new_oil_is_not_inferred_ester():
    evidence = detect_ester(_spectrum("mineral", "new-mineral.jdx"))
    assert not evidence.inferred
    assert evidence.peak_absorbance < 0.05
    assert "no ester carbonyl" in evidence.sentence


def test_path_length_scales_the_evidence_to_01mm():
    thin = make_spectrum("thin.jdx", X, 0.25 * oil_spectrum(X, "ester"), "1/CM", "ABSORBANCE")
    assert detect_ester(thin, path_length_mm=0.025).peak_absorbance == pytest.approx(
        detect_ester(_spectrum("ester", "full.jdx")).peak_absorbance, rel=1e-12)


def test_undeclared_base_stock_takes_the_inference():
    finding = resolve_base_stock(None, detect_ester(_spectrum("ester", "r.jdx")))
    assert (finding.base_stock, finding.basis, finding.conflict) == ("ester", "inferred from spectrum", False)


def test_declared_base_stock_wins_and_a_disagreement_is_reported():
    evidence = detect_ester(_spectrum("ester", "r.jdx"))
    finding = resolve_base_stock("mineral", evidence)
    assert (finding.base_stock, finding.basis, finding.conflict) == ("mineral", "declared", True)
    assert finding.evidence is evidence and "disagrees" in finding.sentence


def test_declared_ester_agreeing_with_the_spectrum_is_no_conflict():
    finding = resolve_base_stock("mineral+ester", detect_ester(_spectrum("ester", "r.jdx")))
    assert finding.base_stock == "mineral+ester" and not finding.conflict


def test_declared_ester_with_no_carbonyl_in_the_spectrum_is_a_conflict():
    finding = resolve_base_stock("ester", detect_ester(_spectrum("mineral", "r.jdx")))
    assert finding.conflict


def test_no_declaration_and_no_ester_leaves_it_unknown():
    finding = resolve_base_stock("", detect_ester(_spectrum("mineral", "r.jdx")))
    assert finding.base_stock is None and finding.basis == "unknown"


def test_spectrum_not_reaching_the_window_gives_no_inference():
    short = make_spectrum("short.jdx", wavenumber_grid(2000, 4000, 2), oil_spectrum(wavenumber_grid(2000, 4000, 2)),
                          "1/CM", "ABSORBANCE")
    evidence = detect_ester(short)
    assert not evidence.inferred and "does not cover" in evidence.sentence
    assert resolve_base_stock("mineral", evidence).conflict is False
