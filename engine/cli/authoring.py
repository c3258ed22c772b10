"""The authoring commands behind sumpwise.cli.main: `check` (validity, lint, examples), `compare`, `propose-limits`.

Exit codes are sumpwise.cli.main's: 0 done, 2 invalid rule set or input (or, for check, a
failed example or --strict with warnings), 3 findings (`compare`: a sample moved).
"""

from __future__ import annotations

import argparse
import datetime as dt

from sumpwise.cli.exit_codes import FINDINGS, OK, USAGE
from sumpwise.cli.options import output_file, refuse_overwriting
from sumpwise.render.safe_text import reject_line, terminal_lines
from sumpwise.ledger.audit import stored_ruleset, stored_samples
from sumpwise.vocabulary.cautions import caution_text
from sumpwise.authoring.compare import compare_rulesets, comparison_lines, same_name_differs
from sumpwise.ruleset.compiler import SEVERITY_RANK, check_ruleset, load_ruleset
from sumpwise.authoring.examples import check_examples
from sumpwise.authoring.lint import lint_ruleset
from sumpwise.vocabulary.problems import InputError, Problem
from sumpwise.authoring.limit_statistics import NotEnoughData
from sumpwise.authoring.proposals import Filters, Refused, figure_lines, propose_from_samples, snippet
from sumpwise.intake.samples import load_column_map, read_samples



def run_check(paths, strict: bool, stdout, stderr) -> int:
    """Check each rule set in one pass: schema, extends, meaning, lint and examples, every problem sorted.

    Diagnostics go to stderr, one verdict line per file to stdout, then the cautions ("! " lines).
    Where errors leave pieces out, lint runs on the rest and the examples are not run (a note says so).
    """
    failed = 0
    for path in paths:
        checked = check_ruleset(path)
        rs = checked.ruleset
        found = list(checked.problems)
        failures: tuple = ()
        if rs is not None:
            found += lint_ruleset(rs, partial=checked.partial)
            if checked.partial and rs.examples:
                first = rs.examples[0].origin
                found.append(Problem(first.file, first.line, first.column,
                                     f"{len(rs.examples)} example(s) not run: the rule set has errors", first.path,
                                     severity="note", code="E002", hint="fix the errors; the next run runs them"))
            elif not checked.partial:
                failures = check_examples(rs)
        for text in _sorted_output(found, failures):
            stderr.write(text + "\n")
        errors = [p for p in found if p.severity == "error"]
        warnings = [p for p in found if p.severity == "warning"]
        verdict = "failed" if errors or failures or (strict and warnings) else "ok"
        failed += verdict == "failed"
        strict_note = " (--strict: warnings are errors)" if strict and warnings else ""
        if rs is None or checked.partial:
            stdout.write(f"{path}: failed: {len(errors)} error(s), {len(warnings)} warning(s){strict_note}; "
                         f"nothing was fingerprinted\n")
            continue
        rules = sum(len(rs.rules_for(name)) for name in rs.classes)
        held = len(rs.examples) - len(failures)
        stdout.write(f"{path}: {verdict}: rule set {rs.id} version {rs.version}, {len(rs.classes)} class(es), "
                     f"{rules} rule(s), {len(rs.caveats)} caveat(s), sha256 {rs.sha256}; "
                     f"{len(warnings)} warning(s){strict_note}; {held} of {len(rs.examples)} example(s) hold\n")
    # A rule set found "ok" is valid, not right for the machine: the cautions follow the verdicts.
    stdout.write(caution_text("! ") + "\n")
    return USAGE if failed else OK


def _sorted_output(problems: list, failures: tuple) -> list[str]:
    """Problems and example failures in one list, by file, line and column."""
    items = [((p.file, p.line, p.column, SEVERITY_RANK.get(p.severity, 3), p.code), p.render()) for p in problems]
    items += [((f.file, f.line, f.column, 0, f.code), f.render()) for f in failures]
    return [text for _, text in sorted(items, key=lambda item: item[0])]


def add_example_guard(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--allow-failing-examples", action="store_true",
                        help="grade even when the rule set's own examples do not hold (they are checked by default)")


def examples_hold(ruleset, args, stderr) -> bool:
    """A rule set whose own examples fail does not grade (nor go into a ledger) unless the user says so."""
    failures = check_examples(ruleset)
    if not failures:
        return True
    for failure in failures:
        stderr.write(failure.render() + "\n")
    if args.allow_failing_examples:
        stderr.write(f"sumpwise: warning: {len(failures)} example(s) of rule set {ruleset.id} version "
                     f"{ruleset.version} do not hold; grading anyway (--allow-failing-examples)\n")
        return True
    stderr.write(f"sumpwise: rule set {ruleset.id} version {ruleset.version}: {len(failures)} of its own "
                 f"example(s) do not hold, so its grades cannot be trusted; nothing was graded. Fix the rule set "
                 f"or its examples (sumpwise check), or pass --allow-failing-examples to grade anyway\n")
    return False


def add_compare_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("old", metavar="OLD_RULESET", help="a rule-set file, or sha256:FINGERPRINT of one stored in --db")
    parser.add_argument("new", metavar="NEW_RULESET", help="a rule-set file, or sha256:FINGERPRINT of one stored in --db")
    source = parser.add_mutually_exclusive_group(required=True)
    source.add_argument("--samples", metavar="FILE", help="CSV or JSON Lines samples to grade")
    source.add_argument("--db", metavar="PATH", help="a ledger: its current samples")
    _sample_options(parser)


def run_compare(args, stdout, stderr) -> int:
    """Grade the samples under both rule sets; exit 3 when any sample moves, so a review can be guarded."""
    old, new = _compared_ruleset(args.old, args.db), _compared_ruleset(args.new, args.db)
    if warning := same_name_differs(old, new):
        stderr.write(f"sumpwise compare: {warning}\n")
    numeric = tuple(dict.fromkeys([*old.measures, *new.measures]))
    batch = _read(args, numeric)
    comparison = compare_rulesets(old, new, batch)
    stderr.write("".join(reject_line(batch.source, r) + "\n" for r in comparison.rejects))
    stdout.write("\n".join(terminal_lines(comparison_lines(comparison, args.old, args.new))) + "\n\n")
    stdout.write(caution_text("! ") + "\n")
    return FINDINGS if comparison.moved else OK


def _compared_ruleset(name: str, db):
    """A rule-set file, or `sha256:<fingerprint>` of one the ledger given with --db recorded."""
    if not name.startswith("sha256:"):
        return load_ruleset(name)
    if db is None:
        raise InputError(f"{name}: a stored rule set needs --db PATH, the ledger that recorded it")
    digest = name.removeprefix("sha256:")
    if len(digest) != 64 or any(c not in "0123456789abcdef" for c in digest):
        raise InputError(f"{name}: expected sha256: and the 64 hex digits of a fingerprint (sumpwise check prints it)")
    return stored_ruleset(db, digest)


def add_propose_arguments(parser: argparse.ArgumentParser) -> None:
    source = parser.add_mutually_exclusive_group(required=True)
    source.add_argument("--samples", metavar="FILE", help="CSV or JSON Lines: the site's own results")
    source.add_argument("--db", metavar="PATH", help="a ledger: its current samples")
    parser.add_argument("--class", required=True, dest="class_name", metavar="CLASS")
    parser.add_argument("--measure", required=True, metavar="MEASURE",
                        help="an input or derived measure (derived ones need --rules for new-oil values)")
    parser.add_argument("--lubricant", metavar="CODE", help="only results on this lubricant")
    parser.add_argument("--unit", action="append", default=[], metavar="UNIT_ID",
                        help="only results of this unit (repeat for several)")
    parser.add_argument("--since", type=_iso_date, metavar="DATE", help="only results sampled on or after this date")
    parser.add_argument("--until", type=_iso_date, metavar="DATE", help="only results sampled on or before this date")
    parser.add_argument("--pool-lubricants", action="store_true",
                        help="pool the results of several lubricants (refused by default: ASTM E2412 Annex A3)")
    parser.add_argument("--rules", metavar="RULESET",
                        help="rule set for new-oil values, declared measures and the grade ladder")
    parser.add_argument("--direction", choices=("above", "below"),
                        help="above (default) or below (default for bn, rpvot and their retained %%)")
    parser.add_argument("--method", choices=("auto", "spc", "percentile"), default="auto",
                        help="auto (default): a normality test picks spc or percentile")
    parser.add_argument("--rule-id", metavar="ID", help="id of the proposed rule")
    parser.add_argument("--out", metavar="PATH", type=output_file,
                        help="write the YAML snippet here instead of standard output")
    _sample_options(parser)


def run_propose_limits(args, stdout, stderr) -> int:
    """Print the figures and a YAML ladder snippet; refuse (exit 2) when there is too little data."""
    refuse_overwriting([("--out", args.out)], [("the samples file", args.samples), ("the ledger --db", args.db),
                                               ("the rule set", args.rules), ("--columns", args.columns)])
    ruleset = load_ruleset(args.rules) if args.rules else None
    batch = _read(args, ruleset.measures if ruleset else ())
    stderr.write("".join(reject_line(batch.source, r) + "\n" for r in batch.rejects))  # as grade writes them
    filters = Filters(args.lubricant, tuple(args.unit), args.since, args.until, args.pool_lubricants)
    try:
        found = propose_from_samples(batch, args.class_name, args.measure, args.lubricant, ruleset,
                                     args.direction, args.method, filters=filters)
    except (NotEnoughData, Refused) as exc:
        stderr.write(f"sumpwise propose-limits: refused, no limit proposed: {exc}\n")
        return USAGE
    text = snippet(found, args.rule_id)
    if args.out:
        with open(args.out, "w", encoding="utf-8", newline="") as out:
            out.write(text)
        stdout.write("\n".join(figure_lines(found)) + f"\nwrote {args.out}\n" + caution_text("! ") + "\n")
    else:
        stdout.write(text)
    return OK


def _iso_date(text: str) -> str:
    try:
        return dt.date.fromisoformat(text).isoformat()
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a date as YYYY-MM-DD, found {text!r}") from None


def _sample_options(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--columns", metavar="MAP", help="column map YAML: lab column names and units")
    parser.add_argument("--input-format", choices=("csv", "jsonl"),
                        help="format of the samples (default: from the file name)")


def _read(args, numeric: tuple):
    if args.db is not None:
        return stored_samples(args.db)
    numeric = tuple(numeric)  # the rule sets' declared measures: a map may name them, as grade's may
    columns = load_column_map(args.columns, numeric, numeric) if args.columns else None
    return read_samples(args.samples, None, columns, args.input_format, numeric)
