"""Benchmark: grade synthetic samples end to end and print figures per stage.

Prints seconds, samples/s and peak resident memory for each stage (read CSV, derive
measures, evaluate, build reasons, write JSON Lines) on N samples (default 1,000,000)
against the shipped rules of all six classes, then the same rules through the plain
per-row evaluator (row_evaluator.py) on a smaller batch, and the speed ratio.

    .venv/bin/python benchmarks/bench_grade.py [--rows N] [--baseline-rows M]
"""

from __future__ import annotations

import argparse
import os
import resource
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent / "tests" / "support"))  # the per-row evaluator

from row_evaluator import grade_row  # noqa: E402

from sumpwise.ruleset.compiler import load_ruleset  # noqa: E402
from sumpwise.evaluation.evaluator import evaluate  # noqa: E402
from sumpwise.derive.row_measures import derive_measures
 # noqa: E402
from sumpwise.render.jsonl import jsonl_lines  # noqa: E402
from sumpwise.results.records import GradedBatch  # noqa: E402
from sumpwise.intake.samples import read_samples  # noqa: E402


def peak_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def synthetic(ruleset, n: int, seed: int = 7) -> pd.DataFrame:
    """Plausible-looking invented samples: each class with one of its own lubricants."""
    rng = np.random.default_rng(seed)
    classes = np.array(sorted(ruleset.classes))
    cls = rng.choice(classes, n)
    codes = np.array(sorted(ruleset.lubricants))
    lubricant = rng.choice(codes, n)
    new_kv40 = np.array([ruleset.lubricants[c].kv40 or 46.0 for c in codes])[np.searchsorted(codes, lubricant)]
    new_an = np.array([ruleset.lubricants[c].an or 0.1 for c in codes])[np.searchsorted(codes, lubricant)]
    frame = pd.DataFrame({
        "sample_id": np.char.add("S", np.arange(n).astype(str)),
        "unit_id": np.char.add("U", rng.integers(0, 5000, n).astype(str)),
        "class": cls,
        "lubricant": lubricant,
        "sampled_on": "2026-06-01",
        "oil_hours": rng.uniform(0, 30000, n).round(0),
        "kv40": (new_kv40 * rng.normal(1.0, 0.05, n)).round(2),
        "kv100": rng.uniform(5, 15, n).round(2),
        "an": (new_an + np.abs(rng.normal(0, 0.15, n))).round(2),
        "bn": rng.uniform(2, 12, n).round(1),
        "oxidation": rng.uniform(0, 40, n).round(1),
        "nitration": rng.uniform(0, 20, n).round(1),
        "water": np.abs(rng.normal(150, 150, n)).round(0),
        "rpvot": rng.uniform(100, 1200, n).round(0),
    })
    for column in ("kv100", "oxidation", "water", "rpvot", "bn", "oil_hours"):
        frame.loc[rng.random(n) < 0.05, column] = np.nan
    return frame


def stage(name: str, n: int, started: float, figures: list) -> float:
    now = time.perf_counter()
    seconds = now - started
    figures.append((name, seconds, n / seconds if seconds else float("inf"), peak_mb()))
    return now


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=1_000_000)
    parser.add_argument("--baseline-rows", type=int, default=100_000)
    args = parser.parse_args()

    ruleset = load_ruleset(HERE / "all-classes.yaml")
    rules = sum(len(ruleset.rules_for(c)) for c in ruleset.classes)
    with tempfile.TemporaryDirectory() as folder:
        csv_path = Path(folder) / "samples.csv"
        synthetic(ruleset, args.rows).to_csv(csv_path, index=False)
        out_path = Path(folder) / "results.jsonl"
        print(f"{args.rows:,} samples, {len(ruleset.classes)} classes, {rules} rules in all "
              f"({len(ruleset.caveats)} caveats); CSV {csv_path.stat().st_size / 1e6:.0f} MB; "
              f"numpy {np.__version__}, pandas {pd.__version__}, {os.cpu_count()} cores")
        figures: list = []
        t = time.perf_counter()
        batch = read_samples(csv_path)
        t = stage("read CSV", args.rows, t, figures)
        measured = derive_measures(batch.frame, ruleset.lubricants, ruleset.measures, ruleset.fields)
        t = stage("derive measures", args.rows, t, figures)
        outcome = evaluate(ruleset, measured)
        t = stage("evaluate", args.rows, t, figures)
        graded = GradedBatch(ruleset, measured, outcome, batch.rejects, batch.rows_read, batch.source,
                             ("kv40", "kv100", "an", "oxidation", "water", "oil_hours"))
        size = sum(len(block) for block in jsonl_lines(graded))  # rendered block by block, then dropped
        t = stage("build reasons", args.rows, t, figures)
        with open(out_path, "w", encoding="utf-8") as out:
            for block in jsonl_lines(graded):
                out.write(block)
        t = stage("write JSON Lines", args.rows, t, figures)
        print(f"{'stage':<18} {'seconds':>8} {'samples/s':>12} {'peak MB':>9}")
        for name, seconds, rate, peak in figures:
            print(f"{name:<18} {seconds:>8.3f} {rate:>12,.0f} {peak:>9.0f}")
        # 'build reasons' renders every record's reasons to JSON text and drops it; 'write JSON
        # Lines' renders again and writes to disk, so end to end counts the write stage only.
        total = sum(seconds for name, seconds, _, _ in figures if name != "build reasons")
        print(f"{'end to end':<18} {total:>8.3f} {args.rows / total:>12,.0f} {peak_mb():>9.0f}")
        print(f"JSON Lines output: {size / 1e6:.0f} MB, {size / args.rows:.0f} characters a sample "
              f"(end to end = read + derive + evaluate + write; 'write' includes rendering)")
        print(f"evaluation (reasons as arrays: each rule's level, cap and caveat per sample): "
              f"{figures[2][1]:.3f} s; with reasons rendered to JSON text: {figures[2][1] + figures[3][1]:.3f} s")
        print_floors(csv_path, graded, size, Path(folder) / "floor.jsonl")

        small = synthetic(ruleset, args.baseline_rows, seed=11)
        rows = small.to_dict("records")
        t0 = time.perf_counter()
        for row in rows:
            grade_row(ruleset, row)
        loop = time.perf_counter() - t0
        small_batch = read_samples(_to_csv(small, Path(folder) / "small.csv"))
        t0 = time.perf_counter()
        small_measured = derive_measures(small_batch.frame, ruleset.lubricants)
        small_outcome = evaluate(ruleset, small_measured)
        engine_seconds = time.perf_counter() - t0
        print(f"per-row evaluator: {args.baseline_rows:,} samples in {loop:.2f} s "
              f"({args.baseline_rows / loop:,.0f} samples/s); engine derive+evaluate on the same rows: "
              f"{engine_seconds:.3f} s; ratio {loop / engine_seconds:.0f}x")
        del small_outcome


def print_floors(csv_path: Path, graded: GradedBatch, size: int, out_path: Path) -> None:
    """What the two ends cost with no sumpwise work at all: the same CSV parsed by pandas with
    default options, and the same number of characters of already rendered text written out."""
    t = time.perf_counter()
    pd.read_csv(csv_path)
    parse = time.perf_counter() - t
    block = next(jsonl_lines(graded))
    t = time.perf_counter()
    with open(out_path, "w", encoding="utf-8") as out:
        for _ in range(max(1, round(size / len(block)))):
            out.write(block)
    write = time.perf_counter() - t
    out_path.unlink()
    print(f"floors: pandas.read_csv alone {parse:.3f} s; writing {size / 1e6:,.0f} MB of ready text "
          f"(one block, written over and over) {write:.3f} s; together {parse + write:.3f} s")


def _to_csv(frame: pd.DataFrame, path: Path) -> Path:
    frame.to_csv(path, index=False)
    return path


if __name__ == "__main__":
    main()
