"""`grade --jobs 2`: a second process renders records while the next chunk is graded.

The reference is `--jobs 1` (one process, in order): two processes must write the same bytes,
in the same order, whatever the chunk and block sizes, to a file and to a pipe; a failure
in either process must end the command with its exit code, never a hang or lost records.
"""

from __future__ import annotations

import errno
import json
import os
import signal
import subprocess
import sys

import pandas as pd
import pytest

from conftest import ROOT, run_cli
from random_samples import random_samples
from sumpwise.cli import record_output
from sumpwise.ruleset.compiler import load_ruleset

SITE = ROOT / "scenarios" / "brackwater" / "site.yaml"
SAMPLES = ROOT / "scenarios" / "brackwater" / "samples.csv"

pytestmark = pytest.mark.skipif(not record_output.two_processes_possible(),
                                reason="two processes need fork on Linux in a process without other threads")


@pytest.fixture
def small_blocks(monkeypatch):
    """Blocks of a few rows, so a 331-row file makes many blocks for the two processes to share."""
    monkeypatch.setattr(record_output, "BLOCK_ROWS", 7)
    monkeypatch.setattr(record_output, "HELD_ROWS", 20)
    forks = []
    handed = record_output._Handed

    class Counted(handed):
        def __init__(self, *args):
            forks.append(1)
            super().__init__(*args)
    monkeypatch.setattr(record_output, "_Handed", Counted)
    return forks


@pytest.mark.parametrize("form", ["compact", "full"])
@pytest.mark.parametrize("chunk", ["1000", "50", "13"])
def test_two_processes_write_the_bytes_one_writes(tmp_path, small_blocks, form, chunk):
    outputs = {}
    for jobs in ("1", "2"):
        target = tmp_path / f"{jobs}.jsonl"
        run = run_cli("grade", SAMPLES, "--rules", SITE, "--record", form, "--chunk-rows", chunk, "--jobs", jobs,
                      "--out", target)
        assert run.code == 0, run.err
        outputs[jobs] = (target.read_bytes(), run.err)
    assert outputs["2"] == outputs["1"]
    assert len(outputs["1"][0].splitlines()) == 327  # the demo's 326 graded and 1 unrated rows (README)
    assert len(small_blocks) == -(-331 // int(chunk))  # every chunk went through the two processes


def _failing_first_block(monkeypatch, fault, from_row: int = 0):
    """The renderer, but the first block (the forked process takes it) of a batch whose first
    sample is at file row `from_row` or later meets `fault` instead."""
    renderer = record_output.block_renderer

    def failing(graded, form):
        render = renderer(graded, form)

        def block(start, stop):
            if start == 0 and graded.columns.index[0] >= from_row:
                fault()
            return render(start, stop)
        return block
    monkeypatch.setattr(record_output, "block_renderer", failing)


def test_a_failure_in_a_middle_chunk_leaves_the_chunks_before_it_and_nothing_after(tmp_path, small_blocks,
                                                                                  monkeypatch):
    whole = tmp_path / "whole.jsonl"
    assert run_cli("grade", SAMPLES, "--rules", SITE, "--chunk-rows", "50", "--jobs", "1", "--out", whole).code == 0

    def fault():
        raise ValueError("a rendering fault")
    _failing_first_block(monkeypatch, fault, from_row=101)  # the third chunk of 50 rows
    out = tmp_path / "out.jsonl"
    run = run_cli("grade", SAMPLES, "--rules", SITE, "--chunk-rows", "50", "--jobs", "2", "--out", out)
    assert run.code == 1 and "a rendering fault" in run.err
    before = [line for line in whole.read_text(encoding="utf-8").splitlines()
              if json.loads(line)["origin"]["row"] <= 100]
    assert out.read_text(encoding="utf-8").splitlines() == before  # the first two chunks whole, then nothing


def test_a_failure_in_the_other_process_ends_the_command_as_a_bug(tmp_path, small_blocks, monkeypatch):
    def fault():
        raise ValueError("a rendering fault")
    _failing_first_block(monkeypatch, fault)
    run = run_cli("grade", SAMPLES, "--rules", SITE, "--jobs", "2", "--out", tmp_path / "out.jsonl")
    assert run.code == 1
    assert "internal error" in run.err and "a rendering fault" in run.err


def test_the_other_process_killed_ends_the_command_without_a_hang(tmp_path, small_blocks, monkeypatch):
    _failing_first_block(monkeypatch, lambda: os.kill(os.getpid(), signal.SIGKILL))
    run = run_cli("grade", SAMPLES, "--rules", SITE, "--jobs", "2", "--out", tmp_path / "out.jsonl")
    assert run.code == 1
    assert "ended by signal 9" in run.err


def test_a_full_disk_in_the_other_process_is_an_error_of_the_environment(tmp_path, small_blocks, monkeypatch):
    def fault():
        raise OSError(errno.ENOSPC, "No space left on device")
    _failing_first_block(monkeypatch, fault)
    run = run_cli("grade", SAMPLES, "--rules", SITE, "--jobs", "2", "--out", tmp_path / "out.jsonl")
    assert run.code == 2
    assert "No space left on device" in run.err and "internal error" not in run.err


def test_a_bad_later_chunk_leaves_the_earlier_chunks_written_as_one_process_does(tmp_path, small_blocks):
    text = SAMPLES.read_bytes()
    lines = text.split(b"\n")
    lines[300] += b"\xff"  # not UTF-8: the whole file is refused at that line (exit 2), in chunk 4
    bad = tmp_path / "bad.csv"
    bad.write_bytes(b"\n".join(lines))
    results = {}
    for jobs in ("1", "2"):
        target = tmp_path / f"{jobs}.jsonl"
        run = run_cli("grade", bad, "--rules", SITE, "--chunk-rows", "100", "--jobs", jobs, "--out", target)
        results[jobs] = (run.code, target.read_bytes())
    assert results["2"] == results["1"]
    assert results["1"][0] == 2 and len(results["1"][1].splitlines()) > 0  # refused at the bad byte, after 3 chunks


def _many_samples(tmp_path, n: int):
    ruleset = load_ruleset(SITE)
    path = tmp_path / "many.csv"
    frame = random_samples(ruleset, n, seed=5)
    frame["sampled_on"] = (pd.Timestamp("2026-01-01") + pd.to_timedelta(frame.index // 1000, unit="D")).strftime(
        "%Y-%m-%d")  # each unit's samples in date order, as a file graded in chunks must list them
    frame.to_csv(path, index=False)
    return path


def test_the_real_command_writes_the_same_bytes_to_a_pipe(tmp_path):
    path = _many_samples(tmp_path, 60_000)  # three chunks of 20,000 rows, each several blocks
    outputs = {}
    for jobs in ("1", "2"):
        done = subprocess.run([sys.executable, "-m", "sumpwise", "grade", str(path), "--rules", str(SITE),
                               "--record", "compact", "--chunk-rows", "20000", "--jobs", jobs],
                              capture_output=True, timeout=600)
        assert done.returncode == 0, done.stderr.decode()
        outputs[jobs] = done.stdout
    assert outputs["2"] == outputs["1"]
    assert outputs["1"].count(b"\n") > 50_000


@pytest.mark.parametrize("jobs", ["1", "2"])
def test_a_reader_that_stops_early_ends_the_command_without_a_traceback_and_says_so(tmp_path, jobs):
    """Exit 2, not 0 ("done"): the later chunks were never graded, so a --fail-at finding among
    them could not be seen; --summary says where the run stopped (before, it was not written)."""
    path = _many_samples(tmp_path, 60_000)
    summary = tmp_path / "summary.json"
    process = subprocess.Popen([sys.executable, "-m", "sumpwise", "grade", str(path), "--rules", str(SITE),
                                "--chunk-rows", "20000", "--jobs", jobs, "--summary", str(summary)],
                               stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    first = process.stdout.readline()
    process.stdout.close()  # like `| head -1`
    err = process.stderr.read()
    assert process.wait(timeout=600) == 2
    assert first.startswith(b'{"format"') and b"Traceback" not in err and b"internal error" not in err
    assert b"Exception ignored" not in err  # no complaint from the interpreter's own flush at exit
    assert b"standard output was closed by its reader" in err
    report = json.loads(summary.read_text())
    assert report["exit"] == 2 and "closed by its reader" in report["stopped"]
    assert report["total"]["read"] < 60_000


def test_jobs_takes_one_or_two():
    run = run_cli("grade", SAMPLES, "--rules", SITE, "--jobs", "3")
    assert run.code == 2 and "--jobs" in run.err
