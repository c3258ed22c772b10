"""Damaged spectrum files: exactly one output row each, measured or rejected with a reason (issue 14).

The damage is random but seeded (numpy's default_rng), so a failure reproduces: cut files,
bytes replaced by digits, letters, pseudo-digits, '#', '=', NUL, non-ASCII and line breaks,
lines repeated or dropped, and header numbers made non-finite. Checked: no exception
escapes, the rows come back in order and one per file, and a rejected row names its file.
"""

import numpy as np
import pytest

from sumpwise.intake.spectra.batch import measure_spectra
from synthetic_spectra import oil_spectrum, wavenumber_grid, write_jcampdx

X = wavenumber_grid()
ALPHABET = list(b"0123456789 +-.,@ABCIJKRSTsabcijr%#=$\x00\n\r\xe9\xff")


def _damaged(text: bytes, rng) -> bytes:
    kind = rng.integers(6)
    if kind == 0:
        return text[: rng.integers(len(text))]
    if kind == 1:
        data = bytearray(text)
        for at in rng.integers(0, len(data), rng.integers(1, 20)):
            data[at] = ALPHABET[rng.integers(len(ALPHABET))]
        return bytes(data)
    lines = text.split(b"\n")
    if kind == 2:
        k = rng.integers(len(lines))
        return b"\n".join(lines[:k] + [lines[k]] * int(rng.integers(2, 4)) + lines[k + 1 :])
    if kind == 3:
        k = rng.integers(len(lines))
        return b"\n".join(lines[:k] + lines[k + 1 :])
    label = [b"NPOINTS", b"FIRSTX", b"LASTX", b"YFACTOR", b"XFACTOR"][rng.integers(5)]
    value = [b"nan", b"1e400", b"-inf", b"0", b"-5", b"2.5", b""][rng.integers(7)]
    return b"\n".join(line.split(b"=")[0] + b"= " + value if line.startswith(b"##" + label) else line
                      for line in lines)


@pytest.mark.parametrize("form", ["AFFN", "SQZ", "DIFDUP"])
def test_every_damaged_file_gives_exactly_one_row_in_order(tmp_path, form):
    rng = np.random.default_rng({"AFFN": 1, "SQZ": 2, "DIFDUP": 3}[form])
    clean = write_jcampdx(tmp_path / "clean.jdx", X, oil_spectrum(X, oxidation=0.1), form=form).read_bytes()
    paths = []
    for k in range(120):
        path = tmp_path / f"damaged_{k:03d}.jdx"
        path.write_bytes(_damaged(clean, rng))
        paths.append(path)
    frame, rejections = measure_spectra(paths)
    assert list(frame["spectrum"]) == [str(p) for p in paths]
    rejected = frame["rejection"] != ""
    assert rejected.sum() == len(rejections) and rejected.sum() > 30  # the damage is mostly noticed
    assert all(r.startswith(str(p)) for r, p in zip(frame["rejection"][rejected], np.array(paths)[rejected]))
    # a measured row's empty band always says why
    for _, row in frame[~rejected].iterrows():
        assert np.isfinite(row["oxidation"]) or "oxidation: not measured" in row["notes"], row["spectrum"]
