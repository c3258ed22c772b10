"""The ledger's part of the command line: --db on grade and explain, and `history`, `replay`,
`rulesets` and `find`.

main.py keeps one short handler a command; the work is here and in ledger/store.py and audit.py.
"""

from __future__ import annotations

import argparse
import getpass
import json
from pathlib import Path

from sumpwise.cli.exit_codes import FINDINGS, OK
from sumpwise.cli.options import iso_date, refuse_overwriting
from sumpwise.ledger.audit import (explain_from_ledger, find_samples, ledger_rulesets, recorded_rejects, replay,
                                   replay_lines, stored_ruleset, stored_ruleset_text, unit_forecasts, unit_history,
                                   write_history)
from sumpwise.ledger.store import DEFAULT_PATH, Correction, SchemaMismatch, grade_into_ledger
from sumpwise.render.safe_text import spreadsheet_frame, terminal_lines
from sumpwise.results.pipeline import grade_batch
from sumpwise.ruleset.compiler import load_ruleset
from sumpwise.vocabulary.cautions import caution_text
from sumpwise.vocabulary.problems import InputError



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
                             "corrections (both are kept; the new one is current); needs --reason")
    parser.add_argument("--reason", metavar="TEXT", help="with --correction: why the recorded values were wrong")
    parser.add_argument("--author", metavar="NAME",
                        help="with --correction: who makes the correction (default: the login name)")
    parser.add_argument("--same-version", action="store_true",
                        help="with --db: record a rule set although its id and version are already recorded "
                             "with other content (normally refused: raise the version instead)")


def add_history_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("unit_id", metavar="UNIT_ID")
    add_db_argument(parser, optional_value=False)
    parser.add_argument("--format", choices=("table", "csv", "jsonl"), default="table",
                        help="output format (default table)")


def add_replay_arguments(parser: argparse.ArgumentParser) -> None:
    add_db_argument(parser, optional_value=False)
    parser.add_argument("--since", metavar="DATE", type=iso_date, help="only samples taken on or after this ISO date")
    parser.add_argument("--strict", action="store_true",
                        help="also fail (exit 3) when today's engine grades a sample otherwise than the older "
                             "engine that recorded it (an engine change; listed either way)")
    parser.add_argument("--head", metavar="BATCH:DIGEST", type=_head,
                        help="the head an earlier replay printed: a different digest for that batch, or the batch "
                             "gone, is a finding (a chain recomputed after an alteration)")


def _head(text: str) -> tuple[int, str]:
    batch, _, digest = text.partition(":")
    digest = digest.strip().lower()
    if not batch.strip().isdigit() or len(digest) != 64 or any(c not in "0123456789abcdef" for c in digest):
        raise argparse.ArgumentTypeError(f"expected BATCH:DIGEST as replay prints it (a batch number, a colon and "
                                         f"64 hex digits), found '{text}'")
    return int(batch), digest


def add_rulesets_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("ruleset", metavar="FINGERPRINT|ID@VERSION", nargs="?",
                        help="print this stored rule set as a one-file rule set (check and compare read it)")
    add_db_argument(parser, optional_value=False)
    parser.add_argument("--out", metavar="PATH", help="write the rule set to this file instead")


def add_find_arguments(parser: argparse.ArgumentParser) -> None:
    add_db_argument(parser, optional_value=False)
    parser.add_argument("--rule", metavar="RULE_ID", help="samples on which this rule fired")
    parser.add_argument("--grade", metavar="GRADE", action="append",
                        help="samples graded exactly this (repeatable)")
    parser.add_argument("--at-least", metavar="LEVEL", type=int, help="samples at this ladder level or higher")
    parser.add_argument("--unit", metavar="UNIT_ID", help="samples of this unit")
    parser.add_argument("--since", metavar="DATE", type=iso_date, help="sampled on or after this ISO date")
    parser.add_argument("--until", metavar="DATE", type=iso_date, help="sampled on or before this ISO date")
    parser.add_argument("--ruleset", metavar="FINGERPRINT", help="graded under this rule set (a prefix will do)")
    parser.add_argument("--version", metavar="VERSION", dest="ruleset_version",
                        help="graded under this rule-set version")
    parser.add_argument("--all-versions", action="store_true",
                        help="include versions of samples that were later corrected")
    parser.add_argument("--rejects", action="store_true", help="list the recorded rejected rows instead")
    parser.add_argument("--format", choices=("table", "csv", "jsonl"), default="table")


def grade(args, batch, ruleset, stderr):
    """Grade the batch; with --db, after the ledger's earlier samples, and record it in one transaction.

    Returns the graded batch, whether rows were refused for conflicting with recorded samples,
    warnings, and the levels recorded samples dated after the new ones would now grade at
    (Recorded.regraded), for --fail-at.
    """
    if getattr(args, "db", None) is None:
        if getattr(args, "correction", False) or getattr(args, "reason", None):
            raise InputError("--correction needs --db PATH: corrections are recorded in a ledger")
        return grade_batch(batch, ruleset), False, [], []
    correction = None
    if args.correction:
        if not args.reason or not args.reason.strip():
            raise InputError("--correction needs --reason TEXT: the ledger keeps why recorded values were replaced")
        correction = Correction(args.reason.strip(), (args.author or getpass.getuser()).strip())
    elif args.reason or args.author:
        raise InputError("--reason and --author go with --correction")
    graded, recorded = grade_into_ledger(args.db, batch, ruleset, correction, args.same_version)
    where = f"batch {recorded.batch}" if recorded.batch is not None else "nothing new"
    stderr.write(f"sumpwise: ledger {args.db}: {where}: {recorded.new} new sample(s), {recorded.known} already "
                 f"recorded, {recorded.corrections} correction(s)\n")
    if recorded.head:
        stderr.write(f"sumpwise: ledger {args.db}: head {recorded.head} (keep it elsewhere: `sumpwise replay --head "
                     f"{recorded.head}` shows the batches up to it removed or rewritten)\n")
    if recorded.conflicts:
        stderr.write(f"sumpwise: ledger {args.db}: {recorded.conflicts} row(s) rejected: their sample id is already "
                     f"recorded with other values (the rejects name the batch; if the new values are right, grade "
                     f"those rows again with --correction --reason TEXT); the other rows were graded and recorded\n")
    return graded, recorded.conflicts > 0, _regraded_warnings(args.db, recorded, ruleset.grades), \
        [after for *_, after in recorded.regraded]


SHOWN_REGRADED = 5  # samples named in the warning; the count says how many in all


def _regraded_warnings(db, recorded, grades: tuple) -> list[str]:
    """Recorded samples a late result changes: their verdicts stand, but a pipeline must know."""
    if not recorded.regraded:
        return []
    names = list(grades) + ["unrated"]
    shown = "; ".join(f"{sid} (unit {unit}): {names[before]} as graded without them, {names[after]} with them"
                      for sid, unit, before, after in recorded.regraded[:SHOWN_REGRADED])
    more = f"; and {len(recorded.regraded) - SHOWN_REGRADED} more" if len(recorded.regraded) > SHOWN_REGRADED else ""
    return [f"ledger {db}: batch {recorded.batch} recorded samples dated before {len(recorded.regraded)} recorded "
            f"sample(s) of their units whose trends were graded without them, and would now grade otherwise: "
            f"{shown}{more}. Their recorded verdicts stand, as recorded (replay grades each batch after what the "
            f"ledger held then); look at these units again"]


def _other_ruleset(db, rules: str | None):
    """--rules with explain --db: a rule-set file, or a stored rule set by fingerprint or ID@VERSION."""
    if rules is None:
        return None
    if Path(rules).exists():
        return load_ruleset(rules)
    return stored_ruleset(db, rules.removeprefix("sha256:"))  # compare's spelling of a stored rule set


def run_explain(args, stdout) -> int:
    other = _other_ruleset(args.db, args.rules)
    stdout.write("\n".join(terminal_lines(explain_from_ledger(args.db, args.sample_id, other))) + "\n")
    return OK


def run_history(args, stdout, stderr) -> int:
    unit = unit_history(args.db, args.unit_id)
    ruleset, forecasts = None, ()
    if args.format == "table":
        ruleset, forecasts = unit_forecasts(args.db, args.unit_id)
    write_history(unit, args.unit_id, stdout, args.format, forecasts, ruleset)
    return OK


def run_replay(args, stdout, stderr) -> int:
    """Exit 3 on any integrity finding or re-grade the recording engine does not reproduce; engine
    changes (an older engine recorded otherwise) are listed and fail only with --strict."""
    try:
        report = replay(args.db, args.since, args.head)
    except SchemaMismatch as exc:  # the header rewritten: a finding about the file, as the chain's are
        stdout.write("\n".join(terminal_lines([f"integrity: ledger: {exc}", "integrity: 1 finding(s): the ledger "
                                                "cannot be replayed until its header says what its tables are"]))
                     + "\n")
        return FINDINGS
    stdout.write("\n".join(terminal_lines(replay_lines(report, args.strict))) + "\n")
    if report.differences or report.engine_changes:
        stdout.write(caution_text("! ") + "\n")
    return FINDINGS if report.failed(args.strict) else OK


def run_rulesets(args, stdout, stderr) -> int:
    if args.ruleset is None:
        if args.out:
            raise InputError("sumpwise rulesets: --out needs a FINGERPRINT or ID@VERSION")
        stdout.write(f"{'sha256':<16}  {'id':<24} {'version':>8} {'batches':>8} {'samples':>8} {'current':>8}  "
                     f"first recorded\n")
        lines = [f"{r['sha256'][:16]}  {r['id']:<24} {r['version']:>8} {r['batches']:>8} {r['samples']:>8} "
                 f"{r['current']:>8}  {r['first'] or '-'}" for r in ledger_rulesets(args.db)]
        stdout.write("".join(line + "\n" for line in terminal_lines(lines)))
        return OK
    refuse_overwriting([("--out", args.out)], [("the ledger --db", args.db)])
    sha, canonical = stored_ruleset_text(args.db, args.ruleset)
    text = json.dumps(json.loads(canonical), indent=1, ensure_ascii=False) + "\n"  # one value a line: loadable
    if args.out:
        Path(args.out).write_text(text, encoding="utf-8")
        stderr.write(f"sumpwise: rule set {sha} written to {args.out}\n")
    else:
        stdout.write(text)
    return OK


def run_find(args, stdout, stderr) -> int:
    if args.since and args.until and args.since > args.until:
        raise InputError(f"find: --since {args.since} is after --until {args.until}: no date is both")
    if args.rejects:
        found = recorded_rejects(args.db)
    else:
        found = find_samples(args.db, rule=args.rule, grade_at_least=args.at_least, grades=args.grade,
                             unit=args.unit, since=args.since, until=args.until,
                             ruleset=args.ruleset, version=args.ruleset_version, everything=args.all_versions)
        found = found.drop(columns=["level", "superseded_in"] if not args.all_versions else ["level"])
    if args.format == "csv":
        spreadsheet_frame(found).to_csv(stdout, index=False, lineterminator="\n")
    elif args.format == "jsonl":
        stdout.write(found.to_json(orient="records", lines=True, force_ascii=False))
    else:
        shown = found if args.rejects else found.drop(columns=["correction_author", "correction_reason"])
        shown = shown.astype(object).where(shown.notna(), "")  # a missing id or batch is blank, not NaN
        stdout.write("\n".join(terminal_lines(shown.to_string(index=False).splitlines())) + "\n" if len(found) else "")
        stdout.write(f"{len(found)} {'rejected row' if args.rejects else 'sample'}(s)\n")
        if not args.rejects:  # a list of grades is read by people: who corrected what, and the cautions
            stdout.write("".join(line + "\n" for line in terminal_lines(_correction_notes(found))))
            stdout.write(caution_text("! ") + "\n")
    return OK


def _correction_notes(found) -> list[str]:
    """Under the find table: each listed correction, whose version it replaced, by whom and why."""
    corrections = found[found["corrects_batch"].notna()]
    return [f"{row.sample_id} (batch {row.batch}) is a correction of the version batch {row.corrects_batch} recorded, "
            f"by {row.correction_author}: {row.correction_reason}" for row in corrections.itertuples()]


def grade_demo(out_dir: Path, batch, ruleset):
    """The demo's year of samples through a ledger in its out folder; a regenerated scenario is a correction,
    and the shipped site rule set may have changed under its version with the engine (a demo, not a site)."""
    path = out_dir / "brackwater.db"
    graded, _ = grade_into_ledger(path, batch, ruleset, Correction("the demo scenario was generated again", "demo"),
                                  reuse_version=True)
    return graded, path
