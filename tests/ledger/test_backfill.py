"""A late result (a sample dated before samples the ledger already holds for its unit).

The later samples' trends were graded without it. Their recorded verdicts stand (replay
grades each batch after what the ledger held then), but the run must say which of them
would now grade otherwise, or a pipeline never learns that a unit it saw as normal is
climbing. The site's gearbox rule iron-climbing fires at watch when iron has risen in three
samples running (site practice, scenarios/brackwater/site.yaml); iron 20, 30, 40 ppm is two
rises, and a late 25 between them makes it three.
"""

import json

from conftest import ROOT, run_cli

from sumpwise.intake.samples import read_samples
from sumpwise.ledger.store import grade_into_ledger
from sumpwise.ruleset.compiler import load_ruleset

SITE = ROOT / "scenarios" / "brackwater" / "site.yaml"
HEADER = "sample_id,unit_id,class,lubricant,sampled_on,oil_hours,kv40,iron\n"


def _csv(tmp_path, name, *rows):
    path = tmp_path / name
    path.write_text(HEADER + "".join(f"{row}\n" for row in rows))
    return path


def _first_three(tmp_path):
    return _csv(tmp_path, "march.csv", "G1,SWP-9,gearbox,GEAR-320-PAO,2026-01-10,1000,323.3,20",
                "G3,SWP-9,gearbox,GEAR-320-PAO,2026-03-10,3000,323.3,30",
                "G4,SWP-9,gearbox,GEAR-320-PAO,2026-04-10,4000,323.3,40",
                "H1,SWP-8,gearbox,GEAR-320-PAO,2026-04-10,4000,323.3,20")


def test_a_late_result_names_the_later_samples_it_changes(tmp_path):
    site = load_ruleset(SITE)
    db = tmp_path / "site.db"
    first = grade_into_ledger(db, read_samples(_first_three(tmp_path)), site)[0]
    assert [r.grade for r in first.results()] == ["normal"] * 4
    late = _csv(tmp_path, "late.csv", "G2,SWP-9,gearbox,GEAR-320-PAO,2026-02-10,2000,323.3,25",
                "H2,SWP-8,gearbox,GEAR-320-PAO,2026-05-10,5000,323.3,21")  # H2 is later than H1: no backfill
    graded, recorded = grade_into_ledger(db, read_samples(late), site)
    assert [r.grade for r in graded.results()] == ["normal", "normal"]  # G2 itself: one rise
    assert recorded.regraded == (("G4", "SWP-9", 0, 1),)  # normal without G2, watch with it
    assert run_cli("replay", "--db", db).code == 0  # the recorded verdicts stand and replay clean


def test_a_late_result_that_changes_nothing_says_nothing(tmp_path):
    site = load_ruleset(SITE)
    db = tmp_path / "site.db"
    grade_into_ledger(db, read_samples(_first_three(tmp_path)), site)
    late = _csv(tmp_path, "late.csv", "G2,SWP-9,gearbox,GEAR-320-PAO,2026-02-10,2000,323.3,35")  # 20, 35, 30, 40
    assert grade_into_ledger(db, read_samples(late), site)[1].regraded == ()


def test_the_command_line_warns_and_fail_at_counts_it(tmp_path):
    db = tmp_path / "site.db"
    assert run_cli("grade", _first_three(tmp_path), "--rules", SITE, "--db", db, "--fail-at", "watch").code == 0
    late = _csv(tmp_path, "late.csv", "G2,SWP-9,gearbox,GEAR-320-PAO,2026-02-10,2000,323.3,25")
    summary = tmp_path / "summary.json"
    run = run_cli("grade", late, "--rules", SITE, "--db", db, "--fail-at", "watch", "--summary", summary)
    assert run.code == 3, run.err  # no record reaches watch, but a recorded sample now would
    assert "G4 (unit SWP-9): normal as graded without them, watch with them" in run.err
    assert any("G4 (unit SWP-9)" in warning for warning in json.loads(summary.read_text())["warnings"])
    assert run_cli("grade", late, "--rules", SITE, "--db", tmp_path / "other.db", "--fail-at", "watch").code == 0
