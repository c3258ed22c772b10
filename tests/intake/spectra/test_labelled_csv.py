"""Instrument CSV exports with a labelled block (`LABEL,value` rows, `XYDATA`, the rows, free text after).

The layout is that of a public instrument-export test file (the JASCOFiles.jl package's
test/data/ftir_test.csv, MIT licence): JCAMP-DX label names in the first column, `XYDATA` alone on
a line, comma-separated rows, a blank line and an "Extended Information" block of settings in a
legacy Japanese encoding (Shift-JIS). Before, such a file was refused as unreadable ("cannot read
file: 'utf-8' codec can't decode byte 0x83") for free text no reading needs, and without that text
its first row (`TITLE,`) was taken for a column header and the file refused because "the header
does not say absorbance or transmittance" although its `YUNITS,ABSORBANCE` did. Label meanings: JCAMP-DX 4.24 (McDonald & Wilks 1988). The oil spectra are
synthetic (tests/support/synthetic_spectra.py); the screw-compressor carbonyl-rise ladder (watch 8,
alert 15 abs/cm above COMP-46-M's new-oil 1.5) is an editable default, no source.
"""

import json

import numpy as np
import pytest
from conftest import ROOT, run_cli

from sumpwise.intake.spectra.spectrum import SpectrumError
from sumpwise.intake.spectra.spectrum_csv import read_spectrum_csv
from synthetic_spectra import oil_spectrum, wavenumber_grid

SCREW = ROOT / "rules" / "screw-compressor.yaml"
X = wavenumber_grid()
# "##### Extended Information", then "[comment]" and "Test Lab" in Shift-JIS, as the public file has them
FREE_TEXT = b"\r\n##### Extended Information\r\n[\x83R\x83\x81\x83\x93\x83g\x8f\xee\x95\xf1]\r\n\x8e\x8e\x97\xbf,Test Lab\r\n"


def _export(path, x, y, yunits="ABSORBANCE", npoints=None, data_type="INFRARED SPECTRUM", extra=""):
    """Written as the public export is: descending x from the instrument's FIRSTX, CRLF line ends."""
    rows = [f"{a:.4f},{b:.6g}" for a, b in zip(x, y)]
    head = ["TITLE,", f"DATA TYPE,{data_type}", "ORIGIN,Brackwater Point lab", "OWNER,", "DATE,26/11/02",
            "RESOLUTION,", f"DELTAX,{x[1] - x[0]:g}", "XUNITS,1/CM", f"YUNITS,{yunits}", f"FIRSTX,{x[0]:.4f}",
            f"LASTX,{x[-1]:.4f}", f"NPOINTS,{npoints or len(rows)}", f"FIRSTY,{y[0]:.6g}"] + ([extra] if extra else [])
    path.write_bytes(("\r\n".join(head + ["XYDATA"] + rows) + "\r\n").encode("ascii") + FREE_TEXT)
    return path


def test_a_labelled_export_grades_as_its_jcamp_twin(tmp_path):
    # a compressor oil that gained 0.20 of carbonyl at 0.1 mm (direct 21 abs/cm with the new oil's 1.0: alert)
    y = oil_spectrum(X, oxidation=0.20, noise=2e-4, seed=81)
    _export(tmp_path / "used.csv", X[::-1], y[::-1])
    (tmp_path / "samples.csv").write_text("sample_id,unit_id,class,lubricant,sampled_on,oil_hours,an,spectrum\n"
                                          "L,C7,screw-compressor,COMP-46-M,2026-11-02,3000,0.15,used.csv\n")
    run = run_cli("grade", tmp_path / "samples.csv", "--rules", SCREW)
    # before: rejected F001: "cannot read file: 'utf-8' codec can't decode byte 0x83"
    assert run.code == 0, run.err
    (record,) = map(json.loads, run.out.splitlines())
    assert record["values"]["oxidation"] == pytest.approx(21.0, abs=0.3) and record["grade"] == "alert"


def test_labelled_transmittance_and_path_length_are_read(tmp_path):
    y = oil_spectrum(X, oxidation=0.20, noise=2e-4, seed=82, path_mm=0.025)
    spectrum = read_spectrum_csv(_export(tmp_path / "t.csv", X[::-1], (100 * 10 ** -y)[::-1], yunits="%T",
                                         extra="PATH LENGTH,0.025 MM"))
    assert spectrum.path_length_mm == 0.025
    assert np.allclose(spectrum.absorbance, y, atol=1e-5)  # -log10(%T / 100), to the 6 digits written


@pytest.mark.parametrize("change, line, words", [
    ({"npoints": 1000}, 12, "NPOINTS says 1000, but 1726 rows"),
    ({"data_type": "RAMAN SPECTRUM"}, 2, "not an infrared spectrum"),
    ({"yunits": "INTENSITY"}, 9, "INTENSITY"),
])
def test_a_labelled_export_that_cannot_be_read_names_its_line(tmp_path, change, line, words):
    path = _export(tmp_path / "bad.csv", X[::-1], oil_spectrum(X)[::-1], **change)
    with pytest.raises(SpectrumError) as caught:
        read_spectrum_csv(path)
    assert caught.value.line == line and words in caught.value.reason


def test_a_byte_that_is_not_utf8_on_a_row_that_is_read_is_refused_with_its_line(tmp_path):
    path = _export(tmp_path / "bad.csv", X[::-1], oil_spectrum(X)[::-1])
    raw = path.read_bytes().replace(b"XUNITS,1/CM", b"XUNITS,1/CM\x83")
    path.write_bytes(raw)
    with pytest.raises(SpectrumError) as caught:
        read_spectrum_csv(path)
    assert caught.value.line == 8 and "not UTF-8" in caught.value.reason


@pytest.mark.parametrize("extra, line, words", [
    ("SAMPLING PROCEDURE,ATR (diamond)", 14, "names ATR"),
    ("DATA PROCESSING,ATR correction", 14, "names ATR"),
    ("STATE,GAS", 14, "names GAS"),
])
def test_a_labelled_export_that_names_atr_or_a_gas_is_refused_as_jcamp_dx_is(tmp_path, extra, line, words):
    # the labels JCAMP-DX files are refused by (an ATR spectrum per 0.1 mm reads tens of times too small)
    path = _export(tmp_path / "atr.csv", X[::-1], oil_spectrum(X)[::-1], extra=extra)
    with pytest.raises(SpectrumError) as caught:
        read_spectrum_csv(path)
    assert caught.value.line == line and words in caught.value.reason


def test_a_labelled_export_that_declares_a_difference_is_read_as_one(tmp_path):
    difference = oil_spectrum(X, oxidation=0.085) - oil_spectrum(X)
    spectrum = read_spectrum_csv(_export(tmp_path / "d.csv", X[::-1], difference[::-1],
                                         extra="DATA PROCESSING,SPECTRAL SUBTRACTION OF THE NEW OIL"))
    assert spectrum.difference
