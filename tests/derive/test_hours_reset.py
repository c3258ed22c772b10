"""Oil hours that do not count from the oil's fill: an hours meter reset at an overhaul with the
oil kept, and a unit's running hours given as oil hours across an oil change.

Fixtures in tests/data/trends/ (see its README.md): a steam turbine sampled monthly and a
hydraulic press sampled weekly, each overhauled with its hours meter reset while the oil stayed
in, so the aged readings (acid number, carbonyl, viscosity, RPVOT) go on from where they were.

Sources of the expectations: oil hours restart at an oil change, and a rate per 1000 h is the
change over the hours between two samples of one charge (shared/reference/limits.md "Service
hours", common practice, no source); an oil change brings the aged readings back toward the new
oil's (a drain leaves some old oil behind: at least halfway back, common practice, no source);
acid number and carbonyl rise, base number and RPVOT fall as an oil ages (ASTM D4378, D6224).
Before this, the engine took every such fall for an oil change, silently: the turbine's carbonyl
rate over the hours since the reset read 4.1 abs/cm per 1000 h and fired carbonyl-rising-fast (a
false watch), and the press's iron run was cut, so three rises in a row graded normal.
"""

from __future__ import annotations

import json

import pandas as pd
import pytest

import sumpwise
from conftest import DATA, ROOT, run_cli
from result_views import caveats_of, fired, unevaluated

TRENDS = DATA / "trends"
TURBINE = TRENDS / "overhaul-reset-turbine.csv"
PRESS = TRENDS / "overhaul-reset-hydraulic.csv"
UNIT_HOURS = TRENDS / "unit-hours-turbine.csv"
STEAM = ROOT / "rules" / "steam-turbine.yaml"  # the shipped rule set
TREND_RULES = TRENDS / "rules.yaml"


def _graded(frame_or_path, rules):
    samples = frame_or_path if isinstance(frame_or_path, pd.DataFrame) else sumpwise.read_samples(frame_or_path)
    return sumpwise.grade(samples, sumpwise.load_ruleset(rules))


def _frame(path):
    return pd.read_csv(path, dtype=str, keep_default_na=False)


def test_a_meter_reset_at_an_overhaul_is_no_oil_change_and_fires_no_rate_on_the_reset_hours():
    graded = _graded(TURBINE, STEAM)
    reset = graded.find("BP-T4-2604")
    assert caveats_of(reset) == ["oil-hours-not-from-fill"]
    message = reset.caveats[0].message
    assert message.startswith("oil hours fell from 31140 to 150 since the previous sample of unit ST-4 "
                              "(BP-T4-2603, 2026-03-03) with no oil_changed flag")
    # what told it: each aged reading, then and now, against the new oil (TURB-32-M in the rule set)
    assert "an 0.15 to 0.16 (new oil 0.06)" in message and "oxidation 6.6 to 6.8 (new oil 1.2)" in message
    assert "rpvot 655 to 640 (new oil 1150)" in message and "set oil_changed" in message
    # 6.6 abs/cm over 2330 oil hours since the reset is 2.8 per 1000 h, above the shipped 2 after
    # 1000 h: it fired carbonyl-rising-fast at watch before. The hours no longer count from the
    # fill, so the rate over them is not evaluated, and every later sample of the charge says why.
    measured = graded.measured.set_index("sample_id")
    for sample_id in ("BP-T4-2604", "BP-T4-2605", "BP-T4-2606", "BP-T4-2607"):
        result = graded.find(sample_id)
        assert result.grade == "normal" and fired(result) == set(), sample_id
        assert pd.isna(measured.at[sample_id, "oxidation_rise_per_1000h"]), sample_id
        assert caveats_of(result) == ["oil-hours-not-from-fill"], sample_id
    # from 1000 oil hours on the rule reads the rate (under 1000 h its other clause decides it)
    assert {"carbonyl-rising-fast"} <= unevaluated(graded.find("BP-T4-2606")) & unevaluated(graded.find("BP-T4-2607"))
    assert "do not count from the fill since sample BP-T4-2604 (2026-04-07)" in \
        graded.find("BP-T4-2607").caveats[0].message
    # the old charge keeps its rate: 5.4 abs/cm rise over 31140 h
    # (rounded to 9 decimals, vocabulary.measures.DECIMALS)
    assert measured.at["BP-T4-2603", "oxidation_rise_per_1000h"] == pytest.approx(5.4 / 31.14, abs=1e-9)
    assert "carbonyl-rising-fast" not in unevaluated(graded.find("BP-T4-2603"))


def test_the_trend_goes_on_across_a_meter_reset():
    # HP-2, weekly: iron 11, 12, 15, 19 (reset to 40 h), 23, 24 ppm. Steps above the rule set's
    # 2 ppm noise margin: +3, +4, +4, three rises in a row at BP-HP2-05, and iron-climbing (above
    # 2 rises) is a watch. Before: the reset restarted the run, iron_rising was 1 and it graded normal.
    graded = _graded(PRESS, TREND_RULES)
    climbing = graded.find("BP-HP2-05")
    assert climbing.grade == "watch" and fired(climbing) == {("iron-climbing", "watch")}
    measured = graded.measured.set_index("sample_id")
    assert measured.at["BP-HP2-04", "iron_step"] == 4.0 and measured.at["BP-HP2-05", "iron_rising"] == 3.0
    # no rate across the reset (the hours between are not known), one after it: 4 ppm over 120 h
    assert pd.isna(measured.at["BP-HP2-04", "iron_step_per_1000h"])
    assert measured.at["BP-HP2-05", "iron_step_per_1000h"] == pytest.approx(4 / 120 * 1000, rel=1e-9)
    assert "iron-rate" in unevaluated(graded.find("BP-HP2-04"))
    assert caveats_of(graded.find("BP-HP2-04")) == ["oil-hours-not-from-fill"]
    assert "an 0.43 to 0.43 (new oil 0.1)" in graded.find("BP-HP2-04").caveats[0].message


@pytest.mark.parametrize("how", ["flag", "lubricant"])
def test_a_flag_or_a_change_of_lubricant_code_is_still_an_oil_change(how):
    frame = _frame(PRESS)
    at = frame["sample_id"] == "BP-HP2-04"
    if how == "flag":
        frame.loc[at, "oil_changed"] = "yes"
    else:
        frame.loc[frame.index >= frame.index[at][0], "lubricant"] = "TEST-46-B"
    rules = sumpwise.load_ruleset(TREND_RULES)
    graded = sumpwise.grade(frame, rules)
    changed = graded.find("BP-HP2-04")
    assert caveats_of(changed)[:1] == ["oil-changed"] and "oil-hours-not-from-fill" not in caveats_of(changed)
    assert pd.isna(graded.measured.set_index("sample_id").at["BP-HP2-04", "iron_step"])
    assert graded.find("BP-HP2-05").grade == "normal"  # the run starts again on the new charge
    assert "oil-hours-not-from-fill" not in [c for s in graded.results() for c in caveats_of(s)]


def test_an_unflagged_oil_change_whose_readings_fall_back_to_new_is_still_an_oil_change():
    # The same press, the oil truly changed at the overhaul and nobody set the flag: acid number
    # 0.43 -> 0.12 (new 0.10), viscosity 47.2 -> 46.1 (new 46.0), iron 19 -> 3 ppm.
    frame = _frame(PRESS)
    fresh = frame["sample_id"].isin(["BP-HP2-04", "BP-HP2-05", "BP-HP2-06"])
    frame.loc[fresh, "an"] = ["0.12", "0.12", "0.13"]
    frame.loc[fresh, "kv40"] = ["46.1", "46.1", "46.2"]
    frame.loc[fresh, "iron"] = ["3", "4", "5"]
    graded = _graded(frame, TREND_RULES)
    changed = graded.find("BP-HP2-04")
    assert caveats_of(changed) == ["oil-changed"]
    assert "oil hours fell from 6360 to 40" in changed.caveats[0].message
    assert "oil-hours-not-from-fill" not in [c for s in graded.results() for c in caveats_of(s)]


def test_mixed_evidence_is_read_as_an_oil_change():
    # Viscosity stayed (a same-grade fill) but the acid number came back to new: one aged reading
    # back at least halfway is enough to read an oil change, as before.
    frame = _frame(PRESS)
    frame.loc[frame["sample_id"] == "BP-HP2-04", "an"] = "0.14"
    graded = _graded(frame, TREND_RULES)
    assert caveats_of(graded.find("BP-HP2-04")) == ["oil-changed"]


def test_a_forecast_fits_only_the_samples_since_the_reset():
    # Oil hours before and after a reset are on two scales: a fit over both would be nonsense.
    # The RPVOT forecast is the least-squares line over the four samples since the reset, checked
    # against scipy.stats.linregress (rpvot_retained_pct = RPVOT / 1150 x 100, TURB-32-M's new oil).
    from scipy import stats
    graded = _graded(TURBINE, STEAM)
    [made] = [f for f in graded.forecasts if f.rule == "rpvot-retained"]
    fit = stats.linregress([150.0, 820.0, 1490.0, 2330.0], [v / 1150 * 100 for v in (640, 625, 610, 590)])
    assert made.samples == 4 and made.sample_id == "BP-T4-2607"
    assert made.slope_per_1000h == pytest.approx(fit.slope * 1000.0, rel=1e-9)
    assert made.at_hours == pytest.approx((50.0 - fit.intercept) / fit.slope, abs=1e-3)


def _records(path):
    return {r["sample_id"]: r for r in map(json.loads, path.read_text().splitlines())}


@pytest.mark.parametrize("path", [TURBINE, UNIT_HOURS])
@pytest.mark.parametrize("rows", [1, 3])
def test_chunks_tell_the_reset_as_the_whole_file_does(tmp_path, rows, path):
    # Across a chunk boundary the reset is judged on the carried readings, and a later chunk's
    # samples of the charge still get no rate on the reset hours (the project's rule for chunks:
    # the records of the whole file, forecasts aside).
    whole, chunked = tmp_path / "whole.jsonl", tmp_path / "chunked.jsonl"
    assert run_cli("grade", path, "--rules", STEAM, "--out", whole).code == 0
    run = run_cli("grade", path, "--rules", STEAM, "--chunk-rows", rows, "--out", chunked)
    assert run.code == 0, run.err
    got, want = _records(chunked), _records(whole)
    for record in list(got.values()) + list(want.values()):
        record["forecasts"] = None
    assert got == want
    said = [c["caveat"] for r in got.values() for c in r["caveats"]]
    assert said.count("oil-hours-not-from-fill") == 4


def test_a_ledger_tells_the_reset_in_a_later_batch(tmp_path):
    db = tmp_path / "ledger.db"
    first, second = tmp_path / "first.csv", tmp_path / "second.csv"
    lines = TURBINE.read_text().splitlines(True)
    first.write_text("".join(lines[:5]))  # up to the reset
    second.write_text(lines[0] + "".join(lines[5:]))
    assert run_cli("grade", first, "--rules", STEAM, "--db", db, "--out", tmp_path / "a.jsonl").code == 0
    out = tmp_path / "b.jsonl"
    run = run_cli("grade", second, "--rules", STEAM, "--db", db, "--out", out)
    assert run.code == 0, run.err
    records = _records(out)
    for sample_id in ("BP-T4-2605", "BP-T4-2606", "BP-T4-2607"):
        assert records[sample_id]["grade"] == "normal", sample_id
        [said] = [c for c in records[sample_id]["caveats"] if c["caveat"] != "few-rules-evaluated"]
        assert said["caveat"] == "oil-hours-not-from-fill", sample_id
        assert "since sample BP-T4-2604 (2026-04-07)" in said["message"], sample_id
        assert records[sample_id]["derived"]["oxidation_rise_per_1000h"] is None, sample_id


def test_the_reset_is_counted_as_a_warning(tmp_path):
    run = run_cli("grade", TURBINE, "--rules", STEAM, "--out", tmp_path / "out.jsonl")
    assert run.code == 0 and "4 sample(s) with caveat oil-hours-not-from-fill" in run.err



def test_oil_hours_that_run_on_past_an_oil_change_are_the_units_not_the_oils():
    # ST-5's oil_hours column counts the turbine's running hours: the flagged oil change at
    # BP-T5-2604 (2026-03-10) reads 42700 h, 7 days after the old oil's 42540 h. Oil filled since
    # then can hold at most 8 days x 24 h x 2 = 384 h (limits.md "Service hours": oil hours restart
    # at an oil change; our calendar margin, no source). Before: the new oil's carbonyl rise over
    # 44040 h read 0.07 abs/cm per 1000 h, and carbonyl-rising-fast passed without a word; over
    # the ~1340 h since the fill it is (4.3 - 1.2) / 1.34 = 2.3, above the shipped 2.
    graded = _graded(UNIT_HOURS, STEAM)
    change = graded.find("BP-T5-2604")
    assert caveats_of(change) == ["oil-changed", "oil-hours-not-from-fill"]
    assert change.caveats[1].message.startswith(
        "an oil change, yet its oil hours, 42700, are more than the calendar holds since the previous sample of "
        "unit ST-5 (BP-T5-2603, 2026-03-03) (42540 h, 7 days earlier: at most 384 h")
    measured = graded.measured.set_index("sample_id")
    for sample_id in ("BP-T5-2605", "BP-T5-2606", "BP-T5-2607"):
        assert caveats_of(graded.find(sample_id)) == ["oil-hours-not-from-fill"], sample_id
        assert pd.isna(measured.at[sample_id, "oxidation_rise_per_1000h"]), sample_id
        assert "carbonyl-rising-fast" in unevaluated(graded.find(sample_id)), sample_id
    # the old charge is untouched
    assert caveats_of(graded.find("BP-T5-2603")) == [] and measured.at["BP-T5-2603", "oxidation_rise_per_1000h"] > 0


def test_oil_hours_from_the_fill_at_an_oil_change_are_left_alone():
    # The same history written with oil hours from the fill (160 h a week after the change): no caveat.
    frame = _frame(UNIT_HOURS)
    new = frame.index >= frame.index[frame["sample_id"] == "BP-T5-2604"][0]
    frame.loc[new, "oil_hours"] = ["160", "830", "1500", "2170"]
    graded = _graded(frame, STEAM)
    assert "oil-hours-not-from-fill" not in [c for s in graded.results() for c in caveats_of(s)]
    late = graded.find("BP-T5-2606")
    assert fired(late) == {("carbonyl-rising-fast", "watch")}  # (4.3 - 1.2) / 1.5 = 2.07 per 1000 h


def test_viscosity_alone_tells_no_meter_reset():
    # An unflagged oil change whose only readings are viscosities: the new fill reads 46.9 mm2/s
    # against the table's 46.0 (a grade's new oil lies anywhere in its ISO VG band, ISO 3448), the
    # old oil 47.2, so the fill is not halfway back; viscosity alone is no evidence of a reset, and
    # the fall in oil hours is an oil change as before.
    frame = _frame(PRESS).drop(columns=["an"])
    fresh = frame["sample_id"].isin(["BP-HP2-04", "BP-HP2-05", "BP-HP2-06"])
    frame.loc[fresh, "kv40"] = ["46.9", "46.9", "47.0"]
    graded = _graded(frame, TREND_RULES)
    # ... and it says that nothing told it (oil-change-untold): viscosity cannot tell a reset
    assert caveats_of(graded.find("BP-HP2-04")) == ["oil-changed", "oil-change-untold"]


def test_a_top_up_flagged_as_an_oil_change_is_said():
    # HP-2's oil was topped up before BP-HP2-03 and the site set oil_changed there: oil hours run on
    # (6360 h, 120 h after the week before, but 6360 since no fill the calendar could hold). The flag
    # is kept (an oil change restarts the trend as asked), and the sample says what its hours tell.
    frame = _frame(PRESS)
    frame = frame[frame["sample_id"] <= "BP-HP2-03"].copy()
    frame.loc[frame["sample_id"] == "BP-HP2-03", "oil_changed"] = "yes"
    graded = _graded(frame, TREND_RULES)
    flagged = graded.find("BP-HP2-03")
    assert caveats_of(flagged) == ["oil-changed", "oil-hours-not-from-fill"]
    assert "if oil_changed marks a top-up, clear it" in flagged.caveats[1].message
    assert pd.isna(graded.measured.set_index("sample_id").at["BP-HP2-03", "iron_step"])  # the flag still restarts
