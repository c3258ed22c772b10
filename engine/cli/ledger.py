"""The ledger's part of the command line: --db on grade and explain, and `history` and `replay`.

cli.py keeps one short handler a command; the work is here and in ledger.py / audit.py.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from sumpwise.cli.options import iso_date
from sumpwise.render.safe_text import terminal_lines
from sumpwise.ledger.audit import explain_from_ledger, replay, replay_lines, unit_history, write_history
from sumpwise.vocabulary.cautions import caution_text
from sumpwise.results.pipeline import grade_batch
from sumpwise.ledger.store import DEFAULT_PATH, grade_into_ledger
from sumpwise.vocabulary.problems import InputError

FINDINGS = 3


def add_db_argument(parser: argparse.ArgumentParser, optional_value: bool) -> None:
    if optional_value:
        parser.add_argument("--db", metavar="PATH", nargs="?", const=DEFAULT_PATH,
                            help=f"record samples and results in this ledger (SQLite; --db alone: ./{DEFAULT_PATH})")
    else:
        parser.add_argument("--db", metavar="PATH", default=DEFAULT_PATH,
                            help=f"the ledger (default ./{DEFAULT_PATH})")


def add_grade_arguments(parser: argparse.ArgumentParser) -> None:
    add_db_argument(parser, optional_value=True)
    parser.add_argument("--correction", action="store_true",
                        help="with --db: record samples whose id is already in the ledger with other values as "
                             "corrections (both are kept; the new one is current)")


def add_history_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("unit_id", metavar="UNIT_ID")
    add_db_argument(parser, optional_value=False)
    parser.add_argument("--format", choices=("table", "csv", "jsonl"), default="table",
                        help="output format (default table)")


def add_replay_arguments(parser: argparse.ArgumentParser) -> None:
    add_db_argument(parser, optional_value=False)
    parser.add_argument("--since", metavar="DATE", type=iso_date, help="only samples taken on or after this ISO date")


def grade(args, batch, ruleset, stderr):
    """Grade the batch; with --db, after the ledger's earlier samples, and record it in one transaction."""
    if getattr(args, "db", None) is None:
        if getattr(args, "correction", False):
            raise InputError("--correction needs --db PATH: corrections are recorded in a ledger")
        return grade_batch(batch, ruleset)
    graded, recorded = grade_into_ledger(args.db, batch, ruleset, args.correction)
    where = f"batch {recorded.batch}" if recorded.batch is not None else "nothing new"
    stderr.write(f"sumpwise: ledger {args.db}: {where}: {recorded.new} new sample(s), {recorded.known} already "
                 f"recorded, {recorded.corrections} correction(s)\n")
    return graded


def run_explain(args, stdout) -> int:
    stdout.write("\n".join(terminal_lines(explain_from_ledger(args.db, args.sample_id))) + "\n")
    return 0


def run_history(args, stdout, stderr) -> int:
    write_history(unit_history(args.db, args.unit_id), args.unit_id, stdout, args.format)
    return 0


def run_replay(args, stdout, stderr) -> int:
    report = replay(args.db, args.since)
    stdout.write("\n".join(terminal_lines(replay_lines(report))) + "\n")
    if report.differences:
        stdout.write(caution_text("! ") + "\n")
    return FINDINGS if report.differences else 0


def grade_demo(out_dir: Path, batch, ruleset):
    """The demo's year of samples through a ledger in its out folder; a regenerated scenario is a correction."""
    path = out_dir / "brackwater.db"
    graded, _ = grade_into_ledger(path, batch, ruleset, correction=True)
    return graded, path
