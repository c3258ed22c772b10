"""Synthetic oil spectra with bands of known height and area, and a JCAMP-DX writer.

For tests, the benchmark and the demo scenario: every band is a Gaussian or
Lorentzian, so a measured height or area can be checked in closed form.
The band set below is invented (positions follow common IR correlation values),
with magnitudes chosen to look like real oils at 0.100 mm (common practice, no
source): a new mineral oil shows a small carbonyl (about 0.01 absorbance), used
oils carbonyl peaks of about 0.05-0.5, and a new ester oil's own carbonyl
saturates (about 2 absorbance, above the 1.5 threshold of the band file).

The hydrocarbon C-H bands are as strong as a transmission cell makes them: about
55 mol/L of CH2 in a hydrocarbon oil at a peak molar absorptivity of tens of
L/(mol cm) (from memory) puts the C-H stretch near 2925 cm-1 at 20-30 absorbance
through 0.1 mm, far past what any spectrometer records. The recorded absorbance is
limited by stray light: A = -log10((10^-A_true + s) / (1 + s)), s = 0.01 % of the
light (common practice, no source), so the stretch region sits at a ceiling near
4.0 and the bending bands at 1460 and 1377 cm-1 read about 2.9 and 1.2. Below
0.5 absorbance the ceiling changes a reading by under 0.03 %, at 2 by 0.2 %.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

SQZ_POSITIVE = "@ABCDEFGHI"
SQZ_NEGATIVE = "@abcdefghi"
DIF_POSITIVE = "%JKLMNOPQR"
DIF_NEGATIVE = "%jklmnopqr"
DUP_DIGITS = " STUVWXYZs"


def wavenumber_grid(first: float = 550.0, last: float = 4000.0, step: float = 2.0) -> np.ndarray:
    """Ascending grid, 550-4000 cm-1 at 2 cm-1 by default (1 726 points)."""
    count = int(round((last - first) / step)) + 1
    return first + step * np.arange(count)


def gaussian(x, centre: float, area: float, sigma: float):
    """Gaussian band of total area `area` (abs*cm-1); its peak height is area / (sigma*sqrt(2*pi))."""
    return area / (sigma * np.sqrt(2 * np.pi)) * np.exp(-0.5 * ((np.asarray(x) - centre) / sigma) ** 2)


def lorentzian(x, centre: float, area: float, gamma: float):
    """Lorentzian band of total area `area`, half-width at half-maximum gamma; peak height area/(pi*gamma)."""
    return area / np.pi * gamma / ((np.asarray(x) - centre) ** 2 + gamma**2)


ROOT_2PI = np.sqrt(2 * np.pi)
STRAY_LIGHT = 1.0e-4  # fraction of the light that reaches the detector whatever the sample absorbs
# (centre cm-1, area abs*cm-1 at 0.1 mm, sigma cm-1): invented, demo only. The C-H stretch and
# bending heights at 0.1 mm (25, 15, 8, 5; 3.0, 1.2; 0.4 at 722) are from memory, as the
# module docstring says; the widths (sigma 6-12 cm-1) are our choice.
_HYDROCARBON = ((2925, 25.0 * 12 * ROOT_2PI, 12), (2855, 15.0 * 10 * ROOT_2PI, 10), (2955, 8.0 * 8 * ROOT_2PI, 8),
                (2870, 5.0 * 8 * ROOT_2PI, 8), (1460, 3.0 * 10 * ROOT_2PI, 10), (1377, 1.2 * 6 * ROOT_2PI, 6),
                (722, 0.4 * 8 * ROOT_2PI, 8),
                (1712, 0.35, 14))  # the last: a new mineral oil's small carbonyl, 0.01 high
_ESTER = ((1740, 60.0, 12), (1240, 12.0, 25), (1170, 18.0, 22))  # carbonyl 2.0 high at 0.1 mm: saturated
ESTER_CARBONYL_HEIGHT = 60.0 / (12 * np.sqrt(2 * np.pi))
_ADDITIVE = ((990, 1.5, 15),)  # phosphate anti-wear, new oil
_DEGRADATION = {
    "oxidation": (1712, 14),
    "nitration": (1630, 8),
    "sulfation": (1150, 12),
    "water": (3350, 70),
}


def oil_spectrum(
    x,
    base_stock: str = "mineral",
    oxidation: float = 0.0,
    nitration: float = 0.0,
    sulfation: float = 0.0,
    water: float = 0.0,
    soot: float = 0.0,
    antiwear_left: float = 1.0,
    slope: float = 2.0e-5,
    offset: float = 0.02,
    noise: float = 0.0,
    seed: int = 0,
    path_mm: float = 0.1,
    stray_light: float = STRAY_LIGHT,
    c_h: float = 1.0,
    ester_additive: float = 0.0,
):
    """Recorded absorbance of a made-up oil in a transmission cell of `path_mm` of neat oil.

    `oxidation`, `nitration`, `sulfation`, `water` are peak heights (absorbance
    at 0.1 mm) added to the new oil; a Gaussian of height h and width sigma has
    area h * sigma * sqrt(2 pi). `soot` lifts the whole spectrum (a flat offset,
    as soot scatters broadly); `antiwear_left` is the fraction of anti-wear band
    remaining. Every band scales with path_mm (Beer-Lambert), then the stray-light
    ceiling applies (stray_light=0: the true absorbance, unlimited). `c_h` scales the
    hydrocarbon C-H bands (a base stock with less CH2, such as a PAG: about 0.7, from
    memory); `ester_additive` adds that fraction of an ester base stock's bands (its
    carbonyl 2.0 high at 0.1 mm, and its C-O bands): 0.05-0.25 is an ester additive such
    as a polymethacrylate viscosity modifier at a few percent (from memory).
    """
    x = np.asarray(x, dtype=float)
    y = _true_absorbance(x, base_stock, oxidation, nitration, sulfation, water, soot, antiwear_left, slope, offset,
                         c_h, ester_additive)
    y = y * (path_mm / 0.1)
    if stray_light:
        y = -np.log10((10.0 ** -y + stray_light) / (1.0 + stray_light))
    if noise:
        y = y + np.random.default_rng(seed).normal(0.0, noise, size=x.size)
    return y


# Effective thickness of one ATR reflection (diamond or ZnSe crystal, 45 degrees, oil of refractive
# index about 1.48): about 2 um at 1000 cm-1, growing with the wavelength (from memory).
ATR_MICROMETRES_AT_1000 = 2.0


def atr_spectrum(x, reflections: int = 1, noise: float = 0.0, seed: int = 0, **oil):
    """An ATR spectrum of the same made-up oil: the true absorbance per 0.1 mm times the effective
    thickness of `reflections` reflections over 100 um, that thickness growing as 1/wavenumber."""
    x = np.asarray(x, dtype=float)
    true = oil_spectrum(x, stray_light=0.0, **oil)
    microns = reflections * ATR_MICROMETRES_AT_1000 * 1000.0 / x
    y = true * microns / 100.0
    if noise:
        y = y + np.random.default_rng(seed).normal(0.0, noise, size=x.size)
    return y


def at_resolution(x, y, resolution: float):
    """The spectrum as an instrument of `resolution` cm-1 records it: y convolved with a line shape
    approximated by a Gaussian of that full width at half height (our simplification; real
    apodised line shapes differ in their wings). x evenly spaced; the ends are padded flat."""
    x, y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
    sigma = resolution / (2 * np.sqrt(2 * np.log(2)))
    step = x[1] - x[0]
    reach = int(np.ceil(4 * sigma / abs(step)))
    kernel = np.exp(-0.5 * (np.arange(-reach, reach + 1) * step / sigma) ** 2)
    return np.convolve(np.pad(y, reach, mode="edge"), kernel / kernel.sum(), mode="valid")


def _true_absorbance(x, base_stock, oxidation, nitration, sulfation, water, soot, antiwear_left, slope, offset,
                     c_h=1.0, ester_additive=0.0):
    y = offset + slope * (x - x.min()) + soot
    for centre, area, sigma in _HYDROCARBON[:-1]:
        y = y + gaussian(x, centre, area * c_h, sigma)
    bands = _HYDROCARBON[-1:] + (_ESTER if base_stock == "ester" else ())
    for centre, area, sigma in bands:
        y = y + gaussian(x, centre, area, sigma)
    for centre, area, sigma in _ESTER if ester_additive else ():
        y = y + gaussian(x, centre, area * ester_additive, sigma)
    for centre, area, sigma in _ADDITIVE:
        y = y + gaussian(x, centre, area * antiwear_left, sigma)
    for name, height in (("oxidation", oxidation), ("nitration", nitration), ("sulfation", sulfation),
                         ("water", water)):
        centre, sigma = _DEGRADATION[name]
        y = y + gaussian(x, centre, height * sigma * np.sqrt(2 * np.pi), sigma)
    return y


def random_used_oils(x, count: int, seed: int = 0, base_stock: str = "mineral"):
    """A (count, points) block of used-oil spectra with random degradation: for the benchmark.

    Peak heights at 0.1 mm drawn uniformly: carbonyl 0-0.5, nitration and sulfation
    0-0.2, water 0-0.3 (realistic used-oil magnitudes, common practice, no source).
    """
    rng = np.random.default_rng(seed)
    new = oil_spectrum(x, base_stock)
    shapes = np.stack([gaussian(x, c, s * np.sqrt(2 * np.pi), s) for c, s in _DEGRADATION.values()])  # height 1
    amounts = rng.uniform(0.0, [0.5, 0.2, 0.2, 0.3], size=(count, len(_DEGRADATION)))
    soot = rng.uniform(0.0, 0.3, size=(count, 1))
    return new[None, :] + amounts @ shapes + soot


def write_jcampdx(
    path: Path | str,
    x,
    y,
    form: str = "AFFN",
    title: str = "synthetic spectrum",
    x_units: str = "1/CM",
    y_units: str = "ABSORBANCE",
    significant: int = 6,
    values_per_line: int | None = None,
    path_length: str | None = None,
) -> Path:
    """Write an evenly spaced spectrum as JCAMP-DX 4.24.

    form: AFFN, PAC, SQZ, DIF (with Y-check), DIFDUP (DIF with DUP runs) or
    XYPOINTS. Y is stored as integers times a YFACTOR chosen to keep
    `significant` digits; the Y values written are therefore rounded.
    values_per_line defaults to what keeps lines near 80 characters.
    path_length: written as `##PATH LENGTH=` (e.g. "0.025 MM") when given.
    """
    values_per_line = values_per_line or {"AFFN": 8, "PAC": 8, "SQZ": 12}.get(form, 14)
    path = Path(path)
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    span = float(np.max(np.abs(y))) or 1.0
    y_factor = 10.0 ** (np.floor(np.log10(span)) - significant + 1)
    stored = np.round(y / y_factor).astype(np.int64)
    header = [
        f"##TITLE= {title}",
        "##JCAMP-DX= 4.24",
        "##DATA TYPE= INFRARED SPECTRUM",
        "##ORIGIN= sumpwise synthetic data (invented)",
        "##OWNER= public domain",
        f"##XUNITS= {x_units}",
        f"##YUNITS= {y_units}",
        "##XFACTOR= 1",
        f"##YFACTOR= {y_factor:.10g}",
        f"##FIRSTX= {x[0]:.10g}",
        f"##LASTX= {x[-1]:.10g}",
        f"##NPOINTS= {x.size}",
        f"##FIRSTY= {stored[0] * y_factor:.10g}",
    ]
    if path_length is not None:
        header.insert(4, f"##PATH LENGTH= {path_length}")
    if form == "XYPOINTS":
        body = ["##XYPOINTS=(XY..XY)"] + [f"{xi:.10g}, {yi}" for xi, yi in zip(x, stored)]
    else:
        body = ["##XYDATA=(X++(Y..Y))"] + _xydata_lines(x, stored, form, values_per_line)
    path.write_text("\n".join(header + body + ["##END="]) + "\n", encoding="ascii")
    return path


def _xydata_lines(x, stored, form, per_line):
    lines = []
    if form in ("AFFN", "PAC", "SQZ"):
        for start in range(0, stored.size, per_line):
            chunk = stored[start : start + per_line]
            if form == "AFFN":
                text = " " + " ".join(str(v) for v in chunk)
            elif form == "PAC":
                text = "".join(f"{v:+d}" for v in chunk)
            else:
                text = "".join(_sqz(v) for v in chunk)
            lines.append(f"{x[start]:.10g}{text}")
        return lines
    if form not in ("DIF", "DIFDUP"):
        raise ValueError(f"unknown JCAMP-DX form {form!r}: expected AFFN, PAC, SQZ, DIF, DIFDUP or XYPOINTS")
    start = 0
    while start < stored.size - 1 or start == 0:
        stop = min(start + per_line, stored.size - 1)
        diffs = np.diff(stored[start : stop + 1])
        text = _sqz(stored[start]) + (_dif_dup(diffs) if form == "DIFDUP" else "".join(_dif(d) for d in diffs))
        lines.append(f"{x[start]:.10g}{text}")
        start = stop
        if stop == stored.size - 1:
            break
    lines.append(f"{x[-1]:.10g}{_sqz(stored[-1])}")  # the last line's Y-check
    return lines


def _pseudo(value, positive, negative):
    digits = str(abs(int(value)))
    table = negative if value < 0 else positive
    return table[int(digits[0])] + digits[1:]


def _sqz(value):
    return _pseudo(value, SQZ_POSITIVE, SQZ_NEGATIVE)


def _dif(value):
    return _pseudo(value, DIF_POSITIVE, DIF_NEGATIVE)


def _dup(count):
    digits = str(int(count))
    return DUP_DIGITS[int(digits[0])] + digits[1:]


def _dif_dup(diffs):
    parts = []
    i = 0
    while i < diffs.size:
        j = i
        while j + 1 < diffs.size and diffs[j + 1] == diffs[i]:
            j += 1
        run = j - i + 1
        parts.append(_dif(diffs[i]) + (_dup(run) if run > 1 else ""))
        i = j + 1
    return "".join(parts)
