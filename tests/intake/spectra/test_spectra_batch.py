"""measure_spectra and the CSV reader: per-spectrum rejection, direct vs subtraction, per-row references.

Checks against closed-form Gaussian areas (see test_bands.py) and ASTM D7412
12.1-12.2 (abs/cm = abs/0.1 mm x 100).
"""

import math

import numpy as np
import pytest

from sumpwise.intake.spectra.batch import measure_spectra
from sumpwise.intake.spectra.spectrum import SpectrumError
from sumpwise.intake.spectra.spectrum_csv import parse_spectrum_csv
from synthetic_spectra import oil_spectrum, wavenumber_grid, write_jcampdx

X = wavenumber_grid()
CARBONYL = 0.2  # added carbonyl peak height, absorbance at 0.1 mm (a realistic used oil)


def _carbonyl_area():
    area = CARBONYL * 14 * math.sqrt(2 * math.pi)  # Gaussian of height h, sigma 14: area h sigma sqrt(2 pi)
    z = lambda v: (v - 1712) / (14 * math.sqrt(2))
    return area / 2 * (math.erf(z(1800)) - math.erf(z(1670)))


def _oil(x, **kw):
    """The synthetic oil's true absorbance (no stray-light ceiling), so band areas stay closed-form."""
    return oil_spectrum(x, stray_light=0.0, **kw)


@pytest.fixture
def files(tmp_path):
    new = write_jcampdx(tmp_path / "new.jdx", X[::-1], _oil(X)[::-1], form="DIFDUP", significant=9)
    used = write_jcampdx(tmp_path / "used.jdx", X[::-1], _oil(X, oxidation=CARBONYL)[::-1], form="SQZ",
                         significant=9)
    broken = tmp_path / "broken.jdx"
    broken.write_text(used.read_text().replace("##END=\n", ""))
    short = write_jcampdx(tmp_path / "short.jdx", X[X > 700], _oil(X[X > 700]), form="AFFN")
    csv = tmp_path / "used.csv"
    csv.write_text("wavenumber,absorbance\n" + "\n".join(f"{a},{float(b)!r}" for a, b in zip(X, _oil(X, oxidation=CARBONYL))))
    return {"new": new, "used": used, "broken": broken, "short": short, "csv": csv}


def test_a_bad_file_rejects_only_itself(files):
    frame, rejections = measure_spectra([files["used"], files["broken"], files["csv"]])
    assert list(frame["spectrum"]) == [str(files["used"]), str(files["broken"]), str(files["csv"])]
    assert [r.spectrum for r in rejections] == [str(files["broken"])]
    assert "without ##END=" in rejections[0].reason and rejections[0].line is not None
    assert frame.loc[1, "rejection"].startswith(f"{files['broken']}:")
    assert frame.loc[0, "rejection"] == "" and frame.loc[2, "rejection"] == ""
    assert frame.loc[0, "oxidation_area"] == pytest.approx(frame.loc[2, "oxidation_area"], rel=1e-6)


def test_a_band_outside_the_x_range_is_left_empty_with_a_note_and_the_rest_measured(files):
    # issue 11: bands one by one; the short file (700-4000 cm-1) misses the 550-650 baseline window
    frame, rejections = measure_spectra([files["short"]], needed=("water",))
    assert not rejections and np.isnan(frame.loc[0, "oxidation"]) and np.isfinite(frame.loc[0, "water"])
    assert "oxidation: not measured: x range 702-4000 cm-1 does not cover" in frame.loc[0, "notes"]


def test_x_range_covering_none_of_the_needed_bands_rejects_naming_the_file_and_line(files):
    frame, rejections = measure_spectra([files["short"]], needed=("oxidation",))
    assert len(rejections) == 1 and "does not cover band oxidation" in rejections[0].reason
    assert rejections[0].line is not None and np.isnan(frame.loc[0, "oxidation_area"])


def test_direct_method_and_unit_are_recorded(files):
    frame, _ = measure_spectra([files["used"]])
    assert (frame.loc[0, "method"], frame.loc[0, "unit"]) == ("direct", "abs/0.1mm")


def test_subtraction_against_the_same_lubricants_new_oil(files):
    frame, rejections = measure_spectra([files["used"], files["new"]],
                                        references={files["used"]: files["new"], files["new"]: files["new"]})
    assert not rejections
    assert (frame.loc[0, "method"], frame.loc[0, "unit"]) == ("subtraction", "abs/cm")
    # ASTM D7412 12.1-12.2: abs/cm = 100 x abs/0.1 mm; tolerance covers the 2 cm-1 trapezoid error.
    assert frame.loc[0, "oxidation_area"] == pytest.approx(100 * _carbonyl_area(), rel=1e-4)
    # a reference measured against itself reads zero
    for name in ("oxidation_area", "oxidation", "nitration", "sulfation", "antiwear", "water", "soot"):
        assert abs(frame.loc[1, name]) < 1e-9, name


def test_mixed_direct_and_subtraction_rows(files):
    frame, _ = measure_spectra([files["used"], files["csv"]], references={str(files["csv"]): files["new"]})
    assert list(frame["method"]) == ["direct", "subtraction"]
    assert frame.loc[1, "reference"] == str(files["new"])


def test_unreadable_reference_rejects_its_rows(files, tmp_path):
    frame, rejections = measure_spectra([files["used"]], references={files["used"]: tmp_path / "missing.jdx"})
    assert "reference spectrum unusable" in rejections[0].reason


def test_transmittance_zero_inside_a_band_rejects_that_spectrum(tmp_path):
    t = 10 ** -oil_spectrum(X)
    t[np.searchsorted(X, 1700)] = 0.0
    path = write_jcampdx(tmp_path / "t.jdx", X, t, form="AFFN", y_units="TRANSMITTANCE", significant=9)
    frame, _ = measure_spectra([path], needed=("water",))
    # no light at 1700 cm-1: the carbonyl bands are not measured (saturated), the spectrum's other bands are
    assert np.isnan(frame.loc[0, "oxidation"]) and "oxidation: not measured: saturated" in frame.loc[0, "notes"]
    assert np.isfinite(frame.loc[0, "water"])


def test_csv_reader_errors_name_the_line():
    with pytest.raises(SpectrumError) as caught:
        parse_spectrum_csv("wavenumber,absorbance\n4000,0.1\n3998,abc\n", "s.csv")
    assert caught.value.line == 3 and "abc" in caught.value.reason
    with pytest.raises(SpectrumError) as caught:
        parse_spectrum_csv("4000,0.1,7\n", "s.csv")
    assert caught.value.line == 1 and "2 columns" in caught.value.reason
