"""A row whose `method` names one FTIR convention while its spectrum is read by the other is
graded by what was read, and the run says so (it dropped the lab's word without one).

The spectrum decides: with a new-oil reference for the lubricant it is subtracted, without one
it is read directly (README, FTIR conventions). The demo's ST-1 spectrum, no reference given."""

from conftest import ROOT, run_cli

FTIR = ROOT / "scenarios" / "brackwater" / "ftir"


def test_a_declared_method_the_spectrum_overrides_is_noted(tmp_path):
    spectrum = FTIR / "spectra" / "ST-1-2026-11-02.jdx"
    samples = tmp_path / "s.csv"
    samples.write_text("sample_id,unit_id,class,lubricant,sampled_on,oil_hours,kv40,an,spectrum,method\n"
                       f"FT-4,ST-1,steam-turbine,TURB-46-M,2026-11-02,46700,48.3,0.41,{spectrum},subtraction\n"
                       f"FT-5,ST-2,steam-turbine,TURB-46-M,2026-11-02,46700,48.3,0.41,{spectrum},direct\n")
    run = run_cli("grade", samples, "--rules", FTIR / "site-ftir.yaml", "--format", "csv")
    assert run.code == 0, run.err
    assert ("note: 1 row(s) (row 1) say method subtraction, but their spectrum was read by direct trend: no "
            "new-oil reference spectrum is given for their lubricant") in run.err
    assert run.err.count("say method") == 1  # the row that said direct was read directly: nothing to say
