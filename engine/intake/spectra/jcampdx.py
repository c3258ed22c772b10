"""JCAMP-DX reader for single infrared spectra (versions 4.24 and 5.x).

Why our own reader and not the MIT `jcamp` package:
- the house allows pyyaml, numpy, pandas and jsonschema at run time only;
- jcamp 1.3.2 reads a DUP count from its pseudo-digit alone, so `S0` (a
  count of 10) and longer runs come back short (ftir.md); a reader that
  silently loses points is worse than none for trend limits;
- a rejected file must say which line failed (Y-check, point count, missing
  ##END), which a generic reader does not report;
- the decoder here is vectorised with numpy over whole data blocks, and
  `read_jcampdx_many` decodes a chunk of files in one pass, so parsing keeps
  pace with the band measures; jcamp decodes value by value in Python.
  Blocks of integers (the usual AFFN, PAC, SQZ, DIF, DUP output) take a
  fast path: character classes by bytes.translate, digits parsed in C by
  np.fromstring; anything else (blank lines, decimals, commas, a bad
  character) goes to the general decoder, which also words those errors.

What is read: ##XYDATA=(X++(Y..Y)) in AFFN, PAC or ASDF (SQZ, DIF with its
Y-check, DUP; every pseudo-digit replaces only the leading digit, McDonald &
Wilks 1988 §5.2), and ##XYPOINTS=(XY..XY) in AFFN; XFACTOR/YFACTOR; x in
1/CM, micrometres or nanometres; y absorbance or transmittance. Compound
files, NTUPLES and peak tables are refused with a clear error.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from sumpwise.intake.spectra.spectrum import (Spectrum, SpectrumError, declares_difference, make_spectrum,
                                              parse_path_length, y_unit_kind)

# A mid-infrared spectrum at 0.5 cm-1 over 4000-400 cm-1 has 7 201 points; a million bounds
# the memory one damaged NPOINTS could ask for.
MAX_POINTS = 1_000_000

_SEP, _DIGIT, _ABS, _DIF, _DUP, _INVALID = 0, 1, 2, 3, 4, 5


def _tables():
    kind = np.full(256, _INVALID, dtype=np.int8)
    lead = np.zeros(256, dtype=np.int64)
    negative = np.zeros(256, dtype=bool)
    for ch in b" \t\r\n,;":
        kind[ch] = _SEP
    for value, ch in enumerate(b"0123456789"):
        kind[ch], lead[ch] = _DIGIT, value
    kind[ord("@")] = _ABS
    kind[ord("%")] = _DIF
    for value in range(1, 10):
        kind[ord("A") + value - 1], lead[ord("A") + value - 1] = _ABS, value
        kind[ord("a") + value - 1], lead[ord("a") + value - 1] = _ABS, value
        negative[ord("a") + value - 1] = True
        kind[ord("J") + value - 1], lead[ord("J") + value - 1] = _DIF, value
        kind[ord("j") + value - 1], lead[ord("j") + value - 1] = _DIF, value
        negative[ord("j") + value - 1] = True
    for value in range(1, 9):
        kind[ord("S") + value - 1], lead[ord("S") + value - 1] = _DUP, value
    kind[ord("s")], lead[ord("s")] = _DUP, 9
    kind[ord("+")] = _ABS
    kind[ord("-")] = _ABS
    negative[ord("-")] = True
    for table in (kind, lead, negative):
        table.flags.writeable = False
    return kind, lead, negative


_KIND, _LEAD, _NEGATIVE = _tables()
_KIND_BYTES = _KIND.astype(np.uint8).tobytes()  # the same table for bytes.translate, faster than indexing
_SIGNED_LEAD = np.where(_KIND == _DIGIT, 0, np.where(_NEGATIVE, -_LEAD, _LEAD))  # a digit leads no pseudo-digit
_SIGN = np.where(_NEGATIVE, -1, 1)
_IS_SIGN = np.isin(np.arange(256), (ord("+"), ord("-")))
_POW10 = 10 ** np.arange(19, dtype=np.int64)
_DIGITS_ONLY = bytes(c if 48 <= c <= 57 else 32 for c in range(256))  # bytes.translate table: non-digits to spaces
_EXPONENT = re.compile(rb"[0-9][Ee][+-]")
_PAC_SIGN = re.compile(rb"(?<=[0-9.])(?=[+-])")
_COMMENT = re.compile(r"\$\$.*")
_LABEL_NOISE = str.maketrans("", "", " \t-/_")  # label names ignore these (JCAMP-DX 4.24)
_XYDATA_NUMBERS = ("FIRSTX", "LASTX", "NPOINTS", "XFACTOR", "YFACTOR")
_DATA_LABEL = re.compile(r"^##(XYDATA|XYPOINTS|PEAKTABLE|NTUPLES|DATATABLE)=(.*)$", re.M | re.I)


def read_jcampdx(path: Path | str) -> Spectrum:
    """Read one single-spectrum JCAMP-DX file; raise SpectrumError naming file and line."""
    return parse_jcampdx(_read_text(path), str(path))


def read_jcampdx_many(paths, chunk: int = 32) -> list:
    """Read many files; each entry is a Spectrum or the SpectrumError that rejected that file.

    The numeric decoding runs once per chunk of files (one set of numpy
    calls for all of them); a chunk that meets an error is decoded again
    file by file, so the error names its own file and line.
    """
    results = []
    for start in range(0, len(paths), chunk):
        prepared = []
        for path in paths[start : start + chunk]:
            try:
                prepared.append(_prepare(_read_text(path), str(path)))
            except SpectrumError as exc:
                prepared.append(exc)
        ready = [item for item in prepared if not isinstance(item, SpectrumError)]
        try:
            decoded = iter(_decode(ready))
            results.extend(item if isinstance(item, SpectrumError) else next(decoded) for item in prepared)
        except SpectrumError:
            for item in prepared:
                results.append(item if isinstance(item, SpectrumError) else _decode_or_error(item))
    return results


def parse_jcampdx(text: str, source: str) -> Spectrum:
    """Parse JCAMP-DX text (see module docstring for what is supported)."""
    return _decode([_prepare(text, source)])[0]


def _read_text(path):
    """The file as text: Latin-1 (any byte reads; the data are ASCII), a UTF-8 or UTF-16 byte-order mark
    honoured, lone carriage returns taken as line ends.

    Why: a file saved with a byte-order mark, in UTF-16, or with old carriage-return line ends
    holds a good spectrum; read as plain Latin-1 it was refused for a missing ##TITLE= or data
    block that is there.
    """
    try:
        with open(path, "rb", buffering=0) as file:  # unbuffered: one read of the whole file, no buffer copy
            data = file.read()
    except OSError as exc:
        raise SpectrumError(str(path), None, f"cannot read file: {exc.strerror}") from exc
    if data[:2] in (b"\xff\xfe", b"\xfe\xff"):
        try:
            text = data.decode("utf-16")
        except UnicodeDecodeError:
            raise SpectrumError(str(path), None, "starts with a UTF-16 byte-order mark but is not UTF-16 text") from None
    else:
        text = data[3:].decode("latin-1") if data.startswith(b"\xef\xbb\xbf") else data.decode("latin-1")
    if "\n" not in text and "\r" in text:
        text = text.replace("\r", "\n")
    return text


def _decode_or_error(item):
    try:
        return _decode([item])[0]
    except SpectrumError as exc:
        return exc


@dataclass(frozen=True)
class _Prepared:
    """A file split into header and data lines, before its numbers are decoded (XYPOINTS: already read)."""

    ctx: "_Context"
    raw: bytes | None
    line_numbers: np.ndarray | None
    spectrum: Spectrum | None = None
    numbers: tuple = ()  # XYDATA: FIRSTX, LASTX, NPOINTS, XFACTOR, YFACTOR


def _prepare(text, source):
    match = _DATA_LABEL.search(text)
    if match is None:
        raise SpectrumError(source, None, "no ##XYDATA= or ##XYPOINTS= data block")
    label = match.group(1).upper()
    data_line = text.count("\n", 0, match.start()) + 1
    if label not in ("XYDATA", "XYPOINTS"):
        raise SpectrumError(source, data_line, f"##{label}= is not read; only single XYDATA/XYPOINTS spectra are")
    header, header_lines = _parse_header(text[: match.start()], source)
    if "TITLE" not in header:
        raise SpectrumError(source, 1, "##TITLE= missing; a JCAMP-DX file starts with it")
    if header.get("DATATYPE", "").upper().startswith("LINK"):
        raise SpectrumError(source, header_lines.get("DATATYPE"), "compound (LINK) files are not read")
    form = match.group(2).split("$$")[0].strip().replace(" ", "").upper()
    block_start = match.end() + 1
    block_end = _next_label_line(text, match.end())
    if block_end < 0:
        last_line = text.rstrip("\n").count("\n") + 1
        raise SpectrumError(source, last_line, "file ends without ##END=")
    block = text[block_start:block_end]
    problem = _trailer_problem(text[block_end + 1 :])
    if problem is not None:
        offset, reason = problem
        raise SpectrumError(source, data_line + block.count("\n") + 2 + offset, reason)
    if "$" in block:  # a one-character test runs at memchr speed; "$$" in block does not
        block = _COMMENT.sub("", block)
    ctx = _Context(source, header, header_lines, data_line)
    ctx.required("XUNITS")
    y_unit_kind(source, ctx.required("YUNITS"), ctx.line("YUNITS"))  # refused by name before any decoding
    _check_sampling(ctx)
    if label == "XYPOINTS":
        if form not in ("(XY..XY)", "(XY,XY)"):
            raise SpectrumError(source, data_line, f"##XYPOINTS={form} is not read; expected (XY..XY)")
        x, y = _read_xypoints(block, ctx)
        return _Prepared(ctx, None, None, _spectrum(ctx, x, y))
    if form != "(X++(Y..Y))":
        raise SpectrumError(source, data_line, f"##XYDATA={form} is not read; expected (X++(Y..Y))")
    numbers = tuple(ctx.number(key, 1.0 if key in ("XFACTOR", "YFACTOR") else None) for key in _XYDATA_NUMBERS)
    npoints = numbers[_XYDATA_NUMBERS.index("NPOINTS")]
    if npoints != int(npoints) or not 2 <= npoints <= MAX_POINTS:
        raise SpectrumError(source, ctx.line("NPOINTS"),
                            f"##NPOINTS={ctx.header['NPOINTS']!r}: expected a whole number of points from 2 to "
                            f"{MAX_POINTS:,}")
    raw = block.encode("latin-1")
    if not raw.strip():
        raise SpectrumError(source, data_line, "data block is empty")
    return _Prepared(ctx, raw, None, numbers=numbers)


# Sampling without a cell: the FTIR oil methods read transmission cells of 0.025-0.1 mm (ASTM
# D7214, confirmed; ftir.md), and every band here is put per 0.1 mm of oil. An ATR or
# reflectance absorbance has no path length (the light enters the oil by a few micrometres,
# from memory), so per 0.1 mm it would read tens of times too small: a used oil graded clean.
_NO_CELL = re.compile(r"\b(ATR|ATTENUATED|REFLECT\w*|DRIFTS?|PHOTOACOUSTIC|PAS)\b")


# Where files say ATR: the standard's sampling label first; then a processing note (instrument
# software writes "ATR correction" there) and the title (labs name the accessory in it).
# A title is free text about the sample too ("PAS-3 compressor", "reflects..."), so only the
# unambiguous words count there.
_NO_CELL_IN_TITLE = re.compile(r"\b(ATR|ATTENUATED TOTAL REFLECT\w*|DRIFTS|DIFFUSE REFLECT\w*|PHOTOACOUSTIC)\b")
_SAMPLING_LABELS = (("SAMPLINGPROCEDURE", "SAMPLING PROCEDURE", _NO_CELL), ("DATAPROCESSING", "DATA PROCESSING", _NO_CELL),
                    ("TITLE", "TITLE", _NO_CELL_IN_TITLE))


# ##STATE= is JCAMP-DX's label for the sample's physical state (McDonald & Wilks 1988; from memory). An oil
# is a liquid; a gas spectrum's C-H stretch still reaches the saturation threshold, so the C-H check alone
# took a public gas-phase spectrum of butane (##STATE=GAS) for a whole oil.
_NOT_AN_OIL_STATE = re.compile(r"\b(GAS|VAPOU?R)\b")


def _check_sampling(ctx):
    check_sampling_labels(ctx.source, ctx.header, ctx.line)


def check_sampling_labels(source, header, line_of, mark="##"):
    """Refuse labels (keys upper case without spaces) whose ##SAMPLING PROCEDURE=, ##DATA PROCESSING= or
    ##TITLE= names a method without a cell path length (ATR, reflectance), or whose ##STATE= names a gas.
    line_of(key) gives a label's line; `mark` how the file writes a label in the message."""
    state = header.get("STATE", "")
    if (found := _NOT_AN_OIL_STATE.search(state.upper())) is not None:
        raise SpectrumError(source, line_of("STATE"),
                            f"{mark}STATE={state!r} names {found.group(1)}: an oil spectrum is of a liquid; a gas's "
                            "absorbance per 0.1 mm says nothing of an oil")
    for key, label, words in _SAMPLING_LABELS:
        said = header.get(key, "")
        found = words.search(said.upper())
        if found:
            raise SpectrumError(source, line_of(key),
                                f"{mark}{label}={said!r} names {found.group(1)}: such absorbances have no cell "
                                "path length, so they cannot be put per 0.1 mm as transmission-cell readings are")


def _next_label_line(text, start):
    """Index of the newline that opens the next ##label line at or after start, or -1 (text.find("\\n##", start)).

    '#' never occurs in data, so a one-character search finds the candidates
    at memchr speed; a three-character search over a block full of newlines
    is several times slower.
    """
    position = text.find("#", start + 1)
    while position >= 0 and not text.startswith("\n##", position - 1):
        position = text.find("#", position + 1)
    return position - 1 if position >= 0 else -1


def _without_blank_lines(item):
    """The general path's view of a block: blank lines dropped, the others keep their file line numbers."""
    raw = item.raw
    line_numbers = item.ctx.data_line + 1 + np.arange(raw.count(b"\n") + 1)
    if _has_blank_line(raw):
        kept = [(line, number) for line, number in zip(raw.split(b"\n"), line_numbers) if line.strip()]
        raw = b"\n".join(line for line, _ in kept)
        line_numbers = np.array([number for _, number in kept])
    return _Prepared(item.ctx, raw, line_numbers, numbers=item.numbers)


def _spectrum(ctx, x, y, evenly_spaced=False):
    path_length = None
    if "PATHLENGTH" in ctx.header:
        path_length = parse_path_length(ctx.source, ctx.line("PATHLENGTH"), ctx.header["PATHLENGTH"])
    return make_spectrum(ctx.source, x, y, ctx.header["XUNITS"], ctx.header["YUNITS"],
                         ctx.line("FIRSTX") or ctx.data_line, evenly_spaced=evenly_spaced,
                         path_length_mm=path_length,
                         difference=declares_difference(ctx.header.get("DATAPROCESSING", "")),
                         resolution_cm1=_resolution(ctx.header.get("RESOLUTION", "")))


def _resolution(text):
    """cm-1 from a ##RESOLUTION= such as `4`, `4.0 CM-1` or `0.5`; None when it starts with no positive number
    (a free-text resolution is not compared)."""
    match = re.match(r"\s*(\d+\.?\d*|\.\d+)", text)
    value = float(match.group(1)) if match else 0.0
    return value if value > 0 else None


def _decode(items):
    """Decode the XYDATA of several prepared files with one pass of array operations."""
    pending = [item for item in items if item.spectrum is None]
    if pending:
        decoded = iter(_decode_xydata(pending))
        return [item.spectrum if item.spectrum is not None else next(decoded) for item in items]
    return [item.spectrum for item in items]


class _Context:
    """Header values and their line numbers, for typed look-ups with located errors."""

    def __init__(self, source, header, lines, data_line):
        self.source, self.header, self.lines, self.data_line = source, header, lines, data_line

    def line(self, key):
        return self.lines.get(key)

    def required(self, key):
        if key not in self.header or not self.header[key]:
            raise SpectrumError(self.source, self.data_line, f"##{key}= missing; it is needed before the data block")
        return self.header[key]

    def number(self, key, default=None):
        if key not in self.header:
            if default is None:
                raise SpectrumError(self.source, self.data_line, f"##{key}= missing; it is needed before the data block")
            return default
        try:
            value = float(self.header[key].split()[0])
        except (ValueError, IndexError):
            raise SpectrumError(self.source, self.lines[key], f"##{key}= {self.header[key]!r} is not a number") from None
        if not math.isfinite(value):
            raise SpectrumError(self.source, self.lines[key], f"##{key}= {self.header[key]!r} is not a finite number")
        return value


def _parse_header(text, source):
    """Labels to values (label names normalised as the standard allows) and their line numbers."""
    values, lines = {}, {}
    key = None
    for number, raw in enumerate(text.split("\n"), start=1):
        if raw.startswith("##"):
            name, sep, value = raw[2:].partition("=")
            if not sep:
                raise SpectrumError(source, number, f"label line without '=': {raw.strip()!r}")
            key = (name if name.isalnum() else name.translate(_LABEL_NOISE)).upper()
            if key == "TITLE" and "TITLE" in values:
                raise SpectrumError(source, number, "a second ##TITLE= before the data: compound files are not read")
            values[key] = value.partition("$$")[0].strip()
            lines[key] = number
        elif key is not None and not key.startswith("$") and raw.strip() and not raw.lstrip().startswith("$$"):
            values[key] = (values[key] + " " + raw.split("$$")[0].strip()).strip()
    return values, lines


def _trailer_problem(trailer):
    """What is wrong after the data block, as (lines into the trailer, reason), or None."""
    for offset, raw in enumerate(trailer.split("\n")):
        stripped = raw.strip()
        if stripped.upper().startswith("##END="):
            later = trailer.upper().find("##TITLE=", trailer.upper().find("##END="))
            if later >= 0:
                return trailer.count("\n", 0, later), "a second ##TITLE= after ##END=: only single-spectrum files are read"
            return None
        if stripped.startswith("##") and not stripped.startswith("##$"):
            label = stripped[2:].partition("=")[0].strip().upper()
            if label in ("XYDATA", "XYPOINTS", "TITLE", "PEAKTABLE"):
                return offset, f"a second ##{label}= block: only single spectra are read"
    return trailer.rstrip("\n").count("\n"), "file ends without ##END="


def _decode_xydata(items):
    source = items[0].ctx.source if len(items) == 1 else "<batch>"
    header = np.array([item.numbers for item in items])
    decoded = _decode_integer_blocks(items, source)
    if decoded is None:
        items = [_without_blank_lines(item) for item in items]
        decoded = _decode_general(items, source)
        if decoded is None:
            return [_decode_xydata([item])[0] for item in items]
    y, line_start_index, is_check, line_x, line_unit, line_numbers, first_line = decoded
    line_file = np.cumsum(first_line) - 1
    first_x, last_x, npoints, x_factor, y_factor = header.T
    npoints = npoints.astype(np.int64)
    file_start = np.append(line_start_index[first_line], y.size)
    counts = np.diff(file_start)
    delta = np.where(npoints > 1, (last_x - first_x) / np.maximum(npoints - 1, 1), 0.0)
    _check_line_abscissae(source, line_numbers, line_x * x_factor[line_file], line_unit * np.abs(x_factor[line_file]),
                          line_start_index - is_check - file_start[line_file], first_x[line_file], delta[line_file])
    wrong = np.flatnonzero(counts != npoints)
    if wrong.size:
        ctx = items[wrong[0]].ctx
        raise SpectrumError(ctx.source, ctx.line("NPOINTS"),
                            f"##NPOINTS={npoints[wrong[0]]} but the data block holds {counts[wrong[0]]} points")
    spectra = []
    for k, item in enumerate(items):
        x = first_x[k] + np.arange(npoints[k]) * delta[k]
        values = y[file_start[k] : file_start[k + 1]] * y_factor[k]
        _check_first_y(item.ctx, values)
        spectra.append(_spectrum(item.ctx, x, values, evenly_spaced=True))
    return spectra


# FIRSTY is the first Y in true units (stored value x YFACTOR; McDonald & Wilks 1988). Written
# with fewer digits than the data, it agrees within 1e-4 of the largest |Y| in 56 of the 58
# public JCAMP-DX files with a FIRSTY read for this check (three public test collections); one
# of the other two writes FIRSTY=0, the other carries a mistyped YFACTOR (0.18 % off). A
# YFACTOR mistyped by a power of ten misses by far more.
FIRST_Y_TOLERANCE = 1e-3  # of the largest |Y|; our choice


def _check_first_y(ctx, values):
    """The decoded first Y times YFACTOR must be the header's FIRSTY: else the factor or the data are wrong.

    Why: a wrong YFACTOR scales every absorbance, and a band height with it, without any
    other sign; FIRSTY is the one label that states a Y in true units. A FIRSTY of 0 says
    nothing about the scale (one public file writes 0 before a first Y of 0.03) and is not
    compared.
    """
    text = ctx.header.get("FIRSTY", "").split()
    if not text or values.size == 0:
        return
    stated, last_digit = _number_and_last_digit(text[0])
    if stated is None:
        raise SpectrumError(ctx.source, ctx.line("FIRSTY"), f"##FIRSTY= {ctx.header['FIRSTY']!r} is not a number")
    if stated == 0 or not math.isfinite(values[0]):
        return
    largest = float(np.abs(values).max())  # decoded integers times a finite factor: finite
    if abs(values[0] - stated) > FIRST_Y_TOLERANCE * largest + 0.5 * last_digit:
        raise SpectrumError(
            ctx.source, ctx.line("FIRSTY"),
            f"##FIRSTY={text[0]} but the first Y read is {values[0]:.6g} (stored value x ##YFACTOR="
            f"{ctx.header.get('YFACTOR', '1')}): the factor or the data are wrong, so every value would be "
            "misscaled")


def _number_and_last_digit(text):
    """(value, the size of one unit in its last written digit), or (None, 0) when not a finite number."""
    match = re.fullmatch(r"[+-]?(\d*)(?:\.(\d*))?(?:[EeDd]([+-]?\d+))?", text)
    if match is None or not (match.group(1) or match.group(2)):
        return None, 0.0
    value = float(text.replace("D", "E").replace("d", "e"))
    if not math.isfinite(value):
        return None, 0.0
    return value, 10.0 ** (int(match.group(3) or 0) - len(match.group(2) or ""))


def _line_tables(items):
    """All lines of the joined blocks: their file line numbers and which lines open a file."""
    lines_per_file = np.array([item.line_numbers.size for item in items])
    first_line = np.zeros(lines_per_file.sum(), dtype=bool)
    first_line[np.cumsum(lines_per_file) - lines_per_file] = True
    return np.concatenate([item.line_numbers for item in items]), first_line


def _decode_integer_blocks(items, source):
    """Fast path for blocks of integers only (AFFN, PAC, SQZ, DIF, DUP), the common case.

    Each token is split at its leading character and its digits are parsed
    in C by np.fromstring on a copy where every non-digit is a space; the
    leading character's digit, sign and form come from lookup tables. Returns
    None when the blocks need the general path: blank lines, decimals,
    commas, a character outside the forms, a line without an integer X and
    a Y, a value over 18 digits or a sign alone. Errors the two paths share
    (DUP, DIF, Y-check, X position, point count) are raised as there.
    """
    raw = b"\n".join(item.raw for item in items)
    if b"." in raw or b"," in raw or b";" in raw or _has_exponent(raw):
        return None
    chars = np.frombuffer(raw, dtype=np.uint8)
    kind = np.frombuffer(raw.translate(_KIND_BYTES), dtype=np.int8)
    if (kind == _INVALID).any():
        return None
    separator = kind == _SEP
    starts = kind >= _ABS
    starts[1:] |= (kind[1:] == _DIGIT) & separator[:-1]
    starts[0] |= kind[0] == _DIGIT
    ends = ~separator
    ends[:-1] &= starts[1:] | separator[1:]
    token_pos = np.flatnonzero(starts)
    lengths = np.flatnonzero(ends) + 1 - token_pos
    newlines = np.flatnonzero(chars == 10)
    line_numbers, first_line = _joined_line_tables(items, newlines)
    per_line = np.diff(np.concatenate(([0], np.searchsorted(token_pos, newlines), [token_pos.size])))
    if per_line.min() < 2 or lengths.max() > 18:
        return None
    lead = chars[token_pos]
    lead_kind = kind[token_pos]
    x_token = np.cumsum(per_line) - per_line
    if np.any(_IS_SIGN[lead] & (lengths == 1)) or not np.all((lead_kind[x_token] == _DIGIT) | _IS_SIGN[lead[x_token]]):
        return None
    numbers = np.fromstring(raw.translate(_DIGITS_ONLY), dtype=np.int64, sep=" ")
    if numbers.size == token_pos.size and lead_kind.max() == _DIGIT:  # unsigned AFFN: each token is its number
        value = numbers
    else:
        digits = np.zeros(token_pos.size, dtype=np.int64)
        digits[(lead_kind == _DIGIT) | (lengths > 1)] = numbers
        value = _SIGNED_LEAD[lead] * _POW10[lengths - 1] + _SIGN[lead] * digits
    is_y = np.ones(token_pos.size, dtype=bool)
    is_y[x_token] = False
    y_line = np.repeat(np.arange(line_numbers.size), per_line - 1)
    y, line_start_index, is_check = _expand_asdf(value[is_y], lead_kind[is_y], token_pos[is_y], y_line,
                                                 newlines, line_numbers, first_line, source)
    line_x = np.copysign(np.abs(value[x_token]), _SIGN[lead[x_token]])  # float, and "-0" stays -0.0 as in AFFN
    return y, line_start_index, is_check, line_x, np.ones(line_x.size), line_numbers, first_line


def _joined_line_tables(items, newlines):
    """_line_tables for blocks joined by newlines, from the newline positions (no per-file count)."""
    sizes = np.array([len(item.raw) for item in items]) + 1
    file_first = np.searchsorted(newlines, np.cumsum(sizes) - sizes)  # each file's first line, counted in the chunk
    lines = np.arange(newlines.size + 1)
    line_file = np.repeat(np.arange(len(items)), np.diff(np.append(file_first, lines.size)))
    data_lines = np.array([item.ctx.data_line for item in items])
    first_line = np.zeros(lines.size, dtype=bool)
    first_line[file_first] = True
    return data_lines[line_file] + 1 + lines - file_first[line_file], first_line


def _decode_general(items, source):
    """Every supported block (decimals, exponents, leading spaces...); None: decode these files one by one."""
    raw = b"\n".join(item.raw for item in items)
    line_numbers, first_line = _line_tables(items)
    chars = np.frombuffer(raw, dtype=np.uint8).copy()
    line_x, line_unit = _take_line_abscissae(chars, line_numbers, source)
    y_text = chars.tobytes()
    if b"." in y_text or _has_exponent(y_text):
        if len(items) > 1:
            return None
        y, line_start_index = _decode_affn_floats(y_text, line_numbers, source)
        is_check = np.zeros(line_numbers.size, dtype=bool)
    else:
        y, line_start_index, is_check = _decode_asdf(y_text, line_numbers, source, first_line)
    return y, line_start_index, is_check, line_x, line_unit, line_numbers, first_line


def _has_exponent(text):
    """A digit, E or e, then a sign: AFFN floats; the substring test first, the regex is slow on long digit runs."""
    if b"+" not in text and b"-" not in text:
        return False
    return any(e in text for e in (b"E+", b"E-", b"e+", b"e-")) and _EXPONENT.search(text) is not None


def _has_blank_line(raw):
    if raw.startswith(b"\n") or raw.endswith(b"\n") or b"\n\n" in raw:
        return True
    if b" \n" not in raw and b"\t\n" not in raw and b"\r\n" not in raw and b"\n " not in raw and b"\n\t" not in raw:
        return False
    return any(not line.strip() for line in raw.split(b"\n"))


def _take_line_abscissae(chars, line_numbers, source):
    """Find each line's leading X (AFFN), blank it out of `chars` in place, return X values and last-digit units."""
    newlines = np.flatnonzero(chars == 10)
    line_start = np.concatenate(([0], newlines + 1))
    spaces = (chars == 32) | (chars == 9) | (chars == 13)
    solid = np.flatnonzero(~spaces)
    x_start = solid[np.minimum(np.searchsorted(solid, line_start), solid.size - 1)]
    signed = (chars[x_start] == ord("+")) | (chars[x_start] == ord("-"))
    numeric = ((chars >= 48) & (chars <= 57)) | (chars == 46)
    breaks = np.append(np.flatnonzero(~numeric), chars.size)
    x_end = breaks[np.searchsorted(breaks, x_start + signed)]
    empty = x_end <= x_start + signed
    if np.any(empty):
        k = int(np.argmax(empty))
        raise SpectrumError(source, int(line_numbers[k]), "data line does not start with an X value")
    mark = np.zeros(chars.size + 1, dtype=np.int8)
    mark[x_start] = 1  # one X per line, and each ends before the next begins
    mark[x_end] = -1
    in_x = np.cumsum(mark[:-1]) > 0
    line_x, decimals = _affn_numbers(chars, in_x, x_start, signed, source, line_numbers)
    chars[in_x] = 32
    return line_x, 10.0 ** -decimals


def _affn_numbers(chars, in_x, x_start, signed, source, line_numbers):
    """Values of the X tokens (sign, digits, at most one '.') marked by in_x, one per line, and their decimals."""
    positions = np.flatnonzero(in_x)
    token = np.searchsorted(x_start, positions, side="right") - 1
    is_dot = chars[positions] == 46
    dots = np.bincount(token[is_dot], minlength=x_start.size)
    if np.any(dots > 1):
        k = int(np.argmax(dots > 1))
        raise SpectrumError(source, int(line_numbers[k]), "X value has more than one decimal point")
    is_digit = (chars[positions] >= 48) & (chars[positions] <= 57)
    digit_token = token[is_digit]
    digits = np.bincount(digit_token, minlength=x_start.size)
    if np.any(digits == 0) or digits.max() > 18:
        k = int(np.argmax((digits == 0) | (digits > 18)))
        raise SpectrumError(source, int(line_numbers[k]), "X value is not a number of at most 18 digits")
    first_digit = np.cumsum(digits) - digits
    place = (first_digit + digits - 1)[digit_token] - np.arange(digit_token.size)
    mantissa = np.add.reduceat((chars[positions[is_digit]] - 48).astype(np.int64) * _POW10[place], first_digit)
    dot_position = np.full(x_start.size, chars.size)
    dot_position[token[is_dot]] = positions[is_dot]
    after_dot = np.bincount(digit_token[positions[is_digit] > dot_position[digit_token]], minlength=x_start.size)
    negative = signed & (chars[x_start] == ord("-"))
    values = np.where(negative, -1.0, 1.0) * mantissa / 10.0 ** after_dot
    return values, after_dot


def _is_float(text):
    try:
        float(text)
    except ValueError:
        return False
    return True


def _check_line_abscissae(source, line_numbers, line_x, line_unit, index, first_x, delta):
    """Each line's X is a checkpoint: it must sit within about one DELTAX of its first point's position.

    Why one DELTAX and not half: some public collections write each line's X one DELTAX
    before the count of values read so far while their total count matches NPOINTS
    exactly; the x axis comes from FIRSTX, LASTX and NPOINTS, so such files are read. A
    larger disagreement means a value was lost or added mid-file (and the count check
    after this one catches a single lost value).
    """
    expected = first_x + index * delta
    tolerance = 1.01 * np.abs(delta) + 0.5 * line_unit + 1e-9 * np.abs(expected)
    off = np.flatnonzero(np.abs(line_x - expected) > tolerance)
    if off.size:
        k = off[0]
        raise SpectrumError(
            source, int(line_numbers[k]),
            f"line X={line_x[k]:g} but {int(index[k])} points before it put it at {expected[k]:g}: "
            "a value is missing or extra before this line",
        )


def _decode_affn_floats(y_text, line_numbers, source):
    """AFFN with decimals or exponents: split and convert; a bad field is found line by line."""
    text = _PAC_SIGN.sub(b" ", y_text.replace(b",", b" ").replace(b";", b" "))
    lines = text.split(b"\n")
    counts = np.array([len(line.split()) for line in lines])
    try:
        values = np.array(text.split(), dtype="S").astype(np.float64)
    except ValueError:
        for line, number in zip(lines, line_numbers):
            for field in line.split():
                if not _is_float(field):
                    raise SpectrumError(source, int(number), f"{field.decode('latin-1')!r} is not a number") from None
        raise
    if np.any(counts == 0):
        raise SpectrumError(source, int(line_numbers[np.argmax(counts == 0)]), "data line has an X value but no Y values")
    return values, np.cumsum(counts) - counts


def _decode_asdf(y_text, line_numbers, source, first_line):
    """Decode SQZ/DIF/DUP/PAC Y values of all lines at once; return ints, each line's first index, check flags."""
    chars = np.frombuffer(y_text, dtype=np.uint8)
    kind = _KIND[chars]
    newlines = np.flatnonzero(chars == 10)

    def located(position, reason):
        return SpectrumError(source, int(line_numbers[np.searchsorted(newlines, position)]), reason)

    invalid = kind == _INVALID
    if invalid.any():
        first_bad = int(np.argmax(invalid))
        raise located(first_bad, f"character {chr(chars[first_bad])!r} is not part of AFFN, PAC or ASDF (SQZ/DIF/DUP) data")
    separator = kind == _SEP
    starts = kind >= _ABS
    starts[1:] |= (kind[1:] == _DIGIT) & separator[:-1]
    starts[0] |= kind[0] == _DIGIT
    in_token = np.flatnonzero(~separator)
    token_first = np.flatnonzero(starts[in_token])
    lengths = np.diff(np.append(token_first, in_token.size))
    if lengths.max() > 18:
        k = int(np.argmax(lengths > 18))
        raise located(in_token[token_first[k]], "a value has more than 18 digits")
    token_of_char = np.cumsum(starts[in_token], dtype=np.int32)
    token_of_char -= 1
    place = (token_first + lengths - 1)[token_of_char] - np.arange(in_token.size)
    magnitude = np.add.reduceat(_LEAD[chars[in_token]] * _POW10[place], token_first)
    lead_char = chars[in_token[token_first]]
    token_kind = _KIND[lead_char]
    token_pos = in_token[token_first]
    value = np.where(_NEGATIVE[lead_char], -magnitude, magnitude)
    token_line = np.cumsum(chars == 10, dtype=np.int32)[token_pos]
    sign_only = ((lead_char == ord("+")) | (lead_char == ord("-"))) & (lengths == 1)
    if sign_only.any():
        raise located(token_pos[np.argmax(sign_only)], "a sign with no digits after it")
    return _expand_asdf(value, token_kind, token_pos, token_line, newlines, line_numbers, first_line, source)


def _expand_asdf(value, token_kind, token_pos, token_line, newlines, line_numbers, first_line, source):
    """Y tokens to points: DUP runs repeated, DIF summed, Y-check values compared and dropped."""

    def located(position, reason):
        return SpectrumError(source, int(line_numbers[np.searchsorted(newlines, position)]), reason)

    is_dup = token_kind == _DUP
    if is_dup.any():
        dup_at = np.flatnonzero(is_dup)
        before = np.maximum(dup_at - 1, 0)
        orphan = (dup_at == 0) | is_dup[before] | (token_line[before] != token_line[dup_at])
        if orphan.any():
            raise located(token_pos[dup_at[np.argmax(orphan)]], "a DUP count with no value before it on the line")
        if np.any(value[dup_at] < 1):
            raise located(token_pos[dup_at[np.argmax(value[dup_at] < 1)]], "a DUP count below 1")
        repeats = np.ones(value.size, dtype=np.int64)
        repeats[dup_at - 1] = value[dup_at]
        kept = np.flatnonzero(~is_dup)
        source_token = np.repeat(kept, repeats[kept])
        point_value = value[source_token]
        point_is_dif = token_kind[source_token] == _DIF
        point_line = token_line[source_token]
    else:
        point_value, point_is_dif, point_line = value, token_kind == _DIF, token_line
    per_line = np.bincount(point_line, minlength=line_numbers.size)
    if not per_line.all():
        k = int(np.argmax(per_line == 0))
        raise SpectrumError(source, int(line_numbers[k]), "data line has an X value but no Y values")
    line_first = np.cumsum(per_line) - per_line
    if not point_is_dif.any():
        return point_value.astype(np.float64), line_first, np.zeros(line_numbers.size, dtype=bool)
    starts_dif = point_is_dif[line_first[first_line]]
    if starts_dif.any():
        k = int(np.flatnonzero(first_line)[np.argmax(starts_dif)])
        raise SpectrumError(source, int(line_numbers[k]),
                            "data start with a DIF value: there is no previous value to add it to")

    last_absolute = np.maximum.accumulate(np.where(point_is_dif, 0, np.arange(point_value.size)))
    running = np.cumsum(np.where(point_is_dif, point_value, 0))
    y = (point_value - running)[last_absolute] + running

    line_last = line_first + per_line - 1
    is_check = np.zeros(line_numbers.size, dtype=bool)
    is_check[1:] = point_is_dif[line_last[:-1]]
    is_check &= ~first_line
    checked = np.flatnonzero(is_check)
    if checked.size:
        not_absolute = point_is_dif[line_first[checked]]
        if not_absolute.any():
            k = checked[np.argmax(not_absolute)]
            raise SpectrumError(source, int(line_numbers[k]),
                                "Y-check missing: the previous line ended in DIF form, so this line must start "
                                "with that last Y in absolute (SQZ) form")
        mismatch = y[line_first[checked]] != y[line_last[checked - 1]]
        if mismatch.any():
            k = checked[np.argmax(mismatch)]
            raise SpectrumError(source, int(line_numbers[k]),
                                f"Y-check failed: line starts with Y={y[line_first[k]]} but the previous line "
                                f"ended with Y={y[line_last[k - 1]]}")
        drop = np.zeros(y.size, dtype=bool)
        drop[line_first[checked]] = True
        kept_before = np.cumsum(~drop) - (~drop)
        return y[~drop].astype(np.float64), kept_before[line_first], is_check
    return y.astype(np.float64), line_first, is_check


def _read_xypoints(block, ctx):
    x_factor, y_factor = ctx.number("XFACTOR", 1.0), ctx.number("YFACTOR", 1.0)
    tokens, token_lines = [], []
    for offset, line in enumerate(block.split("\n")):
        fields = re.sub(r"(?<=[0-9.])(?=[+-])", " ", line.replace(",", " ").replace(";", " ")).split()
        tokens.extend(fields)
        token_lines.extend([ctx.data_line + 1 + offset] * len(fields))
    try:
        values = np.array(tokens, dtype=np.float64)
    except ValueError:
        for field, number in zip(tokens, token_lines):
            try:
                float(field)
            except ValueError:
                raise SpectrumError(ctx.source, number, f"{field!r} is not a number") from None
        raise
    if values.size % 2:
        raise SpectrumError(ctx.source, token_lines[-1], "XYPOINTS hold an odd count of numbers: an X without its Y")
    pairs = values.reshape(-1, 2)
    if "NPOINTS" in ctx.header and int(ctx.number("NPOINTS")) != pairs.shape[0]:
        raise SpectrumError(ctx.source, ctx.line("NPOINTS"),
                            f"##NPOINTS={int(ctx.number('NPOINTS'))} but the data block holds {pairs.shape[0]} points")
    _check_first_y(ctx, pairs[:, 1] * y_factor)
    return pairs[:, 0] * x_factor, pairs[:, 1] * y_factor
