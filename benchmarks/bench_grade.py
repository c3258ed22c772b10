"""Benchmark: grade synthetic samples end to end and print each figure beside its floor or target.

On N samples (default 1,000,000) against the shipped rules of all six classes: the stages
in one process (read CSV, derive + evaluate without and with forecasts, render compact and
full JSON Lines as UTF-8 bytes as `grade` writes them, the per-record API `graded.results()`,
and the per-row evaluator against derive + evaluate); then whole processes: the start-up
(imports), `sumpwise grade` to compact and to full records in one process and in two
(`--jobs 1`, `--jobs 2`), and the per-row peer script (peer_per_row.py: csv module + the
per-row oracle) on a smaller file, whose output must equal sumpwise's byte for byte. With
--chunked-rows M it also grades an M-row file in chunks and prints the peak memory of the
largest process and of all of them together. Linux only (/proc, os.wait4). Figures only:
nothing here is asserted.

    .venv/bin/python benchmarks/bench_grade.py [--rows N] [--peer-rows M] [--api-rows K] [--baseline-rows B]
                                               [--chunked-rows R [--chunk-rows C]]
"""

from __future__ import annotations

import argparse
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent
RULES = HERE / "all-classes.yaml"

from sumpwise.intake.samples import read_samples  # noqa: E402
from sumpwise.render.jsonl import jsonl_bytes, write_jsonl_bytes  # noqa: E402
from sumpwise.results.pipeline import grade_batch  # noqa: E402
from sumpwise.ruleset.compiler import load_ruleset  # noqa: E402

TARGETS = {"compact": 4.0, "full": 10.0}  # seconds per 1,000,000 samples, CSV in to JSON Lines out
PEER_RATIO = 5.0  # sumpwise grade at least this many times faster than the per-row peer, whole process
MEMORY_MB = 2048  # peak resident memory of a chunked 10,000,000-row grade


def peak_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


UNITS = 5000


def synthetic(ruleset, n: int, seed: int = 7, start: int = 0) -> pd.DataFrame:
    """Plausible-looking invented samples, rows start..start+n of the file: 5,000 units sampled in
    turn once a day, each keeping its class and its oil, the oil hours rising 20 h a day (a
    10,000,000-row file ends in 2025: a later date than a year ahead is refused as a slip).

    A unit's samples come in date order with hours the calendar holds and no change of oil, as
    a site's are: trends run from sample to sample (a lubricant code that changed, or hours
    rising faster than the days allow, would restart them with a caveat), and any chunking of
    the file keeps each unit's samples in order."""
    rng = np.random.default_rng(seed)
    classes = np.array(sorted(ruleset.classes))
    codes = np.array(sorted(ruleset.lubricants))
    numbers = np.arange(start, start + n)
    unit, day = numbers % UNITS, numbers // UNITS
    units = np.random.default_rng(7)  # the same units in every block of the file
    cls, lubricant = units.choice(classes, UNITS)[unit], units.choice(codes, UNITS)[unit]
    new_kv40 = np.array([ruleset.lubricants[c].kv40 or 46.0 for c in codes])[np.searchsorted(codes, lubricant)]
    new_an = np.array([ruleset.lubricants[c].an or 0.1 for c in codes])[np.searchsorted(codes, lubricant)]
    new_oxidation = np.array([ruleset.lubricants[c].oxidation or 1.0 for c in codes])[np.searchsorted(codes, lubricant)]
    frame = pd.DataFrame({
        "sample_id": np.char.add("S", np.arange(n).astype(str)),
        "unit_id": np.char.add("U", unit.astype(str)),
        "class": cls,
        "lubricant": lubricant,
        "sampled_on": (pd.Timestamp("2020-01-01") + pd.to_timedelta(day, unit="D")).strftime("%Y-%m-%d"),
        "oil_hours": (100 + 20 * day + rng.integers(0, 4, n)).astype(float),
        "kv40": (new_kv40 * rng.normal(1.0, 0.05, n)).round(2),
        "kv100": rng.uniform(5, 15, n).round(2),
        "an": (new_an + np.abs(rng.normal(0, 0.15, n))).round(2),
        "bn": rng.uniform(2, 12, n).round(1),
        "oxidation": (new_oxidation + rng.uniform(0, 40, n)).round(1),  # direct: the new oil's carbonyl and more
        "nitration": rng.uniform(0, 20, n).round(1),
        "water": np.abs(rng.normal(150, 150, n)).round(0),
        "rpvot": rng.uniform(100, 1200, n).round(0),
    })
    for column in ("kv100", "oxidation", "water", "rpvot", "bn", "oil_hours"):
        frame.loc[rng.random(n) < 0.05, column] = np.nan
    return frame


def write_csv(ruleset, n: int, path: Path, seed: int = 7, block: int = 1_000_000) -> Path:
    """The synthetic CSV, written a block at a time (a 10,000,000-row file never sits in memory)."""
    with open(path, "w", encoding="utf-8", newline="") as out:
        for start in range(0, n, block):
            frame = synthetic(ruleset, min(block, n - start), seed + start, start)
            frame["sample_id"] = np.char.add("S", np.arange(start, start + len(frame)).astype(str))
            frame.to_csv(out, index=False, header=start == 0)
    return path


def _tree(pid: int) -> list[int]:
    """The process and its descendants (Linux /proc)."""
    found, todo = [], [pid]
    while todo:
        here = todo.pop()
        found.append(here)
        try:
            with open(f"/proc/{here}/task/{here}/children") as handle:
                todo.extend(int(p) for p in handle.read().split())
        except OSError:
            pass
    return found


def _pss_mb(pids: list[int]) -> float:
    """Proportional set size of these processes together: a page two processes share counts half
    in each, so the sum is the memory the tree really holds (resident sizes would count it twice)."""
    total = 0
    for pid in pids:
        try:
            with open(f"/proc/{pid}/smaps_rollup") as handle:
                total += next(int(line.split()[1]) for line in handle if line.startswith("Pss:"))
        except (OSError, StopIteration):
            pass
    return total / 1024.0


def run(argv: list) -> tuple[float, float, float, float]:
    """Wall seconds, CPU seconds (the process and every process it waited for), the largest
    process's peak resident MB (measured by /usr/bin/time: the benchmark's own wait4 would count
    this process's pages copied at fork), and the peak of the whole tree's proportional set
    size, sampled every 20 ms (what `--jobs 2`'s two processes hold together)."""
    started = time.perf_counter()
    with tempfile.TemporaryFile() as said:
        process = subprocess.Popen(["/usr/bin/time", "-f", "%M", sys.executable] + [str(a) for a in argv],
                                   stdout=subprocess.DEVNULL, stderr=said)
        tree_peak = 0.0
        while True:
            tree_peak = max(tree_peak, _pss_mb(_tree(process.pid)))
            pid, status, usage = os.wait4(process.pid, os.WNOHANG)
            if pid:
                break
            time.sleep(0.02)
        seconds = time.perf_counter() - started
        process.returncode = os.waitstatus_to_exitcode(status)  # reaped here: Popen must not wait again
        said.seek(0)
        text = said.read().decode("utf-8", "replace")
    if process.returncode:
        raise subprocess.CalledProcessError(process.returncode, argv, stderr=text)
    return seconds, usage.ru_utime + usage.ru_stime, int(text.strip().splitlines()[-1]) / 1024.0, tree_peak


class Clock:
    """Wall and CPU time of a stage: on a shared machine the CPU time is the steadier figure."""

    def __init__(self):
        self.wall, self.cpu = time.perf_counter(), time.process_time()

    def lap(self) -> tuple[float, float]:
        wall, cpu = time.perf_counter() - self.wall, time.process_time() - self.cpu
        self.wall, self.cpu = time.perf_counter(), time.process_time()
        return wall, cpu


def row(name: str, times: tuple, n: int, note: str = "") -> None:
    wall, cpu = times
    scale = 1_000_000 / n
    print(f"{name:<40} wall {wall:>7.2f} s  cpu {cpu:>7.2f} s  per 1,000,000: wall {wall * scale:>7.2f} s, "
          f"cpu {cpu * scale:>7.2f} s  {note}")


def evaluator_baseline(ruleset, m: int) -> None:
    """The per-row oracle (tests/support/row_evaluator.py) against derive + evaluate on the same rows."""
    sys.path.insert(0, str(HERE.parent / "tests" / "support"))
    from row_evaluator import grade_row
    from sumpwise.derive.row_measures import derive_measures
    from sumpwise.evaluation.evaluator import evaluate
    small = synthetic(ruleset, m, seed=11)
    rows = small.to_dict("records")
    clock = Clock()
    for one in rows:
        grade_row(ruleset, one)
    loop = clock.lap()
    evaluate(ruleset, derive_measures(small, ruleset.lubricants))
    engine = clock.lap()
    row(f"per-row evaluator, {m:,} samples", loop, m)
    row(f"derive + evaluate, the same {m:,}", engine, m,
        f"{loop[0] / engine[0]:.0f} times faster (wall), {loop[1] / engine[1]:.0f} (CPU); target at least 100")


def main() -> None:
    sys.stdout.reconfigure(line_buffering=True)
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=1_000_000)
    parser.add_argument("--peer-rows", type=int, default=100_000)
    parser.add_argument("--api-rows", type=int, default=100_000)
    parser.add_argument("--baseline-rows", type=int, default=100_000)
    parser.add_argument("--chunked-rows", type=int, default=0, help="also grade this many rows in chunks")
    parser.add_argument("--chunk-rows", type=int, default=0,
                        help="the chunked grade's --chunk-rows (default: grade's)")
    args = parser.parse_args()

    ruleset = load_ruleset(RULES)
    rules = sum(len(ruleset.rules_for(c)) for c in ruleset.classes)
    with tempfile.TemporaryDirectory() as folder:
        folder = Path(folder)
        csv_path = write_csv(ruleset, args.rows, folder / "samples.csv")
        n = args.rows
        print(f"{n:,} samples, {len(ruleset.classes)} classes, {rules} rules in all ({len(ruleset.caveats)} "
              f"caveats); CSV {csv_path.stat().st_size / 1e6:.0f} MB; numpy {np.__version__}, pandas "
              f"{pd.__version__}, {os.cpu_count()} cores, load average {os.getloadavg()[0]:.1f}")

        print("\nin one process (stages):")
        clock = Clock()
        batch = read_samples(csv_path)
        row("read CSV and validate rows", clock.lap(), n)
        pd.read_csv(csv_path)
        row("floor: pandas.read_csv alone", clock.lap(), n)
        grade_batch(batch, ruleset, forecasts=False)
        row("derive, trends, evaluate, no forecasts", clock.lap(), n, "(what a grade read in chunks does)")
        graded = grade_batch(batch, ruleset)
        row("derive, trends, evaluate, forecasts", clock.lap(), n)
        sizes = {}
        for form in ("compact", "full"):
            target = folder / f"{form}.jsonl"
            clock = Clock()
            with open(target, "wb") as out:  # UTF-8 bytes, as `grade` writes them
                write_jsonl_bytes(graded, out, form)
            sizes[form] = target.stat().st_size
            row(f"render + write {form} JSON Lines", clock.lap(), n,
                f"{sizes[form] / 1e6:,.0f} MB, {sizes[form] / n:,.0f} bytes a sample")
            block = next(jsonl_bytes(graded, form=form))
            clock = Clock()
            with open(folder / "floor.jsonl", "wb") as out:
                for _ in range(max(1, round(sizes[form] / len(block)))):
                    out.write(block)
            row(f"floor: writing {sizes[form] / 1e6:,.0f} MB of ready text", clock.lap(), n)
            (folder / "floor.jsonl").unlink()
            target.unlink()
        evaluator_baseline(ruleset, min(args.baseline_rows, n))
        api = min(args.api_rows, n)
        values = graded.results()
        clock = Clock()
        for _ in range(api):
            next(values)
        row(f"graded.results(), first {api:,} records", clock.lap(), api)
        print(f"peak memory of this process so far: {peak_mb():,.0f} MB")
        del graded, batch, values

        print("\nwhole process, start-up (once a process, not scaled):")
        for name, code in (("import numpy and pandas (floor)", "import numpy, pandas"),
                           ("import sumpwise's command line", "import sumpwise.cli.main")):
            seconds, cpu = run(["-c", code])[:2]
            print(f"{name:<40} wall {seconds:>7.2f} s  cpu {cpu:>7.2f} s")
        print("\nwhole process, `sumpwise grade SAMPLES --rules all-classes.yaml --record FORM --jobs J --out ...`"
              "\n(peak: the largest process's resident peak; the two processes of --jobs 2 share pages, so their"
              "\ntogether is the peak of their summed proportional set sizes, sampled every 20 ms):")
        for form in ("compact", "full"):
            for jobs in ("1", "2"):
                seconds, cpu, peak, together = run(["-m", "sumpwise", "grade", csv_path, "--rules", RULES, "--record",
                                                    form, "--jobs", jobs, "--out", folder / f"{form}.jsonl"])
                verdict = "met" if seconds * 1_000_000 / n <= TARGETS[form] else "NOT met"
                row(f"--record {form} --jobs {jobs}", (seconds, cpu), n,
                    f"target {TARGETS[form]:.0f} s per 1,000,000 (wall): {verdict}; peak {peak:,.0f} MB, "
                    f"together {together:,.0f} MB")
                (folder / f"{form}.jsonl").unlink()

        m = args.peer_rows
        peer_csv = write_csv(ruleset, m, folder / "peer.csv", seed=11)
        ours = run(["-m", "sumpwise", "grade", peer_csv, "--rules", RULES, "--record", "compact",
                    "--out", folder / "ours.jsonl"])[:2]
        theirs = run([HERE / "peer_per_row.py", peer_csv, "--rules", RULES, "--out", folder / "peer.jsonl"])[:2]
        same = (folder / "ours.jsonl").read_bytes() == (folder / "peer.jsonl").read_bytes()
        print(f"\nper-row peer (peer_per_row.py) on {m:,} samples, whole process, compact records:")
        row("sumpwise grade --record compact", ours, m)
        row("peer_per_row.py", theirs, m, f"same bytes as sumpwise: {same}")
        ratio, cpu_ratio = theirs[0] / ours[0], theirs[1] / ours[1]
        print(f"sumpwise is {ratio:.1f} times faster by wall time, {cpu_ratio:.1f} by CPU time "
              f"(target at least {PEER_RATIO:.0f}: {'met' if ratio >= PEER_RATIO else 'NOT met'} by wall time)")

        if args.chunked_rows:
            big = write_csv(ruleset, args.chunked_rows, folder / "big.csv", seed=23)
            chunking = ["--chunk-rows", str(args.chunk_rows)] if args.chunk_rows else []
            print(f"\nchunked grade of {args.chunked_rows:,} samples ({big.stat().st_size / 1e9:.2f} GB CSV), "
                  f"compact records, --chunk-rows {args.chunk_rows or 'default'}:")
            seconds, cpu, peak, together = run(["-m", "sumpwise", "grade", big, "--rules", RULES, "--record", "compact",
                                                "--out", folder / "big.jsonl"] + chunking)
            lines = sum(1 for _ in open(folder / "big.jsonl", "rb"))
            row("sumpwise grade, chunked", (seconds, cpu), args.chunked_rows,
                f"peak {peak:,.0f} MB, together {together:,.0f} MB (target within {MEMORY_MB:,} MB: "
                f"{'met' if together <= MEMORY_MB else 'NOT met'}); {lines:,} records")
    print(f"\nload average at the end: {os.getloadavg()[0]:.1f}")


if __name__ == "__main__":
    main()
