"""A file read in chunks keeps the delimiter and decimal mark its first chunk shows.

Each chunk used to detect the decimal mark on its own from its first lines: a later chunk
whose first 200 lines held only whole numbers took '.', and its `46,5` was rejected (D004)
though the same row is read as 46.5 when the file is one chunk."""

import io

import numpy as np

from sumpwise.intake.chunked import sample_chunks
from sumpwise.intake.samples import read_samples


def _export() -> str:
    lines = ["Sample;Asset;Equipment;Oil;Sampled;kv40"]
    for k in range(1, 501):
        value = "46,1" if k <= 2 else "47,2" if k == 480 else str(40 + k % 7)  # rows 3..479: whole numbers
        lines.append(f"S-{k};HPU-1;hydraulic;HYD-46-M;2026-03-01;{value}")
    return "\n".join(lines) + "\n"


def test_later_chunks_read_decimal_commas_as_the_first_chunk_does():
    text = _export().replace("Sample;Asset;Equipment;Oil;Sampled", "sample_id;unit_id;class;lubricant;sampled_on")
    whole = read_samples(io.StringIO(text), name="export.csv")
    chunks = list(sample_chunks(io.StringIO(text), name="export.csv", rows=250))
    assert len(chunks) == 2
    assert [r.code for c in chunks for r in c.rejects] == [] == [r.code for r in whole.rejects]
    row_480 = chunks[1].frame.loc[480, "kv40"]
    assert row_480 == whole.frame.loc[480, "kv40"] == 47.2
    assert np.array_equal(np.concatenate([c.frame["kv40"].to_numpy() for c in chunks]), whole.frame["kv40"].to_numpy())
    assert any("decimal mark ','" in note for note in chunks[0].notes)
