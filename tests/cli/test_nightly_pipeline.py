"""`sumpwise grade` run unattended each night, through the real command line (`python -m sumpwise`).

The pipeline reads only the records, the exit code and `--summary`: every row read must end up
graded, unrated or rejected with a reason, the counts must add up, and the exit code and summary
must say what happened, including which file failed and which findings were reached. The samples
are Brackwater Point results (invented) at realistic magnitudes; the limits are the scenario's
(scenarios/brackwater/site.yaml, which names its sources: ISO 4406, ASTM D6304, common practice).
"""

from __future__ import annotations

import csv
import io
import json
import subprocess
import sys

from conftest import DATA, ROOT

SITE = ROOT / "scenarios" / "brackwater" / "site.yaml"
SAMPLES = ROOT / "scenarios" / "brackwater" / "samples.csv"
HERE = DATA / "pipeline_found6"


def sumpwise(*argv, stdin: bytes = b"", cwd=None) -> subprocess.CompletedProcess:
    """The real command, as a nightly script runs it."""
    return subprocess.run([sys.executable, "-m", "sumpwise", *map(str, argv)], input=stdin, capture_output=True,
                          timeout=300, cwd=cwd)


def test_the_table_puts_the_trend_caveats_that_may_hide_a_finding_first():
    """FIRST_CAVEATS are the caveats under which a grade may be too mild: the table lists them
    first so that a line cut at 100 columns still shows them, and the run warns of them. An
    oil-hours slip leaves the rates to and from that sample untaken (as oil-hours-not-from-fill
    leaves its rates); an untold oil change restarts the trend where it may only have been a
    meter reset (as class-changed restarts it). Both were listed after trend-break and
    oil-changed, and cut off the line, and the run said nothing of them."""
    done = sumpwise("grade", HERE / "hpu-week.csv", "--rules", SITE, "--format", "table")
    assert done.returncode == 0, done.stderr.decode()
    lines = {line.split()[0]: line for line in done.stdout.decode().splitlines() if line.startswith("BP-7")}
    assert lines["BP-7104"].endswith("caveat: oil-hours-slip, trend-break")
    assert "caveat: oil-change-untold, few-rule~" in lines["BP-7203"]  # cut at 100 columns, the untold one shown
    err = done.stderr.decode()
    assert "warning: " + str(HERE / "hpu-week.csv") + ": 2 sample(s) with caveat oil-hours-slip" in err
    assert "1 sample(s) with caveat oil-change-untold" in err
    assert "unit-id-spelling" in lines["BP-7102"]  # hpu-7 beside HPU-7: one unit, graded on all it has,
    assert "caveat unit-id-spelling" not in err    # so not a caveat that may hide a finding
