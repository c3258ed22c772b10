"""What the intake tests read from a real `grade` run (its records, the rules they fired, the
rejects and the counts it writes on standard error) and the small water files many of them grade
(shared by the intake hunts' test files)."""

from __future__ import annotations

import json
import re

from conftest import run_cli

_REJECT = re.compile(r": row (\d+)(?: \(sample [^)]*\))?: rejected (D\d{3}): ([^:]+):")
_COUNTS = re.compile(r"read (\d+) row\(s\): (\d+) graded, (\d+) unrated, (\d+) rejected")


def graded_run(*argv, stdin: str = "") -> tuple[dict, str]:
    """{sample id: record} of a `grade` run (JSON Lines) and its standard error; exit 0 required."""
    run = run_cli("grade", *argv, stdin=stdin)
    assert run.code == 0, run.err
    return {r["sample_id"]: r for r in map(json.loads, run.out.splitlines())}, run.err


def fired_rules(record: dict) -> set:
    return {reason["rule"] for reason in record["reasons"]}


def rejects_said(err: str) -> list:
    """(row, code, field) of the rejects `grade` writes on standard error."""
    return [(int(row), code, field) for row, code, field in _REJECT.findall(err)]


def counts_said(err: str) -> tuple:
    """(read, graded, unrated, rejected) of the run's summary line."""
    (found,) = _COUNTS.findall(err)
    return tuple(map(int, found))


def water_file(path, rows, on: str):
    """A hydraulic lab file of water readings, the shape the intake hunts' tests write: `rows` are
    (sample id, unit id, water cell as written), all sampled on `on`, HYD-46-M oil. Returns `path`."""
    lines = [f"{sample},{unit},hydraulic,HYD-46-M,{on},{water}" for sample, unit, water in rows]
    path.write_text("sample_id,unit_id,class,lubricant,sampled_on,water\n" + "".join(line + "\n" for line in lines),
                    encoding="utf-8")
    return path
