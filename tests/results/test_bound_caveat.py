"""A censored reading that leaves a limit above the sample's grade undecided raises the engine
caveat grade-may-be-higher: the grade is the least the sample can have.

How a lab's `<x` and `>x` read: the value lies below (above) x, at any distance (common
practice in used-oil lab reports, no source). ISO 4406:1999 writes `≥` before a code when
fewer than 20 particles were counted (shared fact sheet limits.md): the code may be higher.
Limits are the Brackwater Point site's (scenarios/brackwater/site.yaml).
"""

import io

import pytest
from conftest import ROOT

from sumpwise import grade, load_ruleset, read_samples

SITE = load_ruleset(ROOT / "scenarios" / "brackwater" / "site.yaml")
CAVEAT = "grade-may-be-higher"


def _graded(header: str, rows: list[str]) -> dict:
    batch = read_samples(io.StringIO(header + "\n" + "\n".join(rows) + "\n"), "bounds.csv")
    return {r.sample_id: r for r in grade(batch, SITE).results()}


def _bound(result):
    notes = [c for c in result.caveats if c.caveat == CAVEAT]
    return notes[0].message if notes else None


# Steam-turbine water (ppm, above): watch 100, alert 300, urgent 1000.
@pytest.mark.parametrize("water, grade_, note", [
    ("<500", "normal", "water: water written '<500' may be above its alert limit (300 ppm)"),
    (">100", "watch", "water: water written '>100' may be above its urgent limit (1000 ppm)"),
    (">500", "alert", "water: water written '>500' may be above its urgent limit (1000 ppm)"),
    (">1500", "urgent", None),  # past the top limit: nothing left open
    ("<50", "normal", None),  # below the lowest limit: decided
    ("", "normal", None),  # no value: a gap (not_evaluated), not a bound
    ("250", "watch", None),  # a number decides every step
])
def test_water_bounds_on_the_steam_turbine_ladder(water, grade_, note):
    result = _graded("sample_id,unit_id,class,lubricant,sampled_on,water,kv40,an,oxidation",
                     [f"W-1,ST-9,steam-turbine,TURB-46-M,2026-03-02,{water},46,0.1,2"])["W-1"]
    assert result.grade == grade_ and _bound(result) == note


def test_no_caveat_when_another_rule_already_gives_the_open_grade():
    # acid number 0.5 over a new oil of 0.07: a rise of 0.43 crosses the urgent 0.4 on its own
    result = _graded("sample_id,unit_id,class,lubricant,sampled_on,water,kv40,an,oxidation",
                     ["W-2,ST-9,steam-turbine,TURB-46-M,2026-03-02,>500,46,0.5,2"])["W-2"]
    assert result.grade == "urgent" and _bound(result) is None


def test_a_cap_in_force_closes_the_steps_above_it():
    # Polyol-ester compressor oil: the ester caveat caps carbonyl rules at watch unless the acid
    # number has risen; `>196` abs/cm may be past the urgent carbonyl limit only where the cap is lifted.
    results = _graded("sample_id,unit_id,class,lubricant,sampled_on,oxidation,an,oil_hours",
                      ["E-1,AC-3,screw-compressor,COMP-46-PE,2026-03-02,>196,0.15,1500",
                       "E-2,AC-4,screw-compressor,COMP-46-PE,2026-03-02,>196,0.35,1500"])
    assert results["E-1"].grade == "watch" and _bound(results["E-1"]) is None
    assert results["E-2"].grade == "alert"
    assert _bound(results["E-2"]).startswith("carbonyl-rise: oxidation_rise ")
    assert "may be above its urgent limit (30 abs/cm)" in _bound(results["E-2"])


def test_an_iso_code_counted_below_twenty_particles():
    # The site's hydraulic target 17/15/12, alert 19/17/14: `≥12` at 14 µm may be 14 or more.
    results = _graded("sample_id,unit_id,class,lubricant,sampled_on,iso4406,kv40,an",
                      ["I-1,HPU-1,hydraulic,HYD-46-M,2026-03-02,16/14/≥12,46,0.3",
                       "I-2,HPU-2,hydraulic,HYD-46-M,2026-03-02,16/14/11,46,0.3"])
    assert results["I-1"].grade == "normal"
    assert "may be above its alert limit (14)" in _bound(results["I-1"])
    assert _bound(results["I-2"]) is None


def test_the_caveat_is_listed_in_compact_records_and_counted(tmp_path):
    from conftest import run_cli
    samples = tmp_path / "w.csv"
    samples.write_text("sample_id,unit_id,class,lubricant,sampled_on,water\n"
                       "W-3,ST-9,steam-turbine,TURB-46-M,2026-03-02,>500\n", encoding="utf-8")
    run = run_cli("grade", samples, "--rules", ROOT / "scenarios" / "brackwater" / "site.yaml", "--record", "compact",
                  "--fail-on-caveat", CAVEAT)
    assert run.code == 3 and f"1 sample(s) with caveat {CAVEAT}" in run.err
    assert f'"caveat": "{CAVEAT}"' in run.out


# Brackwater's steam-turbine young-oil-oxidising: oil_hours below 2000 and oxidation_rise above 10,
# alert. TURB-46-M's new carbonyl is 0, so 16 abs/cm is a rise of 16 (carbonyl-rise gives watch).
@pytest.mark.parametrize("hours, grade_, note", [
    (">1500", "watch", "young-oil-oxidising: its condition may hold (oil_hours written '>1500'), which gives alert"),
    (">2500", "watch", None),  # the bound decides it: no younger than 2500 h
    ("<1500", "alert", None),  # decided: the rule fires
    ("", "watch", None),  # no hours: a gap (not_evaluated), not a bound
])
def test_a_condition_rule_left_undecided_by_a_bound_says_the_grade_may_be_higher(hours, grade_, note):
    result = _graded("sample_id,unit_id,class,lubricant,sampled_on,water,kv40,an,oxidation,oil_hours",
                     [f"Y-1,ST-9,steam-turbine,TURB-46-M,2026-03-02,50,46,0.1,16,{hours}"])["Y-1"]
    assert result.grade == grade_ and _bound(result) == note


def test_a_condition_rule_left_undecided_by_a_rate_within_the_noise_margin_says_so_too(tmp_path):
    # The resample fixture (tests/data/derive_found4, invented): B-603's iron rate is 100 per 1000 h
    # from a step of 2 ppm within the 2 ppm margin. Written as a condition rule (alert above 40),
    # the rule is not evaluated, and the grade may be higher, as for the ladder rule
    # (tests/derive/test_trends_found4.py). Before: not evaluated, with no caveat.
    found = ROOT / "tests" / "data" / "derive_found4"
    text = (found / "rules.yaml").read_text().replace(
        """      - id: iron-rate
        measure: iron_step_per_1000h
        above: {watch: 20, alert: 40}""", """      - id: iron-rate
        when: {measure: iron_step_per_1000h, above: 40}
        grade: alert""")
    (tmp_path / "rules.yaml").write_text(text)
    graded = grade(read_samples(found / "resample.csv"), load_ruleset(tmp_path / "rules.yaml"))
    result = {r.sample_id: r for r in graded.results()}["B-603"]
    assert result.grade == "normal" and "iron-rate" in {n.rule for n in result.not_evaluated}
    assert _bound(result) == ("iron-rate: its condition may hold (iron_step_per_1000h 100, its step being within "
                              "the noise margin), which gives alert")
