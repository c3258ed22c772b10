"""Sample ids one `grade` run writes records for in more than one of its files.

Each file is graded on its own, and a sample id given twice in one file is rejected (D003).
Across files nothing stopped a lab's re-issued result (the same sample id in this week's
export and last week's, perhaps with other values) from coming out as two records with two
grades: a pipeline keying by sample id keeps one of them, whichever it meets last. The run
now says so, naming the id and the earlier file. Memory: 8 bytes and a file number per
record (64-bit hashes of the ids, as the chunked reader keeps within a file).
"""

from __future__ import annotations

import numpy as np

from sumpwise.intake.chunked import id_hashes, merged

SHOWN = 3  # ids named in a warning; the count says how many in all


class RepeatedIds:
    """The ids of the run's earlier files, and those of each later file found among them."""

    def __init__(self):
        self.hashes = np.empty(0, dtype=np.uint64)  # sorted
        self.files = np.empty(0, dtype=np.int64)  # the earlier file of each hash
        self.names: list[str] = []
        self.pending: list[np.ndarray] = []  # this file's hashes, joined to the run's at its end
        self.found: list[tuple[str, str]] = []  # this file's (sample id, earlier file)

    def add(self, ids: np.ndarray) -> None:
        """One graded chunk's sample ids (its records, in order)."""
        if not len(ids):
            return
        hashes = id_hashes(ids.astype(object))
        if len(self.hashes):
            at = np.minimum(np.searchsorted(self.hashes, hashes), len(self.hashes) - 1)
            repeated = np.flatnonzero(self.hashes[at] == hashes)
            self.found.extend((str(ids[k]), self.names[int(self.files[at[k]])]) for k in repeated)
        self.pending.append(hashes)

    def end_file(self, name: str) -> str | None:
        """Close a file: its ids join the run's; a warning when some were in an earlier file."""
        found, self.found = self.found, []
        hashes = np.concatenate(self.pending) if self.pending else np.empty(0, dtype=np.uint64)
        self.pending = []
        self.hashes, self.files = merged(self.hashes, self.files, hashes,
                                         np.full(len(hashes), len(self.names), dtype=np.int64))
        self.names.append(name)
        if not found:
            return None
        shown = ", ".join(f"'{sid}' (also in {earlier})" for sid, earlier in found[:SHOWN])
        more = f" and {len(found) - SHOWN} more" if len(found) > SHOWN else ""
        return (f"{name}: {len(found)} sample id(s) with a record from an earlier file of this run: {shown}{more}; "
                f"each file is graded on its own, so each such sample has more than one record (with --db the ledger "
                f"keeps one and rejects a changed one as L001)")
