"""Shared generators, a runner that parses the command line's results, and the Hypothesis profiles.

`ci` (the default) keeps the property tests to well under a minute on a loaded CI machine, the same
examples every run; `thorough` runs many more, new ones each run, for a developer hunting crashes:
SUMPWISE_HYPOTHESIS_PROFILE=thorough .venv/bin/python -m pytest tests/property (see DEVELOPERS.md).
"""

from __future__ import annotations

import csv
import io
import json
import os
import re

from hypothesis import HealthCheck, settings, strategies as st

from conftest import ROOT, run_cli

_SLOW_OK = [HealthCheck.too_slow, HealthCheck.data_too_large, HealthCheck.function_scoped_fixture]
settings.register_profile("ci", max_examples=15, deadline=None, suppress_health_check=_SLOW_OK,
                          derandomize=True, print_blob=True)
settings.register_profile("thorough", max_examples=400, deadline=None, suppress_health_check=_SLOW_OK,
                          print_blob=True)
settings.load_profile(os.environ.get("SUMPWISE_HYPOTHESIS_PROFILE", "ci"))

GEARBOX = ROOT / "rules" / "gearbox.yaml"
HEADER = ("sample_id", "unit_id", "class", "lubricant", "sampled_on", "kv40", "an", "water", "oxidation")
LUBRICANTS = ("GEAR-220-M", "GEAR-320-M", "GEAR-220-PAO", "GEAR-320-PAO", "GEAR-220-PAG", "NOT-ON-FILE")
SUMMARY = re.compile(r"read (\d+) row\(s\): (\d+) graded, (\d+) unrated, (\d+) rejected")

# Cells a lab export can hold, good and bad: realistic magnitudes (kv40 of ISO VG 220-320 gear oils,
# acid number up to a few mg KOH/g, water up to 2 % = 20 000 ppm) and the damage found in real files.
GARBAGE = st.sampled_from(["", " ", "n/a", "<0.1", "1,5", "nan", "NaN", "inf", "-Infinity", "1e999", "1e-400",
                           "--1", "0x10", "=1+2", "\x1b[31m", "\u202e", "é", "12 ppm", "true", "-0", "1_000"])


def number(low: float, high: float):
    return st.floats(low, high, allow_nan=False, allow_infinity=False).map(lambda v: f"{v:.4g}")


CELL = {
    "kv40": st.one_of(number(150, 450), GARBAGE, st.just("")),
    "an": st.one_of(number(0, 4), GARBAGE),
    "water": st.one_of(number(0, 20000), GARBAGE),
    "oxidation": st.one_of(number(0, 60), GARBAGE, st.just("")),
    "class": st.sampled_from(["gearbox", "gearbox", "gearbox", "hydraulic", "", "Gearbox", "gear\x07box"]),
    "lubricant": st.sampled_from(LUBRICANTS + ("",)),
    "sampled_on": st.sampled_from(["2026-03-02", "2026-13-45", "", "02/03/2026", "2026-02-29", "2024-02-29"]),
}


@st.composite
def sample_rows(draw, min_rows: int = 1, max_rows: int = 12):
    """Rows of a gearbox lab export with unique ids and one unit each (so no row trends with another)."""
    n = draw(st.integers(min_rows, max_rows))
    rows = []
    for i in range(n):
        row = {"sample_id": f"GB-{i:04d}", "unit_id": f"GB-U{i}"}
        for name in HEADER[2:]:
            row[name] = draw(CELL[name])
        rows.append(row)
    return rows


def to_csv(rows, header=HEADER) -> str:
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(header)
    for row in rows:
        writer.writerow([row.get(name, "") for name in header])
    return out.getvalue()


class Graded:
    """One grade run: exit code, verdict and origin (file, row) by sample id, and the summary counts."""

    def __init__(self, run):
        self.code, self.err = run.code, run.err
        self.verdicts, self.origins = {}, {}
        for line in run.out.splitlines():
            record = json.loads(line)
            self.verdicts[record["sample_id"]] = (record["grade"], record["level"],
                                                  tuple(r["rule"] for r in record["reasons"]))
            self.origins[record["sample_id"]] = (record["origin"]["file"], record["origin"]["row"])
        found = SUMMARY.search(run.err)
        self.counts = tuple(int(x) for x in found.groups()) if found else None


def grade(text: str, *extra, tmp_path=None, rules=GEARBOX) -> Graded:
    """Grade `text` from standard input, or from a file in tmp_path when given."""
    if tmp_path is None:
        return Graded(run_cli("grade", "-", "--rules", rules, *extra, stdin=text))
    path = tmp_path / "lab.csv"
    path.write_text(text, encoding="utf-8")
    return Graded(run_cli("grade", path, "--rules", rules, *extra))


def assert_no_bug(code: int, err: str) -> None:
    assert code != 1 and "Traceback" not in err and "internal error" not in err, err
