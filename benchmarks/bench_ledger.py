"""Benchmark: samples over units through trends, grading and the ledger, each figure beside
its target and, where one exists, its floor.

Prints wall time, this process's CPU time and its peak resident memory after each stage.
Not a test: figures vary by machine (and on a shared machine, by load: CPU time is the
steadier figure there). Targets per 1,000,000 samples on
2 cores, scaled linearly to --samples: import and grade into a new ledger 10 s, the ledger
at most 300 MB, replay 15 s; `history` and `explain` under 0.2 s at any size. Floors: the
same grading without a ledger, SQLite alone storing the rows the import stored, and SQLite
alone reading them back (replay reads them and grades them again). The
data are synthetic (seeded numpy).

    python benchmarks/bench_ledger.py [--samples N] [--units U] [--db PATH] [--trends]
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

from sumpwise.derive.row_measures import derive_measures  # noqa: E402
from sumpwise.derive.trends import add_trend_measures  # noqa: E402
from sumpwise.intake.samples import ColumnMap, validate_samples  # noqa: E402
from sumpwise.ledger.audit import explain_from_ledger, replay, unit_history  # noqa: E402
from sumpwise.ledger.schema import DIGEST_3_SAMPLE_COLUMNS  # noqa: E402
from sumpwise.ledger.store import begin, grade_into_ledger, open_ledger  # noqa: E402
from sumpwise.results.pipeline import grade_batch  # noqa: E402
from sumpwise.ruleset.compiler import load_ruleset  # noqa: E402
from sumpwise.vocabulary.measures import TREND_BASES  # noqa: E402

PER_MILLION = {"import": 10.0, "size": 300.0, "replay": 15.0}
QUERY_TARGET = 0.2
RULES = ROOT / "tests" / "data" / "ledger" / "trend-rules.yaml"


def synthetic(n: int, units: int, seed: int = 20260101) -> pd.DataFrame:
    """n samples, units sampled in turn every few days, oil ageing slowly, an oil change now and then:
    the new oil's hours count from its fill and its readings start from new again, as a site's do
    (hours running on across a flagged change are a unit's hours, which the engine says)."""
    rng = np.random.default_rng(seed)
    per_unit = n // units
    unit = np.repeat(np.arange(units), per_unit)
    k = np.tile(np.arange(per_unit), units)
    changed = rng.random(len(k)) < 0.01
    charge = pd.Series(changed).groupby(unit).cumsum().to_numpy()
    age = pd.Series(k).groupby([unit, charge]).cumcount().to_numpy()  # samples since the fill
    hours = 200.0 + age * 150.0 + rng.integers(0, 20, len(k))
    frame = pd.DataFrame({
        "sample_id": np.char.add("S", np.arange(len(k)).astype(str)).astype(object),
        "unit_id": np.char.add("U-", unit.astype(str)).astype(object),
        "class": "steam-turbine", "lubricant": "TEST-46",
        "sampled_on": (pd.Timestamp("2020-01-01") + pd.to_timedelta(k * 7, unit="D")).strftime("%Y-%m-%d")
        .to_numpy(dtype=object),
        "oil_hours": hours,
        "kv40": np.round(46.0 + age * 0.004 + rng.normal(0, 0.2, len(k)), 2),
        "an": np.round(0.05 + age * 0.001 + rng.normal(0, 0.01, len(k)), 3).clip(0),
        # direct carbonyl from the rule set's new-oil 1.0 abs/0.1 mm (100 abs/cm) upwards, in abs/cm
        "oxidation": np.round(100.0 + age * 0.03 + rng.normal(0, 0.3, len(k)), 1),
        "water": np.round(rng.normal(80, 20, len(k)).clip(0)),
        "method": np.where(rng.random(len(k)) < 0.02, "subtraction", "direct").astype(object),
        "lab": "lab-a",
        "oil_changed": np.where(changed, "true", "false").astype(object),
    })
    return frame


def clock() -> tuple[float, float]:
    """(wall, CPU of this process): on a shared machine the CPU figure is the steadier one."""
    return time.perf_counter(), time.process_time()


class Stages:
    def __init__(self, n: int):
        self.scale = n / 1_000_000

    def report(self, name: str, started: tuple, target: float | None = None, per_million: bool = True) -> float:
        seconds, cpu = time.perf_counter() - started[0], time.process_time() - started[1]
        peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        aim = ""
        if target is not None:
            aim = f"target {target * (self.scale if per_million else 1):.2f} s"
        print(f"{name:<52} {seconds:8.3f} s wall {cpu:8.3f} s CPU  {aim:<18} peak RSS so far {peak:6.0f} MB",
              flush=True)
        return seconds


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--samples", type=int, default=1_000_000)
    parser.add_argument("--units", type=int, default=5_000)
    parser.add_argument("--db", help="ledger path (default: a temporary file)")
    parser.add_argument("--trends", action="store_true", help="also time the trend measures on their own")
    args = parser.parse_args()
    stages = Stages(args.samples)
    ruleset = load_ruleset(RULES)

    t = clock()
    raw = synthetic(args.samples, args.units)
    stages.report(f"generate {len(raw):,} samples, {args.units:,} units", t)
    if args.trends:
        trend_stages(raw, ruleset, stages)

    with tempfile.TemporaryDirectory() as folder:
        db = Path(args.db or Path(folder) / "bench.db")
        t = clock()
        graded = grade_batch(validate_samples(raw, [], "<synthetic>", ColumnMap()), ruleset)
        stages.report("floor: validate + grade, no ledger", t)
        del graded
        t = clock()
        batch = validate_samples(raw, [], "<synthetic>", ColumnMap())
        graded, recorded = grade_into_ledger(db, batch, ruleset)
        stages.report(f"import + grade into a new ledger ({recorded.new:,} new)", t, PER_MILLION["import"])
        size = sum(p.stat().st_size for p in db.parent.glob(db.name + "*")) / 1e6
        print(f"{'ledger size (file and its WAL)':<52} {size:8.0f} MB target {PER_MILLION['size'] * stages.scale:.0f}"
              f" MB; grades {pd.Series(graded.grades()).value_counts().to_dict()}", flush=True)
        del graded, batch

        unit, sample = f"U-{args.units // 2}", f"S{args.samples // 2}"
        t = clock()
        rows = unit_history(db, unit)
        stages.report(f"history {unit} ({len(rows)} samples)", t, QUERY_TARGET, per_million=False)
        t = clock()
        lines = explain_from_ledger(db, sample)
        stages.report(f"explain {sample} ({len(lines)} lines)", t, QUERY_TARGET, per_million=False)

        t = clock()
        report = replay(db)
        stages.report(f"replay ({report.checked:,} results, {len(report.differences)} findings)", t,
                      PER_MILLION["replay"])

        again = validate_samples(raw.iloc[: len(raw) // 10], [], "<synthetic>", ColumnMap())
        t = clock()
        _, recorded = grade_into_ledger(db, again, ruleset)
        stages.report(f"re-import {len(again.frame):,} known samples ({recorded.known:,} known)", t)
        del again, raw
        (seconds, cpu), (read, read_cpu) = sqlite_floor(db, Path(folder) / "floor.db")
        print(f"{'floor: SQLite alone reading every row back':<52} {read:8.3f} s wall {read_cpu:8.3f} s CPU  (what replay "
              f"must read, as Python tuples)", flush=True)
        print(f"{'floor: SQLite alone storing the same rows':<52} {seconds:8.3f} s wall {cpu:8.3f} s CPU  (read back from the ledger, "
              f"inserted into a new one in one transaction as the import does, no sumpwise work)", flush=True)


def trend_stages(raw: pd.DataFrame, ruleset, stages: Stages) -> None:
    batch = validate_samples(raw, [], "<synthetic>", ColumnMap())
    measured = derive_measures(batch.frame, ruleset.lubricants)
    flags = batch.frame["oil_changed"].eq("true").to_numpy()
    t = clock()
    add_trend_measures(measured, flags, None, TREND_BASES)
    stages.report(f"trend measures, all {len(TREND_BASES)} bases", t)
    t = clock()
    add_trend_measures(measured, flags, None, ("kv40", "an", "oxidation"))
    stages.report("trend measures, kv40 + an + oxidation", t)
    shuffle = np.random.default_rng(1).permutation(len(measured))  # input not in unit and date order
    t = clock()
    add_trend_measures(measured.iloc[shuffle], flags[shuffle], None, ("kv40", "an", "oxidation"))
    stages.report("trend measures, 3 bases, shuffled input", t)


TABLES = ("rulesets", "batches", "shapes", "shape_rules", "samples", "verdicts", "rejects")  # in foreign-key order
SAMPLE_COLUMNS = DIGEST_3_SAMPLE_COLUMNS + ("batch", "content_sha256")  # what a form-3 batch writes to a sample row


def sqlite_floor(source: Path, target: Path) -> tuple[tuple[float, float], tuple[float, float]]:
    """(wall, CPU) SQLite takes to store exactly what the import stored, with the same schema,
    settings and way (a sample row's columns bound as the import binds them, the indexes on
    samples dropped first and built after, as the import does for a batch this large): the
    part of the import no change to sumpwise's own code can take away; and to read back what
    replay reads (every column a digest covers, not the reading columns a form-3 batch leaves
    empty), the part of replay no change can take away, besides grading."""
    started = clock()
    with sqlite3.connect(source) as conn:
        tables = {name: conn.execute(f"SELECT {', '.join(SAMPLE_COLUMNS) if name == 'samples' else '*'} "
                                     f"FROM {name}").fetchall() for name in TABLES}
    read = time.perf_counter() - started[0], time.process_time() - started[1]
    for name, rows in tables.items():
        names = ""
        if name == "samples" and rows:  # as the import binds them: a column NULL in every row is left out
            kept = [k for k, column in enumerate(zip(*rows)) if column.count(None) < len(rows)]
            rows = [tuple(row[k] for k in kept) for row in rows]
            names = f" ({', '.join(SAMPLE_COLUMNS[k] for k in kept)})"
        tables[name] = names, rows
    conn = open_ledger(target, building=True)  # a new ledger's settings: built aside, no journal
    started = clock()
    begin(conn)
    indexes = conn.execute("SELECT name, sql FROM sqlite_master WHERE type = 'index' AND tbl_name = 'samples' "
                           "AND sql IS NOT NULL").fetchall()
    for name, _ in indexes:
        conn.execute(f"DROP INDEX {name}")
    for name, (names, rows) in tables.items():
        if rows:
            conn.executemany(f"INSERT INTO {name}{names} VALUES ({', '.join('?' * len(rows[0]))})", rows)
    for _, sql in indexes:
        conn.execute(sql)
    conn.execute("COMMIT")
    conn.close()
    return (time.perf_counter() - started[0], time.process_time() - started[1]), read


if __name__ == "__main__":
    main()
