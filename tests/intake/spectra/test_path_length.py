"""A spectrum read at a path length far from its cell's is refused (F002), not graded at a fraction of its value.

The C-H stretch sits at the instrument's ceiling through any cell of the oil methods, so it
cannot tell a 0.025 mm cell from a 0.1 mm one; the CH2 bend near 1460 cm-1 does not saturate in
thin cells, and by Beer-Lambert it scales with the path. Sources: absorbance scales with path
length and values are normalised to 0.1 mm (A_0.1mm = A x 0.100 / L, common practice; ASTM D7414
1.4.1 reports per 0.1 mm, confirmed); transmission cells of the oil methods are about 0.025-0.1 mm
(ASTM D7214, confirmed); a whole hydrocarbon oil's CH2 bend about 3 absorbance at 0.1 mm (from
memory); the floor 1.0 and ceiling 8.0 are our choice (engine/intake/spectra/spectrum.py). The
screw-compressor rule set's carbonyl-rise ladder (watch 8, alert 15 abs/cm above COMP-46-M's
new-oil 1.5) is an editable default, no source.
"""

import json
import re
from pathlib import Path

import numpy as np
import pytest
from conftest import ROOT, run_cli
from hypothesis import given, settings, strategies as st

from sumpwise.intake.spectra.batch import read_spectra, read_spectrum
from sumpwise.intake.spectra.spectrum import bend_block, plausible_path
from synthetic_spectra import at_resolution, oil_spectrum, wavenumber_grid, write_jcampdx

SCREW = ROOT / "rules" / "screw-compressor.yaml"
X = wavenumber_grid()
HEADER = "sample_id,unit_id,class,lubricant,sampled_on,oil_hours,an,spectrum"


def _write(path, y, path_length=None):
    """As an instrument exports it: descending wavenumbers, DIF/DUP."""
    return write_jcampdx(path, X[::-1], y[::-1], form="DIFDUP", path_length=path_length)


def _grade(folder, rows, *options):
    (folder / "samples.csv").write_text("\n".join(rows) + "\n")
    run = run_cli("grade", folder / "samples.csv", "--rules", SCREW, *options)
    return run, {r["sample_id"]: r for r in map(json.loads, run.out.splitlines())}


def _row(sid, name, extra=""):
    return f"{sid},C7,screw-compressor,COMP-46-M,2026-11-02,3000,0.15,{name}{extra}"


@pytest.fixture()
def quarter(tmp_path):
    # a mineral compressor oil that gained 0.20 of carbonyl at 0.1 mm (20 abs/cm, direct 21 with the new
    # oil's own 1.0: a rise of 19.5, alert), recorded through a 0.025 mm cell, no ##PATH LENGTH=
    _write(tmp_path / "used-0025.jdx", oil_spectrum(X, oxidation=0.20, noise=2e-4, seed=51, path_mm=0.025))
    return tmp_path


def test_an_unlabelled_quarter_millimetre_cell_read_as_a_tenth_is_refused(quarter):
    run, records = _grade(quarter, [HEADER, _row("Q", "used-0025.jdx")])
    assert run.code == 0, run.err
    # before: read as 0.1 mm, 21 / 4 = 5.3 abs/cm direct, a rise of 3.8 over the new oil's 1.5: normal
    assert records == {}
    assert re.search(r"rejected F002: spectrum: .*used-0025\.jdx: its C-H bend \(1450-1470 cm-1\) stands 0\.7\d\d "
                     r".*when read through 0\.1 mm \(a path assumed: no ##PATH LENGTH= in the file\).*cell looks "
                     r"thinner \(about 0\.025 mm of neat oil\).*declare the path length", run.err), run.err
    assert "read 1 row(s): 0 graded, 0 unrated, 1 rejected" in run.err


@pytest.mark.parametrize("how", ["option", "column", "header"])
def test_the_same_spectrum_with_its_path_declared_grades_alert(quarter, how):
    rows = [HEADER, _row("Q", "used-0025.jdx")]
    options = ()
    if how == "option":
        options = ("--path-length", "0.025")
    elif how == "column":
        rows = [HEADER + ",path_length_mm", _row("Q", "used-0025.jdx", ",0.025")]
    else:
        text = (quarter / "used-0025.jdx").read_text()
        (quarter / "used-0025.jdx").write_text(text.replace("##OWNER", "##PATH LENGTH= 0.025 MM\n##OWNER"))
    run, records = _grade(quarter, rows, *options)
    assert run.code == 0, run.err
    assert records["Q"]["values"]["oxidation"] == pytest.approx(21.0, abs=0.3)
    assert records["Q"]["grade"] == "alert"


def test_a_tenth_millimetre_spectrum_read_at_a_quarter_is_refused(tmp_path):
    _write(tmp_path / "used-01.jdx", oil_spectrum(X, oxidation=0.07, noise=2e-4, seed=52))
    run, records = _grade(tmp_path, [HEADER, _row("T", "used-01.jdx")], "--path-length", "0.025")
    assert run.code == 0, run.err
    # before: read as 0.025 mm, every band four times its value: 32 abs/cm direct, a rise of 30.5, urgent, for
    # an oil that gained 7.0 (direct 8.0, a rise of 6.5: normal)
    assert records == {}
    assert re.search(r"rejected F002: spectrum: .*used-01\.jdx: its C-H bend .* stands 2\.9\d\d .*cell looks thicker "
                     r"\(about 0\.098 mm of neat oil\)", run.err), run.err
    # with its own header it is read at its cell, and the same run option no longer applies to it
    _write(tmp_path / "used-01.jdx", oil_spectrum(X, oxidation=0.07, noise=2e-4, seed=52), "0.1 MM")
    run, records = _grade(tmp_path, [HEADER, _row("T", "used-01.jdx")], "--path-length", "0.025")
    assert records["T"]["values"]["oxidation"] == pytest.approx(8.0, abs=0.3) and records["T"]["grade"] == "normal"


def test_an_unlabelled_quarter_cell_reference_stops_the_run(quarter):
    # sample labelled 0.025 mm; its new oil recorded through the same cell but unlabelled, read as 0.1 mm
    _write(quarter / "used.jdx", oil_spectrum(X, oxidation=0.20, noise=2e-4, seed=53, path_mm=0.025), "0.025 MM")
    _write(quarter / "new.jdx", oil_spectrum(X, noise=2e-4, seed=54, path_mm=0.025))
    run, _ = _grade(quarter, [HEADER, _row("R", "used.jdx")], "--reference", f"COMP-46-M={quarter / 'new.jdx'}")
    # before: a quarter of the new oil subtracted from the whole used oil: the used oil's own carbonyl,
    # 0.75 of the new oil's 1.0 abs/cm more than it gained (20.8 abs/cm, alert by luck); for an ester oil
    # three quarters of its 200 abs/cm carbonyl (see test_spectra_found2)
    assert run.code == 2 and run.out == ""
    assert re.search(r"new-oil reference spectrum for COMP-46-M: .*new\.jdx: its C-H bend .*cell looks thinner", run.err)


def test_diluted_spectra_are_judged_on_their_neat_oil_and_never_as_too_thick(tmp_path):
    # 1:4 in a solvent without C-H, 0.1 mm cell: 0.025 mm of neat oil, read with the row's dilution
    _write(tmp_path / "diluted.jdx", oil_spectrum(X, oxidation=0.20, noise=2e-4, seed=55, path_mm=0.025))
    run, records = _grade(tmp_path, [HEADER + ",dilution", _row("D", "diluted.jdx", ",4")])
    assert run.code == 0, run.err
    assert records["D"]["values"]["oxidation"] == pytest.approx(21.0, abs=0.3) and records["D"]["grade"] == "alert"
    # in a hydrocarbon solvent the solvent's own bend stands at a whole oil's: at 0.1 / 10 mm of neat oil that
    # is 29 at 0.1 mm, yet the solvent, not a thicker cell, put it there
    columns = oil_spectrum(X, path_mm=0.1)[:, None]
    assert plausible_path(X, columns, [0.01], [False]).all()
    assert not plausible_path(X, columns, [0.01], [True]).any()


@settings(max_examples=60, deadline=None)
@given(base=st.sampled_from(["mineral", "ester"]), c_h=st.floats(0.6, 1.2), oxidation=st.floats(0.0, 0.5),
       soot=st.floats(0.0, 0.3), cell=st.floats(0.025, 0.2), seed=st.integers(0, 10_000))
def test_realistic_oils_at_their_own_path_pass_and_at_four_times_off_do_not(base, c_h, oxidation, soot, cell, seed):
    # c_h 0.6-1.2: base stocks with less or more CH2 than the synthetic hydrocarbon (a PAG or an ester near 0.7,
    # from memory); soot up to 0.3 absorbance; cells 0.025-0.2 mm
    y = oil_spectrum(X, base, oxidation=oxidation, soot=soot, path_mm=cell, noise=2e-4, seed=seed, c_h=c_h)[:, None]
    assert plausible_path(X, y, [cell], [True]).all()
    recorded, top = bend_block(X, y)
    if top[0] < 1.5:  # a bend below saturation as recorded shows a cell four times thinner than assumed
        assert not plausible_path(X, y, [4 * cell], [True]).any()
    if c_h >= 0.9 and cell <= 0.1:
        # a cell four times thicker than assumed, for a bend of the synthetic hydrocarbon's strength or more
        # through the cells of the methods; a weaker bend, or a thick cell whose bend meets the stray-light
        # ceiling, reads under 8 at 0.1 mm and is not caught (a limit, said in spectrum.py and the README)
        assert not plausible_path(X, y, [cell / 4], [True]).any()


def test_the_realistic_spectra_of_the_tests_and_the_demo_pass_at_their_own_path():
    # every whole-oil spectrum shipped with the project, at its ##PATH LENGTH= (or 0.1 mm), passes the
    # check it would be held to without the header
    folders = [ROOT / "scenarios", ROOT / "tests" / "data" / "spectra" / "found3"]
    names = [p for folder in folders for p in sorted(folder.rglob("*.jdx"))]
    judged = 0
    for path, spectrum in zip(names, read_spectra(names)):
        if isinstance(spectrum, Exception) or spectrum.difference or "minus" in path.name or "atr" in path.name:
            continue
        column = spectrum.absorbance[:, None]
        assert plausible_path(spectrum.wavenumber, column, [spectrum.path_length_mm or 0.1], [True]).all(), path
        judged += 1
    assert judged >= 15
    # and the one public spectrum with C-H bands among the test files (a JCAMP-DX format test file of an
    # unnamed sample, no path given; its CH2 bend stands 3.2 above the level as recorded) passes the path
    # check at 0.1 mm (the C-H stretch check refuses it on its own: its stretch median is 0.89)
    public = read_spectrum(ROOT / "tests" / "data" / "spectra" / "dupdec1.jdx")
    assert plausible_path(public.wavenumber, public.absorbance[:, None], [0.1], [True]).all()



def test_each_refused_row_keeps_its_own_code(quarter):
    # three rows in one run: a good 0.1 mm oil, the unlabelled quarter cell (F002), a difference spectrum (F001)
    _write(quarter / "good.jdx", oil_spectrum(X, oxidation=0.05, noise=2e-4, seed=58))
    _write(quarter / "diff.jdx", oil_spectrum(X, oxidation=0.05) - oil_spectrum(X))
    run, records = _grade(quarter, [HEADER, _row("A", "diff.jdx"), _row("B", "used-0025.jdx"), _row("C", "good.jdx")])
    assert run.code == 0, run.err
    assert set(records) == {"C"}
    assert re.search(r"row 1 \(sample A\): rejected F001: spectrum: ", run.err), run.err
    assert re.search(r"row 2 \(sample B\): rejected F002: spectrum: ", run.err), run.err
    assert "read 3 row(s): 1 graded, 0 unrated, 2 rejected" in run.err


# Base stocks of realistic CH2 content (c_h: the synthetic hydrocarbon's C-H bands times this; a mineral oil
# 0.9-1.1, a PAO 0.9-1.0, a polyol ester 0.6-0.8 with its own carbonyl and C-O bands: from memory), two
# instruments' stray light (0.01 % and 0.1 % of the light: common practice, no source), two resolutions
# (2 and 8 cm-1), new and used (carbonyl 0.3, soot 0.3 at 0.1 mm).
_STOCKS = {"mineral": ("mineral", (0.9, 1.0, 1.1)), "PAO": ("mineral", (0.9, 0.95, 1.0)),
           "ester": ("ester", (0.6, 0.7, 0.8))}


def _bend_range(stock, cell):
    base, levels = _STOCKS[stock]
    columns = np.stack([at_resolution(X, oil_spectrum(X, base, oxidation=used, soot=used, path_mm=cell,
                                                      stray_light=stray, c_h=c_h), resolution)
                        for c_h in levels for stray in (1e-4, 1e-3) for resolution in (2.0, 8.0)
                        for used in (0.0, 0.3)], axis=1)
    recorded, _ = bend_block(X, columns)
    return float(recorded.min()), float(recorded.max())


def test_a_cell_half_or_twice_the_one_assumed_is_not_told_apart_by_the_bend():
    # Measured, and why the engine does not judge a declared path or a factor of two (figures in spectrum.py):
    # the bend as recorded through 0.05, 0.1 and 0.2 mm cells of each base stock.
    found = {(stock, cell): _bend_range(stock, cell) for stock in _STOCKS for cell in (0.05, 0.1, 0.2)}
    for stock in _STOCKS:
        half, whole, double = (found[(stock, cell)] for cell in (0.05, 0.1, 0.2))
        # twice the cell: the bend meets the stray-light ceiling, so 0.1 and 0.2 mm overlap in every stock
        assert double[0] < whole[1], (stock, whole, double)
        # half the cell: apart within one stock, but only by a factor of 1.4-1.5 (lowest at 0.1 mm over highest
        # at 0.05 mm), which is the margin left by CH2 contents that are themselves from memory
        assert half[1] < whole[0] < 1.6 * half[1], (stock, half, whole)
    # across stocks there is no gap: a mineral oil through 0.05 mm reads as high as an ester through 0.1 mm
    assert found[("mineral", 0.05)][1] >= 0.95 * found[("ester", 0.1)][0], found
    # so a mineral oil through 0.05 mm read at 0.1 mm (every band at half) passes the path check
    y = oil_spectrum(X, oxidation=0.2, path_mm=0.05, noise=2e-4, seed=59)[:, None]
    assert plausible_path(X, y, [0.1], [True]).all()
