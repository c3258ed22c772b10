"""The in-memory spectrum every reader returns, the error they raise, and unit conversions.

Readers convert at the edge: whatever the file's abscissa (1/CM, micrometres,
nanometres) and ordinate (absorbance, transmittance as fraction or percent),
a Spectrum holds ascending wavenumbers in cm-1 and absorbance as measured,
so the band code downstream never sees units.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field

import numpy as np

MICROMETRES_PER_CM1 = 1.0e4  # wavelength in um = 10 000 / wavenumber in cm-1 (ftir.md, confirmed)
NANOMETRES_PER_CM1 = 1.0e7  # wavelength in nm = 10 000 000 / wavenumber in cm-1


class SpectrumError(ValueError):
    """A spectrum file that cannot be used: names the file, the line (if known) and why."""

    def __init__(self, source: str, line: int | None, reason: str):
        self.source = source
        self.line = line
        self.reason = reason
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


def make_spectrum(source, x, y, x_units, y_units, range_line=None, notes=(), evenly_spaced=False,
                  path_length_mm=None):
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
        percent = percent_label or (finite.size > 0 and float(np.median(finite)) > 1.5)
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
                    path_length_mm)


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


_PATH_UNITS_MM = {"MM": 1.0, "CM": 10.0, "UM": 1.0e-3, "MICROMETERS": 1.0e-3, "MICROMETRES": 1.0e-3,
                  "MICRONS": 1.0e-3, "MILLIMETERS": 1.0, "MILLIMETRES": 1.0, "CENTIMETERS": 10.0,
                  "CENTIMETRES": 10.0}


_NUMBER_THEN_UNIT = re.compile(r"\s*([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*([A-Za-z]+\.?)?")


def parse_path_length(source, line, text):
    """mm from a `##PATH LENGTH=` value such as `0.1 MM`, `0.1MM`, `5 CM` or `18 CM CELL` (a number, then its unit)."""
    match = _NUMBER_THEN_UNIT.match(text.replace(",", " "))
    value = float(match.group(1)) if match else float("nan")
    unit = (match.group(2) or "").upper().rstrip(".") if match else ""
    if not (math.isfinite(value) and value > 0) or unit not in _PATH_UNITS_MM:
        raise SpectrumError(source, line, f"##PATH LENGTH={text!r}: expected a positive number and its unit "
                                          "(MM, CM or UM), e.g. 0.1 MM")
    return value * _PATH_UNITS_MM[unit]
