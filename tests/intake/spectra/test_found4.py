"""Silent wrong grades found with public JCAMP-DX files: spectra that are not an oil's transmission spectrum.

Each test grades through the real command line and names the grade before the fix. Sources: an oil is
read as a liquid through a transmission cell of 0.025-0.1 mm (ASTM D7214, confirmed); transmittance is
the light through the sample over the light through the background (its definition), so a fraction at
most about 1 and a percent at most about 100 over most of a spectrum; the screw-compressor rule set's
carbonyl-rise ladder (watch 8, alert 15, urgent 30 abs/cm above COMP-46-M's new-oil 1.5) is an
editable default, no source. The public files are not copied here: the spectra are synthetic
(tests/support/synthetic_spectra.py) with the labels and magnitudes the public files show.
"""

import json
import re

import numpy as np
import pytest
from conftest import ROOT, run_cli

from synthetic_spectra import oil_spectrum, wavenumber_grid, write_jcampdx

SCREW = ROOT / "rules" / "screw-compressor.yaml"
X = wavenumber_grid()
HEADER = "sample_id,unit_id,class,lubricant,sampled_on,oil_hours,an,spectrum"


def _grade(folder, rows, *options):
    (folder / "samples.csv").write_text("\n".join(rows) + "\n")
    run = run_cli("grade", folder / "samples.csv", "--rules", SCREW, *options)
    return run, {r["sample_id"]: r for r in map(json.loads, run.out.splitlines())}


def _row(sid, name):
    return f"{sid},C7,screw-compressor,COMP-46-M,2026-11-02,3000,0.15,{name}"


@pytest.mark.parametrize("label", ["##PATH LENGTH= 5 CM", "##STATE= GAS"])
def test_a_gas_phase_hydrocarbon_spectrum_is_refused_not_graded_as_an_oil(tmp_path, label):
    # found with the public gas-phase infrared files shipped in the `jcamp` package's repository (butane,
    # propane, iso-pentane: ##STATE=GAS, ##PATH LENGTH=5 CM; their C-H stretch reaches 1.5-1.8 as recorded,
    # the saturation threshold). The C-H check takes a stretch at that threshold for a whole oil through any
    # cell, and the path check trusts a declared path: before, `spectra` measured those three files and `grade`
    # read such a file as an oil with almost no carbonyl (0.003 abs/cm per 0.1 mm at 50 mm): normal.
    # The same here: a hydrocarbon gas whose C-H stretch and bend read as butane's do (1.7 and 0.6 as recorded).
    gas = oil_spectrum(X, path_mm=0.02, offset=0.0, slope=0.0, noise=2e-4, seed=56)
    write_jcampdx(tmp_path / "gas.jdx", X[::-1], gas[::-1], form="DIFDUP")
    text = (tmp_path / "gas.jdx").read_text()
    extra = label if "STATE" in label else "##PATH LENGTH= 5 CM"
    (tmp_path / "gas.jdx").write_text(text.replace("##OWNER", f"{extra}\n##OWNER"))
    run, records = _grade(tmp_path, [HEADER, _row("G", "gas.jdx")])
    assert run.code == 0, run.err
    assert records == {}
    assert re.search(r"rejected F001: spectrum: .*gas\.jdx:\d+: ##(PATH LENGTH='5 CM' is 50 mm|STATE='GAS' names GAS)",
                     run.err), run.err



def test_a_single_beam_intensity_labelled_transmittance_is_refused(tmp_path):
    # a public JCAMP-DX reader's example header (JCAMPDXir.jl) reads ##YUNITS=TRANSMITTANCE with ##MAXY=3.75e+006:
    # raw detector counts under a transmittance label. Here: an invented source envelope (a Planck curve of a
    # 1300 K source, 1e5 counts at its top) times the transmittance of an oil through 0.1 mm that gained 0.085
    # of carbonyl (8.5 abs/cm; direct 9.5, a rise of 8.0: watch)
    c2 = 1.4388  # second radiation constant, cm K (CODATA)
    envelope = X**3 / np.expm1(c2 * X / 1300.0)
    counts = 1e5 * envelope / envelope.max() * 10 ** -oil_spectrum(X, oxidation=0.085, noise=2e-4, seed=57)
    write_jcampdx(tmp_path / "single-beam.jdx", X[::-1], counts[::-1], form="DIFDUP", y_units="TRANSMITTANCE",
                  path_length="0.1 MM")
    run, records = _grade(tmp_path, [HEADER, _row("S", "single-beam.jdx")])
    assert run.code == 0, run.err
    # before: read as percent transmittance, the carbonyl sat on the source's curve: -0.6 abs/cm direct, normal
    assert records == {}
    assert re.search(r"rejected F001: spectrum: .*single-beam\.jdx:\d+: y values labelled 'TRANSMITTANCE' have a median "
                     r"of 7\.\d+e\+04: .*single-beam or raw intensity", run.err), run.err
    # a percent transmittance a little above 100 % in places (a background that absorbed more) is still read
    percent = 100 * 10 ** -oil_spectrum(X, oxidation=0.085, noise=2e-4, seed=57) * 1.04
    write_jcampdx(tmp_path / "percent.jdx", X[::-1], percent[::-1], form="DIFDUP", y_units="TRANSMITTANCE",
                  path_length="0.1 MM")
    run, records = _grade(tmp_path, [HEADER, _row("P", "percent.jdx")])
    assert records["P"]["values"]["oxidation"] == pytest.approx(9.5, abs=0.3)
