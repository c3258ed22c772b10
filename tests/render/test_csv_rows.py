"""CSV output: one row a sample, fired rules folded into text, the same grades as JSON Lines."""

import csv
import io

from conftest import DATA

from sumpwise import grade, load_ruleset, read_samples
from sumpwise.render.csv_rows import COLUMNS, write_csv


def test_csv_rows_agree_with_the_records():
    rs = load_ruleset(DATA / "rulesets" / "draft.yaml")
    graded = grade(read_samples(DATA / "samples" / "draft-record.csv"), rs)
    out = io.StringIO()
    write_csv(graded, out)
    rows = list(csv.DictReader(io.StringIO(out.getvalue())))
    assert list(rows[0]) == list(COLUMNS)
    row = rows[0]
    assert row["grade"] == "watch" and row["level"] == "1"
    assert row["fired"] == "acid-rise=watch;carbonyl-rise=watch<alert;young-oil-oxidising=watch<alert"
    assert row["caveats"] == "ester-carbonyl"
    assert row["not_evaluated"] == "visc-drift(kv40)"
    assert row["ruleset_sha256"] == rs.sha256


def test_csv_agrees_with_every_record_on_random_samples():
    from conftest import ROOT
    from random_samples import random_samples

    from sumpwise.render.csv_rows import csv_frame
    ruleset = load_ruleset(ROOT / "benchmarks" / "all-classes.yaml")
    graded = grade(random_samples(ruleset, 1500, seed=9), ruleset)
    frame = csv_frame(graded)
    for row, result in zip(frame.itertuples(index=False), graded.results()):
        assert row.grade == result.grade
        assert row.fired == ";".join(f"{r.rule}={r.grade}" + (f"<{r.capped_from}" if r.capped_from else "")
                                     for r in result.reasons)
        assert row.caveats == ";".join(c.caveat for c in result.caveats)
        assert row.not_evaluated == ";".join(
            f"{n.rule}({','.join(f'{m}={dict(n.undecided)[m]}' if m in dict(n.undecided) else m for m in n.missing)})"
            for n in result.not_evaluated)
        assert row.unrated_because == (result.unrated_because or "")
        asked = [x.next_step for x in result.reasons + result.caveats if x.next_step is not None]
        assert row.next_steps == "; ".join(dict.fromkeys(
            x.task + (f" (within {x.within_days} day{'s' * (x.within_days != 1)} of sampling)"
                      if x.within_days is not None else "") for x in asked))


def _site_csv(rows: list[str]) -> list[dict]:
    """The CSV rows of steam-turbine samples graded by the Brackwater site's rule set."""
    from conftest import ROOT
    text = "sample_id,unit_id,class,lubricant,sampled_on,water,kv40,an,oxidation\n" + "\n".join(rows) + "\n"
    graded = grade(read_samples(io.StringIO(text), "site.csv"),
                   load_ruleset(ROOT / "scenarios" / "brackwater" / "site.yaml"))
    out = io.StringIO()
    write_csv(graded, out)
    return list(csv.DictReader(io.StringIO(out.getvalue())))


def test_a_censored_reading_that_decides_nothing_is_told_apart_from_no_value():
    # Water `<500` ppm against the Brackwater steam-turbine ladder (watch 100, alert 300): the
    # reading may be anywhere below 500 (a lab's `<`: common practice, no source), so the rule is
    # not evaluated, and the CSV says which reading left it open; an empty cell is a missing value.
    rows = _site_csv(["C-1,ST-9,steam-turbine,TURB-46-M,2026-03-02,<500,46,0.1,2",
                      "C-2,ST-8,steam-turbine,TURB-46-M,2026-03-02,,46,0.1,2",
                      "C-3,ST-7,steam-turbine,TURB-46-M,2026-03-02,<50,46,0.1,2"])
    gaps = {row["sample_id"]: row["not_evaluated"].split(";") for row in rows}
    assert "water(water=<500)" in gaps["C-1"]
    assert "water(water)" in gaps["C-2"]
    assert not any(gap.startswith("water(") for gap in gaps["C-3"])  # below 50 decides it: below watch


def test_next_steps_are_the_rule_sets_own_for_what_applies():
    # Brackwater's steam-turbine water rule asks a cooler pressure test within 7 days; 150 ppm
    # fires it at watch (the site's example in site.yaml), 40 ppm does not.
    rows = _site_csv(["W-1,ST-9,steam-turbine,TURB-46-M,2026-03-02,150,46,0.1,2",
                      "W-2,ST-8,steam-turbine,TURB-46-M,2026-03-02,40,46,0.1,2"])
    steps = {row["sample_id"]: row["next_steps"] for row in rows}
    assert steps == {"W-1": "Resample, and pressure-test the seawater-cooled lube oil cooler for a tube leak "
                            "(within 7 days of sampling)", "W-2": ""}
