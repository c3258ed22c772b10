"""The `report` command: read results (and rejects, and the rule set), write one HTML file.

The file reading lives here; sumpwise.render.html_report turns records into HTML.
"""

from __future__ import annotations

from pathlib import Path

from sumpwise.cli.exit_codes import OK
from sumpwise.derive.trends import unit_id_key
from sumpwise.cli.options import batch_number, output_file, refuse_overwriting
from sumpwise.ledger.audit import corrected_later, recorded_rejects, stored_results, unit_forecasts
from sumpwise.render.jsonl import dumps
from sumpwise.results.facts import ENGINE_CAVEATS
from sumpwise.results.records import COMPACT, next_step_record
from sumpwise.ruleset.compiler import load_ruleset
from sumpwise.vocabulary.problems import InputError
from sumpwise.render.html_report import parse_rejects, parse_results, render_report, rejects_only_report


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


def with_texts(records, ruleset, name: str) -> tuple:
    """Compact records with their texts (notice, messages, sources, next steps) put back from
    the rule set they were graded with, which must be the one given: compact records carry
    those texts by reference to its fingerprint."""
    sha = records[0]["ruleset"]["sha256"]
    if ruleset is None or ruleset.sha256 != sha:
        given = "no --rules" if ruleset is None else f"--rules is {ruleset.id} sha256 {ruleset.sha256[:12]}..."
        raise InputError(f"{name}: compact records (grade --record compact) carry no notice, messages or sources; "
                         f"they need the rule set they were graded with, {records[0]['ruleset']['id']} sha256 "
                         f"{sha[:12]}... ({given}): give it with --rules")
    caveats = {c.id: c for c in ruleset.caveats}
    filled = []
    for record in records:
        if record.get("form") != COMPACT:
            filled.append(record)
            continue
        rules = ({rule.id: rule for rule in ruleset.rules_for(record["class"])}
                 if record.get("class") in ruleset.classes else {})
        reasons = [_texts_of(r, rules.get(r["rule"]), name, record["sample_id"]) for r in record["reasons"]]
        notes = [dict(c, source=ENGINE_CAVEATS[c["caveat"]].source) if c["caveat"] in ENGINE_CAVEATS
                 else _texts_of(c, caveats.get(c["caveat"]), name, record["sample_id"]) for c in record["caveats"]]
        filled.append(dict(record, notice=ruleset.notice, reasons=reasons, caveats=notes))
    return tuple(filled)


def _texts_of(entry: dict, source, name: str, sample_id: str) -> dict:
    """A reason or caveat with its rule's (or caveat's) message, source and next step."""
    key = "rule" if "rule" in entry else "caveat"
    if source is None:
        raise InputError(f"{name}: sample {sample_id}: {key} '{entry[key]}' is not in the rule set given")
    texts = {"message": source.message, "source": source.source}
    if source.next_step is not None:
        texts["next_step"] = next_step_record(source.next_step)
    return {**entry, **texts}


def write_report(results, out, rejects=None, rules=None, title: str = "", db=None, batch=None) -> dict:
    """Read the inputs, write the report; returns counts for the command's summary line.

    From a ledger (`db`), the rule sets the results were graded with come from the ledger too,
    each sample with its own; `rules`, if given, must be one of them. Compact records need
    `rules`: their texts come from it. Forecasts are those the records carry (a results file
    of format 3); a ledger stores none, so each unit's stored samples are re-graded for them
    (nothing is written) and each forecast is put on the record of the sample it was made
    from, as `grade` writes it.
    """
    rulesets = None
    ruleset = load_ruleset(rules) if rules else None
    if db is not None:
        try:
            stored, rulesets = stored_results(db, batch)
        except InputError as exc:  # a batch whose every row was rejected recorded no results, only its rejects
            refused = ledger_rejects(db, batch) if batch is not None and rejects is None else ()
            if not refused or "holds no results" not in str(exc):
                raise
            return _written(rejects_only_report(refused, ruleset, title or ""), out, (), len(refused))
        records = parse_results([dumps(r.to_record()) for r in stored], f"ledger {db}", one_ruleset=False)
        if ruleset is not None and ruleset.sha256 not in rulesets:
            raise InputError(f"{rules}: rule set {ruleset.id} sha256 {ruleset.sha256[:12]}... graded none of the "
                             f"ledger's results; its limits would be drawn wrongly (leave out --rules: the "
                             f"ledger holds the rule sets it graded with)")
        records = with_forecasts(records, db, stored)
    else:
        records = parse_results(_text(results).splitlines(), str(results), allow_empty=rejects is not None)
        if any(r.get("form") == COMPACT for r in records):
            records = with_texts(records, ruleset, str(results))
    rejected = parse_rejects(_text(rejects), str(rejects)) if rejects else ()
    if not records and not rejected:
        raise InputError(f"{results}: no result records in the file, and no rejected rows in {rejects}")
    if db is not None and rejects is None:  # the ledger recorded its batches' rejected rows: count and list them
        rejected = ledger_rejects(db, batch)
    corrected = corrected_later(db, batch) if db is not None and batch is not None else ()
    html = render_report(records, rejected, ruleset, title=title or "",
                         rejects_given=rejects is not None or db is not None, rulesets=rulesets, corrected=corrected)
    return _written(html, out, records, len(rejected))


def _written(html: str, out, records, rejected: int) -> dict:
    """Write the report; the counts for the command's summary line."""
    Path(out).write_text(html, encoding="utf-8")
    flagged = sum(1 for r in records if (r.get("level") or 0) > 0)
    return {"records": len(records), "flagged": flagged, "rejected": rejected, "bytes": len(html.encode())}


def ledger_rejects(db, batch: int | None = None) -> tuple:
    """The rejected rows the ledger recorded (of one batch, or of all), as parse_rejects gives them,
    each with the file its batch read: a ledger's report would otherwise say none were rejected."""
    found = recorded_rejects(db)
    if batch is not None:
        found = found[found["batch"] == batch]
    found = found.astype(object).where(found.notna(), None)  # a reject of no row or no sample id: None, not NaN
    return tuple({"file": f"batch {r.batch}: {r.source}", "row": "" if r.row is None else str(int(r.row)),
                  "sample_id": r.sample_id or "", "field": str(r.field), "code": str(r.code or ""),
                  "reason": str(r.reason)}
                 for r in found.itertuples(index=False))


def with_forecasts(records, db, stored) -> tuple:
    """Ledger records with the engine's forecasts put on the samples they were made from: each
    unit's stored samples re-graded, as `history` shows them (records rebuilt from a ledger say
    null: it stores none)."""
    # One unit a spelling of its id (unit_forecasts reads every spelling): each forecast once.
    units = {unit_id_key(r.unit_id): r.unit_id for r in stored if r.unit_id is not None and r.unit_id.strip()}
    made: dict = {}
    for unit in units.values():
        for f in unit_forecasts(db, unit)[1]:
            made.setdefault(f.sample_id, []).append(f.to_record())
    return tuple(dict(r, forecasts=made.get(r["sample_id"], [])) for r in records)


def run(args, stdout, stderr) -> int:
    if args.batch is not None and args.db is None:
        raise InputError("sumpwise report: --batch goes with --db")
    refuse_overwriting([("--out", args.out)], [("--results", args.results), ("the ledger --db", args.db),
                                               ("--rejects", args.rejects), ("the rule set", args.rules)])
    counts = write_report(args.results, args.out, args.rejects, args.rules, args.title or "", args.db, args.batch)
    limits = ("with the rule set's limits" if args.rules or args.db else "without limits (no --rules)") if counts[
        "records"] else "none: no result records, the rejected rows only"
    stderr.write(f"sumpwise: report {args.out}: {counts['records']} result(s), {counts['flagged']} flagged, "
                 f"{counts['rejected']} rejected row(s), plots {limits}\n")
    return OK
