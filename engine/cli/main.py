"""The `sumpwise` command: a thin layer over the Python API.

Exit codes keep findings apart from failures, so a pipeline can tell them apart:
0 done; 1 internal fault (a bug); 2 usage error, unreadable input or invalid rule
set; 3 findings: a sample reached the `--fail-at` grade (or `compare` saw a move, replay a difference,
or a ledger import rejected rows whose sample id was recorded with other values).
"""

from __future__ import annotations

import argparse
import contextlib
import csv
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
from sumpwise.render.csv_rows import write_csv
from sumpwise.render.jsonl import dumps, write_jsonl
from sumpwise.render.table import write_table
from sumpwise.results.records import FORMS, FULL
from sumpwise.render.safe_text import spreadsheet_text, terminal_text
from sumpwise.intake.samples import load_column_map, read_samples
from sumpwise.cli import spectra as spectra_command
from sumpwise.intake.sample_spectra import measure_sample_spectra, parse_references
from sumpwise.cli import ledger as ledger_cli
from sumpwise.cli import report as report_command
from sumpwise.cli.options import output_file, output_folder, positive_mm

OK, INTERNAL, USAGE, FINDINGS = 0, 1, 2, 3
CHUNK_ROWS = 1_000_000  # rows `grade` reads, grades and writes at a time (see the README: large files)

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
    grade.add_argument("samples", metavar="SAMPLES", help="CSV or JSON Lines file, or - for standard input")
    _common_inputs(grade)
    grade.add_argument("--format", choices=("jsonl", "csv", "table"), default="jsonl",
                       help="output format (default jsonl)")
    grade.add_argument("--record", choices=FORMS, default=FULL,
                       help="JSON Lines record form: full (default; self-contained, every message, source and "
                            "the notice) or compact (every fact; texts by reference to the rule set it names)")
    grade.add_argument("--chunk-rows", type=_positive_rows, default=CHUNK_ROWS, metavar="N",
                       help=f"read, grade and write the samples N rows at a time, so memory stays bounded "
                            f"(default {CHUNK_ROWS:,}; not with --db or --format table, which take the whole file)")
    grade.add_argument("--out", metavar="PATH", type=output_file,
                       help="write results here instead of standard output")
    grade.add_argument("--rejects", metavar="PATH", type=output_file,
                       help="write rejected rows here (.csv for CSV, else JSON Lines); default: standard error")
    grade.add_argument("--fail-at", metavar="GRADE",
                       help="exit 3 when any sample reaches this grade or higher")
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
    parser.add_argument("--input-format", choices=("csv", "jsonl"),
                        help="format of SAMPLES (default: from its name; csv for standard input)")
    parser.add_argument("--reference", action="append", metavar="LUBRICANT=FILE", default=[],
                        help="new-oil reference spectrum of a lubricant: samples of it with a `spectrum` "
                             "are read by spectral subtraction (repeatable; wins over the rule set's)")
    parser.add_argument("--path-length", type=positive_mm, default=0.1, metavar="MM",
                        help="FTIR cell path length of the spectra, mm (default 0.100)")


def _positive_rows(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number of rows, found {text!r}") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"expected at least 1 row, found {text!r}")
    return value


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


def _read(args, stdin):
    ruleset = load_ruleset(args.rules)
    columns = load_column_map(args.columns) if args.columns else None
    if args.samples == "-":
        batch = read_samples(stdin, "<stdin>", columns, args.input_format or "csv", ruleset.measures)
    else:
        batch = read_samples(args.samples, None, columns, args.input_format, ruleset.measures)
    batch = measure_sample_spectra(batch, ruleset, parse_references(args.reference), args.path_length)
    return ruleset, batch


def _write_rejects(batch, path, stderr) -> None:
    if path is None:
        _put_rejects(batch, stderr, None)
        return
    with open(path, "w", encoding="utf-8", newline="") as out:
        _put_rejects(batch, out, str(path), header=True)


def _put_rejects(batch, out, path: str | None, header: bool = False) -> None:
    """Rejected rows: as CSV for a .csv path, JSON Lines for another path, sentences without one."""
    if path is None:
        for r in batch.rejects:
            who = f" (sample {r.sample_id})" if r.sample_id else ""
            out.write(terminal_text(f"{batch.source}: row {r.row}{who}: rejected {r.code}: {r.field}: {r.reason}")
                      + "\n")
    elif path.endswith(".csv"):
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


def _summary_line(source: str, counts: dict, by_grade: Counter, grades: tuple) -> str:
    ladder = ", ".join(f"{g} {by_grade.get(g, 0)}" for g in list(grades) + ["unrated"])
    return (f"sumpwise: {source}: read {counts['read']} row(s): {counts['graded']} graded, "
            f"{counts['unrated']} unrated, {counts['rejected']} rejected ({ladder})\n")


def _grade(args, stdin, stdout, stderr) -> int:
    if args.record != FULL and args.format != "jsonl":
        raise UsageError(f"sumpwise grade: --record {args.record} is a JSON Lines form; --format is {args.format}")
    if args.format == "table" or getattr(args, "db", None) is not None:
        return _grade_whole(args, stdin, stdout, stderr)
    return _grade_chunks(args, stdin, stdout, stderr)


def _fail_level(args, ruleset):
    if args.fail_at is None:
        return None
    if args.fail_at not in ruleset.grades:
        raise UsageError(f"sumpwise grade: --fail-at {args.fail_at!r} is not on the grade ladder "
                         f"[{', '.join(ruleset.grades)}]")
    return ruleset.level_of(args.fail_at)


def _grade_chunks(args, stdin, stdout, stderr) -> int:
    """Read, grade and write --chunk-rows rows at a time (trends carried across; see grade_in_chunks)."""
    if getattr(args, "correction", False):
        raise InputError("--correction needs --db PATH: corrections are recorded in a ledger")
    ruleset = load_ruleset(args.rules)
    if not authoring_cli.examples_hold(ruleset, args, stderr):
        return USAGE
    fail_level = _fail_level(args, ruleset)
    columns = load_column_map(args.columns) if args.columns else None
    if args.samples == "-":
        chunks = sample_chunks(stdin, "<stdin>", columns, args.input_format or "csv", ruleset.measures, args.chunk_rows)
    else:
        chunks = sample_chunks(args.samples, None, columns, args.input_format, ruleset.measures, args.chunk_rows)
    references = parse_references(args.reference)
    chunks = (measure_sample_spectra(batch, ruleset, references, args.path_length) for batch in chunks)
    counts, by_grade, failed, source = Counter(), Counter(), False, ""
    with contextlib.ExitStack() as stack:
        out = stack.enter_context(open(args.out, "w", encoding="utf-8", newline="")) if args.out else stdout
        rejects = (stack.enter_context(open(args.rejects, "w", encoding="utf-8", newline="")) if args.rejects
                   else stderr)
        for k, graded in enumerate(grade_in_chunks(chunks, ruleset)):
            if args.format == "jsonl":
                write_jsonl(graded, out, args.record)
            else:
                write_csv(graded, out, header=k == 0)
            _put_rejects(graded, rejects, args.rejects, header=k == 0)
            counts.update(graded.counts())
            by_grade.update(graded.grades())
            failed = failed or (fail_level is not None and bool((graded.outcome.level >= fail_level).any()))
            source = graded.source
    stderr.write(_summary_line(source, counts, by_grade, ruleset.grades))
    return FINDINGS if failed else OK


def _grade_whole(args, stdin, stdout, stderr) -> int:
    ruleset, batch = _read(args, stdin)
    if not authoring_cli.examples_hold(ruleset, args, stderr):
        return USAGE
    fail_level = _fail_level(args, ruleset)
    graded, conflicts = ledger_cli.grade(args, batch, ruleset, stderr)
    writer = {"jsonl": lambda graded, out: write_jsonl(graded, out, args.record), "csv": write_csv,
              "table": lambda graded, out: write_table(graded, out, progress=stderr)}[args.format]
    if args.out:
        with open(args.out, "w", encoding="utf-8", newline="") as out:
            writer(graded, out)
    else:
        writer(graded, stdout)
    _write_rejects(graded, args.rejects, stderr)
    stderr.write(_summary(graded))
    if conflicts or (fail_level is not None and (graded.outcome.level >= fail_level).any()):
        return FINDINGS
    return OK


def _explain(args, stdin, stdout, stderr) -> int:
    if args.db is not None:
        return ledger_cli.run_explain(args, stdout)
    if args.samples is None or args.rules is None:
        raise UsageError("sumpwise explain: give --db PATH (a ledger), or --samples and --rules")
    ruleset, batch = _read(args, stdin)
    graded = grade_batch(batch, ruleset)
    result = graded.find(args.sample_id)
    if result is None:
        rejected = [r for r in batch.rejects if r.sample_id == args.sample_id]
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
    report_command.write_report(results_path, report_path, rejects_path, rules,
                                forecasts=[f.to_record() for f in graded.forecasts])

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
