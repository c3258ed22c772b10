"""Plain two-column CSV spectra: wavenumber (cm-1), absorbance; an optional header row."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from sumpwise.intake.spectra.spectrum import Spectrum, SpectrumError, make_spectrum


def read_spectrum_csv(path: Path | str) -> Spectrum:
    """Read `wavenumber,absorbance` rows; a first row that is not numeric is taken as a header."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise SpectrumError(str(path), None, f"cannot read file: {exc}") from exc
    return parse_spectrum_csv(text, str(path))


def parse_spectrum_csv(text: str, source: str) -> Spectrum:
    xs, ys = [], []
    first_data_line = None
    for number, raw in enumerate(text.splitlines(), start=1):
        line = raw.strip()
        if not line or line.startswith("#"):
            continue
        fields = [f.strip() for f in line.replace(";", ",").split(",")]
        if len(fields) != 2:
            raise SpectrumError(source, number, f"expected 2 columns (wavenumber, absorbance), found {len(fields)}")
        try:
            x, y = float(fields[0]), float(fields[1])
        except ValueError:
            if first_data_line is None and not xs:
                first_data_line = -1  # the header row: skipped once
                continue
            raise SpectrumError(source, number, f"expected two numbers, found {fields[0]!r}, {fields[1]!r}") from None
        if first_data_line in (None, -1):
            first_data_line = number
        xs.append(x)
        ys.append(y)
    if len(xs) < 2:
        raise SpectrumError(source, None, "fewer than 2 data rows")
    return make_spectrum(source, np.array(xs), np.array(ys), "1/CM", "ABSORBANCE", first_data_line)
