"""Benchmark: the HTML report of 5,000 units with 20 samples each (100,000 result records).

Prints seconds for each stage beside the floor and the target: reading the results file
(JSON Lines, as `grade` writes it), rendering the HTML, writing it; and, as the floor, the
same file read with json.loads alone. The target is the whole `report` under 30 s on the
project's 2-core machine. The data are synthetic (seeded numpy), graded by the shipped rules
of all six classes (benchmarks/all-classes.yaml), each unit keeping one class and lubricant,
sampled every 14 days with its oil ageing and an oil change now and then.

    .venv/bin/python benchmarks/bench_report.py [--units U] [--samples-per-unit N]
"""

from __future__ import annotations

import argparse
import json
import resource
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

from sumpwise import grade, load_ruleset, read_samples
from sumpwise.cli.report import write_report
from sumpwise.render.html_report import parse_results, render_report
from sumpwise.render.jsonl import write_jsonl

HERE = Path(__file__).resolve().parent
TARGET_SECONDS = 30.0


def peak_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def synthetic(ruleset, units: int, per_unit: int, seed: int = 11) -> pd.DataFrame:
    """Units sampled every 14 days; acid number, oxidation and viscosity drift up, water is noise."""
    rng = np.random.default_rng(seed)
    classes = np.array(sorted(ruleset.classes))
    codes = np.array(sorted(ruleset.lubricants))
    unit_class = rng.choice(classes, units)
    unit_lubricant = rng.choice(codes, units)
    unit = np.repeat(np.arange(units), per_unit)
    k = np.tile(np.arange(per_unit), units)
    n = len(k)
    lub = unit_lubricant[unit]
    at = np.searchsorted(codes, lub)
    new_kv40 = np.array([ruleset.lubricants[c].kv40 or 46.0 for c in codes])[at]
    new_an = np.array([ruleset.lubricants[c].an or 0.1 for c in codes])[at]
    wear = rng.uniform(0.2, 2.0, units)[unit]  # how fast each unit's oil ages
    changed = rng.random(n) < 0.02
    frame = pd.DataFrame({
        "sample_id": np.char.add("S", np.arange(n).astype(str)),
        "unit_id": np.char.add("U-", unit.astype(str)),
        "class": unit_class[unit],
        "lubricant": lub,
        "sampled_on": (pd.Timestamp("2026-01-05") + pd.to_timedelta(k * 14, unit="D")).strftime("%Y-%m-%d"),
        "oil_hours": 500.0 + k * 330.0,
        "kv40": (new_kv40 * (1 + wear * k * 0.002 + rng.normal(0, 0.01, n))).round(2),
        "kv100": rng.uniform(5, 15, n).round(2),
        "an": (new_an + wear * k * 0.01 + np.abs(rng.normal(0, 0.02, n))).round(3),
        "bn": rng.uniform(2, 12, n).round(1),
        "oxidation": (wear * k * 0.8 + rng.uniform(0, 3, n)).round(1),
        "nitration": rng.uniform(0, 20, n).round(1),
        "water": np.abs(rng.normal(120, 80, n)).round(0),
        "rpvot": rng.uniform(300, 1200, n).round(0),
        "oil_changed": np.where(changed, "true", "false"),
    })
    for column in ("kv100", "oxidation", "water", "rpvot", "bn"):
        frame.loc[rng.random(n) < 0.05, column] = np.nan
    return frame


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--units", type=int, default=5_000)
    parser.add_argument("--samples-per-unit", type=int, default=20)
    args = parser.parse_args()
    ruleset = load_ruleset(HERE / "all-classes.yaml")
    with tempfile.TemporaryDirectory() as folder:
        folder = Path(folder)
        samples, results, out = folder / "samples.csv", folder / "results.jsonl", folder / "report.html"
        synthetic(ruleset, args.units, args.samples_per_unit).to_csv(samples, index=False)
        graded = grade(read_samples(samples), ruleset)
        with results.open("w", encoding="utf-8") as stream:
            write_jsonl(graded, stream)
        size = results.stat().st_size
        print(f"{len(graded):,} result records over {args.units:,} units, {size / 1e6:.0f} MB of JSON Lines "
              f"(input made and graded beforehand, not timed)")

        started = time.perf_counter()
        lines = results.read_text(encoding="utf-8").splitlines()
        floor = [json.loads(line) for line in lines]
        floor_s = time.perf_counter() - started
        del floor

        started = time.perf_counter()
        records = parse_results(results.read_text(encoding="utf-8").splitlines(), str(results))
        read_s = time.perf_counter() - started
        started = time.perf_counter()
        html = render_report(records, (), ruleset, rejects_given=False)
        render_s = time.perf_counter() - started
        started = time.perf_counter()
        out.write_text(html, encoding="utf-8")
        write_s = time.perf_counter() - started
        del records, html

        started = time.perf_counter()
        counts = write_report(results, out, rules=HERE / "all-classes.yaml")
        whole_s = time.perf_counter() - started
        plots = out.read_text(encoding="utf-8").count('<svg class="plot"')

    verdict = "met" if whole_s < TARGET_SECONDS else "NOT met"
    rows = [("read and check the results file", read_s),
            (f"render the HTML ({plots:,} plots)", render_s),
            (f"write the HTML ({counts['bytes'] / 1e6:.0f} MB)", write_s),
            ("the whole report (load rule set, read, render, write)", whole_s),
            ("floor: the same file through json.loads alone", floor_s)]
    print(f"{'stage':<58} {'seconds':>8}")
    for name, seconds in rows:
        print(f"{name:<58} {seconds:>8.2f}")
    print(f"target: the whole report under {TARGET_SECONDS:.0f} s: {verdict}")
    print(f"peak memory {peak_mb():,.0f} MB")


if __name__ == "__main__":
    main()
