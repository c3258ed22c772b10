"""Trend measures whose predecessor is in the ledger: a declared wear metal, a particle count,
an ISO 4406 scale number and a differential FTIR reading, graded by two nightly `grade --db`
runs; the second run's steps must use the sample the first run stored.

Expected steps are worked by hand from the two samples (22 - 10 ppm iron; 90 - 30 particles
>= 14 um(c) per mL; 9.0 - 4.0 abs/cm). The scale numbers are from ISO 4406:2021 Table 1:
more than 20 and up to 40 particles per mL is scale number 12, more than 80 and up to 160 is
14. The rule set's limits are invented for the test (tests/data/ledger/wear-rules.yaml).
"""

from __future__ import annotations

import io
import json

import pytest

import sumpwise
from sumpwise.cli.main import main
from sumpwise.ledger.audit import replay, unit_history
from sumpwise.render.jsonl import jsonl_lines
from tests.conftest import DATA

RULES = DATA / "ledger" / "wear-rules.yaml"
HEADER = "sample_id,unit_id,class,lubricant,sampled_on,oil_hours,iron,particles_4um,particles_6um,particles_14um," \
         "oxidation,method,lab\n"
FIRST = HEADER + "W-01,HPU-1,hydraulic,HYD-46,2026-03-02,1000,10,900,350,30,4.0,subtraction,lab-a\n" \
                 "W-11,HPU-2,hydraulic,HYD-46,2026-03-02,500,5,500,200,25,2.0,subtraction,lab-a\n"
SECOND = HEADER + "W-02,HPU-1,hydraulic,HYD-46,2026-03-09,1168,22,1000,400,90,9.0,subtraction,lab-a\n" \
                  "W-12,HPU-2,hydraulic,HYD-46,2026-03-09,668,6,520,210,28,2.5,subtraction,lab-a\n"


def cli(*argv) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    code = main([str(a) for a in argv], io.StringIO(""), out, err)
    return code, out.getvalue(), err.getvalue()


@pytest.fixture
def nightly(tmp_path):
    """Two nightly imports into one ledger; the second night's records."""
    db = tmp_path / "site.db"
    for night, text in (("night-1", FIRST), ("night-2", SECOND)):
        samples, out = tmp_path / f"{night}.csv", tmp_path / f"{night}.jsonl"
        samples.write_text(text)
        code, _, err = cli("grade", samples, "--rules", RULES, "--db", db, "--out", out)
        assert code == 0, err
    records = {r["sample_id"]: r for r in map(json.loads, (tmp_path / "night-2.jsonl").read_text().splitlines())}
    return db, records


def test_second_import_steps_use_the_samples_the_first_stored(nightly):
    _, records = nightly
    fired = {r["rule"]: (r["measure"], r["value"], r["grade"]) for r in records["W-02"]["reasons"]}
    assert fired == {"iron-jump": ("iron_step", 12.0, "watch"),
                     "dirt-count-jump": ("particles_14um_step", 60.0, "watch"),
                     "dirt-code-jump": ("iso4406_14um_step", 2.0, "watch"),  # 12 -> 14, ISO 4406 Table 1
                     "carbonyl-differential-jump": ("oxidation_differential_step", 5.0, "watch")}
    assert records["W-02"]["not_evaluated"] == []
    # HPU-2's small steps are evaluated too, and stay normal: they were compared, not skipped
    assert (records["W-12"]["grade"], records["W-12"]["reasons"], records["W-12"]["not_evaluated"]) == \
           ("normal", [], [])


def test_two_imports_give_the_records_of_one_batch(nightly, tmp_path):
    db, _ = nightly
    whole = sumpwise.grade(sumpwise.read_samples(io.StringIO(FIRST + SECOND[len(HEADER):]), "both.csv"),
                           sumpwise.load_ruleset(RULES))
    wanted = {json.loads(line)["sample_id"]: json.loads(line) for line in "".join(jsonl_lines(whole)).splitlines()}
    for line in (tmp_path / "night-2.jsonl").read_text().splitlines():
        record = json.loads(line)
        assert record["reasons"] == wanted[record["sample_id"]]["reasons"]
        assert record["grade"] == wanted[record["sample_id"]]["grade"]


def test_history_and_replay_show_the_steps(nightly):
    db, _ = nightly
    unit = unit_history(db, "HPU-1")
    assert unit[["iron", "particles_14um", "iso4406_14um", "oxidation_differential"]].to_numpy().tolist() == \
        [[10.0, 30.0, 12.0, 4.0], [22.0, 90.0, 14.0, 9.0]]
    assert unit["fired"].iloc[1].split(";") == ["iron-jump=watch", "dirt-count-jump=watch", "dirt-code-jump=watch",
                                                "carbonyl-differential-jump=watch"]
    code, out, err = cli("history", "HPU-1", "--db", db)
    assert code == 0, err
    head = next(line for line in out.splitlines() if line.startswith("sampled"))
    assert head.split()[-5:] == ["oxidation_differential", "particles_14um", "iso4406_14um", "iron", "grade"]
    assert "W-02: iron-jump=watch" in out
    report = replay(db)  # replay re-grades night 2 after night 1's stored samples: the same steps
    assert (report.checked, report.differences) == (4, ())
