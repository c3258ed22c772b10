"""Measure many spectra at once: read at the edge, group by grid, measure in blocks.

Direct trend: bands on the used-oil spectrum itself, in abs/0.1 mm.
Spectral subtraction (differential trend, ASTM D7418): the new-oil
reference of the same lubricant is interpolated onto the used spectrum's
grid, both are normalised to 0.100 mm, the reference is subtracted, and the
bands are read on the difference, in abs/cm = abs/0.1 mm x 100 (ASTM D7412
12.1-12.2). Spectra sharing a grid are stacked and measured as 2-D arrays
in blocks of `block_size`, which bounds memory.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from sumpwise.intake.spectra.bands import BandSet, load_bands, measure_columns, plan_bands
from sumpwise.intake.spectra.jcampdx import read_jcampdx, read_jcampdx_many
from sumpwise.intake.spectra.spectrum import Spectrum, SpectrumError
from sumpwise.intake.spectra.spectrum_csv import read_spectrum_csv

REFERENCE_PATH_MM = 0.1
ABS_PER_CM_PER_ABS_PER_01MM = 100.0  # ASTM D7412 12.1-12.2
DIRECT, SUBTRACTION = "direct", "subtraction"
UNITS = {DIRECT: "abs/0.1mm", SUBTRACTION: "abs/cm"}
SPECTRUM_SUFFIXES = (".jdx", ".dx", ".jcm", ".jcamp", ".csv")
DEFAULT_BLOCK = 4096


@dataclass(frozen=True)
class Rejection:
    """One spectrum that was not measured, and why (file, line if known, reason)."""

    spectrum: str
    line: int | None
    reason: str

    @property
    def message(self) -> str:
        where = f"{self.spectrum}:{self.line}" if self.line is not None else self.spectrum
        return f"{where}: {self.reason}"


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


def measure_matrix(x, absorbance, bands: BandSet | None = None, path_length_mm: float = 0.1,
                   reference=None, reference_path_length_mm: float | None = None,
                   block_size: int = DEFAULT_BLOCK):
    """Band values for rows of `absorbance` on grid x (ascending), direct or by subtraction.

    reference: None (direct) or one absorbance row on the same grid, or a
    matrix with one row per spectrum. Returns (values, peak_positions,
    uncovered): dicts of arrays in abs/0.1 mm (direct) or abs/cm, NaN where a
    band met a non-finite point; and the bands the grid does not reach.
    Rows are copied once to wavenumber-major order; for many spectra that
    copy costs more than the measures, so measure_spectra stacks columns.
    """
    columns = np.ascontiguousarray(np.atleast_2d(np.asarray(absorbance, dtype=float)).T)
    if reference is not None:
        reference = np.ascontiguousarray(np.atleast_2d(np.asarray(reference, dtype=float)).T)
    return _measure_columns_matrix(x, columns, bands, path_length_mm, reference, reference_path_length_mm,
                                   block_size)


def _measure_columns_matrix(x, columns, bands, path_length_mm, reference, reference_path_length_mm, block_size):
    """measure_matrix on wavenumber-major data: one column per spectrum (reference: one column, or one per spectrum)."""
    bands = bands or load_bands()
    plan = plan_bands(np.asarray(x, dtype=float), bands.bands)
    scale = REFERENCE_PATH_MM / path_length_mm
    ref_scale = REFERENCE_PATH_MM / (reference_path_length_mm or path_length_mm)
    factor = 1.0 if reference is None else ABS_PER_CM_PER_ABS_PER_01MM
    parts = []
    for start in range(0, columns.shape[1], block_size):
        block = columns[:, start : start + block_size] * scale
        if reference is not None:
            ref = reference if reference.shape[1] == 1 else reference[:, start : start + block_size]
            block -= ref * ref_scale
        parts.append(measure_columns(plan, block))
    names = plan.bands
    values = {b.name: np.concatenate([p.values[b.name] for p in parts]) * factor for b in names}
    positions = {k: np.concatenate([p.peak_positions[k] for p in parts]) for k in parts[0].peak_positions} if parts else {}
    return values, positions, plan.uncovered


def measure_spectra(paths, references=None, path_length_mm: float = 0.1, bands: BandSet | None = None,
                    reference_path_length_mm: float | None = None, block_size: int = DEFAULT_BLOCK):
    """Read and measure spectra; one row per path, in order, plus the list of rejections.

    references: None for all direct, or a mapping from a path (as given, str
    or Path) to its new-oil reference file; paths without an entry are read
    directly. Columns: spectrum, one per band, method, unit,
    path_length_mm, reference, rejection. A bad file rejects that spectrum
    only.
    """
    bands = bands or load_bands()
    references = {str(Path(k)): Path(v) for k, v in (references or {}).items()}
    paths = [Path(p) for p in paths]
    rejections = {}
    spectra = {}
    for i, result in zip(range(len(paths)), read_spectra(paths)):
        if isinstance(result, SpectrumError):
            rejections[i] = Rejection(str(paths[i]), result.line, result.reason)
        else:
            spectra[i] = result
    loaded_refs = {}
    for i, spectrum in list(spectra.items()):
        ref_path = references.get(str(paths[i]))
        if ref_path is None:
            continue
        if ref_path not in loaded_refs:
            try:
                loaded_refs[ref_path] = read_spectrum(ref_path)
            except SpectrumError as exc:
                loaded_refs[ref_path] = exc
        if isinstance(loaded_refs[ref_path], SpectrumError):
            rejections[i] = Rejection(str(paths[i]), None, f"reference spectrum unusable: {loaded_refs[ref_path]}")
            del spectra[i]

    groups = {}
    for i, spectrum in spectra.items():
        ref_path = references.get(str(paths[i]))
        groups.setdefault((spectrum.wavenumber.tobytes(), ref_path), []).append(i)

    rows = {}
    for (_, ref_path), members in groups.items():
        x = spectra[members[0]].wavenumber
        columns = np.stack([spectra[i].absorbance for i in members], axis=1)  # as cheap as rows, no later copy
        reference = None
        if ref_path is not None:
            ref = loaded_refs[ref_path]
            reference = np.interp(x, ref.wavenumber, ref.absorbance, left=np.nan, right=np.nan)[:, None]
        values, _, uncovered = _measure_columns_matrix(
            x, columns, bands, path_length_mm, reference, reference_path_length_mm, block_size)
        method = DIRECT if ref_path is None else SUBTRACTION
        for k, i in enumerate(members):
            spectrum = spectra[i]
            if uncovered:
                reason = next(iter(uncovered.values()))
                if len(uncovered) > 1:
                    reason += "; nor bands " + ", ".join(list(uncovered)[1:])
                rejections[i] = Rejection(str(paths[i]), spectrum.range_line, reason)
                continue
            bad = [name for name in bands.names if not np.isfinite(values[name][k])]
            if bad:
                what = "reference or spectrum" if ref_path is not None else "spectrum"
                rejections[i] = Rejection(str(paths[i]), None,
                                          f"{what} has no finite absorbance (e.g. transmittance <= 0 or outside "
                                          f"the reference range) inside band {bad[0]}")
                continue
            rows[i] = {name: float(values[name][k]) for name in bands.names} | {
                "method": method, "unit": UNITS[method]}

    records = []
    for i, path in enumerate(paths):
        ref_path = references.get(str(path))
        record = {"spectrum": str(path)}
        record |= rows.get(i, {name: np.nan for name in bands.names} | {"method": DIRECT if ref_path is None else SUBTRACTION})
        record["unit"] = UNITS[record["method"]] if i in rows else ""
        record["path_length_mm"] = path_length_mm
        record["reference"] = "" if ref_path is None else str(ref_path)
        record["rejection"] = rejections[i].message if i in rejections else ""
        records.append(record)
    columns = ["spectrum", *bands.names, "method", "unit", "path_length_mm", "reference", "rejection"]
    frame = pd.DataFrame.from_records(records, columns=columns)
    return frame, [rejections[i] for i in sorted(rejections)]


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
