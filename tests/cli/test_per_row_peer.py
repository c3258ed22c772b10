"""`sumpwise grade --record compact` writes the same bytes as the benchmark's per-row peer.

benchmarks/peer_per_row.py grades each row of a CSV one at a time with the project's per-row
oracle (tests/support/row_evaluator.py) and fits each unit's forecasts in plain Python: a second,
independent implementation of the whole grade, trends and forecasts included. bench_grade.py
compares the two outputs on its data, but only when someone runs it; this runs both on 20,000 of
the benchmark's own samples (four a unit, so trends and forecasts are taken), every time. A
change to one side that the other does not share (as a forecast rule once was) fails here.
"""

from __future__ import annotations

import subprocess
import sys

from conftest import ROOT

sys.path.insert(0, str(ROOT / "benchmarks"))

from bench_grade import RULES, write_csv  # noqa: E402

from sumpwise.ruleset.compiler import load_ruleset  # noqa: E402


def test_grade_and_the_per_row_peer_write_the_same_records(tmp_path):
    samples = write_csv(load_ruleset(RULES), 20_000, tmp_path / "peer.csv", seed=11)
    ours, theirs = tmp_path / "ours.jsonl", tmp_path / "peer.jsonl"
    for argv in ([sys.executable, "-m", "sumpwise", "grade", str(samples), "--rules", str(RULES), "--record",
                  "compact", "--out", str(ours)],
                 [sys.executable, str(ROOT / "benchmarks" / "peer_per_row.py"), str(samples), "--rules", str(RULES),
                  "--out", str(theirs)]):
        done = subprocess.run(argv, capture_output=True, text=True, cwd=ROOT, timeout=300)
        assert done.returncode == 0, done.stderr
    mine, peer = ours.read_text(encoding="utf-8").splitlines(), theirs.read_text(encoding="utf-8").splitlines()
    assert len(mine) == len(peer) == 20_000
    assert sum('"forecasts": [{' in line for line in mine) > 100  # the comparison reaches the forecasts
    differing = [(a, b) for a, b in zip(mine, peer) if a != b]
    assert not differing, f"{len(differing)} records differ; the first, sumpwise's then the peer's: {differing[0]}"
