"""`--db` as the input of compare, propose-limits and report: the ledger's current samples
and results stand in for a samples or results file."""

import re

import numpy as np
import pytest
from conftest import DATA, run_cli

DRAFT = DATA / "rulesets" / "draft.yaml"


@pytest.fixture
def ledger(tmp_path):
    rng = np.random.default_rng(3)
    rows = ["sample_id,unit_id,class,lubricant,sampled_on,oil_hours,an,kv40"]
    for i in range(60):
        rows.append(f"S{i:03d},T{i % 3},steam-turbine,TURB-46-M,2026-{1 + i // 6:02d}-{1 + i % 6 * 4:02d},"
                    f"{1000 + 100 * i},{0.07 + rng.normal(0.1, 0.04):.3f},{45.9 * rng.normal(1, 0.02):.2f}")
    samples = tmp_path / "samples.csv"
    samples.write_text("\n".join(rows) + "\n")
    db = tmp_path / "ledger.db"
    run = run_cli("grade", samples, "--rules", DRAFT, "--db", db, "--out", tmp_path / "results.jsonl")
    assert run.code == 0, run.err
    return tmp_path, db


def test_compare_from_the_ledger_moves_the_same_samples_as_from_the_file(ledger, tmp_path):
    folder, db = ledger
    tighter = tmp_path / "tighter.yaml"
    tighter.write_text(DRAFT.read_text().replace("above: {watch: 0.1, alert: 0.2, urgent: 0.4}",
                                                 "above: {watch: 0.05, alert: 0.2, urgent: 0.4}")
                       .replace("extends: [draft-parent.yaml]", f"extends: [{DATA / 'rulesets' / 'draft-parent.yaml'}]"))
    from_db = run_cli("compare", DRAFT, tighter, "--db", db)
    from_file = run_cli("compare", DRAFT, tighter, "--samples", folder / "samples.csv")
    assert from_db.code == from_file.code == 3
    moved = re.search(r"(\d+) moved", from_db.out).group(1)
    assert moved == re.search(r"(\d+) moved", from_file.out).group(1) and int(moved) > 0


def test_propose_limits_from_the_ledger(ledger):
    folder, db = ledger
    run = run_cli("propose-limits", "--db", db, "--class", "steam-turbine", "--measure", "an_rise",
                  "--rules", DRAFT)
    assert run.code == 0, run.err
    assert "# count: 60 result(s) used" in run.out and "measure: an_rise" in run.out


def test_report_from_the_ledger_draws_the_recorded_rule_set(ledger, tmp_path):
    folder, db = ledger
    out = tmp_path / "report.html"
    run = run_cli("report", "--db", db, "--out", out)
    assert run.code == 0, run.err
    assert "60 result(s)" in run.err and "with the rule set's limits" in run.err
    html = out.read_text()
    import json
    records = [json.loads(line) for line in (folder / "results.jsonl").read_text().splitlines()]
    flagged = [r["sample_id"] for r in records if r["level"]]
    assert flagged and all(sample_id in html for sample_id in flagged)
    assert records[0]["ruleset"]["sha256"] in html


def test_db_and_samples_are_one_or_the_other(ledger):
    folder, db = ledger
    run = run_cli("compare", DRAFT, DRAFT, "--db", db, "--samples", folder / "samples.csv")
    assert run.code == 2 and "not allowed with argument" in run.err
