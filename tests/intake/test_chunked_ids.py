"""Sample ids seen in earlier chunks: the sorted hashes grow by merging, not by sorting again.

The reference is numpy's stable sort of the old and the new hashes end to end (what the
merge replaces): the same order of hashes and of their rows, ties included.
"""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from sumpwise.intake.chunked import merged

CHUNKS = st.lists(st.lists(st.integers(0, 12), max_size=30), min_size=1, max_size=6)  # few values: many ties


@settings(max_examples=300, deadline=None)
@given(CHUNKS)
def test_merging_chunk_by_chunk_gives_the_stable_sort_of_them_all(chunks):
    hashes, rows = np.empty(0, dtype=np.uint64), np.empty(0, dtype=np.int64)
    every, every_rows, row = [], [], 0
    for chunk in chunks:
        more = np.array(chunk, dtype=np.uint64)
        more_rows = np.arange(row, row + len(chunk), dtype=np.int64)
        row += len(chunk)
        hashes, rows = merged(hashes, rows, more, more_rows)
        every.extend(chunk)
        every_rows.extend(more_rows.tolist())
        order = np.argsort(np.array(every, dtype=np.uint64), kind="stable")
        assert hashes.tolist() == np.array(every, dtype=np.uint64)[order].tolist()
        assert rows.tolist() == np.array(every_rows, dtype=np.int64)[order].tolist()


def test_the_first_row_of_an_id_is_found_first():
    # an id seen at rows 3 and 9 (a reject and a later chunk): a search finds row 3
    hashes, rows = merged(np.empty(0, dtype=np.uint64), np.empty(0, dtype=np.int64),
                          np.array([7, 5], dtype=np.uint64), np.array([3, 4]))
    hashes, rows = merged(hashes, rows, np.array([7], dtype=np.uint64), np.array([9]))
    at = np.searchsorted(hashes, np.uint64(7))
    assert rows[at] == 3 and hashes.dtype == np.uint64
