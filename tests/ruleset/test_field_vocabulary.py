"""A `method` field condition is read in the vocabulary rows are read in.

Intake reads a row's `method` through the FTIR method vocabulary: `differential` (ASTM D7418's
word for spectral subtraction) becomes `subtraction`. A rule testing `method: differential`
compared the rule's word with the row's canonical one and never fired, with no word from `check`.
"""

from __future__ import annotations

import json

from sumpwise.ruleset.compiler import check_ruleset
from tests.conftest import ROOT, run_cli

SAMPLES = ("sample_id,unit_id,class,lubricant,sampled_on,oil_hours,kv40,an,water,method,oxidation\n"
           "BP-1,HP-1,hydraulic,HYD-46-M,2026-01-05,1000,46.1,0.21,40,differential,3.0\n"
           "BP-2,HP-2,hydraulic,HYD-46-M,2026-01-05,1000,46.1,0.21,40,direct,3.0\n")


def _rules(tmp_path, word: str):
    path = tmp_path / "site.yaml"
    path.write_text(f"""ruleset: brackwater-method-test
version: 1
extends: [{ROOT / "rules" / "hydraulic.yaml"}]
classes:
  hydraulic:
    rules:
      - id: read-by-subtraction
        when: {{field: method, equals: {word}}}
        grade: watch
        message: Read by spectral subtraction; confirm against the lab's new-oil reference
        source: site practice
""")
    return path


def test_a_rule_on_method_differential_fires_on_a_row_read_by_differential(tmp_path):
    samples = tmp_path / "samples.csv"
    samples.write_text(SAMPLES)
    for word in ("differential", "Subtraction", "spectral subtraction"):
        run = run_cli("grade", samples, "--rules", _rules(tmp_path, word), "--record", "compact")
        records = {r["sample_id"]: r for r in map(json.loads, run.out.splitlines())}
        fired = {sid: [reason["rule"] for reason in r["reasons"]] for sid, r in records.items()}
        assert fired == {"BP-1": ["read-by-subtraction"], "BP-2": []}, (word, fired)


def test_a_method_outside_the_vocabulary_is_an_error_at_its_line(tmp_path):
    checked = check_ruleset(_rules(tmp_path, "infrared"))
    [problem] = [p for p in checked.problems if p.severity == "error"]
    assert (problem.code, problem.line, problem.path) == ("C018", 8, "$.classes.hydraulic.rules[0].when.equals")
    assert "infrared" in problem.message
