"""An auditor's questions over months of weekly imports (tests/data/ledger_found6, see its README):
two weeks under version 1 of a rule set, two under version 2 (water and iron tightened), a week
with two rejected rows, a correction with its reason and author, and a late result dated before
recorded samples. The lab writes unit ids in several cases (`HP-4`, `hp-4`, `Hp-7`).

Every `find` is checked against an independent recomputation: pandas over the JSON Lines
records `grade` wrote for the same runs, with corrected samples replaced by their correction.
Spellings that differ only in case or surrounding spaces are one unit, as grading, `history`
and `explain` take them (common practice, no source).
"""

from __future__ import annotations

import io
import json
import re
import shutil

import pandas as pd
import pytest

from sumpwise.vocabulary.cautions import CAUTIONS
from tests.conftest import DATA, run_cli

HERE = DATA / "ledger_found6"
REASON, AUTHOR = "lab re-ran Karl Fischer: transcription error", "J. Okafor"
# (file, rule-set version, extra options), in the order the site imported them.
RUNS = (("week-2026-09-07.csv", 1, ()), ("week-2026-09-14.csv", 1, ()), ("week-2026-10-05.csv", 2, ()),
        ("week-2026-10-12.csv", 2, ()),
        ("correction-2026-10-14.csv", 2, ("--correction", "--reason", REASON, "--author", AUTHOR)),
        ("late-2026-09-21.csv", 2, ()))


@pytest.fixture(scope="module")
def site(tmp_path_factory):
    """The ledger after every run, replay checked clean after each; the records each run wrote."""
    folder = tmp_path_factory.mktemp("found6")
    for name in [r[0] for r in RUNS] + ["rules-v1.yaml", "rules-v2.yaml"]:
        shutil.copyfile(HERE / name, folder / name)  # sources recorded as this folder's files
    db, records = folder / "site.db", []
    for k, (name, version, extra) in enumerate(RUNS):
        out = folder / f"run{k}.jsonl"
        graded = run_cli("grade", folder / name, "--rules", folder / f"rules-v{version}.yaml", "--db", db,
                         "--out", out, "--rejects", folder / f"rejects{k}.csv", *extra)
        assert graded.code == 0, graded.err
        replayed = run_cli("replay", "--db", db)
        assert replayed.code == 0 and "integrity: clean" in replayed.out, replayed.out
        records += [dict(json.loads(line), run=k) for line in out.read_text().splitlines()]
    return db, records


def _current(records) -> pd.DataFrame:
    """The oracle: every record `grade` wrote, the last run's version of each sample id kept."""
    frame = pd.DataFrame([{"sample_id": r["sample_id"], "unit_id": r["unit_id"], "sampled_on": r["sampled_on"],
                           "grade": r["grade"], "level": r["level"], "version": str(r["ruleset"]["version"]),
                           "sha256": r["ruleset"]["sha256"], "rules": {x["rule"] for x in r["reasons"]}, "run": r["run"]}
                          for r in records])
    return frame.sort_values("run").drop_duplicates("sample_id", keep="last")


def _found(db, *options) -> list[dict]:
    listed = run_cli("find", "--db", db, "--format", "jsonl", *options)
    assert listed.code == 0, listed.err
    return [json.loads(line) for line in listed.out.splitlines()]


@pytest.mark.parametrize("spelling", ["HP-4", "hp-4", "Hp-4", " HP-4 "])
def test_find_by_unit_takes_every_spelling_as_grading_does_and_shows_each_as_written(site, spelling):
    db, records = site
    oracle = _current(records)
    mine = oracle[oracle["unit_id"].str.strip().str.casefold() == "hp-4"]
    found = _found(db, "--unit", spelling)
    assert sorted(r["sample_id"] for r in found) == sorted(mine["sample_id"]) and len(found) == 5
    assert {r["sample_id"]: r["unit_id"] for r in found} == dict(zip(mine["sample_id"], mine["unit_id"]))
    assert {r["unit_id"] for r in found} == {"HP-4", "hp-4"}  # as the lab wrote them


def test_find_by_unit_no_spelling_recorded_still_refused_with_a_hint(site):
    db, _ = site
    refused = run_cli("find", "--db", db, "--unit", "HP4")
    assert refused.code == 2 and "no sample of unit 'HP4'" in refused.err and "HP-4" in refused.err


@pytest.mark.parametrize("options, keep", [
    (("--rule", "water"), lambda o: o["rules"].map(lambda rules: "water" in rules)),
    (("--rule", "iron"), lambda o: o["rules"].map(lambda rules: "iron" in rules)),
    (("--grade", "watch"), lambda o: o["grade"] == "watch"),
    (("--grade", "normal"), lambda o: o["grade"] == "normal"),
    (("--at-least", "1"), lambda o: o["level"].fillna(-1) >= 1),
    (("--since", "2026-09-14", "--until", "2026-10-05"),
     lambda o: (o["sampled_on"] >= "2026-09-14") & (o["sampled_on"] <= "2026-10-05")),
    (("--version", "1"), lambda o: o["version"] == "1"),
    (("--version", "2", "--rule", "water"),
     lambda o: (o["version"] == "2") & o["rules"].map(lambda rules: "water" in rules)),
    (("--unit", "hp-7", "--version", "2"),
     lambda o: (o["unit_id"].str.casefold() == "hp-7") & (o["version"] == "2")),
])
def test_find_returns_exactly_what_the_records_of_the_same_runs_say(site, options, keep):
    db, records = site
    oracle = _current(records)
    expected = oracle[keep(oracle).to_numpy(dtype=bool)]
    found = _found(db, *options)
    assert sorted(r["sample_id"] for r in found) == sorted(expected["sample_id"])
    by_id = expected.set_index("sample_id")
    for r in found:  # each with the grade and the rule set that gave it
        assert (r["grade"], r["version"], r["ruleset_sha256"]) == tuple(by_id.loc[r["sample_id"], ["grade", "version",
                                                                                                    "sha256"]])


def test_find_by_rule_set_fingerprint_matches_the_records(site):
    db, records = site
    oracle = _current(records)
    for sha in oracle["sha256"].unique():
        assert sorted(r["sample_id"] for r in _found(db, "--ruleset", sha[:12])) == \
            sorted(oracle.loc[oracle["sha256"] == sha, "sample_id"])


def test_the_find_table_carries_the_cautions(site):
    db, _ = site
    table = run_cli("find", "--db", db, "--grade", "watch")
    assert table.code == 0 and all(line in table.out for line in CAUTIONS)
    empty = run_cli("find", "--db", db, "--unit", "GB-9", "--grade", "watch")
    assert empty.out.startswith("0 sample(s)\n") and all(line in empty.out for line in CAUTIONS)


def test_report_draws_one_unit_once_whatever_its_spellings(site, tmp_path):
    db, records = site
    out = tmp_path / "report.html"
    assert run_cli("report", "--db", db, "--out", out).code == 0
    html = out.read_text()
    sections = re.findall(r'<section class="unit" id="unit-([^"]*)"', html)
    units = _current(records)["unit_id"].str.strip().str.casefold()
    assert len(sections) == units.nunique() == 4
    assert sorted(s.casefold() for s in sections) == sorted(units.unique())
    assert "&lsquo;HP-4&rsquo;, &lsquo;hp-4&rsquo;" in html  # both spellings shown as the lab wrote them
    hp4 = html[html.index('id="unit-HP-4"'):]
    hp4 = hp4[:hp4.index("</section>")]
    assert "5 samples" in hp4  # the unit's five current samples in one card
    assert all(line in html for line in CAUTIONS)


def test_report_from_the_records_groups_spellings_as_well(site, tmp_path):
    _, records = site
    kept = _current(records)
    kept = kept[kept["version"] == "2"]  # a results file holds one rule set's results: version 2's runs
    lines = [json.dumps({k: v for k, v in r.items() if k != "run"}) for r in records
             if (r["sample_id"], r["run"]) in set(zip(kept["sample_id"], kept["run"]))]
    results, out = tmp_path / "v2.jsonl", tmp_path / "report.html"
    results.write_text("\n".join(lines) + "\n")
    made = run_cli("report", "--results", results, "--out", out)
    assert made.code == 0, made.err
    html = out.read_text()
    assert len(re.findall(r'<section class="unit"', html)) == kept["unit_id"].str.casefold().nunique() == 4
    assert "&lsquo;hp-4&rsquo;, &lsquo;HP-4&rsquo;" in html  # BW-0921-01 (hp-4) is dated first


def test_history_shows_the_corrected_value_and_explain_the_reason_author_and_earlier_version(site):
    db, records = site
    history = run_cli("history", "hp-4", "--db", db, "--format", "csv")
    assert history.code == 0
    frame = pd.read_csv(io.StringIO(history.out))
    corrected = frame[frame["sample_id"] == "BW-1005-01"].iloc[0]
    assert corrected["water"] == 260 and bool(corrected["corrected"])  # the correction's value, not 160
    assert list(frame["sample_id"]) == ["BW-0907-01", "BW-0914-01", "BW-0921-01", "BW-1005-01", "BW-1012-01"]
    told = run_cli("explain", "BW-1005-01", "--db", db)
    assert told.code == 0
    text = " ".join(told.out.split())
    assert f"This version is a correction by {AUTHOR}: {REASON}." in text
    assert "1 earlier version(s) were corrected: batch 3" in text and "week-2026-10-05.csv" in text
    assert "week-2026-10-05.csv) graded watch (rule set brackwater-found6 version 2), with water 160 (now 260)." \
        in text  # what the correction changed, and under which rule set the replaced version was graded
    assert "water = 260 ppm, above 150 ppm (the watch limit)" in text  # version 2's limit, its own rule set
    assert all(line in text for line in CAUTIONS)  # wrapped to the terminal


def test_explain_under_the_new_rule_set_grades_an_old_sample_after_only_what_came_before(site):
    db, _ = site
    # BW-0914-01 (hp-4): water 170 ppm, iron 45 ppm: normal under version 1 (200, 50), watch under 2 (150, 40).
    told = run_cli("explain", "BW-0914-01", "--db", db, "--rules", "brackwater-found6@2")
    assert told.code == 0, told.err
    text = " ".join(told.out.split())
    assert "normal as recorded, watch under this rule set" in text
    assert "water = 170 ppm, above 200" not in text and "water = 170 ppm, above 150 ppm" in text
    assert all(line in text for line in CAUTIONS)


def test_rejected_rows_are_recorded_with_reason_code_and_origin(site):
    db, _ = site
    listed = run_cli("find", "--db", db, "--rejects", "--format", "jsonl")
    rejects = [json.loads(line) for line in listed.out.splitlines()]
    assert [(r["sample_id"], r["field"], r["code"], r["batch"]) for r in rejects] == [
        ("BW-1012-02", "water", "D004", 4), ("BW-1012-03", "sampled_on", "D015", 4)]
    assert all(r["source"].endswith("week-2026-10-12.csv") and r["row"] in (2, 3) and r["reason"] for r in rejects)


def test_report_from_the_ledger_counts_and_lists_the_rejected_rows_it_recorded(site, tmp_path):
    db, _ = site
    out, one = tmp_path / "all.html", tmp_path / "batch4.html"
    made = run_cli("report", "--db", db, "--out", out)
    assert made.code == 0 and "2 rejected row(s)" in made.err
    html = out.read_text()
    assert "<b>2</b>rejected rows" in html and "No rejects file was given" not in html
    table = html[html.index("<h2>Rejected rows"):]
    assert table.count("week-2026-10-12.csv") == 2 and "BW-1012-02" in table and "BW-1012-03" in table
    assert run_cli("report", "--db", db, "--batch", "4", "--out", one).code == 0
    assert "<b>2</b>rejected rows" in one.read_text()
    assert run_cli("report", "--db", db, "--batch", "3", "--out", one).code == 0
    assert "<b>0</b>rejected rows" in one.read_text()  # batch 3 rejected nothing: counted, not "not given"


def test_report_names_the_limit_and_rule_set_of_each_earlier_finding_when_the_limits_changed(site, tmp_path):
    db, _ = site
    out = tmp_path / "report.html"
    assert run_cli("report", "--db", db, "--out", out).code == 0
    html = out.read_text()
    card = html[html.index('id="unit-Hp-7"'):]
    card = re.sub(r"<[^>]+>", " ", card[:card.index("</section>")])
    card = " ".join(card.split())
    # BW-0907-02: water 240 ppm was watch under version 1 (from 200 ppm); the plot draws version 2's 150 ppm.
    assert "BW-0907-02 3400 watch water watch: water 240, above 200 ppm brackwater-found6 version 1" in card
    assert "the limits drawn are those of brackwater-found6 version 2" in card


@pytest.mark.parametrize("since, until", [(None, "2026-10-19"), ("2026-10-19", "2026-10-19"), ("2026-10-20", None),
                                          ("2026-10-18", "2026-10-18"), (None, "2026-10-18")])
def test_find_by_dates_takes_in_samples_stored_with_their_time_of_day(tmp_path, since, until):
    """A lab that writes the time of sampling: `--until D` means sampled on D or before, at any hour
    (the oracle reads the date part of each record's sampled_on)."""
    db, out = tmp_path / "site.db", tmp_path / "timed.jsonl"
    graded = run_cli("grade", HERE / "timed-2026-10-19.csv", "--rules", HERE / "rules-v2.yaml", "--db", db, "--out", out)
    assert graded.code == 0, graded.err
    days = {r["sample_id"]: r["sampled_on"][:10] for r in map(json.loads, out.read_text().splitlines())}
    assert days["BW-1019-02"] == "2026-10-19" and len(days) == 4
    expected = sorted(sid for sid, day in days.items() if (since is None or day >= since)
                      and (until is None or day <= until))
    options = (("--since", since) if since else ()) + (("--until", until) if until else ())
    assert sorted(r["sample_id"] for r in _found(db, *options)) == expected and expected


def test_history_names_the_rule_set_version_that_graded_each_sample(site):
    db, records = site
    oracle = _current(records)
    mine = oracle[oracle["unit_id"].str.casefold() == "hp-7"].set_index("sample_id")
    listed = run_cli("history", "hp-7", "--db", db, "--format", "csv")
    frame = pd.read_csv(io.StringIO(listed.out), dtype={"ruleset": str})
    assert dict(zip(frame["sample_id"], frame["ruleset"])) == {
        sid: f"brackwater-found6@{v}" for sid, v in mine["version"].items()}
    table = run_cli("history", "HP-7", "--db", db)
    # BW-0907-02, water 240 ppm: watch under version 1 (from 200 ppm); the unit's later samples under version 2.
    assert "BW-0907-02: water=watch (rule set brackwater-found6@1)" in table.out
    assert table.out.startswith("Unit HP-7 (written 'HP-7', 'Hp-7'): 3 sample(s) in the ledger")
    assert dict(zip(frame["sample_id"], frame["unit_id"])) == dict(zip(mine.index, mine["unit_id"]))  # as written
    assert all(line in " ".join(table.out.split()) for line in CAUTIONS)


def test_find_all_versions_lists_every_record_written_with_the_superseded_marked(site):
    db, records = site
    found = _found(db, "--all-versions", "--unit", "HP-4")
    every = [r for r in records if r["unit_id"].strip().casefold() == "hp-4"]
    assert sorted((r["sample_id"], r["grade"]) for r in found) == sorted((r["sample_id"], r["grade"]) for r in every)
    superseded = [(r["sample_id"], r["batch"], r["superseded_in"]) for r in found if r["superseded_in"] is not None]
    assert superseded == [("BW-1005-01", 3, 5)]  # the correction (batch 5) replaced batch 3's version


def test_report_of_one_batch_says_which_of_its_samples_were_corrected_since(site, tmp_path):
    db, _ = site
    out = tmp_path / "batch3.html"
    assert run_cli("report", "--db", db, "--batch", "3", "--out", out).code == 0
    text = " ".join(re.sub(r"<[^>]+>", " ", out.read_text()).split())
    assert "Corrected since: 1 sample(s)" in text and f"BW-1005-01 (batch 5, by {AUTHOR}: {REASON})" in text
    assert run_cli("report", "--db", db, "--batch", "4", "--out", out).code == 0
    assert "Corrected since" not in out.read_text()
    assert run_cli("report", "--db", db, "--out", out).code == 0  # the current results: nothing replaced
    assert "Corrected since" not in out.read_text()


def test_rulesets_count_the_samples_each_recorded_and_those_still_current(site):
    db, records = site
    listed = run_cli("rulesets", "--db", db)
    assert listed.code == 0 and listed.out.splitlines()[0].split()[:6] == ["sha256", "id", "version", "batches",
                                                                           "samples", "current"]
    rows = {r[2]: (int(r[4]), int(r[5])) for r in (line.split() for line in listed.out.splitlines()[1:])}
    written = pd.DataFrame([{"version": str(r["ruleset"]["version"])} for r in records])["version"].value_counts()
    current = _current(records)["version"].value_counts()
    # Version 2 recorded BW-1005-01 twice (batch 3, then its correction): 7 recorded, 6 current.
    assert rows == {v: (int(written[v]), int(current[v])) for v in ("1", "2")} == {"1": (6, 6), "2": (7, 6)}
    assert sum(c for _, c in rows.values()) == len(_found(db))


def test_report_from_the_ledger_lists_a_rejected_row_that_had_no_sample_id(tmp_path):
    """Beside one that had (pandas reads the ids as text, the missing one as NaN)."""
    db, out = tmp_path / "site.db", tmp_path / "report.html"
    graded = run_cli("grade", HERE / "no-id-2026-10-26.csv", "--rules", HERE / "rules-v2.yaml", "--db", db,
                     "--out", tmp_path / "r.jsonl", "--rejects", tmp_path / "rejects.csv")
    assert graded.code == 0, graded.err
    listed = [json.loads(line) for line in run_cli("find", "--db", db, "--rejects", "--format", "jsonl").out.splitlines()]
    assert [(r["sample_id"], r["row"], r["field"]) for r in listed] == [(None, 2, "sample_id"),
                                                                         ("BW-1026-03", 3, "sampled_on")]
    made = run_cli("report", "--db", db, "--out", out)
    assert made.code == 0 and "2 rejected row(s)" in made.err, made.err
    table = out.read_text()[out.read_text().index("<h2>Rejected rows"):]
    assert "<td>2</td><td></td><td>sample_id</td>" in table and "no-id-2026-10-26.csv" in table
