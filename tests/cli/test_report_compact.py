"""`report --results` of compact records (`grade --record compact`): their texts are by
reference to the fingerprinted rule set, so the report takes them from `--rules` when its
fingerprint matches and refuses without it. The check is against the full records of the same
grading: the two reports must be the same bytes. The Brackwater scenario is the invented demo site.
"""

from __future__ import annotations

import json

import pytest

from tests.conftest import ROOT, run_cli

SCENARIO = ROOT / "scenarios" / "brackwater"
SITE = SCENARIO / "site.yaml"


@pytest.fixture(scope="module")
def graded(tmp_path_factory):
    folder = tmp_path_factory.mktemp("compact")
    for form in ("full", "compact"):
        run = run_cli("grade", SCENARIO / "samples.csv", "--rules", SITE, "--record", form,
                      "--out", folder / f"{form}.jsonl")
        assert run.code == 0, run.err
    return folder


def test_compact_records_with_their_rule_set_render_as_the_full_records_do(graded, tmp_path):
    compact = [json.loads(line) for line in (graded / "compact.jsonl").read_text().splitlines()]
    assert all(r["form"] == "compact" and "notice" not in r for r in compact)
    assert any(r["reasons"] for r in compact) and all("message" not in x for r in compact for x in r["reasons"])
    for form in ("full", "compact"):
        run = run_cli("report", "--results", graded / f"{form}.jsonl", "--rules", SITE,
                      "--out", tmp_path / f"{form}.html")
        assert run.code == 0, run.err
    html = (tmp_path / "compact.html").read_text()
    assert html == (tmp_path / "full.html").read_text()
    flagged = next(r for r in compact if r["reasons"])
    assert flagged["sample_id"] in html


@pytest.mark.parametrize("rules", [None, ROOT / "rules" / "gearbox.yaml"], ids=["no-rules", "other-rules"])
def test_compact_records_without_the_rule_set_they_were_graded_with_are_refused(graded, tmp_path, rules):
    extra = ["--rules", rules] if rules else []
    run = run_cli("report", "--results", graded / "compact.jsonl", *extra, "--out", tmp_path / "r.html")
    assert run.code == 2
    assert "compact records" in run.err and "need the rule set they were graded with" in run.err
    assert not (tmp_path / "r.html").exists()
