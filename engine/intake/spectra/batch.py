"""Measure many spectra at once: read at the edge, group by grid, measure in blocks.

Direct trend: bands on the used-oil spectrum itself, in abs/0.1 mm.
Differential trend (spectral subtraction, ASTM D7418): the new-oil reference
of the same lubricant is interpolated onto the used spectrum's grid, both are
normalised to 0.100 mm of neat oil (each by its own path length and dilution),
the reference is subtracted, and the bands are read on the difference, in
abs/cm = abs/0.1 mm x 100 (ASTM D7412 12.1-12.2). Spectra sharing a grid and a
reference are stacked and measured as 2-D arrays in blocks of `block_size`,
which bounds memory.

Bands are measured one by one: a band the spectrum's range does not cover, or
one saturated in the sample or the reference, is left empty with a note; a
spectrum is rejected only when none of the bands the run needs is measured.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from sumpwise.intake.spectra.bands import BandSet, load_bands, measure_columns, plan_bands, saturated_bands
from sumpwise.intake.spectra.jcampdx import read_jcampdx, read_jcampdx_many
from sumpwise.intake.spectra.spectrum import (MAX_PATH_MM, Spectrum, SpectrumError, path_problem, plausible_path,
                                              plausible_sampling, sampling_problem)
from sumpwise.intake.spectra.spectrum_csv import read_spectrum_csv

REFERENCE_PATH_MM = 0.1
ABS_PER_CM_PER_ABS_PER_01MM = 100.0  # ASTM D7412 12.1-12.2
DIRECT, SUBTRACTION = "direct", "subtraction"
UNITS = {DIRECT: "abs/0.1mm", SUBTRACTION: "abs/cm"}  # heights and points
AREA_UNITS = {DIRECT: "abs*cm-1/0.1mm", SUBTRACTION: "abs*cm-1/cm"}  # areas: the same path normalisation
SPECTRUM_SUFFIXES = (".jdx", ".dx", ".jcm", ".jcamp", ".csv")
DEFAULT_BLOCK = 4096


@dataclass(frozen=True)
class Rejection:
    """One spectrum that was not measured, and why (file, line if known, reason)."""

    spectrum: str
    line: int | None
    reason: str
    code: str = "F001"  # PROBLEM_CODES

    @property
    def message(self) -> str:
        where = f"{self.spectrum}:{self.line}" if self.line is not None else self.spectrum
        return f"{where}: {self.reason}"


def check_path_length(value, what: str = "path length") -> float:
    """A cell path length in mm: finite and above zero, else ValueError naming it."""
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise ValueError(f"{what}: expected a number of mm, got {value!r}") from None
    if not (math.isfinite(number) and 0 < number <= MAX_PATH_MM):
        raise ValueError(f"{what}: expected a finite number of mm above 0 and at most {MAX_PATH_MM:g}, got {value!r}")
    return number


def check_dilution(value, what: str = "dilution") -> float:
    """A dilution factor (volume of the diluted sample / volume of oil in it): finite, 1 or more."""
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise ValueError(f"{what}: expected a number of 1 or more, got {value!r}") from None
    if not (math.isfinite(number) and 1 <= number <= 1000):
        raise ValueError(f"{what}: expected a finite dilution factor from 1 to 1000, got {value!r}")
    return number


def read_spectrum(path: Path | str) -> Spectrum:
    """Read a .csv as two columns, anything else as JCAMP-DX."""
    path = Path(path)
    if path.suffix.lower() == ".csv":
        return read_spectrum_csv(path)
    return read_jcampdx(path)


def read_spectra(paths) -> list:
    """Read many spectra; each entry is a Spectrum or the SpectrumError that rejected it (in order)."""
    paths = [Path(p) for p in paths]
    results = [None] * len(paths)
    jcamp = [i for i, p in enumerate(paths) if p.suffix.lower() != ".csv"]
    for i, result in zip(jcamp, read_jcampdx_many([paths[i] for i in jcamp])):
        results[i] = result
    for i, path in enumerate(paths):
        if results[i] is None:
            try:
                results[i] = read_spectrum_csv(path)
            except SpectrumError as exc:
                results[i] = exc
    return results


def measure_matrix(x, absorbance, bands: BandSet | None = None, path_length_mm=0.1,
                   reference=None, reference_path_length_mm: float | None = None,
                   block_size: int = DEFAULT_BLOCK):
    """Band values for rows of `absorbance` on grid x (ascending), direct or by subtraction.

    reference: None (direct) or one absorbance row on the same grid, or a
    matrix with one row per spectrum. path_length_mm: one figure or one per
    row. Returns (values, peak_positions, uncovered): dicts of arrays in
    abs/0.1 mm (direct) or abs/cm, NaN where a band met a non-finite point;
    and the bands the grid does not reach. Saturation is not checked here
    (measure_spectra does).
    """
    columns = np.ascontiguousarray(np.atleast_2d(np.asarray(absorbance, dtype=float)).T)
    if reference is not None:
        reference = np.ascontiguousarray(np.atleast_2d(np.asarray(reference, dtype=float)).T)
    return _measure_columns_matrix(x, columns, bands, path_length_mm, reference, reference_path_length_mm,
                                   block_size, with_positions=True)


def _measure_columns_matrix(x, columns, bands, path_length_mm, reference, reference_path_length_mm, block_size,
                            plan=None, with_positions=False):
    """measure_matrix on wavenumber-major data: one column per spectrum (reference: one column, or one per spectrum).

    path_length_mm may be one figure or one per column (a path already divided by
    its dilution factor: what matters is the neat-oil thickness the light crossed).
    """
    bands = bands or load_bands()
    plan = plan or plan_bands(np.asarray(x, dtype=float), bands.bands)
    scale = REFERENCE_PATH_MM / np.broadcast_to(np.asarray(path_length_mm, dtype=float), (columns.shape[1],))
    if reference_path_length_mm is None:
        reference_path_length_mm = path_length_mm if np.ndim(path_length_mm) == 0 else REFERENCE_PATH_MM
    ref_scale = REFERENCE_PATH_MM / reference_path_length_mm
    factor = 1.0 if reference is None else ABS_PER_CM_PER_ABS_PER_01MM
    parts = []
    for start in range(0, columns.shape[1], block_size):
        block = columns[:, start : start + block_size] * scale[None, start : start + block_size]
        if reference is not None:
            ref = reference if reference.shape[1] == 1 else reference[:, start : start + block_size]
            block -= ref * ref_scale
        parts.append(measure_columns(plan, block, with_positions))
    names = plan.bands
    values = {b.name: np.concatenate([p.values[b.name] for p in parts]) * factor for b in names}
    positions = {k: np.concatenate([p.peak_positions[k] for p in parts]) for k in parts[0].peak_positions} if parts else {}
    return values, positions, plan.uncovered


def measure_spectra(paths, references=None, path_length_mm: float = 0.1, bands: BandSet | None = None,
                    reference_path_length_mm: float | None = None, block_size: int = DEFAULT_BLOCK,
                    dilutions=None, needed=None, direct_bands=(), declared=None, peaks=()):
    """Read and measure spectra; exactly one row per path, in order, plus the list of rejections.

    references: None for all direct; a sequence aligned with `paths` (a reference
    file or None per spectrum: two samples naming the same spectrum file may have
    different references); or a mapping from a path to its reference file.
    path_length_mm / reference_path_length_mm: used for a file that has no
    `##PATH LENGTH=` of its own. dilutions: None or one factor per path. declared: None or one
    bool per path, True where the caller's path_length_mm is that sample's own declaration (a
    row's path_length_mm) rather than a run-wide assumption; a path neither the file nor the caller
    declares is checked against the C-H bend (spectrum.path_problem), a declared one is trusted.
    peaks: height bands whose peak wavenumber the caller needs, as `<band>_peak_cm1` columns (NaN
    where the band is not measured).
    needed: the band names the caller needs (default: all); a spectrum none of
    whose needed bands can be measured is rejected. direct_bands: bands read on
    the used spectrum itself even when it has a reference (in the row's abs/cm),
    for measures that hold one convention whatever the row's method. Columns: spectrum, one per
    band, method, unit (of heights and points), area_unit (of areas),
    path_length_mm, dilution, reference, notes, rejection.
    A bad file rejects that spectrum only.
    """
    bands = bands or load_bands()
    paths = [Path(p) for p in paths]
    refs = _aligned_references(paths, references)
    dilutions = [1.0] * len(paths) if dilutions is None else [float(d) for d in dilutions]
    declared = [False] * len(paths) if declared is None else [bool(d) for d in declared]
    needed = tuple(needed) if needed is not None else bands.names
    rejections = {}
    spectra = {}
    unique = list(dict.fromkeys(paths))
    read = dict(zip(unique, read_spectra(unique)))
    for i, path in enumerate(paths):
        result = read[path]
        if isinstance(result, SpectrumError):
            rejections[i] = Rejection(str(path), result.line, result.reason, result.code)
        else:
            spectra[i] = result
    loaded_refs = {}
    for i in list(spectra):
        ref_path = refs[i]
        if ref_path is None or spectra[i].difference:
            continue
        if ref_path not in loaded_refs:
            try:
                loaded_refs[ref_path] = read_spectrum(ref_path)
            except SpectrumError as exc:
                loaded_refs[ref_path] = exc
            else:
                ref = loaded_refs[ref_path]
                ref_mm = ref.path_length_mm or reference_path_length_mm or path_length_mm
                problem = ("a difference spectrum is not a new oil" if ref.difference else
                           sampling_problem(ref, ref_mm, bands.saturation_absorbance))
                if problem is not None:
                    loaded_refs[ref_path] = SpectrumError(ref.source, None, problem)
                elif ref.path_length_mm is None and (problem := path_problem(
                        ref, ref_mm, True, bands.saturation_absorbance, "a path assumed: no ##PATH LENGTH= in the file")):
                    loaded_refs[ref_path] = SpectrumError(ref.source, None, problem, "F002")
        if isinstance(loaded_refs[ref_path], SpectrumError):
            rejections[i] = Rejection(str(paths[i]), None, f"reference spectrum unusable: {loaded_refs[ref_path]}",
                                      loaded_refs[ref_path].code)
            del spectra[i]
        elif (problem := _resolution_problem(spectra[i], loaded_refs[ref_path])) is not None:
            rejections[i] = Rejection(str(paths[i]), None, problem)
            del spectra[i]

    used_path = {i: (s.path_length_mm or path_length_mm) for i, s in spectra.items()}
    groups = {}
    for i, spectrum in spectra.items():
        # a declared difference spectrum is read as it is: the lab's instrument already subtracted the new oil
        ref_path = None if spectrum.difference else refs[i]
        groups.setdefault((spectrum.wavenumber.tobytes(), ref_path, spectrum.difference), []).append(i)

    rows, notes = {}, {}
    for (_, ref_path, difference), members in groups.items():
        x = spectra[members[0]].wavenumber
        columns = np.stack([spectra[i].absorbance for i in members], axis=1)  # as cheap as rows, no later copy
        neat = np.array([used_path[i] / dilutions[i] for i in members])
        # a whole oil thinner than its cell, or a difference spectrum that does not say so: one block test,
        # worded spectrum by spectrum only for those it refuses
        fine = plausible_sampling(x, columns, neat, difference, bands.saturation_absorbance)
        if not fine.all():
            for k in np.flatnonzero(~fine):
                i = members[k]
                rejections[i] = Rejection(str(paths[i]), None,
                                          sampling_problem(spectra[i], neat[k], bands.saturation_absorbance))
                del spectra[i]
            members, columns, neat = [members[k] for k in np.flatnonzero(fine)], columns[:, fine], neat[fine]
            if not members:
                continue
        # a whole oil read at a path neither its file nor the caller declared: the C-H bend must not say the
        # cell is far thinner or thicker (a 0.025 mm cell read as 0.1 mm put every band at a quarter)
        assumed = np.array([spectra[i].path_length_mm is None and not declared[i] for i in members])
        if not difference and assumed.any():
            undiluted = np.array([dilutions[i] == 1.0 for i in members])
            fine = ~assumed | plausible_path(x, columns, neat, undiluted, bands.saturation_absorbance)
            if not fine.all():
                for k in np.flatnonzero(~fine):
                    i = members[k]
                    basis = "a path assumed: no ##PATH LENGTH= in the file" + (
                        "" if dilutions[i] == 1.0 else f", diluted {dilutions[i]:g} times")
                    rejections[i] = Rejection(str(paths[i]), None, path_problem(
                        spectra[i], neat[k], bool(undiluted[k]), bands.saturation_absorbance, basis), "F002")
                    del spectra[i]
                members, columns, neat = [members[k] for k in np.flatnonzero(fine)], columns[:, fine], neat[fine]
                if not members:
                    continue
        plan = plan_bands(x, bands.bands)
        reference, ref_path_mm = None, None
        saturated = saturated_bands(plan, columns, bands.saturation_absorbance)
        ref_saturated = {}
        direct = set(direct_bands) if ref_path is not None else set()
        if direct:  # on the used spectrum's own grid, as without a reference
            own, _, own_uncovered = _measure_columns_matrix(x, columns, bands, neat, None, None, block_size, plan)
        regridded = None
        if ref_path is not None:
            ref = loaded_refs[ref_path]
            ref_path_mm = ref.path_length_mm or reference_path_length_mm or path_length_mm
            if _coarser(ref.wavenumber, x):
                regridded = float(np.median(np.diff(ref.wavenumber)))
                x, columns = _onto(ref.wavenumber, x, columns)
                plan = plan_bands(x, bands.bands)
            reference = np.interp(x, ref.wavenumber, ref.absorbance, left=np.nan, right=np.nan)[:, None]
            # NaN here is outside the reference's range (its own message below), not saturation
            ref_saturated = saturated_bands(plan, np.nan_to_num(reference, nan=0.0), bands.saturation_absorbance)
        values, positions, uncovered = _measure_columns_matrix(
            x, columns, bands, neat, reference, ref_path_mm, block_size, plan, with_positions=bool(peaks))
        if difference:  # already used minus new: abs/cm as a subtraction reads it (ASTM D7412 12.1-12.2)
            values = {name: value * ABS_PER_CM_PER_ABS_PER_01MM for name, value in values.items()}
        if direct:
            values |= {name: own[name] * ABS_PER_CM_PER_ABS_PER_01MM for name in direct}
            uncovered = ({name: why for name, why in uncovered.items() if name not in direct}
                         | {name: why for name, why in own_uncovered.items() if name in direct})
            ref_saturated = {name: flags for name, flags in ref_saturated.items() if name not in direct}
        method = DIRECT if ref_path is None and not difference else SUBTRACTION
        for k, i in enumerate(members):
            row, why = {}, []
            if regridded is not None:
                why.append(f"subtracted on the reference's grid (points {regridded:.3g} cm-1 apart, coarser than the "
                           "sample's): the sample's values at the reference's points, so no band loses height to "
                           "interpolation")
            if difference and refs[i] is not None:
                why.append(f"reference {refs[i]} not subtracted: the file is already a difference spectrum")
            for band in bands.bands:
                value = float(values[band.name][k])
                if band.name in uncovered:
                    why.append(f"{band.name}: not measured: {uncovered[band.name]}")
                elif difference and band.name in direct_bands:
                    why.append(f"{band.name}: not measured: the spectrum is a difference spectrum, and {band.name} "
                               "is read directly on the used oil only")
                elif band.name in ref_saturated and ref_saturated[band.name][0]:
                    why.append(f"{band.name}: not measured: the reference is saturated "
                               f"{_saturation_words(band, bands)}")
                elif saturated.get(band.name, np.zeros(len(members), bool))[k]:
                    why.append(f"{band.name}: not measured: saturated {_saturation_words(band, bands)}")
                elif not math.isfinite(value):
                    what = "reference or spectrum" if ref_path is not None else "spectrum"
                    why.append(f"{band.name}: not measured: the {what} has no finite absorbance inside the band "
                               "(e.g. transmittance <= 0 or outside the reference range)")
                else:
                    row[band.name] = value
                    continue
                row[band.name] = math.nan
            if not any(math.isfinite(row[name]) for name in needed if name in row):
                first = next((w for w in why if w.split(":")[0] in needed), why[0] if why else "no band measured")
                line = spectra[i].range_line if any(n in uncovered for n in needed) else None
                rejections[i] = Rejection(str(paths[i]), line, "none of the needed bands could be measured; " + first
                                          + _unit_hint(spectra[i]))
                continue
            rows[i] = row | {"method": method, "unit": UNITS[method]} | {
                f"{name}_peak_cm1": float(positions[name][k]) if math.isfinite(row[name]) else math.nan
                for name in peaks}
            notes[i] = "; ".join(why)

    records = []
    for i, path in enumerate(paths):
        ref_path = None if i in spectra and spectra[i].difference else refs[i]
        record = {"spectrum": str(path)}
        record |= rows.get(i, {name: np.nan for name in bands.names} | {f"{name}_peak_cm1": np.nan for name in peaks}
                           | {"method": DIRECT if ref_path is None else SUBTRACTION})
        record["unit"] = UNITS[record["method"]] if i in rows else ""
        record["area_unit"] = AREA_UNITS[record["method"]] if i in rows else ""
        record["path_length_mm"] = used_path.get(i, path_length_mm)
        record["dilution"] = dilutions[i]
        record["reference"] = "" if ref_path is None else str(ref_path)
        record["notes"] = notes.get(i, "")
        record["rejection"] = rejections[i].message if i in rejections else ""
        records.append(record)
    columns = ["spectrum", *bands.names, *(f"{name}_peak_cm1" for name in peaks), "method", "unit", "area_unit",
               "path_length_mm", "dilution", "reference", "notes", "rejection"]
    frame = pd.DataFrame.from_records(records, columns=columns)
    return frame, [rejections[i] for i in sorted(rejections)]


# Why the coarser grid: linear interpolation cuts the top of every peak between grid points, by
# about h (d/2)^2 / (2 sigma^2) for a Gaussian of height h and width sigma at spacing d. An ester's
# own carbonyl (2.0 at 0.1 mm, sigma 12) interpolated from a reference on an 8 cm-1 grid onto a
# 2 cm-1 one left 7.0 abs/cm in the difference of a new oil with itself (1.6 from a 4 cm-1 grid):
# a band the oil never gained. Sampling the finer spectrum at the coarser one's points leaves none.
GRID_TOLERANCE = 1.05  # spacings within 5 % are one grid (rounding of FIRSTX/LASTX): our choice


def _coarser(reference_x, x) -> bool:
    """Whether the reference's points lie further apart than the sample's (median spacing)."""
    inside = reference_x[(reference_x >= x[0]) & (reference_x <= x[-1])]
    return inside.size >= 2 and np.median(np.diff(inside)) > GRID_TOLERANCE * np.median(np.diff(x))


def _onto(reference_x, x, columns):
    """(the reference's grid within the sample's range, the sample's columns linearly interpolated at those
    points): one pair of neighbouring rows and one weight per point, shared by every column of the block."""
    inside = reference_x[(reference_x >= x[0]) & (reference_x <= x[-1])]
    right = np.clip(np.searchsorted(x, inside, side="right"), 1, x.size - 1)
    weight = ((inside - x[right - 1]) / (x[right] - x[right - 1]))[:, None]
    return inside, columns[right - 1] * (1.0 - weight) + columns[right] * weight


# Spectral subtraction needs both spectra recorded alike (common practice, no source): the same
# resolution. At another resolution every sharp band has another height and width, and the
# difference keeps a residue whose positive and negative lobes cancel in area, so the area check
# cannot see it: an ester oil's own carbonyl (2.0 at 0.1 mm, sigma 12) read 10.6 abs/cm of gained
# carbonyl with the sample at 16 cm-1 and its reference at 4, 23.8 the other way round, 5.5 at 4
# against 8 (tests/support/synthetic_spectra.py, line shapes as Gaussians of FWHM the resolution).
RESOLUTION_TOLERANCE = 1.01  # our choice: ##RESOLUTION= values are written as round figures


def _resolution_problem(spectrum: Spectrum, reference: Spectrum) -> str | None:
    """Why this sample cannot be subtracted against this reference, when both files give ##RESOLUTION=."""
    mine, theirs = spectrum.resolution_cm1, reference.resolution_cm1
    if mine is None or theirs is None or max(mine, theirs) <= RESOLUTION_TOLERANCE * min(mine, theirs):
        return None
    return (f"recorded at {mine:g} cm-1 resolution (##RESOLUTION=), its reference {reference.source} at {theirs:g}: "
            "a subtraction of spectra recorded at different resolutions leaves a residue of every sharp band (an "
            "ester's own carbonyl reads as 5-24 abs/cm gained); record both alike")


def _unit_hint(spectrum: Spectrum) -> str:
    """A hint when an x axis read as cm-1 lies wholly outside the mid-infrared (4000-400 cm-1 is 2.5-25 um;
    ftir.md): wavelengths written under a wavenumber label or none."""
    x = spectrum.wavenumber
    if spectrum.x_units.upper().replace(" ", "") not in ("1/CM", "CM-1", "CM^-1", "WAVENUMBERS", "WAVENUMBER"):
        return ""
    if x[-1] < 400:
        kind = "micrometres (2.5-25 um is 4000-400 cm-1)"
    elif x[0] > 1000 and x[-1] > 10000:
        kind = "nanometres (2500-25000 nm is 4000-400 cm-1)"
    else:
        return ""
    return (f"; x values {x[0]:g}-{x[-1]:g} read as cm-1 lie outside the mid-infrared: wavelengths in {kind}? say "
            "so (##XUNITS=MICROMETERS or NANOMETERS, or a CSV header such as 'wavelength (um)')")


def _saturation_words(band, bands: BandSet) -> str:
    low, high = band.saturation_window
    return (f"(absorbance above {bands.saturation_absorbance:g} as recorded within {low:g}-{high:g} cm-1): "
            "dilute the sample or use a thinner cell")


def _aligned_references(paths, references) -> list:
    if references is None:
        return [None] * len(paths)
    if isinstance(references, dict):
        by_path = {str(Path(k)): Path(v) for k, v in references.items()}
        return [by_path.get(str(p)) for p in paths]
    refs = [None if r is None else Path(r) for r in references]
    if len(refs) != len(paths):
        raise ValueError(f"references: expected one entry per spectrum ({len(paths)}), got {len(refs)}")
    return refs


def expand_inputs(items) -> list[Path]:
    """Files as given; directories expanded to their spectrum files (sorted, not recursive)."""
    found = []
    for item in items:
        path = Path(item)
        if path.is_dir():
            found.extend(sorted(p for p in path.iterdir() if p.is_file() and p.suffix.lower() in SPECTRUM_SUFFIXES))
        else:
            found.append(path)
    return found
