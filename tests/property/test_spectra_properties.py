"""Properties of reading spectra: any damage to a JCAMP-DX or CSV file is a rejected row with its
reason, never a bug, and each input file gives exactly one output row."""

from __future__ import annotations

import csv
import io

from hypothesis import given, strategies as st

from conftest import run_cli
from property_inputs import assert_no_bug
from synthetic_spectra import oil_spectrum, wavenumber_grid, write_jcampdx

X = wavenumber_grid()
HEADER_DAMAGE = st.sampled_from(["##NPOINTS=nan", "##NPOINTS=1e400", "##NPOINTS=-5", "##FIRSTX=inf",
                                 "##LASTX=1e999", "##YFACTOR=0", "##YFACTOR=nan", "##XFACTOR=-1",
                                 "##DELTAX=0", "##XYDATA=(X++(Y..Y))", "##END=", "##TITLE=\x1b[2J", ""])


@st.composite
def damaged_spectrum(draw, folder) -> bytes:
    form = draw(st.sampled_from(["AFFN", "PAC", "SQZ", "DIF", "DIFDUP", "XYPOINTS"]))
    path = write_jcampdx(folder / "clean.jdx", X, oil_spectrum(X, oxidation=draw(st.floats(0, 20))), form=form)
    raw = path.read_bytes()
    for _ in range(draw(st.integers(1, 3))):
        kind = draw(st.sampled_from(["header", "cut", "splice", "truncate"]))
        if kind == "header":
            text = raw.decode("ascii", errors="replace").split("\n")
            at = draw(st.integers(0, min(len(text) - 1, 25)))
            text.insert(at, draw(HEADER_DAMAGE))
            raw = "\n".join(text).encode("utf-8")
        elif kind == "cut":
            at = draw(st.integers(0, len(raw)))
            raw = raw[:at] + raw[at + draw(st.integers(1, 400)):]
        elif kind == "splice":
            at = draw(st.integers(0, len(raw)))
            raw = raw[:at] + draw(st.binary(min_size=1, max_size=16)) + raw[at:]
        else:
            raw = raw[:draw(st.integers(0, len(raw)))]
    return raw


@given(data=st.data())
def test_every_spectrum_file_gives_one_row_whatever_its_damage(data, tmp_path_factory):
    folder = tmp_path_factory.mktemp("spectra")
    count = data.draw(st.integers(1, 3))
    paths = []
    for i in range(count):
        path = folder / f"BP-{i:04d}.jdx"
        path.write_bytes(data.draw(damaged_spectrum(folder)))
        paths.append(path)
    good = write_jcampdx(folder / "BP-good.jdx", X, oil_spectrum(X), form="AFFN")
    run = run_cli("spectra", *paths, good)
    assert_no_bug(run.code, run.err)
    rows = list(csv.DictReader(io.StringIO(run.out)))
    assert len(rows) == count + 1  # the undamaged file is measured whatever happened to the others
