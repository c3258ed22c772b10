"""The in-memory spectrum every reader returns, the error they raise, and unit conversions.

Readers convert at the edge: whatever the file's abscissa (1/CM, micrometres,
nanometres) and ordinate (absorbance, transmittance as fraction or percent),
a Spectrum holds ascending wavenumbers in cm-1 and absorbance as measured,
so the band code downstream never sees units.
"""

from __future__ import annotations

import math
import re
import warnings
from dataclasses import dataclass, field

import numpy as np

MICROMETRES_PER_CM1 = 1.0e4  # wavelength in um = 10 000 / wavenumber in cm-1 (ftir.md, confirmed)
NANOMETRES_PER_CM1 = 1.0e7  # wavelength in nm = 10 000 000 / wavenumber in cm-1


class SpectrumError(ValueError):
    """A spectrum file that cannot be used: names the file, the line (if known) and why."""

    def __init__(self, source: str, line: int | None, reason: str, code: str = "F001"):
        self.source = source
        self.line = line
        self.reason = reason
        self.code = code  # PROBLEM_CODES: F001 unusable, F002 path length far from the one assumed
        where = f"{source}:{line}" if line is not None else source
        super().__init__(f"{where}: {reason}")


@dataclass(frozen=True)
class Spectrum:
    """One infrared spectrum: ascending wavenumbers (cm-1) and absorbance as measured.

    `range_line` is the file line that declares or holds the abscissa range,
    so an error about coverage can point at it. `notes` records conversions
    made on reading (e.g. percent transmittance to absorbance).
    """

    source: str
    wavenumber: np.ndarray
    absorbance: np.ndarray
    x_units: str
    y_units: str
    range_line: int | None = None
    notes: tuple[str, ...] = field(default=())
    path_length_mm: float | None = None  # from the file's ##PATH LENGTH=, when it has one
    # The file says it holds a difference spectrum (used minus new oil, subtracted by the lab's
    # instrument): ##DATA PROCESSING= naming a spectral subtraction, or a CSV column so named.
    difference: bool = False
    resolution_cm1: float | None = None  # from the file's ##RESOLUTION=, when it gives a number

    def __post_init__(self):
        for array in (self.wavenumber, self.absorbance):
            array.flags.writeable = False


def wavenumber_from_micrometres(wavelength_um):
    """cm-1 from um: 2.5 um is 4000 cm-1, 25 um is 400 cm-1."""
    return MICROMETRES_PER_CM1 / np.asarray(wavelength_um, dtype=float)


def wavenumber_from_nanometres(wavelength_nm):
    return NANOMETRES_PER_CM1 / np.asarray(wavelength_nm, dtype=float)


def absorbance_from_transmittance(transmittance, percent: bool):
    """A = -log10(T); T <= 0 has no absorbance and becomes NaN (flagged when a band needs it)."""
    t = np.asarray(transmittance, dtype=float)
    if percent:
        t = t / 100.0
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(t > 0, -np.log10(np.where(t > 0, t, 1.0)), np.nan)


# A percent transmittance spectrum can pass 100 % where the background absorbed more than the sample (a few
# percent: common practice, no source), never over most of its points. A median above 120 is not a
# transmittance: a single-beam intensity spectrum labelled TRANSMITTANCE (a public JCAMP-DX reader's example
# header reads ##YUNITS=TRANSMITTANCE with ##MAXY=3.75e+006) read as percent put an oil's carbonyl on the
# source's curve: 0.085 gained read -0.6 abs/cm, normal. Our choice, no source.
MAX_PERCENT_MEDIAN = 120.0


def make_spectrum(source, x, y, x_units, y_units, range_line=None, notes=(), evenly_spaced=False,
                  path_length_mm=None, difference=False, resolution_cm1=None):
    """Convert abscissa to ascending cm-1 and ordinate to absorbance, checking monotonicity.

    evenly_spaced: x was built as first + k * delta, so two points settle its order.
    """
    unit = _x_unit_kind(source, x_units, range_line)
    x = np.asarray(x, dtype=float)
    if unit == "um":
        x = wavenumber_from_micrometres(x)
    elif unit == "nm":
        x = wavenumber_from_nanometres(x)
    y_kind, percent_label = y_unit_kind(source, y_units)
    y = np.asarray(y, dtype=float)
    notes = list(notes)
    if y_kind == "T":
        finite = y[np.isfinite(y)]
        # Fraction or percent, when the label does not say: judged on the median, not the largest value.
        # A fraction spectrum can reach past 1.5 at a few points (a public test file peaks at 1.505),
        # and read as percent every absorbance gains 2 and every band reads as saturated; a percent
        # spectrum with a median of 1.5 % or less passes almost no light anywhere. Common practice, no source.
        median = float(np.median(finite)) if finite.size else math.nan
        percent = percent_label or (finite.size > 0 and median > 1.5)
        if median > MAX_PERCENT_MEDIAN:
            raise SpectrumError(source, range_line, (
                f"y values labelled {y_units!r} have a median of {median:.4g}: a transmittance is the light through "
                f"the sample over the light through the background, at most 1 (or 100 %) almost everywhere, so "
                "these are a single-beam or raw intensity spectrum, whose bands sit on the instrument's own "
                "curve; export the sample's transmittance or absorbance spectrum (ratioed against its background)"))
        if percent and not percent_label:
            notes.append("transmittance read as percent (median above 1.5)")
        notes.append("absorbance = -log10(transmittance)")
        y = absorbance_from_transmittance(y, percent)
    if x.size >= 2 and x[0] > x[-1]:
        x, y = x[::-1], y[::-1]
    if x.size < 2 or not (x[1] > x[0] and (unit == "cm1" and evenly_spaced or np.all(np.diff(x) > 0))):
        raise SpectrumError(source, range_line, "abscissa is not strictly monotonic (or has fewer than 2 points)")
    dip = _c_h_dip(x, y)
    if dip is not None:
        raise SpectrumError(source, range_line, (
            f"the C-H stretch ({C_H_STRETCH[0]:g}-{C_H_STRETCH[1]:g} cm-1) lies {dip:.2f} on average below the "
            f"{C_H_BASELINE[0]:g}-{C_H_BASELINE[1]:g} cm-1 level as read ({y_units!r}): every oil absorbs most "
            "there, so the values look like transmittance read as absorbance (or the reverse); give the y "
            "unit (##YUNITS=, or a CSV header such as '%T')"))
    return Spectrum(source, np.ascontiguousarray(x), np.ascontiguousarray(y), x_units, y_units, range_line, tuple(notes),
                    path_length_mm, difference, resolution_cm1)


# The C-H stretch of any hydrocarbon or ester oil is its strongest infrared band (IR correlation
# tables, from memory), so in absorbance it stands above the band-free 2200-1900 cm-1 region;
# in transmittance it is the deepest dip. Read the wrong way, every band points down and a
# carbonyl gain reads as nothing. 0.1 absorbance of margin keeps a spectrum without that band
# (a flat test line, a gas) from being refused; transmittance read as absorbance misses it by
# 0.50 for the synthetic used oil of the tests and by 0.18 for a weak public spectrum of a
# vegetable-fat spread (min T 0.52), relabelled as absorbance.
C_H_STRETCH = (2800.0, 3000.0)
C_H_BASELINE = (1900.0, 2200.0)
C_H_MARGIN = 0.1
_C_H_LOWS = np.array([C_H_BASELINE[0], C_H_STRETCH[0]])
_C_H_HIGHS = np.array([C_H_BASELINE[1], C_H_STRETCH[1]])


def _c_h_dip(x, y):
    """How far the C-H stretch region's mean lies below the band-free window's mean, when beyond the
    margin; None when it does not, or when the spectrum does not reach both. Means, not extremes:
    in transmittance the region's edges sit near the level, so its highest point says nothing."""
    if x[0] > C_H_BASELINE[0] or x[-1] < C_H_STRETCH[1]:
        return None
    (a, b), (c, d) = np.searchsorted(x, _C_H_LOWS).tolist(), np.searchsorted(x, _C_H_HIGHS, side="right").tolist()
    level, stretch = y[a:c], y[b:d]
    if not level.size or not stretch.size:
        return None
    dip = float(level.mean() - stretch.mean())
    if math.isnan(dip):  # transmittance <= 0 somewhere: judge on the finite points
        level, stretch = level[np.isfinite(level)], stretch[np.isfinite(stretch)]
        if not level.size or not stretch.size:
            return None
        dip = float(level.mean() - stretch.mean())
    return dip if dip > C_H_MARGIN else None


def _x_unit_kind(source, text, line):
    key = text.upper().replace(" ", "")
    if key in {"1/CM", "CM-1", "CM^-1", "CM**-1", "WAVENUMBERS", "WAVENUMBER", "1/CM-1", "CM-1(WAVENUMBER)"}:
        return "cm1"
    if key in {"MICROMETERS", "MICROMETRES", "MICRONS", "UM", "MICROMETER", "MICROMETRE"}:
        return "um"
    if key in {"NANOMETERS", "NANOMETRES", "NM", "NANOMETER", "NANOMETRE"}:
        return "nm"
    raise SpectrumError(source, line, f"x units {text!r} are not 1/CM, MICROMETERS or NANOMETERS")


def y_unit_kind(source, text, line=None):
    """("A" or "T", whether percent) for an ordinate unit; any other unit is refused by name.

    Why refuse: an absorption coefficient, a Kubelka-Munk or a reflectance ordinate
    read as absorbance would give band values of a wholly different scale.
    """
    key = text.upper().replace(" ", "")
    if key in {"ABSORBANCE", "ABSORBANCEUNITS", "A", "AU", "ABS"}:
        return "A", False
    if key in {"TRANSMITTANCE", "T", "%T", "%TRANSMITTANCE", "PERCENTTRANSMITTANCE", "TRANSMITTANCE(%)",
               "TRANSMITTANCE%", "TRANSMITTANCE,%", "%TRANSMISSION", "TRANSMISSION"}:
        return "T", "%" in key or "PERCENT" in key
    raise SpectrumError(source, line, f"y units {text!r} are refused: only ABSORBANCE or TRANSMITTANCE "
                                      "(fraction or percent) are read")


# The longest path read as an oil's (the path-length options' bound too): whole oils are read through cells of
# 0.025-0.1 mm (ASTM D7214, confirmed); gas cells are centimetres long (public infrared files of gases say 5-18 CM).
# A gas spectrum's C-H stretch reaches the saturation threshold as recorded, which the C-H check takes for a
# whole oil through any cell: read per 0.1 mm at its 5 cm, every band was 500 times too small. Our choice.
MAX_PATH_MM = 10.0

_PATH_UNITS_MM = {"MM": 1.0, "CM": 10.0, "UM": 1.0e-3, "MICROMETERS": 1.0e-3, "MICROMETRES": 1.0e-3,
                  "MICRONS": 1.0e-3, "MILLIMETERS": 1.0, "MILLIMETRES": 1.0, "CENTIMETERS": 10.0,
                  "CENTIMETRES": 10.0}


_NUMBER_THEN_UNIT = re.compile(r"\s*([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*([A-Za-z]+\.?)?")


# A processing note that says the new (reference) oil was subtracted. "Background subtracted"
# (the usual single-beam ratio, or a baseline correction) is not one, so SUBTRACT needs a word
# for the oil beside it. ##DATA PROCESSING= is JCAMP-DX 4.24's free-text label for background
# correction, smoothing, subtraction and the like (McDonald & Wilks 1988; from memory).
_DIFFERENCE_WORDS = re.compile(r"\bDIFFERENCE\b|\bSPECTRAL\s+SUBTRACTION\b|"
                               r"\bSUBTRACT\w*\b.*\b(REFERENCE|NEW|FRESH|UNUSED)\b|"
                               r"\b(REFERENCE|NEW|FRESH|UNUSED)\b.*\bSUBTRACT\w*")


def declares_difference(text: str) -> bool:
    """Whether a processing note or column name says the spectrum is used minus new oil."""
    return _DIFFERENCE_WORDS.search(text.upper()) is not None


def parse_path_length(source, line, text):
    """mm from a `##PATH LENGTH=` value such as `0.1 MM`, `0.1MM`, `5 CM`, `18 CM CELL` or `100 µm` (a number,
    then its unit; the micro sign or Greek mu read as u)."""
    match = _NUMBER_THEN_UNIT.match(text.replace(",", " ").replace("\u00b5", "u").replace("\u03bc", "u"))
    value = float(match.group(1)) if match else float("nan")
    unit = (match.group(2) or "").upper().rstrip(".") if match else ""
    if not (math.isfinite(value) and value > 0) or unit not in _PATH_UNITS_MM:
        raise SpectrumError(source, line, f"##PATH LENGTH={text!r}: expected a positive number and its unit "
                                          "(MM, CM or UM), e.g. 0.1 MM")
    mm = value * _PATH_UNITS_MM[unit]
    if mm > MAX_PATH_MM:
        raise SpectrumError(source, line, (
            f"##PATH LENGTH={text!r} is {mm:g} mm: an oil is read through a cell of 0.025-0.1 mm (ASTM D7214), and a "
            f"path above {MAX_PATH_MM:g} mm is a gas cell's, so this is not an oil spectrum (per 0.1 mm every band "
            f"would read {mm / REFERENCE_MM:g} times too small)"))
    return mm


# What tells a transmission spectrum of a whole oil from a difference spectrum or an ATR one.
# Every lubricant base stock but a perfluorinated one is mostly CH2 and CH3: about 55 mol/L of
# CH2 in a hydrocarbon oil, at a peak molar absorptivity of tens of L/(mol cm), puts the C-H
# stretch near 2925 cm-1 at 20-30 absorbance through 0.1 mm and the CH2 bend near 1460 cm-1 at
# about 3 (from memory). Through any cell of the FTIR oil methods (0.025-0.1 mm, ASTM D7214,
# confirmed; ftir.md) the stretch region is therefore at the instrument's stray-light ceiling,
# 2-4 absorbance (common practice, no source). A difference spectrum (used minus new oil, both
# through the same cell) cancels those bands to within the residue of a path mismatch (a 2 %
# mismatch leaves a median of 0.001 in the stretch core of our synthetic oils, 0.05 at its most).
# An ATR spectrum reads them through the micrometres the evanescent wave reaches (about 2 um at
# 1000 cm-1 per reflection, shorter at higher wavenumbers; from memory): a stretch-core median of
# 0.07 (one reflection) to 0.7 (ten). Measured on tests/support/synthetic_spectra.py (the figures
# are the stretch-core median above the 1900-2200 cm-1 level): a used oil at 0.1 mm 3.95 (its
# ceiling); at 0.025 mm 2.50 as recorded, 10 at 0.1 mm; 1:10 in a 0.1 mm cell 1.0, 10 at 0.1 mm.
# An ATR of 25 reflections (1.7) passes for a transmission spectrum: that is the limit of the check.
C_H_CORE = (2850.0, 2960.0)  # the stretch region all four CH2/CH3 stretches cover
C_H_BEND = (1450.0, 1470.0)  # the CH2 scissor / CH3 asymmetric bend, for spectra that stop below 2850
C_H_FLOOR = 1.0  # absorbance at 0.1 mm of neat oil above the 1900-2200 level: our choice, see above
# A declared difference spectrum may keep at most this C-H at 0.1 mm above the level: our choice. One-sided:
# below the level is what a difference shows where both recordings sat at the ceiling while the rest of the
# spectrum rose (soot lifts every wavenumber but the saturated ones: 0.5 of soot gained puts the C-H core
# 0.5 below the level), or where the used oil's cell was the thinner.
DIFFERENCE_CEILING = 0.3
CANCELLED = 0.03  # below this C-H at 0.1 mm the refusal calls the bands cancelled, not weak (wording only)
REFERENCE_MM = 0.1


@dataclass(frozen=True)
class CHStrength:
    """How strongly a spectrum shows the C-H bands every oil has, to judge what kind of spectrum it is.

    recorded: the stretch core's median (or the bend's highest point, when the spectrum stops below
    the stretch) above the mean of the band-free 1900-2200 cm-1 window, as recorded; ceiling: the same
    band's absolute level as recorded reached `saturation` (the light was gone: a whole oil through a
    cell, whatever its length); at_01mm: recorded x 0.1 / the neat-oil path. Median, not maximum: a
    difference spectrum is noisy where both recordings sat at the ceiling, and its spikes must not pass
    for a band.
    """

    band: str
    recorded: float
    ceiling: bool
    at_01mm: float


def c_h_strength(spectrum: Spectrum, neat_path_mm: float, saturation: float = 1.5) -> CHStrength | None:
    """The C-H strength of a spectrum read through `neat_path_mm` of neat oil; None when it reaches
    neither the stretch core nor the bend together with the 1900-2200 cm-1 window."""
    band, recorded, top = c_h_block(spectrum.wavenumber, spectrum.absorbance[:, None])
    if band is None or not np.isfinite(recorded[0]):
        return None
    return CHStrength(band, float(recorded[0]), bool(top[0] >= saturation),
                      float(recorded[0]) * REFERENCE_MM / neat_path_mm)


def c_h_block(x, columns):
    """(band read, C-H excess as recorded, its absolute level) per column of a wavenumber-major block;
    band None when the grid reaches neither region with the 1900-2200 cm-1 window; NaN where a column
    has no finite point in a window. Whole-block reductions, no per-spectrum loop."""
    level = _slab(x, columns, C_H_BASELINE, np.mean, np.nanmean)
    if level is None:
        return None, None, None
    top, band = _slab(x, columns, C_H_CORE, np.median, np.nanmedian), "C-H stretch"
    if top is None:
        top, band = _slab(x, columns, C_H_BEND, np.max, np.nanmax), "C-H bend"
    if top is None:
        return None, None, None
    return band, top - level, top


def plausible_sampling(x, columns, neat_path_mm, difference: bool, saturation: float = 1.5) -> np.ndarray:
    """bool per column: whether sampling_problem finds nothing (the same rule, for a whole block)."""
    band, recorded, top = c_h_block(x, columns)
    if band is None:
        return np.ones(columns.shape[1], dtype=bool)
    at_01mm = recorded * REFERENCE_MM / np.asarray(neat_path_mm, dtype=float)
    ceiling = top >= saturation
    unjudged = ~np.isfinite(recorded)
    if difference:
        return unjudged | (~ceiling & (at_01mm <= DIFFERENCE_CEILING))
    return unjudged | ceiling | (at_01mm >= C_H_FLOOR)


def _slab(x, columns, window, reduce, nan_reduce):
    """reduce() down the rows of `columns` within [low, high] (NaN skipped), or None when the grid has no
    point there."""
    if x[0] > window[0] or x[-1] < window[1]:
        return None
    a, b = np.searchsorted(x, window[0]), np.searchsorted(x, window[1], side="right")
    if b <= a:
        return None
    slab = columns[a:b]
    if np.isfinite(slab).all():
        return reduce(slab, axis=0)
    with warnings.catch_warnings():  # a column with no finite point gives NaN: "not judged"
        warnings.simplefilter("ignore", RuntimeWarning)
        return nan_reduce(slab, axis=0)


def sampling_problem(spectrum: Spectrum, neat_path_mm: float, saturation: float = 1.5) -> str | None:
    """Why this spectrum cannot be read as it claims to be, or None.

    A whole-oil spectrum (the default) must show C-H bands no thinner than the path allows; one the
    file declares a difference spectrum must show them cancelled. Without either window nothing is
    judged (the band code then leaves the bands it cannot reach empty).
    """
    found = c_h_strength(spectrum, neat_path_mm, saturation)
    if found is None:
        return None
    where = (f"its {found.band} ({_span(found.band)} cm-1) stands {found.recorded:.3f} above the "
             f"{C_H_BASELINE[0]:g}-{C_H_BASELINE[1]:g} cm-1 level as recorded, {found.at_01mm:.3f} at 0.1 mm of neat "
             f"oil ({neat_path_mm:g} mm read)")
    if spectrum.difference:
        if found.ceiling or found.at_01mm > DIFFERENCE_CEILING:
            return (f"the file declares a difference spectrum, but {where}: the C-H bands of a whole oil, which "
                    f"a subtraction leaves no more than {DIFFERENCE_CEILING:g} above that level; it is not a "
                    "difference spectrum")
        return None
    if found.ceiling or found.at_01mm >= C_H_FLOOR:
        return None
    if found.at_01mm < CANCELLED:
        kind = ("the C-H bands every oil has are absent or cancelled: not an oil, or a difference spectrum (used "
                "minus new oil, already subtracted), which read as a used oil would grade its gain as a direct "
                "reading or have the new oil subtracted twice; if it is one, say so (##DATA PROCESSING="
                "SPECTRAL SUBTRACTION OF THE NEW OIL, or a CSV column named 'difference absorbance') and it is "
                "read as differential")
    else:
        kind = ("too weak for any transmission cell of the FTIR oil methods: an ATR or other short-path "
                "spectrum (say so in ##SAMPLING PROCEDURE=; it is refused, having no path length), or a "
                f"wrong path length or dilution (a difference spectrum keeps less than {CANCELLED:g})")
    return (f"{where}; any oil through a transmission cell reads at least {C_H_FLOOR:g} there (or reaches the "
            f"{saturation:g} saturation threshold as recorded): {kind}")


# The C-H stretch reaches the instrument's ceiling through any cell of the oil methods, so it cannot tell a
# 0.025 mm cell from a 0.1 mm one: a 0.025 mm spectrum read as 0.1 mm passed the check above while every band
# read at a quarter. The CH2 bend near 1460 cm-1 does not saturate through thin cells: about 3 absorbance at
# 0.1 mm of a hydrocarbon oil (from memory: ~45 mol/L of CH2; the synthetic oils of the tests read 2.94),
# 0.75 through 0.025 mm, so Beer-Lambert puts the path in it. Base stocks differ in CH2 (an ester or a PAG
# carries perhaps 0.6-0.8 of a hydrocarbon's, from memory), so the bend cannot rescale a reading to 1 %, only
# show a path far from the one assumed: by more than 3 from the typical figure. Our choice, no source:
# PATH_FLOOR catches a cell a third or less of the one assumed (0.025 mm read as 0.1 mm: 0.75); a bend at or
# above the saturation threshold as recorded is a lower bound and never too thin. PATH_CEILING catches a cell
# three times or more the one assumed (0.1 mm read as 0.025 mm: 11.8); judged on undiluted samples only, since
# a hydrocarbon solvent brings its own bend; a bend weaker than the hydrocarbon's, or one pressed under the
# stray-light ceiling in a thick cell, may stay under it. A cell half or twice the one assumed is not caught,
# and a declared path is not checked against the bend, because the bend does not separate them. Measured on
# tests/support/synthetic_spectra.py (tests/intake/spectra/test_path_length.py: mineral, PAO and ester stocks of
# CH2 content from memory, stray light 0.01-0.1 %, resolution 2-8 cm-1, new and used), the bend as recorded:
# mineral 1.26-1.64 / 2.28-3.20 / 2.30-3.90 through 0.05 / 0.1 / 0.2 mm, PAO 1.26-1.49 / 2.28-2.94 / 2.30-3.90,
# ester 0.84-1.19 / 1.65-2.37 / 2.26-3.84. Twice the cell overlaps in every stock (the bend meets the stray-light
# ceiling); half the cell is apart within one stock by a factor of only 1.39-1.53, the margin a CH2 content known
# from memory uses up, and across stocks not at all (a mineral oil through 0.05 mm, 1.64, reads as an ester
# through 0.1 mm, 1.65). No public spectrum of an oil through a known cell was found to narrow that.
# Only a path nobody declared is judged (batch.measure_spectra): a declared one is trusted, which is the way
# through for a fluid whose bend is intrinsically weak.
C_H_BEND_TYPICAL = 3.0  # absorbance of a whole hydrocarbon oil's CH2 bend above the level at 0.1 mm: from memory
PATH_FLOOR = 1.0
PATH_CEILING = 8.0


def bend_block(x, columns):
    """(C-H bend's highest point above the 1900-2200 cm-1 level as recorded, that point's own absorbance) per
    column of a wavenumber-major block, or (None, None) when the grid does not reach both windows."""
    level = _slab(x, columns, C_H_BASELINE, np.mean, np.nanmean)
    top = _slab(x, columns, C_H_BEND, np.max, np.nanmax)
    if level is None or top is None:
        return None, None
    return top - level, top


def plausible_path(x, columns, neat_path_mm, undiluted, saturation: float = 1.5) -> np.ndarray:
    """bool per column of a whole-oil block: whether path_problem finds nothing (one rule, whole-block reductions)."""
    recorded, top = bend_block(x, columns)
    if recorded is None:
        return np.ones(columns.shape[1], dtype=bool)
    at_01mm = recorded * REFERENCE_MM / np.asarray(neat_path_mm, dtype=float)
    with np.errstate(invalid="ignore"):
        thin = (top < saturation) & (at_01mm < PATH_FLOOR)
        thick = np.asarray(undiluted, dtype=bool) & (at_01mm > PATH_CEILING)
    return ~(thin | thick)


def path_problem(spectrum: Spectrum, neat_path_mm: float, undiluted: bool, saturation: float = 1.5,
                 basis: str = "a path assumed") -> str | None:
    """Why the path length a whole-oil spectrum is read at cannot be its cell's, or None (see PATH_FLOOR)."""
    recorded, top = bend_block(spectrum.wavenumber, spectrum.absorbance[:, None])
    if recorded is None or plausible_path(spectrum.wavenumber, spectrum.absorbance[:, None], [neat_path_mm],
                                          [undiluted], saturation)[0]:
        return None
    at_01mm = float(recorded[0]) * REFERENCE_MM / neat_path_mm
    estimate = neat_path_mm * at_01mm / C_H_BEND_TYPICAL
    side = "thinner" if at_01mm < PATH_FLOOR else "thicker"
    scale = "a third or less of" if side == "thinner" else "several times"
    return (f"its C-H bend ({_span('C-H bend')} cm-1) stands {float(recorded[0]):.3f} above the "
            f"{C_H_BASELINE[0]:g}-{C_H_BASELINE[1]:g} cm-1 level as recorded, {at_01mm:.3f} at 0.1 mm of neat oil "
            f"when read through {neat_path_mm:g} mm ({basis}); a whole oil reads about {C_H_BEND_TYPICAL:g} there at 0.1 mm, "
            f"so the cell looks {side} (about {estimate:.2g} mm of neat oil) and every band would read at "
            f"{scale} its value; declare the path length (##PATH LENGTH= in the file, a path_length_mm column, "
            f"or the path-length option) and the dilution")


def _span(band):
    low, high = C_H_CORE if band == "C-H stretch" else C_H_BEND
    return f"{low:g}-{high:g}"
