"""A new-oil reference of another formulation: the ester carbonyl it lacks is not graded as oxidation.

The sample's oil carries an ester additive (a polymethacrylate viscosity modifier's carbonyl) that
the reference spectrum's oil has not; subtracting leaves that carbonyl, which read as tens of abs/cm
of oxidation gained. Sources: differential trend subtracts the new oil of the same formulation
(ASTM D7418, confirmed; E2412 10.2 compares with unused oil of the same formulation, confirmed);
oxidation products absorb at 1725-1650 cm-1 and ester carbonyls at 1770-1725 cm-1 (Tormos et al.,
Tribology Transactions 55 (2012) 872, confirmed); abs/cm = 100 x abs/0.1 mm (ASTM D7412 12.1-12.2,
confirmed). The additive's carbonyl heights (0.1 and 0.5 at 0.1 mm) are realistic for a few percent of
a polymethacrylate (from memory; the band file's note). The screw-compressor carbonyl-differential
ladder (watch 8, alert 15, urgent 30 abs/cm) is an editable default, no source.
"""

import json

import pytest
from conftest import ROOT, run_cli

from synthetic_spectra import oil_spectrum, wavenumber_grid, write_jcampdx

SCREW = ROOT / "rules" / "screw-compressor.yaml"
X = wavenumber_grid()
HEADER = "sample_id,unit_id,class,lubricant,sampled_on,oil_hours,an,spectrum"


def _write(path, y):
    """As an instrument exports it: descending wavenumbers, DIF/DUP, ##PATH LENGTH= 0.1 MM."""
    return write_jcampdx(path, X[::-1], y[::-1], form="DIFDUP", path_length="0.1 MM")


def _grade(folder, spectra, reference):
    rows = [HEADER] + [f"{sid},C7,screw-compressor,COMP-46-M,2026-11-02,3000,0.15,{name}" for sid, name in spectra.items()]
    (folder / "samples.csv").write_text("\n".join(rows) + "\n")
    run = run_cli("grade", folder / "samples.csv", "--rules", SCREW, "--reference",
                  f"COMP-46-M={folder / reference}")
    assert run.code == 0, run.err
    return {r["sample_id"]: r for r in map(json.loads, run.out.splitlines())}


@pytest.fixture()
def oils(tmp_path):
    # the oil in service carries an ester additive; "new-plain" is a new oil of another formulation without it
    _write(tmp_path / "new-plain.jdx", oil_spectrum(X, noise=2e-4, seed=61))
    for additive in (0.05, 0.25):
        _write(tmp_path / f"new-{additive}.jdx", oil_spectrum(X, noise=2e-4, seed=62, ester_additive=additive))
        _write(tmp_path / f"used-{additive}.jdx",
               oil_spectrum(X, oxidation=0.03, noise=2e-4, seed=63, ester_additive=additive))
    return tmp_path


def test_a_reference_without_the_oils_ester_additive_is_a_mismatch_not_a_gain(oils):
    records = _grade(oils, {"A": "used-0.05.jdx", "B": "used-0.25.jdx"}, "new-plain.jdx")
    # before: the additive's carbonyl read as gained: A 10.4 abs/cm (watch), B 50.2 (urgent), for 3.0 gained
    for sid in ("A", "B"):
        record = records[sid]
        assert record["values"]["oxidation_differential"] is None, sid
        assert record["grade"] == "normal", sid  # graded on what is left: its acid number and hours
        assert "carbonyl-differential" in {n["rule"] for n in record["not_evaluated"]}
        note = {c["caveat"]: c["message"] for c in record["caveats"]}["reference-mismatch"]
        assert "within the ester carbonyl band (1725-1770 cm-1)" in note and "peaks at 17" in note
        assert "new-plain.jdx" in note


@pytest.mark.parametrize("additive", [0.05, 0.25])
def test_the_same_formulations_new_oil_still_reads_the_gain(oils, additive):
    records = _grade(oils, {"A": f"used-{additive}.jdx"}, f"new-{additive}.jdx")
    record = records["A"]
    assert record["values"]["oxidation_differential"] == pytest.approx(3.0, abs=0.3)
    assert "reference-mismatch" not in {c["caveat"] for c in record["caveats"]}
    assert record["grade"] == "normal"


def test_a_large_gain_over_a_small_additive_residue_is_still_graded(oils):
    # a carbonyl gained of 0.30 (30 abs/cm, urgent) peaks among the oxidation products even over the 0.1 of
    # additive carbonyl the reference lacks: it is read (30.6 abs/cm, the residue adding 2 %), not refused
    _write(oils / "used-urgent.jdx", oil_spectrum(X, oxidation=0.30, noise=2e-4, seed=64, ester_additive=0.05))
    record = _grade(oils, {"U": "used-urgent.jdx"}, "new-plain.jdx")["U"]
    assert record["values"]["oxidation_differential"] == pytest.approx(30.6, abs=0.4)
    assert record["grade"] == "urgent"


@pytest.mark.parametrize("real_mm", [0.024, 0.0225])
def test_an_ester_oils_reference_through_a_thinner_cell_than_declared_is_a_mismatch(tmp_path, real_mm):
    # a polyol ester oil in a 0.025 mm cell (##PATH LENGTH= 0.025 MM) that gained 0.065 of carbonyl at 0.1 mm
    # (6.5 abs/cm, normal); its new oil recorded through a cell 4 % or 10 % thinner, labelled 0.025 MM too.
    # The ester's own carbonyl (2.0 at 0.1 mm) is left 4-10 % in the difference, at the ester's 1740 cm-1
    X25 = X[::-1]
    write_jcampdx(tmp_path / "used.jdx", X25, oil_spectrum(X, "ester", oxidation=0.065, noise=2e-4, seed=71,
                                                           path_mm=0.025)[::-1], form="DIFDUP", path_length="0.025 MM")
    write_jcampdx(tmp_path / "new.jdx", X25, oil_spectrum(X, "ester", noise=2e-4, seed=72, path_mm=real_mm)[::-1],
                  form="DIFDUP", path_length="0.025 MM")
    rows = [HEADER + ",base_stock", "E,C7,screw-compressor,COMP-46-M,2026-11-02,3000,0.15,used.jdx,polyol-ester"]
    (tmp_path / "samples.csv").write_text("\n".join(rows) + "\n")
    run = run_cli("grade", tmp_path / "samples.csv", "--rules", SCREW, "--reference", f"COMP-46-M={tmp_path / 'new.jdx'}")
    assert run.code == 0, run.err
    (record,) = map(json.loads, run.out.splitlines())
    # before: read as gained, 9.1 abs/cm (watch) at 0.024 mm, 21.0 (alert) at 0.0225, for 6.5 gained
    assert record["values"]["oxidation_differential"] is None
    note = {c["caveat"]: c["message"] for c in record["caveats"]}["reference-mismatch"]
    assert "within the ester carbonyl band" in note and "thinner cell" in note
    # and the reference recorded through the declared cell reads the gain
    write_jcampdx(tmp_path / "new.jdx", X25, oil_spectrum(X, "ester", noise=2e-4, seed=72, path_mm=0.025)[::-1],
                  form="DIFDUP", path_length="0.025 MM")
    run = run_cli("grade", tmp_path / "samples.csv", "--rules", SCREW, "--reference", f"COMP-46-M={tmp_path / 'new.jdx'}")
    (record,) = map(json.loads, run.out.splitlines())
    assert record["values"]["oxidation_differential"] == pytest.approx(6.5, abs=0.3)
