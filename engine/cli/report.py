"""The `report` command: read results (and rejects, and the rule set), write one HTML file.

The file reading lives here; sumpwise.render.html_report turns records into HTML.
"""

from __future__ import annotations

from pathlib import Path

from sumpwise.cli.options import batch_number, output_file
from sumpwise.ledger.audit import stored_results
from sumpwise.render.jsonl import dumps
from sumpwise.ruleset.compiler import load_ruleset
from sumpwise.vocabulary.problems import InputError
from sumpwise.render.html_report import parse_rejects, parse_results, render_report


def add_arguments(parser) -> None:
    source = parser.add_mutually_exclusive_group(required=True)
    source.add_argument("--results", metavar="FILE", help="JSON Lines results written by `sumpwise grade`")
    source.add_argument("--db", metavar="PATH",
                        help="a ledger: the current result of every recorded sample (or one --batch)")
    parser.add_argument("--batch", type=batch_number, metavar="N", help="with --db: only the samples batch N recorded")
    parser.add_argument("--rejects", metavar="FILE",
                        help="rejected rows written by `grade --rejects` (.csv or JSON Lines), to count them")
    parser.add_argument("--rules", metavar="RULESET",
                        help="the rule set the results were graded with: plots what each class's rules read, "
                             "with its limits")
    parser.add_argument("--title", metavar="TEXT", help="report title (default: the rule set's title)")
    parser.add_argument("--out", required=True, metavar="PATH", type=output_file, help="the HTML file to write")


def _text(path) -> str:
    try:
        return Path(path).read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError(f"{path}: no such file") from None
    except UnicodeDecodeError as exc:
        raise InputError(f"{path}: not UTF-8 text (byte {exc.start})") from None


def write_report(results, out, rejects=None, rules=None, title: str = "", db=None, batch=None,
                 forecasts=()) -> dict:
    """Read the inputs, write the report; returns counts for the command's summary line.

    From a ledger (`db`), the rule sets the results were graded with come from the ledger too,
    each sample with its own; `rules`, if given, must be one of them. `forecasts` are the grading's own (Forecast records), when
    the caller graded the samples itself; results files do not carry them.
    """
    rulesets = None
    ruleset = load_ruleset(rules) if rules else None
    if db is not None:
        stored, rulesets = stored_results(db, batch)
        records = parse_results([dumps(r.to_record()) for r in stored], f"ledger {db}", one_ruleset=False)
        if ruleset is not None and ruleset.sha256 not in rulesets:
            raise InputError(f"{rules}: rule set {ruleset.id} sha256 {ruleset.sha256[:12]}... graded none of the "
                             f"ledger's results; its limits would be drawn wrongly (leave out --rules: the "
                             f"ledger holds the rule sets it graded with)")
    else:
        records = parse_results(_text(results).splitlines(), str(results))
    rejected = parse_rejects(_text(rejects), str(rejects)) if rejects else ()
    html = render_report(records, rejected, ruleset, title=title or "", rejects_given=rejects is not None,
                         forecasts=forecasts, rulesets=rulesets)
    Path(out).write_text(html, encoding="utf-8")
    flagged = sum(1 for r in records if (r.get("level") or 0) > 0)
    return {"records": len(records), "flagged": flagged, "rejected": len(rejected), "bytes": len(html.encode())}


def run(args, stdout, stderr) -> int:
    if args.batch is not None and args.db is None:
        raise InputError("sumpwise report: --batch goes with --db")
    counts = write_report(args.results, args.out, args.rejects, args.rules, args.title or "", args.db, args.batch)
    limits = "with the rule set's limits" if args.rules or args.db else "without limits (no --rules)"
    stderr.write(f"sumpwise: report {args.out}: {counts['records']} result(s), {counts['flagged']} flagged, "
                 f"{counts['rejected']} rejected row(s), plots {limits}\n")
    return 0
