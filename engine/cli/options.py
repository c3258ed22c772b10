"""Option value types shared by the commands: each refuses a bad value while the command line is read.

argparse turns an ArgumentTypeError into a usage error (exit 2) naming the option, so a
bad value stops the command before any input is read or any ledger is written.
"""

from __future__ import annotations

import argparse
import datetime as dt
import os
import re
from pathlib import Path

from sumpwise.intake.spectra.batch import check_path_length
from sumpwise.vocabulary.problems import InputError


def positive_mm(text: str) -> float:
    """A cell path length in mm, by the spectra reader's own rule (finite, above 0, at most 10)."""
    try:
        return check_path_length(text, "path length")
    except ValueError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None


def _whole_number(text: str, what: str, minimum: int) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected {what}, found {text!r}") from None
    if value < minimum:
        raise argparse.ArgumentTypeError(f"expected {what} of at least {minimum}, found {text!r}")
    return value


def batch_number(text: str) -> int:
    """A ledger batch number: a whole number from 1."""
    return _whole_number(text, "a batch number (1, 2, ...)", 1)


def row_count(text: str) -> int:
    """A number of rows a chunk holds: a whole number from 1."""
    return _whole_number(text, "a whole number of rows", 1)


def reject_count(text: str) -> int:
    """How many rejected rows a run may have: a whole number from 0."""
    return _whole_number(text, "a whole number of rows", 0)


def iso_date(text: str) -> str:
    """A calendar date written YYYY-MM-DD; kept as text, the form the ledger compares."""
    try:
        if not re.fullmatch(r"\d{4}-\d{2}-\d{2}", text):
            raise ValueError
        dt.date.fromisoformat(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a calendar date YYYY-MM-DD, found {text!r}") from None
    return text


def output_file(text: str) -> str:
    """A file the command may create or replace: not a folder, in a folder that exists."""
    if not text or "\x00" in text:
        raise argparse.ArgumentTypeError(f"expected a file name, found {text!r}")
    path = Path(text)
    try:
        if path.is_dir():
            raise argparse.ArgumentTypeError(f"{text} is a folder; name a file to write")
        parent = path.parent
        if not parent.is_dir():
            raise argparse.ArgumentTypeError(f"cannot write {text}: the folder {parent} does not exist")
    except OSError as exc:  # a name too long for the file system
        raise argparse.ArgumentTypeError(f"cannot write {text[:80]}: {exc.strerror}") from None
    return text


def output_folder(text: str) -> str:
    """A folder the command may create: not an existing file."""
    if not text or "\x00" in text:
        raise argparse.ArgumentTypeError(f"expected a folder name, found {text!r}")
    try:
        if Path(text).exists() and not Path(text).is_dir():
            raise argparse.ArgumentTypeError(f"{text} is a file; name a folder")
    except OSError as exc:
        raise argparse.ArgumentTypeError(f"cannot use {text[:80]}: {exc.strerror}") from None
    return text


def _same_file(a, b) -> bool:
    """Two names of one regular file: the same inode when both exist (links, `./x`), else the same
    real path. A device or pipe (/dev/null) is no file that writing empties."""
    try:
        if os.path.exists(a) and os.path.exists(b):
            return os.path.isfile(a) and os.path.samefile(a, b)
    except OSError:
        pass
    return os.path.realpath(a) == os.path.realpath(b)


def refuse_overwriting(outputs, inputs) -> None:
    """Stop before any file is opened for writing when it is one the command reads, or another it
    writes: opening it empties it, so the samples, the rule set or a whole ledger would be lost.

    `outputs` and `inputs`: (what, path) pairs, e.g. ("--out", "x.jsonl"), ("the ledger --db", "l.db");
    a None path is skipped, and so is "-" (a standard stream)."""
    outputs = [(what, str(path)) for what, path in outputs if path is not None and str(path) != "-"]
    inputs = [(what, str(path)) for what, path in inputs if path is not None and str(path) != "-"]
    for k, (what, path) in enumerate(outputs):
        for other, read in inputs + outputs[:k]:
            if _same_file(path, read):
                raise InputError(f"{what} {path} is the same file as {other} {read}: writing it would first "
                                 f"empty it; name another file to write")
