"""The authoring commands behind sumpwise.cli.main: `check` (validity, lint, examples), `compare`, `propose-limits`.

Exit codes are sumpwise.cli.main's: 0 done, 2 invalid rule set or input (or, for check, a
failed example or --strict with warnings), 3 findings (`compare`: a sample moved).
"""

from __future__ import annotations

import argparse

from sumpwise.cli.options import output_file
from sumpwise.render.safe_text import terminal_lines
from sumpwise.ledger.audit import stored_samples
from sumpwise.vocabulary.cautions import caution_text
from sumpwise.authoring.compare import compare_rulesets, comparison_lines
from sumpwise.ruleset.compiler import load_ruleset
from sumpwise.authoring.examples import check_examples
from sumpwise.authoring.lint import lint_ruleset
from sumpwise.vocabulary.problems import InvalidFile
from sumpwise.authoring.limit_statistics import NotEnoughData
from sumpwise.authoring.proposals import figure_lines, propose_from_samples, snippet
from sumpwise.intake.samples import load_column_map, read_samples

OK, USAGE, FINDINGS = 0, 2, 3


def run_check(paths, strict: bool, stdout, stderr) -> int:
    """Validate, lint and run the examples of each rule set; diagnostics to stderr, a verdict line each."""
    failed = 0
    for path in paths:
        try:
            rs = load_ruleset(path)
        except InvalidFile as exc:
            stderr.write(f"{exc}\n")
            failed += 1
            continue
        warnings = lint_ruleset(rs)
        failures = check_examples(rs)
        for problem in warnings:
            stderr.write(problem.render() + "\n")
        for failure in failures:
            stderr.write(failure.render() + "\n")
        rules = sum(len(rs.rules_for(name)) for name in rs.classes)
        held = len(rs.examples) - len(failures)
        verdict = "failed" if failures or (strict and warnings) else "ok"
        failed += verdict == "failed"
        strict_note = " (--strict: warnings are errors)" if strict and warnings else ""
        stdout.write(f"{path}: {verdict}: rule set {rs.id} version {rs.version}, {len(rs.classes)} class(es), "
                     f"{rules} rule(s), {len(rs.caveats)} caveat(s), sha256 {rs.sha256}; "
                     f"{len(warnings)} warning(s){strict_note}; {held} of {len(rs.examples)} example(s) hold\n")
    return USAGE if failed else OK


def add_compare_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("old", metavar="OLD_RULESET")
    parser.add_argument("new", metavar="NEW_RULESET")
    source = parser.add_mutually_exclusive_group(required=True)
    source.add_argument("--samples", metavar="FILE", help="CSV or JSON Lines samples to grade")
    source.add_argument("--db", metavar="PATH", help="a ledger: its current samples")
    _sample_options(parser)


def run_compare(args, stdout, stderr) -> int:
    """Grade the samples under both rule sets; exit 3 when any sample moves, so a review can be guarded."""
    old, new = load_ruleset(args.old), load_ruleset(args.new)
    numeric = tuple(dict.fromkeys([*old.measures, *new.measures]))
    batch = _read(args, numeric)
    comparison = compare_rulesets(old, new, batch)
    stdout.write("\n".join(terminal_lines(comparison_lines(comparison, args.old, args.new))) + "\n\n")
    stdout.write(caution_text("! ") + "\n")
    return FINDINGS if comparison.moved else OK


def add_propose_arguments(parser: argparse.ArgumentParser) -> None:
    source = parser.add_mutually_exclusive_group(required=True)
    source.add_argument("--samples", metavar="FILE", help="CSV or JSON Lines: the site's own results")
    source.add_argument("--db", metavar="PATH", help="a ledger: its current samples")
    parser.add_argument("--class", required=True, dest="class_name", metavar="CLASS")
    parser.add_argument("--measure", required=True, metavar="MEASURE",
                        help="an input or derived measure (derived ones need --rules for new-oil values)")
    parser.add_argument("--lubricant", metavar="CODE", help="only results on this lubricant")
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
    ruleset = load_ruleset(args.rules) if args.rules else None
    batch = _read(args, ruleset.measures if ruleset else ())
    try:
        found = propose_from_samples(batch, args.class_name, args.measure, args.lubricant, ruleset,
                                     args.direction, args.method)
    except NotEnoughData as exc:
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


def _sample_options(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--columns", metavar="MAP", help="column map YAML: lab column names and units")
    parser.add_argument("--input-format", choices=("csv", "jsonl"),
                        help="format of the samples (default: from the file name)")


def _read(args, numeric: tuple):
    if args.db is not None:
        return stored_samples(args.db)
    columns = load_column_map(args.columns) if args.columns else None
    return read_samples(args.samples, None, columns, args.input_format, numeric)
