"""JCAMP-DX reader: public-domain format test files, hand-built files, writer round trips, malformed files.

Sources: McDonald & Wilks, Appl. Spectrosc. 42 (1988) 151 (ASDF forms, Y-check,
pseudo-digits replace only the leading digit, 5.2); R. J. Lancashire's
public-domain test files dupdec1.jdx, dupdec2.jdx, dupinc1.jdx and fixinc2.jdx (their own
header values FIRSTY, MAXY, MINY, NPOINTS, LASTX and data lines are the reference).
"""

from pathlib import Path

import numpy as np
import pytest

from sumpwise.intake.spectra.jcampdx import parse_jcampdx, read_jcampdx
from sumpwise.intake.spectra.spectrum import SpectrumError
from synthetic_spectra import oil_spectrum, wavenumber_grid, write_jcampdx

DATA = Path(__file__).resolve().parents[2] / "data" / "spectra"


def test_dupdec1_public_domain_ir_dif_dup_matches_its_header():
    # Lancashire dupdec1.jdx: DIF/DUP %T, NPOINTS=3951, FIRSTX=4400, LASTX=450, FIRSTY=82.25, MAXY=87.1
    spectrum = read_jcampdx(DATA / "dupdec1.jdx")
    assert spectrum.wavenumber.size == 3951
    assert spectrum.wavenumber[0] == pytest.approx(450.0)
    assert spectrum.wavenumber[-1] == pytest.approx(4400.0)
    transmittance_percent = 100 * 10 ** (-spectrum.absorbance)
    assert transmittance_percent[-1] == pytest.approx(82.25, abs=1e-9)  # FIRSTY, at FIRSTX = 4400
    assert transmittance_percent.max() == pytest.approx(87.1, abs=1e-9)  # MAXY
    assert "transmittance read as percent (median above 1.5)" in spectrum.notes


def test_dupinc1_public_domain_nanometres_matches_its_header():
    # Lancashire dupinc1.jdx: UV-vis absorbance, x in NANOMETERS with XFACTOR .1, NPOINTS=440,
    # FIRSTX=250, LASTX=469.5, FIRSTY=1.1663, MAXY=3.3747
    spectrum = read_jcampdx(DATA / "dupinc1.jdx")
    assert spectrum.absorbance.size == 440
    wavelength_nm = 1e7 / spectrum.wavenumber
    assert wavelength_nm[-1] == pytest.approx(250.0)
    assert wavelength_nm[0] == pytest.approx(469.5)
    assert spectrum.absorbance[-1] == pytest.approx(1.1663)
    assert spectrum.absorbance.max() == pytest.approx(3.3747)


def test_dupdec2_public_domain_fraction_data_under_percent_range_labels_is_read_by_its_data():
    # Lancashire dupdec2.jdx (CR LF, byte for byte): DIF/DUP, YFACTOR=0.0001, FIRSTY=0.5839, so the data are
    # transmittance as a fraction; its MAXY=79.17 and MINY=0.19 and the instrument line "0.19,79.170 %T" give
    # the same range in percent. Read by the data (median 0.61: a fraction); read by MAXY as percent, every
    # absorbance would gain 2 and every band read as saturated.
    spectrum = read_jcampdx(DATA / "dupdec2.jdx")
    assert spectrum.wavenumber.size == 3951
    assert spectrum.wavenumber[[0, -1]] == pytest.approx([450.0, 4400.0])
    transmittance = 10 ** (-spectrum.absorbance)
    assert transmittance[-1] == pytest.approx(0.5839, abs=1e-9)  # FIRSTY, at FIRSTX = 4400
    assert transmittance.max() == pytest.approx(0.7917, abs=1e-9)  # MAXY / 100
    assert transmittance.min() == pytest.approx(0.0019, abs=1e-9)  # MINY / 100
    assert "transmittance read as percent (median above 1.5)" not in spectrum.notes


def test_fixinc2_public_domain_fixed_form_absorbance_with_an_end_of_file_byte():
    # Lancashire fixinc2.jdx (CR LF and a DOS end-of-file byte 0x1A after ##END=, byte for byte): AFFN
    # absorbance, YFACTOR=0.0001, FIRSTX=400, LASTX=4000, NPOINTS=3601, FIRSTY=0.3487; the values below are
    # the file's own (line "411 4783 ...", last line "3997 1273 1274 1274 1275").
    assert (DATA / "fixinc2.jdx").read_bytes().endswith(b"##END=\r\n\x1a")
    spectrum = read_jcampdx(DATA / "fixinc2.jdx")
    assert spectrum.wavenumber.size == 3601
    np.testing.assert_allclose(spectrum.wavenumber[[0, 11, -4, -1]], [400.0, 411.0, 3997.0, 4000.0])
    np.testing.assert_allclose(spectrum.absorbance[[0, 11, -4, -1]], [0.3487, 0.4783, 0.1273, 0.1275], atol=1e-12)


def test_dup_count_of_ten_or_more_is_read_in_full():
    # hand_dup10.jdx: A00=100, J0=DIF+10, S1=DUP 11 (S=1, then the plain digit 1: McDonald & Wilks 5.2),
    # K=DIF+2, then the Y-check B12=212, %T = DIF 0 twice, j = DIF -1, and a final check B11.
    spectrum = read_jcampdx(DATA / "hand_dup10.jdx")
    expected = np.array([100, 110, 120, 130, 140, 150, 160, 170, 180, 190, 200, 210, 212, 212, 212, 211]) * 0.001
    np.testing.assert_allclose(spectrum.absorbance, expected, rtol=0, atol=1e-12)
    np.testing.assert_allclose(spectrum.wavenumber, np.arange(1000.0, 1016.0))


def test_sqz_pac_affn_micrometres_and_percent_transmittance():
    # hand_sqz_pac.jdx: @=0, a5=-15, B12=212 (SQZ), +7 -30 (PAC), 45 (AFFN); YFACTOR 0.1, %T;
    # x in um with XFACTOR 0.5: 2.5 um = 4000 cm-1, 5 um = 2000 cm-1 (ftir.md: 4000-400 cm-1 is 2.5-25 um).
    spectrum = read_jcampdx(DATA / "hand_sqz_pac.jdx")
    np.testing.assert_allclose(spectrum.wavenumber, 1e4 / np.array([5.0, 4.5, 4.0, 3.5, 3.0, 2.5]))
    percent_t = np.array([4.5, -3.0, 0.7, 21.2, -1.5, 0.0])
    expected = np.where(percent_t > 0, -np.log10(np.clip(percent_t, 1e-300, None) / 100), np.nan)
    np.testing.assert_allclose(spectrum.absorbance, expected, equal_nan=True)


@pytest.mark.parametrize("form", ["AFFN", "PAC", "SQZ", "DIF", "DIFDUP", "XYPOINTS"])
def test_writer_and_reader_round_trip_every_form(tmp_path, form):
    # The writer keeps 6 significant digits: the read values equal the rounded ones.
    x = wavenumber_grid()[::-1]
    y = oil_spectrum(x, "ester", oxidation=4.0, noise=1e-4, seed=3)
    y[200:240] = y[200]  # a run of 40 equal values: DUP counts above 9 in DIFDUP
    spectrum = read_jcampdx(write_jcampdx(tmp_path / "s.jdx", x, y, form=form))
    np.testing.assert_allclose(spectrum.wavenumber, x[::-1])
    np.testing.assert_allclose(spectrum.absorbance, y[::-1], rtol=0, atol=5.1e-6)


def test_difdup_writer_emits_multi_digit_dup_counts(tmp_path):
    x = wavenumber_grid(1000, 1100, 1.0)
    y = np.full(x.size, 0.5)
    text = write_jcampdx(tmp_path / "flat.jdx", x, y, form="DIFDUP", values_per_line=30).read_text()
    assert "%U0\n" in text  # DIF 0, DUP count 30 (U = 3, then the plain digit 0): McDonald & Wilks 5.2
    np.testing.assert_allclose(read_jcampdx(tmp_path / "flat.jdx").absorbance, y)


def test_micrometre_x_units_round_trip(tmp_path):
    x = wavenumber_grid(600, 4000, 4.0)
    y = oil_spectrum(x)
    wavelength_um = 1e4 / x
    # uneven in um, so write as XYPOINTS
    spectrum = read_jcampdx(write_jcampdx(tmp_path / "um.jdx", wavelength_um, y, form="XYPOINTS", x_units="MICROMETERS"))
    np.testing.assert_allclose(spectrum.wavenumber, x)


HAND = (DATA / "hand_dup10.jdx").read_text()


def _error(text, name="bad.jdx"):
    with pytest.raises(SpectrumError) as caught:
        parse_jcampdx(text, name)
    return caught.value


def test_y_check_failure_names_the_line():
    error = _error(HAND.replace("1012B12%Tj", "1012B13%Tj"))
    assert (error.source, error.line) == ("bad.jdx", 15)
    assert "Y-check failed" in error.reason and "213" in error.reason and "212" in error.reason


def test_missing_y_check_value_names_the_line():
    error = _error(HAND.replace("1012B12%Tj", "1012%Tj"))
    assert error.line == 15 and "Y-check missing" in error.reason


def test_wrong_point_count_names_the_npoints_line():
    error = _error(HAND.replace("##NPOINTS= 16", "##NPOINTS= 17").replace("##LASTX= 1015", "##LASTX= 1016"))
    assert error.line == 12 and "NPOINTS=17" in error.reason and "16 points" in error.reason


def test_dup_count_read_short_fails_the_y_check():
    # DUP 11 written as 10: the run ends at 202, not 212, so the next line's check value disagrees.
    error = _error(HAND.replace("J0S1K", "J0S0K"))
    assert error.line == 15 and "Y-check failed" in error.reason and "202" in error.reason


def _affn_lines(tmp_path):
    """An oil spectrum written as AFFN JCAMP-DX: its lines, and the index of its ##XYDATA line."""
    x = wavenumber_grid(550, 4000, 2.0)
    lines = write_jcampdx(tmp_path / "a.jdx", x, oil_spectrum(x), form="AFFN").read_text().split("\n")
    return lines, lines.index("##XYDATA=(X++(Y..Y))")


def test_value_lost_mid_file_without_y_check_is_caught_at_the_next_line(tmp_path):
    # AFFN has no Y-check: drop the last two values of data line 5; line 6's X then sits two points off,
    # beyond the one DELTAX a checkpoint may be off (issue 11).
    lines, data = _affn_lines(tmp_path)
    lines[data + 5] = lines[data + 5].rsplit(" ", 2)[0]
    error = _error("\n".join(lines))
    assert error.line == data + 7 and "missing or extra" in error.reason


def test_one_value_lost_is_caught_by_the_count(tmp_path):
    lines, data = _affn_lines(tmp_path)
    lines[data + 5] = lines[data + 5].rsplit(" ", 1)[0]
    error = _error("\n".join(lines))
    assert "NPOINTS=1726" in error.reason and "1725 points" in error.reason


def test_checkpoints_one_deltax_early_are_read_when_the_count_matches(tmp_path):
    # issue 11: a public collection writes each line's X one DELTAX before the count read so far.
    x = wavenumber_grid(550, 4000, 2.0)
    text = write_jcampdx(tmp_path / "a.jdx", x, oil_spectrum(x), form="AFFN").read_text()
    lines = text.split("\n")
    data = lines.index("##XYDATA=(X++(Y..Y))")
    for k in range(data + 2, len(lines) - 2):
        first, rest = lines[k].split(" ", 1)
        lines[k] = f"{float(first) - 2.0:.10g} {rest}"
    shifted = parse_jcampdx("\n".join(lines), "shifted.jdx")
    np.testing.assert_array_equal(shifted.wavenumber, x)
    np.testing.assert_array_equal(shifted.absorbance, parse_jcampdx(text, "a.jdx").absorbance)


@pytest.mark.parametrize("npoints", ["nan", "1e400", "inf", "2.5", "-3"])
def test_non_finite_or_non_whole_npoints_is_a_located_error(npoints):
    error = _error(HAND.replace("##NPOINTS=", f"##NPOINTS= {npoints} $$").replace("$$ ", "$$", 1))
    assert "NPOINTS" in error.reason and error.line is not None


@pytest.mark.parametrize("unit", ["(micromol/mol)-1m-1", "KUBELKA-MUNK", "REFLECTANCE"])
def test_other_y_units_are_refused_by_name(unit):
    error = _error(HAND.replace("##YUNITS= ABSORBANCE", f"##YUNITS= {unit}"))
    assert unit in error.reason and "refused" in error.reason


def test_path_length_label_is_read_in_mm():
    spectrum = parse_jcampdx(HAND.replace("##YUNITS= ABSORBANCE", "##YUNITS= ABSORBANCE\n##PATH LENGTH= 0.018 CM CELL"),
                             "p.jdx")
    assert spectrum.path_length_mm == pytest.approx(0.18)


@pytest.mark.parametrize("value", ["100 \u00b5m", "100 \u03bcm", "25 um"])
def test_a_path_length_in_micrometres_with_a_micro_sign_is_read(value):
    # the micro sign (U+00B5) and the Greek mu (U+03BC) both write micrometres; before, refused as unitless
    spectrum = parse_jcampdx(HAND.replace("##YUNITS= ABSORBANCE", f"##YUNITS= ABSORBANCE\n##PATH LENGTH= {value}"),
                             "p.jdx")
    assert spectrum.path_length_mm == pytest.approx(float(value.split()[0]) / 1000)


@pytest.mark.parametrize("label, value", [("PATH LENGTH", "5 CM"), ("PATH LENGTH", "18 CM CELL"), ("STATE", "GAS"),
                                          ("STATE", "gas"), ("STATE", "VAPOR")])
def test_a_gas_cell_or_a_gas_is_refused_with_its_line(label, value):
    # public gas-phase infrared files (a collection shipped with the `jcamp` package's repository) say
    # ##STATE=GAS and ##PATH LENGTH=5 CM (to 18 CM CELL); a liquid oil is read through 0.025-0.1 mm (ASTM D7214)
    error = _error(HAND.replace("##YUNITS= ABSORBANCE", f"##YUNITS= ABSORBANCE\n##{label}= {value}"))
    assert error.line == 8 and value in error.reason


def test_missing_end_names_the_last_line():
    error = _error(HAND.replace("##END=\n", ""))
    assert error.line == 16 and "without ##END=" in error.reason


def test_unknown_character_names_the_line():
    error = _error(HAND.replace("1000A00J0S1K", "1000A00J0S1K?"))
    assert error.line == 14 and "'?'" in error.reason


def test_dup_without_a_value_names_the_line():
    error = _error(HAND.replace("1012B12%Tj", "1012B12%Tj\n1015T"))
    assert error.line == 16


def test_missing_units_label_is_an_error():
    error = _error(HAND.replace("##YUNITS= ABSORBANCE\n", ""))
    assert "YUNITS" in error.reason


def test_non_infrared_x_units_are_refused():
    error = _error(HAND.replace("##XUNITS= 1/CM", "##XUNITS= HZ"))
    assert "HZ" in error.reason


def test_compound_files_are_refused():
    error = _error(HAND + HAND)
    assert error.line == 18 and "single-spectrum" in error.reason


def test_xypoints_odd_count_is_an_error():
    text = HAND.split("##XYDATA")[0] + "##XYPOINTS=(XY..XY)\n1000, 0.1\n1001\n##END=\n"
    error = _error(text)
    assert error.line == 15 and "odd count" in error.reason


def test_reading_many_files_at_once_equals_reading_each_and_isolates_a_bad_one(tmp_path):
    from sumpwise.intake.spectra.jcampdx import read_jcampdx_many

    x = wavenumber_grid()[::-1]
    paths = []
    for k, form in enumerate(["DIF", "DIFDUP", "SQZ", "AFFN", "PAC", "XYPOINTS"]):
        paths.append(write_jcampdx(tmp_path / f"{k}.jdx", x, oil_spectrum(x, oxidation=k, noise=1e-4, seed=k), form=form))
    bad = tmp_path / "bad.jdx"
    bad.write_text(paths[0].read_text().replace("##FIRSTY", "##NPOINTS= 1727\n##FIRSTY"))  # spacing no longer fits
    paths.insert(2, bad)
    paths.append(DATA / "dupdec1.jdx")
    results = read_jcampdx_many(paths, chunk=4)
    assert isinstance(results[2], SpectrumError) and results[2].source == str(bad) and results[2].line is not None
    for path, result in zip(paths, results):
        if path != bad:
            np.testing.assert_array_equal(result.absorbance, read_jcampdx(path).absorbance)
            assert result.source == str(path)


def test_crlf_line_endings_as_in_the_original_test_files(tmp_path):
    # The Lancashire files are distributed with CR LF line ends (stored here with LF).
    crlf = tmp_path / "dupdec1_crlf.jdx"
    crlf.write_bytes((DATA / "dupdec1.jdx").read_bytes().replace(b"\n", b"\r\n"))
    np.testing.assert_array_equal(read_jcampdx(crlf).absorbance, read_jcampdx(DATA / "dupdec1.jdx").absorbance)


DECIMAL_X = """##TITLE= decimal abscissae
##JCAMP-DX= 4.24
##XUNITS= MICROMETERS
##YUNITS= ABSORBANCE
##FIRSTX= 2.75
##LASTX= 4.0
##NPOINTS= 6
##XYDATA=(X++(Y..Y))
2.75 1 2 3 4
3.75 5 6
##END=
"""


def test_decimal_line_abscissae_are_checked():
    spectrum = parse_jcampdx(DECIMAL_X, "d.jdx")
    np.testing.assert_allclose(spectrum.wavenumber, 1e4 / np.array([4.0, 3.75, 3.5, 3.25, 3.0, 2.75]))
    np.testing.assert_allclose(spectrum.absorbance, [6, 5, 4, 3, 2, 1])
    error = _error(DECIMAL_X.replace("3.75 5 6", "3.25 5 6"))
    assert error.line == 10 and "missing or extra" in error.reason


def test_blank_lines_and_indented_lines_read_as_the_clean_file_and_keep_line_numbers():
    # JCAMP-DX 4.24 allows blank lines and spaces around values; they take the general path.
    loose = HAND.replace("1000A00J0S1K\n", "\n  1000A00J0S1K\n\n").replace("1012B12%Tj", "1012B12%Tj  ")
    np.testing.assert_array_equal(parse_jcampdx(loose, "loose.jdx").absorbance,
                                  parse_jcampdx(HAND, "hand.jdx").absorbance)
    error = _error(loose.replace("1012B12%Tj", "1012B13%Tj"))
    assert error.line == 17 and "Y-check failed" in error.reason  # two lines further down than in HAND


def test_empty_data_block_is_a_located_error():
    error = _error(HAND.split("##XYDATA")[0] + "##XYDATA=(X++(Y..Y))\n   \n##END=\n")
    assert error.line == 13 and "data block is empty" in error.reason  # the ##XYDATA= line
    error = _error(HAND.split("##XYDATA")[0] + "##XYDATA=(X++(Y..Y))\n##END=\n")
    assert error.line == 13 and "data block is empty" in error.reason  # the ##XYDATA= line


def test_a_negative_zero_line_abscissa_is_reported_as_written():
    # AFFN "-0" is a signed zero (IEEE 754); the X check quotes it as read.
    error = _error(HAND.replace("1012B12%Tj", "-0B12%Tj"))
    assert error.line == 15 and error.reason.startswith("line X=-0 but 12 points before it put it at 1012")


@pytest.mark.parametrize("form", ["AFFN", "PAC", "SQZ", "DIF", "DIFDUP"])
def test_integer_fast_path_and_general_path_agree(tmp_path, form):
    # A blank line after ##XYDATA= sends a block down the general decoder (blank lines are legal, JCAMP-DX 4.24);
    # both decoders must give the same points, and the same located error for a lost line.
    x = wavenumber_grid()[::-1]
    text = write_jcampdx(tmp_path / "s.jdx", x, oil_spectrum(x, oxidation=2.0, noise=1e-4, seed=5), form=form).read_text()
    general = text.replace("##XYDATA=(X++(Y..Y))\n", "##XYDATA=(X++(Y..Y))\n\n")
    fast_spectrum, general_spectrum = parse_jcampdx(text, "a.jdx"), parse_jcampdx(general, "a.jdx")
    np.testing.assert_array_equal(fast_spectrum.absorbance, general_spectrum.absorbance)
    np.testing.assert_array_equal(fast_spectrum.wavenumber, general_spectrum.wavenumber)
    lines = text.split("\n")
    data = lines.index("##XYDATA=(X++(Y..Y))")
    del lines[data + 3]  # the third data line lost: the next line's X (or Y-check) disagrees
    fast_error = _error("\n".join(lines))
    general_error = _error("\n".join(lines).replace("##XYDATA=(X++(Y..Y))\n", "##XYDATA=(X++(Y..Y))\n\n"))
    assert fast_error.reason == general_error.reason and general_error.line == fast_error.line + 1


def test_hand_file_with_early_checkpoints_is_read_from_firstx_lastx_npoints():
    # tests/data/spectra/README.md: checkpoints one DELTAX (2 cm-1) early, count matching NPOINTS
    spectrum = read_jcampdx(DATA / "hand_checkpoints_early.jdx")
    np.testing.assert_array_equal(spectrum.wavenumber, 1000 + 2 * np.arange(10))
    np.testing.assert_allclose(spectrum.absorbance, 0.01 * np.arange(1, 11))
    assert spectrum.path_length_mm == 0.05


def test_hand_file_in_absorption_coefficient_is_refused_by_its_unit():
    with pytest.raises(SpectrumError) as caught:
        read_jcampdx(DATA / "hand_absorption_coefficient.jdx")
    assert "(micromol/mol)-1m-1" in caught.value.reason and caught.value.line == 7
