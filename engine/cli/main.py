"""The `sumpwise` command: a thin layer over the Python API.

Exit codes keep findings apart from failures, so a pipeline can tell them apart (exit_codes.py).
"""

from __future__ import annotations

import argparse
import codecs
import contextlib
import difflib
import io
import csv
import json
import os
import sys
import traceback
from collections import Counter
from pathlib import Path

from sumpwise.version import __version__
from sumpwise.cli import authoring as authoring_cli
from sumpwise.vocabulary.cautions import CAUTIONS, caution_text
from sumpwise.ruleset.compiler import load_ruleset
from sumpwise.render.narrative import explain_lines
from sumpwise.results.pipeline import grade_batch, grade_in_chunks
from sumpwise.intake.chunked import sample_chunks
from sumpwise.vocabulary.problems import InputError, InvalidFile
from sumpwise.render.jsonl import dumps, write_jsonl
from sumpwise.render.table import FIRST_CAVEATS
from sumpwise.results.facts import ENGINE_CAVEATS
from sumpwise.results.records import FORMS, FULL
from sumpwise.render.safe_text import reject_line, spreadsheet_text, terminal_text
from sumpwise.intake.samples import load_column_map, read_samples
from sumpwise.results.records import UNRATED
from sumpwise.cli import spectra as spectra_command
from sumpwise.intake.sample_spectra import measure_sample_spectra, parse_references, reference_files
from sumpwise.cli import ledger as ledger_cli
from sumpwise.ledger.store import LedgerError
from sumpwise.cli import report as report_command
from sumpwise.cli.exit_codes import FINDINGS, INTERNAL, OK, USAGE
from sumpwise.cli.record_output import RecordOutput, default_jobs
from sumpwise.cli.repeated_ids import RepeatedIds
from sumpwise.cli.options import output_file, output_folder, positive_mm, refuse_overwriting, reject_count, row_count

CHUNK_ROWS = 200_000  # rows `grade` reads, grades and writes at a time: about 1 GB at most (README: large files)

SCENARIO = Path(__file__).resolve().parents[2] / "scenarios" / "brackwater"


class UsageError(Exception):
    pass


class _Parser(argparse.ArgumentParser):
    """argparse that writes to the streams it is given and raises instead of exiting."""

    def __init__(self, *args, out=None, **kwargs):
        super().__init__(*args, **kwargs)
        self.out = out

    def _print_message(self, message, file=None):
        if message:
            (self.out or sys.stdout).write(message)

    def exit(self, status=0, message=None):
        if message:
            raise UsageError(message.strip())
        raise _Exit(status)

    def error(self, message):
        raise UsageError(f"{self.prog}: {message}")


class _Exit(Exception):
    def __init__(self, status):
        self.status = status


def _parser(stdout) -> _Parser:
    parser = _Parser(prog="sumpwise", out=stdout,
                     description="Grade in-service lubricating oil samples against a site's YAML limits.",
                     epilog="Exit codes: 0 done, 1 internal fault, 2 usage or input error, 3 findings "
                            "(--fail-at reached). " + " ".join(CAUTIONS))
    parser.add_argument("--version", action="version", version=f"sumpwise {__version__}")
    commands = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    commands.required = True

    check = commands.add_parser("check", help="validate rule sets (exit 0 valid, 2 invalid)", out=stdout,
                                description="Validate rule-set files: schema, names, ladders, sources.")
    check.add_argument("rulesets", nargs="+", metavar="RULESET")
    check.add_argument("--strict", action="store_true", help="treat lint warnings as errors (exit 2)")

    grade = commands.add_parser("grade", help="grade samples against a rule set", out=stdout,
                                description="Grade every sample; every row read ends up graded, unrated or "
                                            "rejected, and the counts go to standard error.")
    grade.add_argument("samples", metavar="SAMPLES", nargs="+",
                       help="CSV, JSON Lines or .xlsx files or folders of them, or - for standard input; "
                            "each file is graded on its own, its rows keep their file and row")
    _common_inputs(grade)
    grade.add_argument("--format", choices=("jsonl", "csv", "table"), default="jsonl",
                       help="output format (default jsonl)")
    grade.add_argument("--record", choices=FORMS, default=FULL,
                       help="JSON Lines record form: full (default; self-contained, every message, source and "
                            "the notice) or compact (every fact; texts by reference to the rule set it names)")
    grade.add_argument("--chunk-rows", type=row_count, default=CHUNK_ROWS, metavar="N",
                       help=f"read, grade and write the samples N rows at a time, so memory stays bounded "
                            f"(default {CHUNK_ROWS:,}; not with --db or --format table, which take the whole file)")
    grade.add_argument("--out", metavar="PATH", type=output_file,
                       help="write results here instead of standard output")
    grade.add_argument("--jobs", type=int, choices=(1, 2), default=default_jobs(),
                       help="processes that write JSON Lines records: 2 renders a chunk's records while the next "
                            "chunk is graded, the same bytes as 1 (default: 2 on two cores or more; on Linux only, "
                            "elsewhere one process writes)")
    grade.add_argument("--rejects", metavar="PATH", type=output_file,
                       help="write rejected rows here (.csv for CSV, else JSON Lines); default: standard error")
    grade.add_argument("--fail-at", metavar="GRADE", action="append", default=[],
                       help="exit 3 when any sample reaches this grade or higher; `unrated`: when any sample "
                            "is unrated (repeatable)")
    grade.add_argument("--fail-on-caveat", metavar="CAVEAT", action="append", default=[],
                       help="exit 3 when any sample carries this caveat, e.g. unknown-lubricant: a sample graded "
                            "on less than it should can still grade normal (repeatable)")
    grade.add_argument("--max-rejects", metavar="N", type=reject_count,
                       help="exit 2 when more than N rows in all are rejected (results are still written)")
    grade.add_argument("--summary", metavar="FILE", type=output_file,
                       help="write the run's counts per file and in total, notes, warnings and what decided the "
                            "exit code (findings, failed files, where the run stopped) as JSON")
    authoring_cli.add_example_guard(grade)
    ledger_cli.add_grade_arguments(grade)

    explain = commands.add_parser("explain", help="tell the story of one sample's grade", out=stdout,
                                  description="Explain one sample's grade in sentences: from a ledger "
                                              "(--db), or by grading --samples with --rules.")
    explain.add_argument("sample_id", metavar="SAMPLE_ID")
    explain.add_argument("--samples", metavar="SAMPLES")
    _common_inputs(explain, rules_required=False)
    explain.add_argument("--db", metavar="PATH", help="explain the verdict recorded in this ledger")

    demo = commands.add_parser("demo", help="grade the shipped Brackwater Point scenario", out=stdout,
                               description="Grade the invented Brackwater Point scenario and print counts.")
    demo.add_argument("--out", metavar="DIR", default="out", type=output_folder,
                      help="folder for the results (default ./out)")

    spectra = commands.add_parser("spectra", help="compute FTIR measures from spectra files", out=stdout,
                                  description="Read JCAMP-DX or CSV spectra and write band measures as CSV.")
    spectra_command.add_arguments(spectra)

    compare = commands.add_parser("compare", help="preview a rule-set change on samples (exit 3 if any moves)",
                                  out=stdout, description="Grade the same samples under two rule sets and report "
                                                          "which samples move between grades and why.")
    authoring_cli.add_compare_arguments(compare)

    propose = commands.add_parser("propose-limits", help="propose ladder limits from the site's own results",
                                  out=stdout, description="Propose a ladder for one measure of one class from the "
                                                          "site's results (ASTM D7720 approach) as a YAML snippet.")
    authoring_cli.add_propose_arguments(propose)

    report = commands.add_parser("report", help="write one self-contained HTML report of graded results",
                                 out=stdout, description="Write one HTML file (no scripts, fonts or links) with "
                                                         "the batch summary, units by attention, trend plots "
                                                         "and every flagged sample's reasons.")
    report_command.add_arguments(report)

    history = commands.add_parser("history", help="a unit's samples and grades over time, from the ledger",
                                  out=stdout, description="Show one unit's recorded samples and grades in "
                                                          "date order (table, CSV or JSON Lines).")
    ledger_cli.add_history_arguments(history)

    replay = commands.add_parser("replay", help="verify the ledger: digests, stored values, every verdict re-graded",
                                 out=stdout, description="Check the batches' digest chain and stored values, and "
                                                         "re-grade every recorded sample with the rule set it was "
                                                         "graded with; exit 3 on any finding.")
    ledger_cli.add_replay_arguments(replay)

    rulesets = commands.add_parser("rulesets", help="list the ledger's rule sets, or print one as a rule-set file",
                                   out=stdout, description="List the rule sets a ledger recorded, or write one "
                                                           "(by fingerprint or ID@VERSION) as a one-file rule set.")
    ledger_cli.add_rulesets_arguments(rulesets)

    find = commands.add_parser("find", help="list recorded samples by rule fired, grade, unit, dates, rule set",
                               out=stdout, description="List the ledger's samples that match every filter given "
                                                       "(or its recorded rejected rows).")
    ledger_cli.add_find_arguments(find)
    return parser


def _common_inputs(parser: argparse.ArgumentParser, rules_required: bool = True) -> None:
    parser.add_argument("--rules", required=rules_required, metavar="RULESET", help="the rule-set YAML file")
    parser.add_argument("--columns", metavar="MAP", help="column map YAML: lab column names and units")
    parser.add_argument("--input-format", choices=("csv", "jsonl", "xlsx"),
                        help="format of SAMPLES (default: from its name; csv for standard input)")
    parser.add_argument("--reference", action="append", metavar="LUBRICANT=FILE", default=[],
                        help="new-oil reference spectrum of a lubricant: samples of it with a `spectrum` "
                             "are read by spectral subtraction (repeatable; wins over the rule set's)")
    parser.add_argument("--path-length", type=positive_mm, default=0.1, metavar="MM",
                        help="FTIR cell path length of the spectra, mm (default 0.100)")


def main(argv=None, stdin=None, stdout=None, stderr=None) -> int:
    """Run one command; streams are arguments so tests need no patching."""
    stdin = stdin or sys.stdin
    stdout = stdout or sys.stdout
    stderr = stderr or sys.stderr
    try:
        args = _parser(stdout).parse_args(argv)
        return _COMMANDS[args.command](args, stdin, stdout, stderr)
    except _Exit as done:
        return done.status
    except UsageError as exc:
        stderr.write(_safe_lines(str(exc)))
        return USAGE
    except InvalidFile as exc:
        stderr.write(_safe_lines(str(exc)))
        stderr.write(f"sumpwise: {len(exc.problems)} problem(s); nothing was graded\n")
        return USAGE
    except InputError as exc:
        stderr.write(_safe_lines(f"sumpwise: {exc}"))
        return USAGE
    except BrokenPipeError:
        return OK
    except OSError as exc:  # a file that cannot be opened, read or written: the environment, not a bug
        where = f" {exc.filename}" if exc.filename else ""
        stderr.write(_safe_lines(f"sumpwise: cannot use{where}: {exc.strerror or exc}"))
        return USAGE
    except Exception as exc:  # a bug: say so plainly, and keep it apart from findings
        stderr.write(f"sumpwise: internal error (a bug, please report it): {exc!r}\n")
        traceback.print_exc(file=stderr)
        return INTERNAL


def _safe_lines(text: str) -> str:
    """A message for standard error: its lines kept, input text in it escaped for the terminal."""
    return "\n".join(terminal_text(line) for line in text.split("\n")) + "\n"


def _check(args, stdin, stdout, stderr) -> int:
    return authoring_cli.run_check(args.rulesets, args.strict, stdout, stderr)


def _rules_and_map(args):
    ruleset = load_ruleset(args.rules)
    extra = tuple(ruleset.measures) + tuple(ruleset.fields)
    columns = load_column_map(args.columns, extra, ruleset.measures) if args.columns else None
    return ruleset, columns


def _read_one(args, stdin, source, ruleset, columns):
    if source == "-":
        batch = read_samples(stdin, "<stdin>", columns, args.input_format or "csv", ruleset.measures)
    else:
        batch = read_samples(source, None, columns, args.input_format, ruleset.measures)
    return measure_sample_spectra(batch, ruleset, parse_references(args.reference), args.path_length)


def _read(args, stdin):
    ruleset, columns = _rules_and_map(args)
    return ruleset, _read_one(args, stdin, args.samples, ruleset, columns)


INPUT_SUFFIXES = (".csv", ".jsonl", ".ndjson", ".json", ".xlsx", ".txt")


# Files a folder may hold beside a lab's export that are not one: another program's companion of
# a file, named after it. Left out of a folder's files with a note and in --summary's `skipped`.
COMPANION_FILES = (("._", "a resource-fork companion of the file beside it, as some file-sharing clients leave"),
                   ("~$", "an office program's owner file, there while someone has the workbook open"))


def _sources(items, skipped: list) -> list:
    """Files in the order given; a folder gives its sample files in name order, every entry with a
    samples name but a folder's: a link to a missing file or a pipe is one of the run's files that
    cannot be read (_unreadable), never left out without a word. A companion file (COMPANION_FILES)
    is left out and added to `skipped` as {"file", "why"}, so it never fails the night's run."""
    found = []
    for item in items:
        path = Path(item)
        if item != "-" and path.is_dir():
            inside = sorted(p for p in path.iterdir() if not p.is_dir() and p.suffix.lower() in INPUT_SUFFIXES)
            for p in list(inside):
                why = next((why for start, why in COMPANION_FILES if p.name.startswith(start)), None)
                if why is not None:
                    skipped.append({"file": str(p), "why": why})
                    inside.remove(p)
            found.extend(str(p) for p in inside)
            if not inside:  # one of the run's inputs that fails (_unreadable); the other inputs are graded
                found.append(item)
        else:
            found.append(item)
    if found.count("-") > 1:
        raise UsageError("sumpwise grade: standard input (-) can be read once")
    return found


def _unreadable(source: str, listed: bool) -> None:
    """Refuse a folder's entry that is no regular file before it is opened: a link to a missing file
    (a share not mounted, a transfer not landed), or a pipe or device, whose read could wait forever;
    and a folder given that holds no samples file (tonight's lab sent nothing)."""
    path = Path(source)
    if source != "-" and path.is_dir():
        raise InputError(f"{source}: the folder holds no samples file ({', '.join(INPUT_SUFFIXES)})")
    if not listed or path.is_file():
        return
    if path.is_symlink() and not path.exists():
        raise InputError(f"{source}: a link to {os.readlink(path)}, which does not exist: nothing read")
    raise InputError(f"{source}: not a regular file (a pipe, socket or device): not read")


def _write_rejects(batch, path, stderr) -> None:
    """Rejected rows to standard error, or to a file (.csv or JSON Lines)."""
    if path is None:
        _put_rejects(batch, stderr, None)
        return
    with open(path, "w", encoding="utf-8", newline="") as out:
        _put_rejects(batch, out, str(path), header=True)


def _put_rejects(batch, out, path: str | None, header: bool = False) -> None:
    """Rejected rows: as CSV for a .csv path, JSON Lines for another path, sentences without one."""
    if path is None:
        out.write("".join(reject_line(batch.source, r) + "\n" for r in batch.rejects))
    elif path.lower().endswith(".csv"):
        writer = csv.writer(out, lineterminator="\n")
        if header:
            writer.writerow(["file", "row", "sample_id", "field", "code", "reason"])
        for r in batch.rejects:
            writer.writerow([spreadsheet_text(cell) for cell in
                             (batch.source, r.row, r.sample_id or "", r.field, r.code, r.reason)])
    else:
        for r in batch.rejects:
            out.write(dumps({"file": batch.source, "row": r.row, "sample_id": r.sample_id, "field": r.field,
                             "code": r.code, "reason": r.reason}) + "\n")


def _summary(graded) -> str:
    return _summary_line(graded.source, graded.counts(), Counter(graded.grades()), graded.ruleset.grades)


def _summary_line(source: str, counts: dict, by_grade: Counter, grades: tuple, stopped: bool = False) -> str:
    ladder = ", ".join(f"{g} {by_grade.get(g, 0)}" for g in list(grades) + ["unrated"])
    read = "stopped by the error above; before it, read" if stopped else "read"
    return (f"sumpwise: {source}: {read} {counts['read']} row(s): {counts['graded']} graded, "
            f"{counts['unrated']} unrated, {counts['rejected']} rejected ({ladder})\n")


# Engine caveats that mean a sample may be graded on less than it should: warned about in the summary.
WARNING_CAVEATS = FIRST_CAVEATS


def _grade(args, stdin, stdout, stderr) -> int:
    summary = _Summary(args.summary)
    try:
        return _grade_files(args, stdin, stdout, stderr, summary)
    except (UsageError, InvalidFile, InputError) as exc:  # refused before or instead of grading
        summary.refused(args, _refusal(exc), stderr)
        raise


def _refusal(exc: Exception) -> str:
    if isinstance(exc, InvalidFile):
        return f"{len(exc.problems)} problem(s) in a file the run reads; nothing was graded:\n{exc}"
    return str(exc)


def _grade_files(args, stdin, stdout, stderr, summary: "_Summary") -> int:
    if args.record != FULL and args.format != "jsonl":
        raise UsageError(f"sumpwise grade: --record {args.record} is a JSON Lines form; --format is {args.format}")
    ruleset, columns = _rules_and_map(args)
    fail_levels, fail_unrated = _fail_at(args, ruleset)
    known = {c.id for c in ruleset.caveats} | set(ENGINE_CAVEATS)
    for caveat in args.fail_on_caveat:
        if caveat not in known:
            close = difflib.get_close_matches(caveat, sorted(known), n=1)
            raise UsageError(f"sumpwise grade: --fail-on-caveat {caveat!r} is no caveat of the rule set or the engine"
                             + (f"; did you mean {close[0]!r}?" if close else ""))
    skipped: list = []
    sources = _sources(args.samples, skipped)
    for entry in skipped:
        stderr.write(terminal_text(f"sumpwise: {entry['file']}: note: skipped, not a samples file: {entry['why']}")
                     + "\n")
    listed = set(sources) - set(args.samples)  # found in a folder, not named on the command line
    refuse_overwriting([("--out", args.out), ("--rejects", args.rejects), ("--summary", args.summary)],
                       [("the samples file", source) for source in sources]
                       + [("the rule set", path) for path in ruleset.files] + [("--columns", args.columns)]
                       + [("the reference spectrum", path) for path in
                          reference_files(ruleset, parse_references(args.reference)).values()]
                       + [("the ledger --db", args.db)])
    if not authoring_cli.examples_hold(ruleset, args, stderr):  # a rule set edited for tonight: say so in --summary
        refused = f"rule set {ruleset.id} version {ruleset.version}: its own examples do not hold; nothing was graded"
        summary.write(_unfinished([], sources, skipped, refused, USAGE))
        return USAGE
    files, reached, found_unrated, conflicts = [], set(), False, 0  # reached: the --fail-at levels met
    repeated = RepeatedIds() if len(sources) > 1 and getattr(args, "db", None) is None else None
    out_name = f"--out {args.out}" if args.out else "standard output"
    tally, stopped = None, None  # stopped: why the run stopped (an output, the ledger), with its summary written
    try:
        with contextlib.ExitStack() as stack:
            out = _opened(stack, args.out, "--out") if args.out else stdout
            rejects = _opened(stack, args.rejects, "--rejects") if args.rejects else stderr
            records = stack.enter_context(RecordOutput(out, _utf8_bytes_under(out, own=bool(args.out)), args.format,
                                                       args.record, stderr, args.jobs))
            first = True
            for source in sources:
                tally = _Tally(ruleset, "<stdin>" if source == "-" else str(source))
                try:
                    _unreadable(source, source in listed)
                    for graded, notes, refused, (warned, regraded) in _graded_batches(args, stdin, source, ruleset,
                                                                                       columns, stderr):
                        conflicts += refused
                        tally.warnings.extend(warned)
                        reached.update(fail for fail in fail_levels if any(level >= fail for level in regraded))
                        for note in notes:
                            stderr.write(terminal_text(f"sumpwise: {graded.source}: note: {note}") + "\n")  # names from the file
                        with _writing(out_name):
                            records.write(graded, header=first)
                        with _writing(args.rejects and f"--rejects {args.rejects}"):
                            _put_rejects(graded, rejects, args.rejects, header=first)
                            rejects.flush()  # a full disk is found here, naming --rejects, not at the close
                        first = False
                        tally.add(graded, notes, written=records.pending is None)  # write() settled the one before
                        if repeated is not None and "sample_id" in graded.measured:
                            repeated.add(graded.measured["sample_id"].to_numpy(dtype=object))
                        levels = graded.outcome.level
                        reached.update(level for level in fail_levels if bool((levels >= level).any()))
                        found_unrated |= bool((levels < 0).any())
                        graded = levels = None  # before the next chunk is graded
                except LedgerError:
                    raise  # the ledger or the rule set refused: every file would meet it
                except InputError as exc:  # this file cannot be read (on): the next files are graded all the same
                    with _writing(out_name):
                        records.settle()  # what it gave before is written, as it was
                    tally.confirm()
                    stderr.write(_safe_lines(f"sumpwise: {exc}"))
                    tally.error = str(exc)
                with _writing(out_name):
                    records.settle()  # the file's records are all out before its summary line
                tally.confirm()
                stderr.write(_summary_line(tally.source, tally.counts, tally.grades, ruleset.grades, tally.error is not None))
                files.append(tally.summary())
                files[-1]["repeated_ids"] = repeated.end_file(tally.source) if repeated is not None else None
    except (_OutputFailed, OSError, LedgerError) as exc:  # the output, or the ledger (a reader fails as InputError)
        stopped = (str(exc) if isinstance(exc, LedgerError)
                   else _stopped(exc, out_name, (args.out, args.rejects), stdout))
        stderr.write(_safe_lines(f"sumpwise: {stopped}"))
        if tally is not None and not (files and files[-1]["file"] == tally.source):
            tally.error = stopped
            stderr.write(_summary_line(tally.source, tally.counts, tally.grades, ruleset.grades, True))
            files.append(tally.summary())
            files[-1]["repeated_ids"] = None
    except (UsageError, InvalidFile, InputError):
        raise  # the command line or an output that cannot be opened: said before anything is graded
    except Exception as exc:  # a bug: main says so (exit 1); the summary says the run did not finish
        done = [f["file"] for f in files]
        summary.write(_unfinished(files, [s for s in sources if s not in done], skipped,
                                                 f"internal error (a bug, please report it): {exc!r}", INTERNAL))
        raise
    total = {key: sum(f[key] for f in files) for key in ("read", "graded", "unrated", "rejected")}
    warnings = [f"{f['file']}: {f['caveats'][c]} sample(s) with caveat {c}" for f in files for c in WARNING_CAVEATS
                if c in f["caveats"]]
    warnings += [f"{f['file']}: {f['unrated']} sample(s) unrated" for f in files if f["unrated"]]
    warnings += [f["repeated_ids"] for f in files if f["repeated_ids"]]
    warnings += [warning for f in files for warning in f.pop("ledger_warnings")]
    if len(files) > 1:
        stderr.write(f"sumpwise: in total: read {total['read']} row(s): {total['graded']} graded, "
                     f"{total['unrated']} unrated, {total['rejected']} rejected\n")
    for warning in warnings:
        stderr.write(terminal_text(f"sumpwise: warning: {warning}") + "\n")
    code = OK
    caveated = sorted(c for c in args.fail_on_caveat if any(f["caveats"].get(c) for f in files))
    for caveat in caveated:
        stderr.write(terminal_text(f"sumpwise: --fail-on-caveat {caveat}: "
                                   f"{sum(f['caveats'].get(caveat, 0) for f in files)} sample(s) carry it") + "\n")
    for level in sorted(reached):
        name = ruleset.grades[level]
        at = sum(f["grades"][g] for f in files for g in ruleset.grades[level:])
        stderr.write(f"sumpwise: --fail-at {name}: {at} sample(s) at {name} or higher\n" if at else
                     f"sumpwise: --fail-at {name}: reached by a recorded sample a late result regraded (warnings)\n")
    if fail_unrated and found_unrated:
        stderr.write(f"sumpwise: --fail-at unrated: {total['unrated']} sample(s) unrated\n")
    findings = {"fail_at": [ruleset.grades[level] for level in sorted(reached)]
                + ([UNRATED] if fail_unrated and found_unrated else []),
                "fail_on_caveat": caveated, "ledger_conflicts": conflicts}
    if findings["fail_at"] or conflicts or caveated:
        code = FINDINGS
    failed = [f["file"] for f in files if f["error"] is not None]
    not_graded = sources[len(files):] if stopped else []
    if not_graded:
        stderr.write(terminal_text(f"sumpwise: the run stopped: {len(not_graded)} file(s) not read: "
                                   f"{', '.join(not_graded)}") + "\n")
    if stopped:
        code = USAGE
    if failed:
        stderr.write(terminal_text(f"sumpwise: {len(failed)} of {len(sources)} file(s) could not be read to the end: "
                                   f"{', '.join(failed)}") + "\n")
        code = USAGE
    too_many = args.max_rejects is not None and total["rejected"] > args.max_rejects
    if too_many:
        stderr.write(f"sumpwise: {total['rejected']} row(s) rejected, more than --max-rejects {args.max_rejects}\n")
        code = USAGE
    if code == USAGE and (findings["fail_at"] or conflicts or caveated):  # exit 2 must not hide them
        stderr.write("sumpwise: exit 2 (input) outranks exit 3 (findings), and the findings above were reached too\n")
    summary.write({"files": files, "total": total, "warnings": warnings, "findings": findings,
                                  "failed_files": failed, "max_rejects_exceeded": too_many, "stopped": stopped,
                                  "not_read": not_graded, "skipped": skipped, "exit": code})
    return code


def _unfinished(files: list, not_read: list, skipped: list, stopped: str, code: int) -> dict:
    """The --summary of a run that ended before its counts were totted up: the files done, and why."""
    for f in files:
        f.pop("ledger_warnings", None)
    return {"files": files, "total": {key: sum(f[key] for f in files) for key in ("read", "graded", "unrated", "rejected")},
            "warnings": [], "findings": {"fail_at": [], "fail_on_caveat": [], "ledger_conflicts": 0},
            "failed_files": [], "max_rejects_exceeded": False, "stopped": stopped, "not_read": not_read,
            "skipped": skipped, "exit": code}


class _Summary:
    """--summary: the run's counts and outcome as JSON, written once however the run ended, also
    when it refused to start (the rule set, the column map, an option): a nightly job must never
    find the previous night's summary in its place and take it for tonight's."""

    def __init__(self, path):
        self.path, self.attempted = path, False

    def write(self, report: dict) -> None:
        if not self.path:
            return
        self.attempted = True
        try:
            with open(self.path, "w", encoding="utf-8") as handle:
                handle.write(json.dumps(report, indent=2, ensure_ascii=False) + "\n")
        except OSError as exc:
            raise InputError(f"--summary {self.path}: cannot write it: {exc.strerror or exc}") from None

    def refused(self, args, why: str, stderr) -> None:
        """The summary of a run that graded nothing, unless one was written, or the path holds
        anything but an earlier summary: a run refused this early may not know every file it
        names (a folder's files, the rule set's parents), and a file it names is never emptied."""
        if not self.path or self.attempted or not _absent_or_summary(Path(self.path)):
            return
        others = ([("the samples file", s) for s in args.samples] + [("the rule set", args.rules)]
                  + [("--columns", args.columns), ("the ledger --db", getattr(args, "db", None)),
                     ("--out", args.out), ("--rejects", args.rejects)])
        try:
            refuse_overwriting([("--summary", self.path)], others)
        except InputError:
            return  # the error that stopped the run may be just this one, and is said
        try:
            self.write(_unfinished([], [str(s) for s in args.samples], [], why, USAGE))
        except InputError as exc:
            stderr.write(_safe_lines(f"sumpwise: {exc}"))


def _absent_or_summary(path: Path) -> bool:
    """No file there, or one that reads as a --summary (a JSON object with its `exit`)."""
    try:
        if not path.exists():
            return True
        if not path.is_file() or path.stat().st_size > 64 * 2**20:
            return False
        report = json.loads(path.read_bytes())
    except (OSError, ValueError):
        return False
    return isinstance(report, dict) and "exit" in report and "stopped" in report


class _OutputFailed(Exception):
    """Records or rejects could not be written: which output, and the system's error."""

    def __init__(self, what: str, error: OSError):
        super().__init__(what)
        self.what, self.error = what, error


@contextlib.contextmanager
def _writing(what):
    """Name the output an OSError (a full disk, a closed pipe) came from; `what` None: standard error."""
    try:
        yield
    except OSError as exc:
        raise _OutputFailed(what or "standard error", exc) from exc


def _stopped(exc, out_name: str, written, stdout) -> str:
    """Why the run stopped, in words; a line cut short in the --out or --rejects file (`written`) is
    taken off, and a standard output its reader closed is pointed at the null device (nothing more
    can reach it, and Python's flush at exit would otherwise complain)."""
    failed = exc
    while failed is not None and not isinstance(failed, _OutputFailed):
        failed = failed.__context__  # closing the failed file failed again as the run unwound: the first says which
    exc = failed or exc
    what, error = (exc.what, exc.error) if isinstance(exc, _OutputFailed) else (out_name, exc)
    for path in filter(None, written):
        _cut_to_whole_lines(path)
    if isinstance(error, BrokenPipeError) and what == "standard output":
        with contextlib.suppress(OSError, ValueError, AttributeError):
            os.dup2(os.open(os.devnull, os.O_WRONLY), stdout.fileno())
        return "standard output was closed by its reader; the run stopped there"
    return f"cannot write {what}: {error.strerror or error}; the run stopped there"


def _cut_to_whole_lines(path) -> None:
    """Take off a last line the failed write left without its line end, so every line is a whole record
    (a regular file only: /dev/full, a pipe or a terminal holds nothing to take off)."""
    if not os.path.isfile(path):
        return
    with contextlib.suppress(OSError):
        with open(path, "rb+") as handle:
            size = handle.seek(0, os.SEEK_END)
            keep = size
            while keep > 0:
                start = max(0, keep - 65536)
                handle.seek(start)
                block = handle.read(keep - start)
                at = block.rfind(b"\n")
                if at >= 0 or start == 0:
                    keep = start + at + 1
                    break
                keep = start
            if keep < size:
                handle.truncate(keep)


def _fail_at(args, ruleset) -> tuple[list, bool]:
    """The grade levels --fail-at names, and whether it names `unrated`."""
    levels, unrated = [], False
    for name in args.fail_at:
        if name == UNRATED:
            unrated = True
        elif name in ruleset.grades:
            levels.append(ruleset.level_of(name))
        else:
            raise UsageError(f"sumpwise grade: --fail-at {name!r} is not on the grade ladder "
                             f"[{', '.join(ruleset.grades)}] and is not 'unrated'")
    return levels, unrated


def _opened(stack: contextlib.ExitStack, path, option: str):
    try:
        return stack.enter_context(open(path, "w", encoding="utf-8", newline=""))
    except OSError as exc:
        raise InputError(f"{option} {path}: cannot write it: {exc.strerror or exc}") from None


def _chunked(args, source, columns) -> bool:
    """Whether a source is read --chunk-rows rows at a time: not for the table or a ledger (they need
    the whole file), a workbook, or a file whose column map declares how it is written (encoding,
    delimiter, decimal mark: the whole-file reader applies them)."""
    if args.format == "table" or getattr(args, "db", None) is not None:
        return False
    if (args.input_format or "") == "xlsx" or str(source).lower().endswith(".xlsx"):
        return False
    return not (columns is not None and columns.options)


def _graded_batches(args, stdin, source, ruleset, columns, stderr):
    """A source's graded batches with the reader's notes, whether a ledger refused rows as conflicts,
    and (warnings, levels) of recorded samples a late result changes: the whole file at once, or
    in chunks whose trends are carried from chunk to chunk (pipeline.grade_in_chunks)."""
    if not _chunked(args, source, columns):
        batch = _read_one(args, stdin, source, ruleset, columns)
        graded, conflicts, warnings, regraded = ledger_cli.grade(args, batch, ruleset, stderr)
        yield graded, batch.notes, conflicts, (warnings, regraded)
        return
    if getattr(args, "correction", False):
        raise UsageError("sumpwise grade: --correction needs --db PATH: corrections are recorded in a ledger")
    if source == "-":
        chunks = sample_chunks(stdin, "<stdin>", columns, args.input_format or "csv", ruleset.measures, args.chunk_rows)
    else:
        chunks = sample_chunks(source, None, columns, args.input_format, ruleset.measures, args.chunk_rows)
    references = parse_references(args.reference)
    said: list = []
    read = map(lambda batch: measure_sample_spectra(batch, ruleset, references, args.path_length), chunks)
    for number, graded in enumerate(grade_in_chunks(_noting(read, said), ruleset)):
        if number == 0 and not graded.forecasts_made and args.format == "jsonl":  # only records carry them
            said.append(f"forecasts not made: the file is read in chunks of {args.chunk_rows:,} rows and a forecast "
                        f"needs each unit's whole oil charge (records say forecasts null); give --chunk-rows "
                        f"above the file's row count, or grade into a ledger and use history")
        notes, said[:] = tuple(said), []
        yield graded, notes, 0, ([], [])
        graded = None  # each reference to a graded chunk goes before the next chunk is graded


def _noting(batches, said: list):
    """Pass batches on, keeping each one's reader notes the first time they are said."""
    seen: set = set()
    for batch in batches:
        said.extend(note for note in batch.notes if note not in seen)
        seen.update(batch.notes)
        yield batch
        batch = None


def _utf8_bytes_under(out, own: bool):
    """The binary stream under `out` when UTF-8 bytes written there are what text written to `out`
    gives (an --out file opened here: UTF-8, no newline translation; or standard output in strict
    UTF-8 where a line ends in \\n), else None. Records are made as bytes: writing them as text
    would decode and encode each block again."""
    if not isinstance(out, io.TextIOWrapper) or out.errors != "strict" or codecs.lookup(out.encoding).name != "utf-8":
        return None
    return out.buffer if own or (out is sys.stdout and os.linesep == "\n") else None


class _Tally:
    """One file's counts, grades and caveats over its chunks, for its summary line, --summary and
    the exit code."""

    def __init__(self, ruleset, source: str):
        self.ruleset, self.source, self.notes, self.warnings = ruleset, source, [], []
        self.counts, self.grades, self.caveats = Counter(), Counter(), Counter()
        self.error: str | None = None  # why the file could not be read to the end
        self.held = None  # a chunk handed to the other process, counted once its records are out

    def add(self, graded, notes, written: bool = True) -> None:
        """Count a graded chunk; one whose records another process is still writing (`written`
        False) is held until confirm(), so a run stopped by its output counts only chunks written
        whole, with one process or two alike."""
        self.confirm()
        self.source = graded.source
        ids = [c.id for c in graded.ruleset.caveats] + [c.id for c in graded.engine_caveats]
        caveats = Counter({ids[k]: count for k, count in enumerate(graded.outcome.caveats.sum(axis=0).tolist())
                           if count})
        self.held = (Counter(graded.counts()), Counter(graded.grades()), list(notes), caveats)
        if written:
            self.confirm()

    def confirm(self) -> None:
        """The held chunk's records are all written: count it."""
        if self.held is not None:
            counts, grades, notes, caveats = self.held
            self.counts.update(counts)
            self.grades.update(grades)
            self.notes.extend(notes)
            self.caveats.update(caveats)
            self.held = None

    def summary(self) -> dict:
        counts = {key: self.counts.get(key, 0) for key in ("read", "graded", "unrated", "rejected")}
        return {"file": self.source, **counts,
                "grades": {g: self.grades.get(g, 0) for g in list(self.ruleset.grades) + [UNRATED]},
                "caveats": dict(sorted(self.caveats.items())), "notes": list(self.notes),
                "error": self.error, "ledger_warnings": list(self.warnings)}


def _explain(args, stdin, stdout, stderr) -> int:
    if args.db is not None:
        return ledger_cli.run_explain(args, stdout)
    if args.samples is None or args.rules is None:
        raise UsageError("sumpwise explain: give --db PATH (a ledger), or --samples and --rules")
    ruleset, batch = _read(args, stdin)
    graded = grade_batch(batch, ruleset)
    result = graded.find(args.sample_id)
    if result is None:
        rejected = [r for r in graded.rejects if r.sample_id == args.sample_id]  # grading's refusals too
        if rejected:
            reasons = "; ".join(f"row {r.row}: {r.field}: {r.reason}" for r in rejected)
            raise InputError(f"sample {args.sample_id} was rejected, not graded: {reasons}")
        raise InputError(f"no sample '{args.sample_id}' in {batch.source}")
    forecasts = [f for f in graded.forecasts if f.sample_id == args.sample_id]
    stdout.write("\n".join(explain_lines(result, ruleset.grades, forecasts=forecasts)) + "\n")
    return OK


def _demo(args, stdin, stdout, stderr) -> int:
    samples, rules = SCENARIO / "samples.csv", SCENARIO / "site.yaml"
    if not samples.is_file() or not rules.is_file():
        raise InputError(f"the demo scenario is not here: {SCENARIO} (run from a source checkout)")
    ruleset = load_ruleset(rules)
    batch = read_samples(samples, None, None, None, ruleset.measures)
    out_dir = Path(args.out)
    out_dir.mkdir(parents=True, exist_ok=True)
    graded, ledger_path = ledger_cli.grade_demo(out_dir, batch, ruleset)
    results_path = out_dir / "brackwater-results.jsonl"
    with open(results_path, "w", encoding="utf-8", newline="") as out:
        write_jsonl(graded, out)
    rejects_path = out_dir / "brackwater-rejects.jsonl"
    _write_rejects(batch, rejects_path, stderr)
    report_path = out_dir / "brackwater-report.html"
    report_command.write_report(results_path, report_path, rejects_path, rules)

    grades = list(ruleset.grades) + ["unrated"]
    table = Counter(zip(graded.measured["class"].fillna("(none)"), graded.grades()))
    classes = sorted({c for c, _ in table})
    width = max(len("class"), *(len(c) for c in classes))
    stdout.write(f"Brackwater Point (invented demo site): {ruleset.title}\n")
    stdout.write(f"rule set {ruleset.id} version {ruleset.version}, sha256 {ruleset.sha256}\n\n")
    stdout.write(f"{'class':<{width}}  " + "  ".join(f"{g:>7}" for g in grades) + "\n")
    for name in classes:
        stdout.write(f"{name:<{width}}  " + "  ".join(f"{table.get((name, g), 0):>7}" for g in grades) + "\n")
    stdout.write("\n" + _summary(graded).replace("sumpwise: ", "", 1))
    stdout.write(f"results: {results_path}\nrejects: {rejects_path}\nreport: {report_path}\n")
    stdout.write(f"explain one: sumpwise explain SAMPLE_ID --samples {samples} --rules {rules}\n")
    stdout.write(f"ledger: {ledger_path} (sumpwise history ST-1 --db {ledger_path}; "
                 f"sumpwise explain BP-0294 --db {ledger_path})\n\n")
    stdout.write(caution_text("! ") + "\n")
    return OK


def _spectra(args, stdin, stdout, stderr) -> int:
    return spectra_command.run(args, stdout, stderr)


def _compare(args, stdin, stdout, stderr) -> int:
    return authoring_cli.run_compare(args, stdout, stderr)


def _propose_limits(args, stdin, stdout, stderr) -> int:
    return authoring_cli.run_propose_limits(args, stdout, stderr)


def _report(args, stdin, stdout, stderr) -> int:
    return report_command.run(args, stdout, stderr)


def _history(args, stdin, stdout, stderr) -> int:
    return ledger_cli.run_history(args, stdout, stderr)


def _replay(args, stdin, stdout, stderr) -> int:
    return ledger_cli.run_replay(args, stdout, stderr)


_COMMANDS = {"check": _check, "grade": _grade, "explain": _explain, "demo": _demo, "spectra": _spectra,
             "compare": _compare, "propose-limits": _propose_limits, "report": _report,
             "history": _history, "replay": _replay,
             "rulesets": lambda args, stdin, stdout, stderr: ledger_cli.run_rulesets(args, stdout, stderr),
             "find": lambda args, stdin, stdout, stderr: ledger_cli.run_find(args, stdout, stderr)}


def entry() -> None:
    """Console-script entry point."""
    sys.exit(main(sys.argv[1:]))
