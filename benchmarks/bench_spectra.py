"""Benchmark: FTIR band measures (vectorised vs a per-spectrum loop) and JCAMP-DX parsing rate.

Prints figures; asserts nothing. Run: python benchmarks/bench_spectra.py [--sizes 10000 100000]
Targets from the issues (2-core machine): 100 000 spectra measured in < 0.2 s
excluding parsing, with the robust baselines (a straight line through the mean
of each baseline window) and peak heights from a local quadratic fit (7 points
at 2 cm-1); >= 2 000 JCAMP-DX files/s parsed. The measure figure
is measure_columns on wavenumber-major blocks plus the saturation check
(saturated_bands), as measure_spectra runs them; its floor, one pass over the
columns the bands read (a sum down those rows), is printed beside it.
measure_matrix from row-major spectra is printed too, since that is what a
caller holding rows pays. Spectra are realistic used oils (carbonyl 0-0.5
absorbance at 0.1 mm). The machine is shared: figures move with its load,
which is printed before and after.
"""

from __future__ import annotations

import argparse
import sys
import os
import tempfile
import time
from pathlib import Path

import numpy as np

from sumpwise.intake.spectra.bands import load_bands, measure_block, measure_columns, plan_bands, saturated_bands
from sumpwise.intake.spectra.batch import measure_matrix
from sumpwise.intake.spectra.jcampdx import read_jcampdx, read_jcampdx_many
sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests" / "support"))  # synthetic spectra
from synthetic_spectra import oil_spectrum, random_used_oils, wavenumber_grid, write_jcampdx

BLOCK = 10_000


def bench_measures(count, x, plan, dtype=np.float64, threshold=1.5):
    """Time measure_columns and the saturation check over `count` spectra in wavenumber-major blocks of BLOCK.

    Generation is not timed. Returns (seconds, floor seconds): the floor is one sum down every
    row any band, baseline window or saturation window reads, the least any measure of them costs.
    """
    elapsed = floor = 0.0
    rows = _rows_read(plan)
    for start in range(0, count, BLOCK):
        block = np.ascontiguousarray(random_used_oils(x, min(BLOCK, count - start), seed=start).T, dtype=dtype)
        t0 = time.perf_counter()
        measure_columns(plan, block)
        saturated_bands(plan, block, threshold)
        elapsed += time.perf_counter() - t0
        t0 = time.perf_counter()
        for piece in rows:
            block[piece].sum(axis=0)
        floor += time.perf_counter() - t0
    return elapsed, floor


def _rows_read(plan):
    """Disjoint row slices covering every grid row a band, a baseline window or a saturation window reads."""
    read = np.zeros(plan.x.size, dtype=bool)
    for columns, _ in plan.areas.values():
        read[columns] = True
    for window in list(plan.windows.values()) + list(plan.saturation.values()):
        read[window] = True
    for reach, _ in plan.peaks.values():  # a height band's region widened by its peak fit
        read[reach] = True
    for i, _ in plan.points.values():
        read[i : i + 2] = True
    edges = np.flatnonzero(np.diff(np.concatenate(([0], read.astype(np.int8), [0]))))
    return [slice(a, b) for a, b in zip(edges[::2], edges[1::2])]


def bench_matrix(count, x, bands):
    """Time measure_matrix on spectra as rows: includes the path scaling and the copy to wavenumber-major order."""
    elapsed = 0.0
    for start in range(0, count, BLOCK):
        rows = random_used_oils(x, min(BLOCK, count - start), seed=start)
        t0 = time.perf_counter()
        measure_matrix(x, rows, bands)
        elapsed += time.perf_counter() - t0
    return elapsed


def bench_loop(count, x, plan):
    """The same measures one spectrum at a time (the baseline the vectorised path replaces)."""
    block = random_used_oils(x, count, seed=1)
    t0 = time.perf_counter()
    for row in block:
        measure_block(plan, row[None, :])
    return time.perf_counter() - t0


def bench_parse(files):
    t0 = time.perf_counter()
    for path in files:
        read_jcampdx(path)
    return time.perf_counter() - t0


def bench_parse_many(files):
    t0 = time.perf_counter()
    results = read_jcampdx_many(files)
    elapsed = time.perf_counter() - t0
    assert all(not isinstance(r, Exception) for r in results)
    return elapsed


def repeated(reader, files, repeat):
    """Seconds of each of `repeat` runs: on a shared machine the best shows the code, the worst the load."""
    return sorted(reader(files) for _ in range(repeat))


def main():
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--sizes", type=int, nargs="+", default=[10_000, 100_000])
    parser.add_argument("--loop", type=int, default=2_000, help="spectra in the per-spectrum loop comparison")
    parser.add_argument("--files", type=int, default=2_000, help="JCAMP-DX files per form to parse")
    parser.add_argument("--repeat", type=int, default=3, help="parse runs per form; best and worst are printed")
    options = parser.parse_args()

    x = wavenumber_grid()
    bands = load_bands()
    plan = plan_bands(x, bands.bands)
    print(f"grid: {x.size} points, {len(bands.bands)} bands, blocks of {BLOCK}; "
          f"load average {' '.join(f'{v:.2f}' for v in os.getloadavg())} on {os.cpu_count()} CPUs")
    loop_seconds = bench_loop(options.loop, x, plan)
    loop_rate = options.loop / loop_seconds
    print(f"per-spectrum loop: {options.loop} spectra in {loop_seconds:.3f} s = {loop_rate:,.0f} spectra/s")
    for count in options.sizes:
        for dtype in (np.float64, np.float32):
            seconds, floor = bench_measures(count, x, plan, dtype, bands.saturation_absorbance)
            print(f"measure_columns + saturation {np.dtype(dtype).name}: {count} spectra in {seconds:.3f} s = "
                  f"{count / seconds:,.0f} spectra/s ({count / seconds / loop_rate:.0f}x the loop); "
                  f"floor (one sum over the rows read) {floor:.3f} s")
        seconds = bench_matrix(count, x, bands)
        print(f"measure_matrix from rows (scaling + reorder included): {count} spectra in {seconds:.3f} s = "
              f"{count / seconds:,.0f} spectra/s")

    with tempfile.TemporaryDirectory() as tmp:
        for form in ("AFFN", "SQZ", "DIFDUP"):
            distinct = 50
            texts = []
            for k in range(distinct):
                y = oil_spectrum(x, oxidation=k * 0.01, water=k * 0.005, noise=1e-4, seed=k)
                texts.append(write_jcampdx(Path(tmp) / f"seed_{form}_{k}.jdx", x[::-1], y[::-1], form=form).read_text())
            files = []
            for n in range(options.files):
                path = Path(tmp) / f"{form}_{n}.jdx"
                path.write_text(texts[n % distinct])
                files.append(path)
            bench_parse(files[:50])  # warm the file cache
            size = files[0].stat().st_size
            for label, reader in (("one at a time", bench_parse), ("read_jcampdx_many", bench_parse_many)):
                seconds = repeated(reader, files, options.repeat)
                print(f"parse {form} ({label}): {len(files)} files of {x.size} points (~{size // 1000} kB) "
                      f"in {seconds[0]:.3f} s = {len(files) / seconds[0]:,.0f} files/s "
                      f"(best of {len(seconds)}; worst {len(files) / seconds[-1]:,.0f} files/s)")
    print(f"load average after: {' '.join(f'{v:.2f}' for v in os.getloadavg())}")


if __name__ == "__main__":
    main()
