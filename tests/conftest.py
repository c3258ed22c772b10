"""Shared test helpers: fixture paths and a way to run the real command line in-process."""

from __future__ import annotations

import io
import sys
from pathlib import Path

import pytest

DATA = Path(__file__).parent / "data"
ROOT = Path(__file__).parent.parent

sys.path.insert(0, str(Path(__file__).parent / "support"))  # the per-row oracle, synthetic spectra


class CliRun:
    def __init__(self, code: int, out: str, err: str):
        self.code, self.out, self.err = code, out, err


def run_cli(*argv, stdin: str = "") -> CliRun:
    from sumpwise.cli.main import main
    out, err = io.StringIO(), io.StringIO()
    code = main([str(a) for a in argv], io.StringIO(stdin), out, err)
    return CliRun(code, out.getvalue(), err.getvalue())


@pytest.fixture
def data() -> Path:
    return DATA
