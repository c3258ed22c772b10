"""`report --db` over a ledger graded under two versions of a rule set: every sample keeps the
grade its own rule set gave, each unit is drawn against the rule set of its latest sample, and
the report names both rule sets.

The second version only lowers the steam-turbine water watch limit (site practice, invented);
the Brackwater scenario is the invented demo site.
"""

from __future__ import annotations

import re

from sumpwise.ledger.audit import stored_results
from tests.conftest import ROOT, run_cli

SCENARIO = ROOT / "scenarios" / "brackwater"


def _rows(units, first, last):
    """The scenario's rows for `units`, the first..last (1-based) of each unit, as CSV text."""
    header, *rows = (SCENARIO / "samples.csv").read_text().splitlines()
    picked = [row for unit in units for row in [r for r in rows if r.split(",")[1] == unit][first - 1:last]]
    return "\n".join([header, *picked]) + "\n"


def _ledger(tmp_path):
    site = tmp_path / "site.yaml"
    site.write_text((SCENARIO / "site.yaml").read_text().replace("../../rules/", str(ROOT / "rules") + "/"))
    text = site.read_text()
    assert "above: {watch: 100, alert: 300, urgent: 1000}" in text
    tighter = tmp_path / "tighter.yaml"
    tighter.write_text(re.sub(r"(?m)^version: .*$", "version: 40", text).replace(
        "above: {watch: 100, alert: 300, urgent: 1000}", "above: {watch: 50, alert: 300, urgent: 1000}"))
    first, second = tmp_path / "first.csv", tmp_path / "second.csv"
    first.write_text(_rows(["ST-1", "ST-2"], 1, 4))
    second.write_text(_rows(["ST-1"], 5, 8))  # ST-2 is not sampled again: its latest stays under version 4
    db = tmp_path / "ledger.db"
    for samples, rules in ((first, site), (second, tighter)):
        run = run_cli("grade", samples, "--rules", rules, "--db", db, "--out", tmp_path / "r.jsonl")
        assert run.code == 0, run.err
    return db


def _sections(html):
    return {re.search(r'data-unit="([^"]+)"', s).group(1): s for s in html.split('<section class="unit"')[1:]}


def _water_limits(section):
    """The limit labels drawn on a unit's water plot."""
    plot = next(f for f in section.split("<figure>")[1:] if 'aria-label="water (ppm)"' in f).split("</figure>")[0]
    return re.findall(r">(watch|alert|urgent) (\d+)</text>", plot)


def test_report_of_a_ledger_under_two_rule_sets_draws_each_unit_against_its_latest_samples_own(tmp_path):
    db = _ledger(tmp_path)
    out = tmp_path / "report.html"
    run = run_cli("report", "--db", db, "--out", out)
    assert run.code == 0, run.err
    html = out.read_text()
    results, rulesets = stored_results(db)
    assert len(rulesets) == 2 and {rs.version for rs in rulesets.values()} == {4, 40}
    for sha, rs in rulesets.items():  # the header lists both: id, version, start of the fingerprint
        assert f"<b>{rs.id}</b> version {rs.version} (sha256 <code>{sha[:12]}</code>" in html
    units = _sections(html)
    latest = {}
    for result in sorted(results, key=lambda r: r.sampled_on):
        latest[result.unit_id] = rulesets[result.ruleset_sha256]
        assert result.sample_id in html  # every sample is in the report
    # ST-1's latest sample was graded under version 40 (water watch 50 ppm): its plot draws that limit
    assert latest["ST-1"].version == 40
    assert ("watch", "50") in _water_limits(units["ST-1"]) and ("watch", "100") not in _water_limits(units["ST-1"])
    assert "graded under 2 rule sets" in units["ST-1"]
    # ST-2 was only graded under version 4 (water watch 100 ppm)
    assert latest["ST-2"].version == 4
    assert ("watch", "100") in _water_limits(units["ST-2"]) and ("watch", "50") not in _water_limits(units["ST-2"])
    assert "graded-by" not in units["ST-2"]


def test_each_sample_keeps_the_grade_its_own_rule_set_gave(tmp_path):
    db = _ledger(tmp_path)
    results, rulesets = stored_results(db)
    # A water reading between 50 and 100 ppm is normal under version 4 and watch under version 40.
    between = [r for r in results if 50 < ((r.to_record().get("values") or {}).get("water") or 0) <= 100]
    assert {rulesets[r.ruleset_sha256].version for r in between} == {4, 40}
    for result in between:
        fired = {reason.rule for reason in result.reasons}
        assert ("water" in fired) == (rulesets[result.ruleset_sha256].version == 40)
