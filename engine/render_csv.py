"""Write graded samples as CSV: one row a sample, reasons folded into short text columns.

CSV suits spreadsheets and simple pipelines; the full reason records are in JSON Lines.
`fired` lists rule=grade (with <capped-from where a caveat lowered it), highest first.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .results import GradedBatch, record_shape_groups

COLUMNS = ("sample_id", "unit_id", "class", "lubricant", "sampled_on", "grade", "level", "fired", "caveats",
           "not_evaluated", "unrated_because", "ruleset", "ruleset_version", "ruleset_sha256", "engine")


def _folded(result) -> dict:
    fired = ";".join(f"{r.rule}={r.grade}" + (f"<{r.capped_from}" if r.capped_from else "") for r in result.reasons)
    return {"grade": result.grade, "level": "" if result.level is None else str(result.level), "fired": fired,
            "caveats": ";".join(c.caveat for c in result.caveats),
            "not_evaluated": ";".join(f"{n.rule}({','.join(n.missing)})" for n in result.not_evaluated),
            "unrated_because": result.unrated_because or ""}


def csv_frame(batch: GradedBatch) -> pd.DataFrame:
    """The CSV table as a DataFrame, built once per record shape, not once per row."""
    n = len(batch)
    rows = np.arange(n)
    names = ("grade", "level", "fired", "caveats", "not_evaluated", "unrated_because")
    table = {name: np.empty(0, dtype=object) for name in names}
    if n:
        representatives, group_of, _ = record_shape_groups(batch, rows)
        folded = [_folded(batch.result(int(rep))) for rep in representatives]
        for name in names:
            table[name] = np.array([f[name] for f in folded], dtype=object)[group_of]
    measured = batch.measured
    frame = pd.DataFrame({name: (measured[name].to_numpy(dtype=object) if name in measured.columns
                                 else np.full(n, None, dtype=object))
                          for name in ("sample_id", "unit_id", "class", "lubricant", "sampled_on")})
    for name, values in table.items():
        frame[name] = values
    rs = batch.ruleset
    frame["ruleset"] = rs.id
    frame["ruleset_version"] = str(rs.version)
    frame["ruleset_sha256"] = rs.sha256
    frame["engine"] = batch.result(0).engine if n else ""
    return frame[list(COLUMNS)]


def write_csv(batch: GradedBatch, stream) -> None:
    csv_frame(batch).to_csv(stream, index=False, lineterminator="\n")
