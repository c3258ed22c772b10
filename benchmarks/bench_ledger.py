"""Benchmark: 1,000,000 samples over 5,000 units through trends, grading and the ledger.

Prints wall time and the process's peak resident memory after each stage. Not a test:
figures vary by machine. Targets (2 cores): trend measures under 1 s, import plus grade
under 30 s, history and explain under 0.2 s. The data are synthetic (seeded numpy).

    python benchmarks/bench_ledger.py [--samples N] [--units U] [--db PATH]
"""

from __future__ import annotations

import argparse
import resource
import sqlite3
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parent.parent

from sumpwise.ledger.audit import explain_from_ledger, unit_history  # noqa: E402
from sumpwise.ruleset.compiler import load_ruleset  # noqa: E402
from sumpwise.ledger.store import begin, grade_into_ledger, open_ledger  # noqa: E402
from sumpwise.derive.row_measures import derive_measures
from sumpwise.vocabulary.measures import TREND_BASES # noqa: E402
from sumpwise.intake.samples import ColumnMap, validate_samples  # noqa: E402
from sumpwise.derive.trends import add_trend_measures  # noqa: E402

RULES = ROOT / "tests" / "data" / "ledger" / "trend-rules.yaml"


def synthetic(n: int, units: int, seed: int = 20260101) -> pd.DataFrame:
    """n samples, units sampled in turn every few days, oil ageing slowly, an oil change now and then."""
    rng = np.random.default_rng(seed)
    per_unit = n // units
    unit = np.repeat(np.arange(units), per_unit)
    k = np.tile(np.arange(per_unit), units)
    hours = 200.0 + k * 150.0 + rng.integers(0, 20, len(k))
    changed = rng.random(len(k)) < 0.01
    frame = pd.DataFrame({
        "sample_id": np.char.add("S", np.arange(len(k)).astype(str)).astype(object),
        "unit_id": np.char.add("U-", unit.astype(str)).astype(object),
        "class": "steam-turbine", "lubricant": "TEST-46",
        "sampled_on": (pd.Timestamp("2020-01-01") + pd.to_timedelta(k * 7, unit="D")).strftime("%Y-%m-%d")
        .to_numpy(dtype=object),
        "oil_hours": hours,
        "kv40": np.round(46.0 + k * 0.004 + rng.normal(0, 0.2, len(k)), 2),
        "an": np.round(0.05 + k * 0.001 + rng.normal(0, 0.01, len(k)), 3).clip(0),
        "oxidation": np.round(1.0 + k * 0.03 + rng.normal(0, 0.3, len(k)), 1),
        "water": np.round(rng.normal(80, 20, len(k)).clip(0)),
        "method": np.where(rng.random(len(k)) < 0.02, "subtraction", "direct").astype(object),
        "lab": "lab-a",
        "oil_changed": np.where(changed, "true", "false").astype(object),
    })
    return frame


class Stages:
    def __init__(self):
        self.started = time.perf_counter()

    def report(self, name: str, started: float) -> None:
        peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        print(f"{name:<44} {time.perf_counter() - started:8.3f} s   peak RSS so far {peak:8.0f} MB", flush=True)


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--samples", type=int, default=1_000_000)
    parser.add_argument("--units", type=int, default=5_000)
    parser.add_argument("--db", help="ledger path (default: a temporary file)")
    args = parser.parse_args()
    stages = Stages()
    ruleset = load_ruleset(RULES)

    t = time.perf_counter()
    raw = synthetic(args.samples, args.units)
    stages.report(f"generate {len(raw):,} samples, {args.units:,} units", t)

    t = time.perf_counter()
    batch = validate_samples(raw, [], "<synthetic>", ColumnMap())
    stages.report("validate (samples.py)", t)

    t = time.perf_counter()
    measured = derive_measures(batch.frame, ruleset.lubricants)
    stages.report("derive measures", t)

    flags = batch.frame["oil_changed"].eq("true").to_numpy()
    t = time.perf_counter()
    trended = add_trend_measures(measured, flags, None, TREND_BASES)
    stages.report(f"trend measures, all {len(TREND_BASES)} bases", t)
    t = time.perf_counter()
    add_trend_measures(measured, flags, None, ("kv40", "an", "oxidation"))
    stages.report("trend measures, kv40 + an + oxidation", t)
    shuffle = np.random.default_rng(1).permutation(len(measured))  # input not in unit and date order
    shuffled = measured.iloc[shuffle]
    t = time.perf_counter()
    add_trend_measures(shuffled, flags[shuffle], None, ("kv40", "an", "oxidation"))
    stages.report("trend measures, 3 bases, shuffled input", t)
    del trended, measured, shuffled

    with tempfile.TemporaryDirectory() as folder:
        db = Path(args.db or Path(folder) / "bench.db")
        t = time.perf_counter()
        batch = validate_samples(raw, [], "<synthetic>", ColumnMap())
        graded, recorded = grade_into_ledger(db, batch, ruleset)
        stages.report(f"import + grade into the ledger ({recorded.new:,} new)", t)
        print(f"ledger file {db.stat().st_size / 1e6:.0f} MB; grades {pd.Series(graded.grades()).value_counts().to_dict()}")
        del graded

        unit, sample = f"U-{args.units // 2}", f"S{args.samples // 2}"
        t = time.perf_counter()
        rows = unit_history(db, unit)
        stages.report(f"history {unit} ({len(rows)} samples)", t)
        t = time.perf_counter()
        lines = explain_from_ledger(db, sample)
        stages.report(f"explain {sample} ({len(lines)} lines)", t)

        again = validate_samples(raw.iloc[: len(raw) // 10], [], "<synthetic>", ColumnMap())
        t = time.perf_counter()
        _, recorded = grade_into_ledger(db, again, ruleset)
        stages.report(f"re-import {len(again.frame):,} known samples ({recorded.known:,} known)", t)
        del again, raw
        seconds = sqlite_floor(db, Path(folder) / "floor.db")
        print(f"{'floor: SQLite alone storing the same rows':<44} {seconds:8.3f} s   (read back from the ledger, "
              f"inserted into a new one in one transaction, no sumpwise work)", flush=True)


def sqlite_floor(source: Path, target: Path) -> float:
    """Seconds SQLite takes to store exactly what the import stored, with the same schema and
    settings: the part of the import no change to sumpwise's own code can take away."""
    with sqlite3.connect(source) as conn:
        tables = {name: conn.execute(f"SELECT * FROM {name} ORDER BY rowid").fetchall()
                  for name in ("rulesets", "batches", "samples", "results")}
    conn = open_ledger(target)
    started = time.perf_counter()
    begin(conn)
    for name, rows in tables.items():
        if rows:
            conn.executemany(f"INSERT INTO {name} VALUES ({', '.join('?' * len(rows[0]))})", rows)
    conn.execute("COMMIT")
    conn.close()
    return time.perf_counter() - started


if __name__ == "__main__":
    main()
