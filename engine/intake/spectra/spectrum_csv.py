"""Plain two-column CSV spectra: wavenumber (cm-1), absorbance; an optional header row.

A header row says what the columns hold, and is read, not skipped: lab exports write
`Wavenumber (cm-1),%T` or `cm-1,Transmittance` as often as `absorbance`, and transmittance
read as absorbance turns every band upside down (a carbonyl band reads as a dip, so a badly
oxidised oil grades as clean). A second column named transmittance (fraction or percent) is
converted; one named absorbance is read as it is; one that names neither is refused by name,
since its scale is unknown. A first column named for a wavelength in micrometres or
nanometres is converted to wavenumbers. Without a header the columns are wavenumber (cm-1)
and absorbance, as documented.

Some instruments export a labelled block instead: `LABEL,value` rows in JCAMP-DX's names
(`DATA TYPE,INFRARED SPECTRUM`, `XUNITS,1/CM`, `YUNITS,ABSORBANCE`, `NPOINTS,12447`), a line
`XYDATA`, the rows, a blank line and free text (a public instrument-export test file carries
its settings there in a legacy Japanese encoding). Those labels are read as JCAMP-DX's are;
the rows end at the first blank line, and what follows is not read.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np

from sumpwise.intake.spectra.jcampdx import check_sampling_labels
from sumpwise.intake.spectra.spectrum import (Spectrum, SpectrumError, declares_difference, make_spectrum,
                                              parse_path_length, y_unit_kind)

# Second-column headers, lower-cased with spaces, brackets and punctuation other than % removed.
_ABSORBANCE_WORDS = ("a", "abs", "au", "log1t")  # and any name that starts with "absorbance"
_TRANSMITTANCE_WORDS = ("transmittance", "transmission", "t")
_PERCENT_MARKS = ("%", "percent", "pct")


def read_spectrum_csv(path: Path | str) -> Spectrum:
    """Read `wavenumber,absorbance` rows; a first row that is not numeric is a header that names the units."""
    path = Path(path)
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise SpectrumError(str(path), None, f"cannot read file: {exc}") from exc
    # undecodable bytes are kept as lone surrogates: an error on any line that is read, none in free text
    # after a labelled block's rows, which is never read
    return parse_spectrum_csv(raw.decode("utf-8-sig", errors="surrogateescape"), str(path))


_XYDATA_LINE = re.compile(r"^XYDATA\b[\s,;]*$", re.I)
_SEPARATOR = re.compile(r"\s*[,;\t]\s*")  # a labelled block's rows: comma, semicolon or tab
_USED_LABELS = ("DATATYPE", "XUNITS", "YUNITS", "PATHLENGTH", "NPOINTS", "TITLE", "STATE", "SAMPLINGPROCEDURE",
                "DATAPROCESSING")
_NOT_UTF8 = re.compile("[\udc80-\udcff]")


def parse_spectrum_csv(text: str, source: str) -> Spectrum:
    lines = text.splitlines()
    start = _labelled_block_end(lines)
    if start is not None:
        return _parse_labelled(lines, start, source)
    return _parse_plain(lines, source)


def _labelled_block_end(lines):
    """Index of the `XYDATA` line when a labelled block comes before any data row, else None."""
    for index, raw in enumerate(lines):
        line = raw.strip()
        if _XYDATA_LINE.match(line):
            return index
        fields = _SEPARATOR.split(line)
        if len(fields) == 2 and all(_is_number(f) for f in fields):
            return None
    return None


def _is_number(text):
    try:
        float(text)
    except ValueError:
        return False
    return True


def _parse_labelled(lines, start, source):
    labels, where = {}, {}
    for number, raw in enumerate(lines[:start], start=1):
        label, *value = _SEPARATOR.split(raw.strip(), maxsplit=1)
        key = label.upper().replace(" ", "")
        if key in _USED_LABELS:  # other labels (free text, names in other scripts) are not read
            _check_text(raw, source, number)
            labels[key], where[key] = (value[0] if value else "").strip().strip('"'), number
    if labels.get("DATATYPE") and "INFRARED" not in labels["DATATYPE"].upper():
        raise SpectrumError(source, where["DATATYPE"], f"DATA TYPE {labels['DATATYPE']!r} is not an infrared spectrum")
    if not labels.get("YUNITS"):
        raise SpectrumError(source, start + 1, "a labelled block without YUNITS: the scale of the values is unknown")
    y_unit_kind(source, labels["YUNITS"], where["YUNITS"])
    check_sampling_labels(source, labels, where.get, mark="")  # ATR, reflectance or a gas, as in JCAMP-DX
    xs, ys = [], []
    for number, raw in enumerate(lines[start + 1 :], start=start + 2):
        line = raw.strip()
        if not line:
            if xs:
                break  # the rows end here; free text may follow
            continue
        _check_text(raw, source, number)
        fields = _SEPARATOR.split(line)
        if len(fields) != 2 or not all(_is_number(f) for f in fields):
            raise SpectrumError(source, number, f"expected two numbers (wavenumber, {labels['YUNITS']}), found {line!r}")
        xs.append(float(fields[0]))
        ys.append(float(fields[1]))
    if len(xs) < 2:
        raise SpectrumError(source, start + 1, "fewer than 2 data rows after XYDATA")
    if "NPOINTS" in labels and _is_number(labels["NPOINTS"]) and float(labels["NPOINTS"]) != len(xs):
        raise SpectrumError(source, where["NPOINTS"], f"NPOINTS says {labels['NPOINTS']}, but {len(xs)} rows follow "
                                                      "XYDATA before the first blank line")
    path_length = (parse_path_length(source, where["PATHLENGTH"], labels["PATHLENGTH"])
                   if labels.get("PATHLENGTH") else None)
    return make_spectrum(source, np.array(xs), np.array(ys), labels.get("XUNITS") or "1/CM", labels["YUNITS"],
                         start + 2, path_length_mm=path_length,
                         difference=declares_difference(labels.get("DATAPROCESSING", "")))


def _check_text(raw, source, number):
    if _NOT_UTF8.search(raw):
        raise SpectrumError(source, number, "a byte that is not UTF-8 on a line that is read")


def _parse_plain(lines, source):
    xs, ys = [], []
    first_data_line = None
    x_units, y_units, difference = "1/CM", "ABSORBANCE", False
    for number, raw in enumerate(lines, start=1):
        line = raw.strip()
        if not line or line.startswith("#"):
            continue
        _check_text(raw, source, number)
        fields = [f.strip() for f in line.replace(";", ",").split(",")]
        if len(fields) != 2:
            raise SpectrumError(source, number, f"expected 2 columns (wavenumber, absorbance), found {len(fields)}")
        try:
            x, y = float(fields[0]), float(fields[1])
        except ValueError:
            if first_data_line is None and not xs:
                first_data_line = -1  # the header row: read once for its units
                x_units, y_units, difference = _header_units(fields, source, number)
                continue
            raise SpectrumError(source, number, f"expected two numbers, found {fields[0]!r}, {fields[1]!r}") from None
        if first_data_line in (None, -1):
            first_data_line = number
        xs.append(x)
        ys.append(y)
    if len(xs) < 2:
        raise SpectrumError(source, None, "fewer than 2 data rows")
    return make_spectrum(source, np.array(xs), np.array(ys), x_units, y_units, first_data_line, difference=difference)


def _header_units(fields, source, line):
    """(x units, y units in the JCAMP-DX spellings make_spectrum reads, whether the second column says it
    holds a difference spectrum) from a header row's two names: `difference absorbance`,
    `absorbance (used - new)`... read as absorbance of a spectrum already subtracted."""
    x_name, y_name = (f.strip().strip('"').strip("'") for f in fields)
    x_key = x_name.lower().replace("µ", "u").replace("μ", "u")
    if re.search(r"\b(um|micrometres?|micrometers?|microns?)\b", x_key):
        x_units = "MICROMETERS"
    elif re.search(r"\b(nm|nanometres?|nanometers?)\b", x_key):
        x_units = "NANOMETERS"
    else:
        x_units = "1/CM"
    no_cell = re.search(r"\b(atr|attenuated|reflect\w*|drifts?|photoacoustic)\b", y_name.lower())
    if no_cell:  # as ##SAMPLING PROCEDURE= in JCAMP-DX (jcampdx._check_sampling)
        raise SpectrumError(source, line, f"second column {y_name!r} names {no_cell.group(1).upper()}: such absorbances "
                                          "have no cell path length, so they cannot be put per 0.1 mm as "
                                          "transmission-cell readings are")
    difference = declares_difference(y_name) or bool(re.search(r"used\s*-\s*(new|reference|fresh)", y_name.lower()))
    if difference:
        y_name = re.sub(r"(?i)\bdifference\b|\(.*\)|\bsubtracted\b", "", y_name).strip() or "absorbance"
    y_key = re.sub(r"[^a-z0-9%]", "", y_name.lower())
    percent = any(mark in y_key for mark in _PERCENT_MARKS)
    bare = y_key
    for mark in _PERCENT_MARKS:
        bare = bare.replace(mark, "")
    if not percent and (y_key in _ABSORBANCE_WORDS or y_key.startswith("absorbance")):
        return x_units, "ABSORBANCE", difference
    if difference:  # a transmittance has no difference spectrum: subtraction is done in absorbance
        raise SpectrumError(source, line, f"second column {fields[1].strip()!r}: a difference spectrum is read in "
                                          "absorbance only; name it 'difference absorbance'")
    if bare in _TRANSMITTANCE_WORDS or bare.startswith(("transmittance", "transmission")):
        return x_units, "%T" if percent else "TRANSMITTANCE", False
    raise SpectrumError(source, line, f"second column {y_name!r}: the header does not say absorbance or "
                                      "transmittance, so the scale of the values is unknown; name it "
                                      "'absorbance', 'transmittance' or '%T' (a file without a header is read as "
                                      "wavenumber, absorbance)")
