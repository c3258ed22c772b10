"""Silent wrong grades found by feeding the FTIR path spectra nobody on the project wrote.

Each test grades through the real command line (`sumpwise grade`, `sumpwise spectra`) and asks
what the grade is, with the old grade named beside it. Public files are the R. J. Lancashire
JCAMP-DX test set (public domain; see tests/data/spectra/README.md); the rest are synthetic
oils with realistic magnitudes at 0.100 mm (tests/support/synthetic_spectra.py).

Sources: absorbance A = -log10(T), T the fraction of light transmitted (the definition of
absorbance; from memory, it is also the conversion the reader documents); ##FIRSTY= is the
first Y in true units, stored value x ##YFACTOR (McDonald & Wilks, Applied Spectroscopy 42
(1988) 151, via shared/reference/ftir.md's label list; the product rule from memory);
differential trend subtracts the same lubricant's new oil after both are path-normalised
(ASTM D7418, confirmed; normalising both first is common practice, ftir.md); abs/cm = 100 x
abs/0.1 mm (ASTM D7412 12.1-12.2, confirmed).
"""

import csv
import io
import json
import re

import numpy as np
import pytest
from conftest import DATA, ROOT, run_cli

from sumpwise.intake.spectra.batch import measure_matrix, read_spectra
from synthetic_spectra import gaussian, oil_spectrum, wavenumber_grid, write_jcampdx

X = wavenumber_grid()
FOUND = DATA / "spectra" / "found2"
SCREW = ROOT / "rules" / "screw-compressor.yaml"  # COMP-46-M: new-oil oxidation 1.5 abs/cm; carbonyl-rise 8/15/30
HEADER = "sample_id,unit_id,class,lubricant,sampled_on,oil_hours,an,spectrum"


def _grade(folder, rows, *options, rules=SCREW):
    (folder / "samples.csv").write_text("\n".join(rows) + "\n")
    run = run_cli("grade", folder / "samples.csv", "--rules", rules, *options)
    records = {json.loads(line)["sample_id"]: json.loads(line) for line in run.out.splitlines()}
    return run, records


def _export(path, header, x, y, digits):
    """A two-column lab export, descending wavenumbers as instruments write them."""
    lines = [header] + [f"{a:.1f},{b:.{digits}f}" for a, b in zip(x[::-1], y[::-1])]
    path.write_text("\n".join(lines) + "\n")
    return path


def test_a_transmittance_csv_export_grades_as_its_absorbance_twin(tmp_path):
    # a used mineral oil that gained 0.20 absorbance of carbonyl at 0.1 mm: 20 abs/cm (D7412 12.1-12.2)
    used = oil_spectrum(X, oxidation=0.20, noise=2e-4, seed=3)
    _export(tmp_path / "abs.csv", "Wavenumber (cm-1),Absorbance", X, used, 6)
    _export(tmp_path / "frac.csv", "Wavenumber (cm-1),Transmittance", X, 10 ** -used, 7)  # A = -log10(T)
    _export(tmp_path / "pct.csv", "cm-1,%T", X, 100 * 10 ** -used, 5)
    _export(tmp_path / "what.csv", "Wavenumber,Intensity", X, 10 ** -used, 7)
    rows = [HEADER] + [f"{name},C{k},screw-compressor,COMP-46-M,2026-11-0{k + 1},3000,0.15,{name}.csv"
                       for k, name in enumerate(("abs", "frac", "pct", "what"))]
    run, records = _grade(tmp_path, rows)
    assert run.code == 0, run.err
    # before: frac.csv was read as absorbance (every band upside down) and graded normal
    assert {name: records[name]["grade"] for name in ("abs", "frac", "pct")} == {"abs": "alert", "frac": "alert",
                                                                               "pct": "alert"}
    read = [records[name]["values"]["oxidation"] for name in ("abs", "frac", "pct")]
    # 1.0 abs/cm of new-oil carbonyl + 20 gained; the three files differ only by rounding
    assert read[0] == pytest.approx(21.0, abs=0.3) and max(read) - min(read) < 0.01
    # a header that names no known ordinate: the scale is unknown, so the row is rejected, not guessed
    assert "what" not in records
    assert re.search(r"rejected F001: spectrum: .*what\.csv:1: second column 'Intensity'", run.err), run.err
    assert "read 4 row(s): 3 graded, 0 unrated, 1 rejected" in run.err


def _yfactor_times(path, factor):
    text = path.read_text()
    written = re.search(r"##YFACTOR= (\S+)", text).group(1)
    return text.replace(f"##YFACTOR= {written}", f"##YFACTOR= {float(written) * factor:.10g}")


def test_a_yfactor_that_disagrees_with_firsty_rejects_the_spectrum(tmp_path):
    used = oil_spectrum(X, oxidation=0.05, noise=2e-4, seed=3)  # 5 abs/cm gained: below carbonyl-rise's watch 8
    good = write_jcampdx(tmp_path / "good.jdx", X[::-1], used[::-1], form="DIFDUP")
    (tmp_path / "typo.jdx").write_text(_yfactor_times(good, 10.0))  # a power of ten lost in ##YFACTOR=
    rows = [HEADER, "G,C1,screw-compressor,COMP-46-M,2026-11-02,3000,0.15,good.jdx",
            "T,C2,screw-compressor,COMP-46-M,2026-11-02,3000,0.15,typo.jdx"]
    run, records = _grade(tmp_path, rows)
    assert run.code == 0, run.err
    assert records["G"]["grade"] == "normal"
    # before: every absorbance ten times too large, oxidation 60 abs/cm, graded urgent without a word
    assert "T" not in records
    firsty_line = next(n for n, line in enumerate(good.read_text().splitlines(), 1) if line.startswith("##FIRSTY"))
    assert f"typo.jdx:{firsty_line}: ##FIRSTY=" in run.err and "rejected F001: spectrum" in run.err
    assert "read 2 row(s): 1 graded, 0 unrated, 1 rejected" in run.err


def test_a_public_file_whose_yfactor_was_mistyped_is_refused_and_its_twin_read():
    # jtpolys.jdx (FIX form) and jtpolysd.jdx (DIF/DUP form) hold the same polystyrene spectrum;
    # jtpolysd's YFACTOR reads 2.3884185791e-09 where jtpolys has 2.384185791e-09 (a digit
    # inserted), while its FIRSTY, 0.9816..., is the true first value, as jtpolys's is.
    fix, dif = read_spectra([FOUND / "jtpolys.jdx", FOUND / "jtpolysd.jdx"])
    assert fix.wavenumber.size == 1844  # ##NPOINTS
    assert re.match(r".*jtpolysd\.jdx:18: ##FIRSTY=9\.81633484363556E-0001 but the first Y read is 0\.98337", str(dif))
    # a thin polystyrene film is no oil through a cell: its C-H stretch core stands 0.05 above the
    # 1900-2200 cm-1 level, where an oil through any cell of the methods sits at its ceiling
    run = run_cli("spectra", FOUND / "jtpolys.jdx")
    (row,) = list(csv.DictReader(io.StringIO(run.out)))
    assert re.search(r"its C-H stretch \(2850-2960 cm-1\) stands 0\.050 above", row["rejection"]), row["rejection"]


def test_the_mistyped_public_file_decodes_to_its_twin_once_its_factor_is_mended(tmp_path):
    # independent of our FIRSTY rule: with jtpolys's factor, the DIF/DUP decoding equals the FIX form's
    mended = (FOUND / "jtpolysd.jdx").read_bytes().replace(b"2.3884185791e-09", b"2.384185791e-09")
    (tmp_path / "mended.jdx").write_bytes(mended)
    fix, dif = read_spectra([FOUND / "jtpolys.jdx", tmp_path / "mended.jdx"])
    assert fix.wavenumber == pytest.approx(dif.wavenumber, rel=1e-7)  # the two files' LASTX differ in the 7th digit
    (fix_bands, _, _), (dif_bands, _, _) = (measure_matrix(s.wavenumber, s.absorbance) for s in (fix, dif))
    for band in ("oxidation", "oxidation_area", "soot", "water"):
        assert dif_bands[band][0] == pytest.approx(fix_bands[band][0], rel=1e-5, abs=1e-7), band


def test_a_rows_thicker_cell_does_not_thin_the_subtracted_reference(tmp_path):
    # a mineral oil with a polymethacrylate viscosity modifier: a new-oil carbonyl 0.5 high at 1730
    # (below the 1.5 ester threshold, as in test_ftir_conventions), read by subtraction
    new = oil_spectrum(X, noise=2e-4, seed=4) + gaussian(X, 1730, 0.5 * 12 * np.sqrt(2 * np.pi), 12)
    used = oil_spectrum(X, oxidation=0.05, noise=2e-4, seed=5) + gaussian(X, 1730, 0.5 * 12 * np.sqrt(2 * np.pi), 12)
    write_jcampdx(tmp_path / "new.jdx", X[::-1], new[::-1], form="DIFDUP")  # the run's 0.100 mm cell
    write_jcampdx(tmp_path / "thick.jdx", X[::-1], 2.0 * used[::-1], form="DIFDUP")  # the same oil in 0.200 mm
    write_jcampdx(tmp_path / "thin.jdx", X[::-1], 0.5 * used[::-1], form="DIFDUP")  # and in 0.050 mm
    rows = [HEADER + ",path_length_mm",
            "K,C1,screw-compressor,COMP-46-M,2026-11-02,3000,0.15,thick.jdx,0.2",
            "N,C2,screw-compressor,COMP-46-M,2026-11-02,3000,0.15,thin.jdx,0.05"]
    run, records = _grade(tmp_path, rows, "--reference", f"COMP-46-M={tmp_path / 'new.jdx'}")
    assert run.code == 0, run.err
    # 0.05 absorbance gained at 0.1 mm is 5 abs/cm whatever the cell (D7418, D7412 12.1-12.2);
    # before: the reference was scaled by the row's cell too, so K read 5 + half the modifier's band
    # (about 26 abs/cm, alert) and N read 5 minus all of it (far below zero, reference-mismatch)
    for sample in ("K", "N"):
        assert records[sample]["values"]["oxidation_differential"] == pytest.approx(5.0, abs=0.3), sample
        assert records[sample]["grade"] == "normal"
        assert "reference-mismatch" not in {c["caveat"] for c in records[sample]["caveats"]}


SOOT_RULES = """ruleset: soot-fixture
version: 1
lubricants:
  ENG-40: {base_stock: mineral, kv100: 14.0, an: 1.0}
classes:
  engine:
    rules:
      - {id: soot-high, measure: soot, above: {watch: 50, alert: 100}, message: soot, source: test fixture}
"""


def test_a_fraction_transmittance_file_with_a_spike_past_1_5_is_not_read_as_percent(tmp_path):
    # sqzdupd1.jdx (public domain): ##YUNITS=TRANSMITTANCE as a fraction (FIRSTY 0.98) whose
    # largest value is 1.505 (MAXY). Read as percent, every absorbance gained 2: each band read
    # as saturated, and the one-point soot band as 2.0 abs/0.1 mm, 200 abs/cm once graded.
    (spectrum,) = read_spectra([FOUND / "sqzdupd1.jdx"])
    ours, _, _ = measure_matrix(spectrum.wavenumber, spectrum.absorbance)
    # the file is near full transmission at 2000 cm-1 (T about 0.99-1.0): soot near 0; before: 2.0
    assert ours["soot"][0] == pytest.approx(0.0, abs=0.01)
    # before: the water band (3150-3500 cm-1) read as saturated too; read as a fraction it is measured
    assert 0 <= spectrum.absorbance[(spectrum.wavenumber > 3150) & (spectrum.wavenumber < 3500)].max() < 1.5
    # Graded as an oil sample: first (wrong scale) an alert from a soot reading of 199.7 abs/cm; then
    # normal; now refused, since its C-H stretch is absent (0.0006 above the 1900-2200 cm-1 level,
    # where an oil through a cell sits at its ceiling): whatever it holds, it is not a used oil
    (tmp_path / "rules.yaml").write_text(SOOT_RULES)
    (tmp_path / "sqzdupd1.jdx").write_bytes((FOUND / "sqzdupd1.jdx").read_bytes())
    rows = ["sample_id,unit_id,class,lubricant,spectrum", "Q,E1,engine,ENG-40,sqzdupd1.jdx"]
    run, records = _grade(tmp_path, rows, rules=tmp_path / "rules.yaml")
    assert run.code == 0, run.err
    assert records == {}
    assert re.search(r"rejected F001: spectrum: .*sqzdupd1\.jdx: its C-H stretch .* stands 0\.001 above", run.err)
    assert "read 1 row(s): 0 graded, 0 unrated, 1 rejected" in run.err


def test_a_percent_file_is_still_read_as_percent_without_its_sign(tmp_path):
    # the same used oil as % transmittance under a bare TRANSMITTANCE label reads as its absorbance file
    used = oil_spectrum(X, oxidation=0.20)
    write_jcampdx(tmp_path / "a.jdx", X, used, form="SQZ", significant=7)
    write_jcampdx(tmp_path / "t.jdx", X, 100 * 10 ** -used, form="SQZ", significant=7, y_units="TRANSMITTANCE")
    rows = list(csv.DictReader(io.StringIO(run_cli("spectra", tmp_path / "a.jdx", tmp_path / "t.jdx").out)))
    for band in ("oxidation", "water", "soot"):  # read as a fraction, every absorbance would be 2 lower
        assert float(rows[1][band]) == pytest.approx(float(rows[0][band]), rel=1e-3, abs=1e-5), band


def test_the_carbonyl_area_is_the_trapezoid_area_above_the_window_mean_baseline(tmp_path):
    # a worked example, checked with numpy.trapezoid: a sloping straight baseline (the mean of each
    # baseline window lies on it, so the band file's baseline is that line) and a triangle of
    # height 0.3 and half-width 40 cm-1 centred at 1730: area 0.3 x 40 = 12 absorbance x cm-1
    baseline = 0.03 + 1.5e-5 * (X - 550)
    triangle = np.clip(0.3 * (1 - np.abs(X - 1730) / 40), 0, None)
    inside = (X >= 1670) & (X <= 1800)
    assert np.trapezoid(triangle[inside], X[inside]) == pytest.approx(12.0, rel=1e-9)
    # and an oil's C-H stretch at its 4.0 ceiling over 2800-3000 cm-1 and its CH2 bend (3.0 over
    # 1440-1480 cm-1, a 0.1 mm cell's), far from every window read
    stretch = np.where((X >= 2800) & (X <= 3000), 4.0, 0.0) + np.where((X >= 1440) & (X <= 1480), 3.0, 0.0)
    write_jcampdx(tmp_path / "t.jdx", X, baseline + triangle + stretch, form="AFFN", significant=9)
    (row,) = list(csv.DictReader(io.StringIO(run_cli("spectra", tmp_path / "t.jdx").out)))
    assert float(row["oxidation_area"]) == pytest.approx(12.0, rel=1e-5)
    assert row["area_unit"] == "abs*cm-1/0.1mm"


DIESEL = ROOT / "rules" / "diesel-engine.yaml"  # nitration: above watch 10, alert 20 abs/cm, as reported


def test_nitration_soot_and_antiwear_keep_the_direct_convention_when_oxidation_is_read_by_subtraction(tmp_path):
    # an engine oil whose new oil already absorbs 0.06 in the nitration window (an invented additive
    # band at 1630 cm-1, our choice) and which gained 0.08 of nitration (D7624's quantity, 8 abs/cm)
    additive = gaussian(X, 1630, 0.06 * 10 * np.sqrt(2 * np.pi), 10)
    write_jcampdx(tmp_path / "new.jdx", X[::-1], (oil_spectrum(X, noise=2e-4, seed=4) + additive)[::-1], form="DIFDUP")
    used = oil_spectrum(X, nitration=0.08, oxidation=0.03, noise=2e-4, seed=5) + additive
    write_jcampdx(tmp_path / "used.jdx", X[::-1], used[::-1], form="DIFDUP")
    rows = ["sample_id,unit_id,class,lubricant,sampled_on,oil_hours,spectrum",
            "N,G1,diesel-engine,ENG-15W40-M,2026-11-02,300,used.jdx"]
    _, alone = _grade(tmp_path, rows, rules=DIESEL)
    _, against = _grade(tmp_path, rows, "--reference", f"ENG-15W40-M={tmp_path / 'new.jdx'}", rules=DIESEL)
    alone, against = alone["N"], against["N"]
    assert (alone["method"], against["method"]) == ("direct", "subtraction")
    # the oxidation reading changes convention and measure (D7418): 4.0 direct, 3.0 gained
    assert alone["values"]["oxidation"] == pytest.approx(4.0, abs=0.2)
    assert against["values"]["oxidation_differential"] == pytest.approx(3.0, abs=0.2)
    # the single-convention bands do not: 6 + 8 = 14 abs/cm of nitration, direct (D7412 12.1-12.2 for x100)
    for band in ("nitration", "sulfation", "antiwear", "soot"):
        assert against["values"][band] == alone["values"][band], band
    assert alone["values"]["nitration"] == pytest.approx(14.0, abs=0.3)
    # before: with the reference the nitration read 7.95 (the gain only) and the sample graded normal
    assert alone["grade"] == against["grade"] == "watch"
    assert [r["rule"] for r in against["reasons"]] == ["nitration"]


@pytest.mark.parametrize("name, encode", [
    ("bom.jdx", lambda text: b"\xef\xbb\xbf" + text.encode("ascii")),  # UTF-8 byte-order mark
    ("utf16.jdx", lambda text: text.encode("utf-16")),  # UTF-16 with its mark, as some Windows tools save
    ("cr.jdx", lambda text: text.replace("\n", "\r").encode("ascii")),  # carriage returns only
    ("crlf.jdx", lambda text: text.replace("\n", "\r\n").encode("ascii")),
    ("path.jdx", lambda text: text.replace("##PATH LENGTH= 0.1 MM", "##PATH LENGTH=0.1MM").encode("ascii")),
])
def test_a_good_spectrum_saved_another_way_reads_the_same(tmp_path, name, encode):
    # before: the byte-order marks were refused for a missing ##TITLE= or data block, lone carriage
    # returns for a missing data block, and 0.1MM (no space) as a path length without a unit
    plain = write_jcampdx(tmp_path / "plain.jdx", X[::-1], oil_spectrum(X, oxidation=0.1)[::-1], form="DIFDUP",
                          path_length="0.1 MM")
    (tmp_path / name).write_bytes(encode(plain.read_text()))
    first, second = list(csv.DictReader(io.StringIO(run_cli("spectra", plain, tmp_path / name).out)))
    assert second["rejection"] == "" and second["path_length_mm"] == "0.1"
    assert [second[band] for band in ("oxidation", "nitration", "soot")] == [first[band] for band in
                                                                              ("oxidation", "nitration", "soot")]


def test_transmittance_under_an_absorbance_label_is_refused_not_graded_clean(tmp_path):
    # the used oil of the CSV test (20 abs/cm gained, alert), as fraction transmittance under labels that
    # say absorbance: a headerless CSV (documented as wavenumber, absorbance) and ##YUNITS=ABSORBANCE
    used = oil_spectrum(X, oxidation=0.20, noise=2e-4, seed=3)
    _export(tmp_path / "bare.csv", "", X, 10 ** -used, 7)
    (tmp_path / "bare.csv").write_text((tmp_path / "bare.csv").read_text().lstrip("\n"))
    write_jcampdx(tmp_path / "label.jdx", X[::-1], (10 ** -used)[::-1], form="DIFDUP", y_units="ABSORBANCE")
    write_jcampdx(tmp_path / "right.jdx", X[::-1], (10 ** -used)[::-1], form="DIFDUP", y_units="TRANSMITTANCE")
    rows = [HEADER] + [f"{name},C{k},screw-compressor,COMP-46-M,2026-11-0{k + 1},3000,0.15,{name}.{ext}"
                       for k, (name, ext) in enumerate((("bare", "csv"), ("label", "jdx"), ("right", "jdx")))]
    run, records = _grade(tmp_path, rows)
    assert run.code == 0, run.err
    # before: bands upside down, the carbonyl read as nothing, both graded normal
    assert set(records) == {"right"} and records["right"]["grade"] == "alert"
    for name in ("bare.csv", "label.jdx"):
        assert re.search(rf"rejected F001: spectrum: .*{re.escape(name)}:\d+: the C-H stretch \(2800-3000 cm-1\) "
                         r"lies 0\.\d\d on average below", run.err), name
    assert "read 3 row(s): 1 graded, 0 unrated, 2 rejected" in run.err


def test_an_atr_spectrum_is_refused_not_read_as_a_tenth_of_a_millimetre(tmp_path):
    # the 20 abs/cm used oil measured by ATR: about 2 um of oil (from memory), 1/50 of 0.1 mm
    atr = 0.02 * oil_spectrum(X, oxidation=0.20, noise=2e-4, seed=3)
    path = write_jcampdx(tmp_path / "atr.jdx", X[::-1], atr[::-1], form="DIFDUP")
    path.write_text(path.read_text().replace("##XUNITS", "##SAMPLING PROCEDURE= MODE=ATR, diamond\n##XUNITS"))
    rows = [HEADER, "R,C1,screw-compressor,COMP-46-M,2026-11-02,3000,0.15,atr.jdx"]
    run, records = _grade(tmp_path, rows)
    # before: read as 0.1 mm, the carbonyl gain was 0.4 abs/cm and the sample graded normal
    assert records == {}
    line = next(n for n, text in enumerate(path.read_text().splitlines(), 1) if text.startswith("##SAMPLING"))
    assert f"atr.jdx:{line}: ##SAMPLING PROCEDURE='MODE=ATR, diamond' names ATR" in run.err


@pytest.mark.parametrize("form", ["AFFN", "PAC", "SQZ", "DIF", "DIFDUP", "XYPOINTS"])
@pytest.mark.parametrize("order", ["ascending", "descending"])
@pytest.mark.parametrize("ordinate", ["ABSORBANCE", "TRANSMITTANCE", "%T"])
def test_one_oil_written_every_way_reads_the_same_bands(tmp_path, form, order, ordinate):
    # metamorphic: the compression form (JCAMP-DX 4.24), the x order and the ordinate (A = -log10 T)
    # change how a spectrum is written, never what its bands read
    used = oil_spectrum(X, oxidation=0.15, nitration=0.04, sulfation=0.03, noise=2e-4, seed=7)
    write_jcampdx(tmp_path / "plain.jdx", X, used, form="AFFN", significant=9)
    x, y = (X, used) if order == "ascending" else (X[::-1], used[::-1])
    y = {"ABSORBANCE": y, "TRANSMITTANCE": 10 ** -y, "%T": 100 * 10 ** -y}[ordinate]
    write_jcampdx(tmp_path / "other.jdx", x, y, form=form, significant=9, y_units=ordinate)
    plain, other = list(csv.DictReader(io.StringIO(run_cli("spectra", tmp_path / "plain.jdx",
                                                               tmp_path / "other.jdx").out)))
    assert other["rejection"] == ""
    for band in ("oxidation", "oxidation_area", "nitration", "sulfation", "antiwear", "soot"):
        assert float(other[band]) == pytest.approx(float(plain[band]), rel=1e-5, abs=1e-6), band


def test_a_coarse_grid_leaves_out_the_bands_it_cannot_read_and_grades_the_rest(tmp_path):
    # 16 cm-1 between points (a low-resolution export): no point falls in the diesel band's 805-815
    # cm-1 window. Before: a traceback (BandFileError) ended both commands for every file
    coarse = wavenumber_grid(544, 4000, 16)
    write_jcampdx(tmp_path / "coarse.jdx", coarse, oil_spectrum(coarse, oxidation=0.20), form="DIFDUP")
    write_jcampdx(tmp_path / "fine.jdx", X, oil_spectrum(X, oxidation=0.20), form="DIFDUP")
    run = run_cli("spectra", tmp_path / "coarse.jdx", tmp_path / "fine.jdx")
    assert run.code == 0, run.err
    coarse_row, fine_row = list(csv.DictReader(io.StringIO(run.out)))
    assert coarse_row["rejection"] == "" and coarse_row["fuel_diesel"] == ""
    assert "fuel_diesel: not measured: the grid (points 16 cm-1 apart) has no point within 805-815" in coarse_row["notes"]
    # the carbonyl (sigma 14 cm-1) is still read on raw points, within 5 % of the fine grid's
    assert float(coarse_row["oxidation"]) == pytest.approx(float(fine_row["oxidation"]), rel=0.05)
    rows = [HEADER, "A,C1,screw-compressor,COMP-46-M,2026-11-02,3000,0.15,coarse.jdx"]
    graded, records = _grade(tmp_path, rows)
    assert graded.code == 0, graded.err
    assert records["A"]["grade"] == "alert"  # 21 abs/cm direct, rise 19.5 over COMP-46-M's 1.5


def test_a_reference_diluted_like_its_samples_but_read_neat_is_a_mismatch_not_an_urgent_oil(tmp_path):
    # a polyol ester compressor oil, new and used (0.10 of carbonyl gained at 0.1 mm: 10 abs/cm), both
    # diluted 1:4 in a 0.1 mm cell (ASTM D7214 asks esters to be diluted, confirmed); the samples file
    # gives the sample's dilution, the reference has no place to say it and is read as neat oil
    write_jcampdx(tmp_path / "new.jdx", X[::-1], oil_spectrum(X, "ester", path_mm=0.025)[::-1], form="DIFDUP")
    write_jcampdx(tmp_path / "used.jdx", X[::-1], oil_spectrum(X, "ester", oxidation=0.10, path_mm=0.025)[::-1],
                  form="DIFDUP")
    rows = [HEADER + ",dilution", "P,C1,screw-compressor,COMP-46-X,2026-11-02,3000,0.15,used.jdx,4"]
    run, records = _grade(tmp_path, rows, "--reference", f"COMP-46-X={tmp_path / 'new.jdx'}")
    # now: its CH2 bend (0.74 as recorded, about 3 through 0.1 mm of neat oil: from memory, see
    # spectrum.py) says the reference was not read through 0.1 mm of neat oil, so the run stops on it
    assert run.code == 2 and run.out == ""
    assert re.search(r"new-oil reference spectrum for COMP-46-X: .*new\.jdx: its C-H bend \(1450-1470 cm-1\) stands "
                     r"0\.7\d\d .*cell looks thinner \(about 0\.025 mm of neat oil\)", run.err), run.err
    # a reference whose file says 0.1 mm is trusted, and the differential reading shows the mismatch
    original = (tmp_path / "new.jdx").read_text()
    (tmp_path / "new.jdx").write_text(original.replace("##OWNER", "##PATH LENGTH= 0.1 MM\n##OWNER"))
    run, records = _grade(tmp_path, rows, "--reference", f"COMP-46-X={tmp_path / 'new.jdx'}")
    assert run.code == 0, run.err
    record = records["P"]
    # before: 4 x 0.25 x used - 0.25 x new left three quarters of the ester's 2.0 carbonyl in the
    # difference, 151 abs/cm, graded urgent by carbonyl-differential (and the diluted reference's ester
    # band, 0.5 as read, fell below the 1.5 that infers an ester, so no ester caveat either)
    assert record["grade"] != "urgent" and record["values"]["oxidation_differential"] is None
    notes = {c["caveat"]: c["message"] for c in record["caveats"]}
    assert "differential carbonyl 151 abs/cm" in notes["reference-mismatch"]
    assert "does not match this oil, its cell or its dilution" in notes["reference-mismatch"]
    assert "carbonyl-differential" in {n["rule"] for n in record["not_evaluated"]}
    # the way to say it: the reference's neat-oil thickness as its path length (0.1 mm / 4), which
    # reads the 10 abs/cm gained and infers the ester (its caveat caps and explains)
    text = original.replace("##OWNER", "##PATH LENGTH= 0.025 MM\n##OWNER")
    (tmp_path / "new.jdx").write_text(text)
    run, records = _grade(tmp_path, rows, "--reference", f"COMP-46-X={tmp_path / 'new.jdx'}")
    record = records["P"]
    assert record["values"]["oxidation_differential"] == pytest.approx(10.0, abs=0.3)
    assert {"base-stock-inferred", "ester-subtracted"} <= {c["caveat"] for c in record["caveats"]}
    assert record["grade"] == "watch"  # carbonyl-differential watch 8, alert 15
