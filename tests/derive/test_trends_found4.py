"""Trends: wrong grades found with realistic unit histories (fixtures in tests/data/derive_found4/),
each checked through the real grade: the grade, the rules that fired or were not evaluated, and
the caveats that say why.

Sources of the expectations: a trend compares two samples of one machine, so a unit id whose
equipment class changes (an id reused for another machine, or a class typed wrong) restarts its
trend there (common practice, no source). A step no larger than the test's repeatability is
test scatter, not a change (ASTM D664 15.1.1, used oils, r = 0.117 X; the rule set's
`noise_margins`), so a steep rate read off such a step over a short span is no finding.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest

import sumpwise
from sumpwise.render.narrative import gap_phrase
from sumpwise.results.records import RateInterval
from conftest import DATA, run_cli
from result_views import caveats_of, fired, unevaluated

FOUND = DATA / "derive_found4"
RULES = FOUND / "rules.yaml"


def _graded(name):
    return sumpwise.grade(sumpwise.read_samples(FOUND / name), sumpwise.load_ruleset(RULES))


def test_a_unit_id_reused_for_another_machine_restarts_its_trend():
    # PK-4 was a hydraulic power unit (iron 6-7 ppm); the id was given to a gearbox, whose first
    # sample reads 48 ppm iron, ordinary for gears, with no lubricant code and oil hours that do
    # not fall. Before: +42 ppm over 400 h, 105 ppm per 1000 h across two machines, fired
    # gear-iron-rate at watch.
    graded = _graded("id-reused.csv")
    gearbox = graded.find("B-404")
    assert gearbox.grade == "normal"
    assert fired(gearbox) == set()
    assert unevaluated(gearbox) == {"gear-iron-rate"}
    assert caveats_of(gearbox) == ["class-changed"]
    assert gearbox.caveats[0].message.startswith(
        "class changed from hydraulic to gearbox since the previous sample of unit PK-4 (B-403, 2026-01-06)")
    assert math.isnan(graded.measured.set_index("sample_id").at["B-404", "iron_step"])
    # the gearbox trends from its own first sample: +4 ppm over 500 h
    after = graded.find("B-405")
    assert caveats_of(after) == [] and after.grade == "normal"
    assert graded.measured.set_index("sample_id").at["B-405", "iron_step_per_1000h"] == pytest.approx(8.0)


def test_a_class_typed_wrong_once_is_said_on_it_and_on_the_sample_after():
    # GB-2 is a gearbox; one sample was entered as hydraulic. It is graded under the hydraulic
    # rules (iron 57 ppm above their watch limit of 30): the caveat is what tells the reader.
    graded = _graded("class-typo.csv")
    typo = graded.find("B-503")
    assert typo.grade == "watch" and fired(typo) == {("iron", "watch")}
    assert caveats_of(typo) == ["class-changed"]
    assert {"iron-rate", "acid-rate", "iron-climbing"} <= unevaluated(typo)
    back = graded.find("B-504")
    assert caveats_of(back) == ["class-changed"]
    assert "from hydraulic to gearbox" in back.caveats[0].message
    assert [caveats_of(graded.find(s)) for s in ("B-501", "B-502", "B-505")] == [[], [], []]


def _without_forecasts(text):
    return [dict(json.loads(line), forecasts=None) for line in text.splitlines()]


def _class_oracle(frame: pd.DataFrame) -> dict:
    """Per unit, in date, flag and oil hours order, a plain loop: a sample whose class (stripped,
    case ignored) differs from the unit's previous one, or that is flagged, has no step."""
    expected = {}
    ordered = frame.sort_values(["unit_id", "sampled_on", "oil_changed", "oil_hours"], kind="stable")
    for _, rows in ordered.groupby("unit_id", sort=False):
        before = None
        for row in rows.itertuples():
            changed = before is not None and row._3.strip().casefold() != before._3.strip().casefold()
            linked = before is not None and not changed and not row.oil_changed
            step = round(row.iron - before.iron, 9) if linked else math.nan
            span = row.oil_hours - before.oil_hours if linked else math.nan
            rate = round(step / span * 1000.0, 9) if span > 0 else math.nan
            expected[row.sample_id] = (changed, step, rate)
            before = row
    return expected


def _class_histories(seed: int, n: int, units: int) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    unit = rng.integers(0, units, n)
    days = rng.integers(0, 700, n)
    kind = np.where(rng.random(n) < 0.1, "gearbox", "hydraulic")  # the class changes about one sample in 5
    kind = np.where(rng.random(n) < 0.05, " Hydraulic", kind)  # the same class spelled otherwise: no change
    return pd.DataFrame({
        "sample_id": [f"R{i:05d}" for i in range(n)], "unit_id": [f"U-{u}" for u in unit], "class": kind,
        "lubricant": "HYD-46-M",
        "sampled_on": (pd.Timestamp("2025-01-01") + pd.to_timedelta(days, unit="D")).strftime("%Y-%m-%d"),
        "oil_hours": days * 16.0 + rng.integers(0, 8, n),  # never falls: no oil change but the flag
        "iron": rng.integers(3, 40, n).astype(float),
        "oil_changed": rng.random(n) < 0.03,
    }).drop_duplicates(["unit_id", "sampled_on", "oil_hours"])  # samples at one moment: their own test


def test_class_changes_agree_with_a_per_unit_loop_on_random_histories():
    frame = _class_histories(21, 2000, 30)
    graded = sumpwise.grade(frame.assign(oil_changed=np.where(frame["oil_changed"], "yes", "no")),
                            sumpwise.load_ruleset(RULES))
    out = graded.measured.set_index("sample_id")
    expected = _class_oracle(frame)
    for sid, (changed, step, rate) in expected.items():
        assert (out.at[sid, "class_change_note"] is not None) == changed, sid
        np.testing.assert_allclose([out.at[sid, "iron_step"], out.at[sid, "iron_step_per_1000h"]], [step, rate],
                                   rtol=1e-12, equal_nan=True, err_msg=sid)
    assert sum(w[0] for w in expected.values()) > 200  # the check saw class changes


def test_chunks_carry_the_class_a_class_change_is_found_against(tmp_path):
    frame = _class_histories(22, 400, 8)
    frame = frame.assign(oil_changed=np.where(frame["oil_changed"], "yes", "no")).sort_values(
        ["sampled_on", "oil_changed", "oil_hours"], kind="stable")
    samples = tmp_path / "samples.csv"
    frame.to_csv(samples, index=False)
    whole, chunked = tmp_path / "whole.jsonl", tmp_path / "chunked.jsonl"
    assert run_cli("grade", samples, "--rules", RULES, "--out", whole).code == 0
    run = run_cli("grade", samples, "--rules", RULES, "--chunk-rows", 7, "--out", chunked)
    assert run.code == 0, run.err
    records = _without_forecasts(whole.read_text())  # a chunked grade makes none
    assert _without_forecasts(chunked.read_text()) == records
    assert [c["caveat"] for r in records for c in r["caveats"]].count("class-changed") > 40


def test_a_resample_within_the_noise_margin_is_no_rate_alert():
    # HPU-3 resampled a day later, 20 oil hours on: iron 9 -> 11 ppm, a step of 2 against the rule
    # set's 2 ppm noise margin. Before: 100 ppm per 1000 h fired iron-rate at alert on test scatter.
    graded = _graded("resample.csv")
    resample = graded.find("B-603")
    assert resample.grade == "normal" and fired(resample) == set()
    gap = {n.rule: n for n in resample.not_evaluated}["iron-rate"]
    # the record says why: the rate, the interval the two readings allow and the margin
    assert gap.missing == ()
    assert gap.undecided == (("iron_step_per_1000h", RateInterval(rate=100.0, low=0.0, high=200.0, step=2.0,
                                                                  margin=2.0, hours=20.0)),)
    assert gap.to_record()["undecided"] == {"iron_step_per_1000h": {"rate": 100.0, "interval": [0.0, 200.0],
                                                                    "step": 2.0, "margin": 2.0, "hours": 20.0}}
    assert gap_phrase(gap.rule, gap.missing, gap.undecided) == (
        "iron-rate: iron_step_per_1000h 100, [0, 200] from a step of 2 within its noise margin of 2 over 20 h "
        "does not decide it")
    assert caveats_of(resample) == ["grade-may-be-higher"]
    assert "may be above its alert limit (40)" in resample.caveats[0].message
    out = graded.measured.set_index("sample_id")
    assert out.at["B-603", "iron_step_per_1000h"] == 100.0  # the number is still recorded as computed


def test_acid_number_rates_within_the_d664_repeatability():
    # ASTM D664 15.1.1, used oils: r = 0.117 X, X the mean of the two results.
    graded = _graded("acid-resample.csv")
    # 0.20 -> 0.21 over 500 h (an ordinary interval): 0.02 per 1000 h, under the 0.05 limit, is
    # decided as before although the step is within r = 0.117 x 0.205 = 0.024: normal, no gap.
    ordinary = graded.find("B-702")
    assert ordinary.grade == "normal" and "acid-rate" not in unevaluated(ordinary) and caveats_of(ordinary) == []
    # 0.21 -> 0.23 over 100 h: 0.2 per 1000 h crosses 0.05, but the step 0.02 is within
    # r = 0.117 x 0.22 = 0.02574: the rate may be anything from -0.0574 to 0.4574. Before: watch.
    resample = graded.find("B-703")
    assert resample.grade == "normal" and fired(resample) == set()
    assert {n.rule: n.undecided for n in resample.not_evaluated}["acid-rate"] == (
        ("an_step_per_1000h", RateInterval(rate=0.2, low=-0.0574, high=0.4574, step=0.02, margin=0.02574,
                                           hours=100.0)),)
    assert caveats_of(resample) == ["grade-may-be-higher"]
    # 0.23 -> 0.30 over 500 h: a step of 0.07 beyond r = 0.031 is a change; 0.14 per 1000 h fires
    risen = graded.find("B-704")
    assert fired(risen) == {("acid-rate", "watch")} and caveats_of(risen) == []


def _rate_oracle(frame: pd.DataFrame, margins) -> dict:
    """Per unit, in date and oil hours order, a plain loop: each rate rule's level as the design
    says (a number not crossing decides; one crossing fires when its step is beyond the noise
    margin and is not evaluated, -1, when within it)."""
    limits = {"iron": ((1, 20.0), (2, 40.0)), "an": ((1, 0.05),)}
    expected = {}
    ordered = frame.sort_values(["unit_id", "sampled_on", "oil_hours"], kind="stable")
    for _, rows in ordered.groupby("unit_id", sort=False):
        before = None
        for row in rows.itertuples():
            levels = {}
            for base, steps in limits.items():
                if before is None or row.oil_hours <= before.oil_hours:
                    levels[base] = -1  # no rate: not evaluated
                    continue
                now, then = getattr(row, base), getattr(before, base)
                step = round(now - then, 9)
                rate = round(step / (row.oil_hours - before.oil_hours) * 1000.0, 9)
                level = max([lv for lv, limit in steps if rate > limit], default=0)
                noise = abs(step) <= margins[base](now, then)
                levels[base] = -1 if level and noise else level
            expected[row.sample_id] = levels
            before = row
    return expected


def test_rate_rules_agree_with_a_per_unit_loop_on_random_histories():
    rng = np.random.default_rng(31)
    n = 1500
    days = rng.integers(0, 500, n)
    frame = pd.DataFrame({
        "sample_id": [f"R{i:05d}" for i in range(n)], "unit_id": [f"U-{u}" for u in rng.integers(0, 20, n)],
        "class": "hydraulic", "lubricant": "HYD-46-M",
        "sampled_on": (pd.Timestamp("2025-01-01") + pd.to_timedelta(days, unit="D")).strftime("%Y-%m-%d"),
        "oil_hours": days * 20.0 + rng.integers(0, 4, n) * 5.0,  # resamples days apart and a few on one day
        "iron": rng.integers(5, 12, n).astype(float),
        "an": rng.integers(20, 30, n) / 100.0,
    }).drop_duplicates(["unit_id", "sampled_on", "oil_hours"])  # samples at one moment: their own test
    graded = sumpwise.grade(frame, sumpwise.load_ruleset(RULES))
    expected = _rate_oracle(frame, {"iron": lambda a, b: 2.0,  # the rule set's noise_margins
                                    "an": lambda a, b: 0.117 * (a + b) / 2.0})  # ASTM D664 15.1.1
    slot = {s.rule.id: j for j, s in enumerate(graded.outcome.slots)}
    at = {sid: i for i, sid in enumerate(graded.measured["sample_id"])}
    for sid, levels in expected.items():
        got = {"iron": int(graded.outcome.final[at[sid], slot["iron-rate"]]),
               "an": int(graded.outcome.final[at[sid], slot["acid-rate"]])}
        assert got == levels, sid
    seen = [lv for levels in expected.values() for lv in levels.values()]
    assert seen.count(-1) > 300 and seen.count(1) > 20 and seen.count(2) > 20  # every outcome occurs


def test_two_sample_points_under_one_unit_id_on_one_day_are_not_stepped():
    # HPU-9 sampled at the reservoir (9 ppm iron) and at the return line ahead of the filter
    # (21 ppm) on one day at 1000 h, under one unit id. A month on, the reservoir reads 20 ppm:
    # +11 ppm since its own bottle, 44 ppm per 1000 h, above the alert limit of 40. Before: it was
    # stepped from the return-line bottle (the file's order), -1 ppm, and graded normal without
    # a word (a silent miss); reversed in the file, the return line's bottle was the reservoir's
    # base instead. Now no step is taken to either bottle or from them, and all three say so.
    graded = _graded("two-points.csv")
    for sid, other in (("B-802", "B-803"), ("B-803", "B-802")):
        bottle = graded.find(sid)
        assert caveats_of(bottle) == ["one-moment"]
        assert bottle.caveats[0].message.startswith(f"sample {other} of unit HPU-9 was taken on the same date "
                                                    "(2026-01-07) at 1000 oil hours")
        assert {"iron-rate", "iron-climbing"} <= unevaluated(bottle)
    after = graded.find("B-804")
    assert {"iron-rate", "iron-climbing", "acid-rate"} <= unevaluated(after)
    assert caveats_of(after) == ["one-moment"]
    assert "trend measures restart here" in after.caveats[0].message
    assert math.isnan(graded.measured.set_index("sample_id").at["B-804", "iron_step"])
    # the file's order no longer matters
    reordered = sumpwise.grade(sumpwise.read_samples(FOUND / "two-points.csv").frame.iloc[[0, 2, 1, 3, 4]],
                               sumpwise.load_ruleset(RULES))
    assert ([r.to_record() for r in reordered.results()][3]["derived"]
            == [r.to_record() for r in graded.results()][3]["derived"])
    assert graded.find("B-805").grade == "normal" and caveats_of(graded.find("B-805")) == []
    # one result filed twice (every reading alike) is no question of order: it steps as before
    frame = sumpwise.read_samples(FOUND / "two-points.csv").frame
    twice = frame.assign(iron=frame["iron"].where(frame["sample_id"] != "B-803", 9.0))
    again = sumpwise.grade(twice, sumpwise.load_ruleset(RULES))
    assert [caveats_of(again.find(s)) for s in ("B-802", "B-803", "B-804")] == [[], [], []]
    assert again.measured.set_index("sample_id").at["B-804", "iron_step_per_1000h"] == pytest.approx(44.0)
    assert fired(again.find("B-804")) == {("iron-rate", "alert")}


def _moment_oracle(frame: pd.DataFrame) -> dict:
    """Per unit, in date and oil hours order, a plain loop: samples sharing their date and oil
    hours with another of the unit, their iron readings not all alike, have no step, nor the
    sample after them."""
    expected = {}
    ordered = frame.sort_values(["unit_id", "sampled_on", "oil_hours"], kind="stable")
    for _, rows in ordered.groupby("unit_id", sort=False):
        rows = list(rows.itertuples())
        moments = [(r.sampled_on, r.oil_hours) for r in rows]
        shared = [len({r.iron for r, m2 in zip(rows, moments) if m2 == m}) > 1 for m in moments]
        for i, row in enumerate(rows):
            after = i > 0 and shared[i - 1] and not shared[i]
            linked = i > 0 and not shared[i] and not after
            step = round(row.iron - rows[i - 1].iron, 9) if linked else math.nan
            expected[row.sample_id] = (shared[i] or after, step)
    return expected


def _moment_histories(seed: int, n: int, units: int) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    days = rng.integers(0, 200, n)  # about one sample in seven shares its day with another of its unit
    return pd.DataFrame({
        "sample_id": [f"R{i:05d}" for i in range(n)], "unit_id": [f"U-{u}" for u in rng.integers(0, units, n)],
        "class": "hydraulic", "lubricant": "HYD-46-M",
        "sampled_on": (pd.Timestamp("2025-01-01") + pd.to_timedelta(days, unit="D")).strftime("%Y-%m-%d"),
        "oil_hours": days * 20.0 + rng.integers(0, 2, n) * 10.0,  # on a shared day, the same hours or not
        "iron": rng.integers(3, 40, n).astype(float),
    })


def test_one_moment_samples_agree_with_a_per_unit_loop_on_random_histories():
    frame = _moment_histories(41, 1500, 20)
    graded = sumpwise.grade(frame, sumpwise.load_ruleset(RULES))
    out = graded.measured.set_index("sample_id")
    expected = _moment_oracle(frame)
    for sid, (said, step) in expected.items():
        assert (out.at[sid, "one_moment_note"] is not None) == said, sid
        np.testing.assert_allclose(out.at[sid, "iron_step"], step, equal_nan=True, err_msg=sid)
    assert sum(w[0] for w in expected.values()) > 200 and sum(not math.isnan(w[1]) for w in expected.values()) > 200


def test_chunks_carry_what_a_one_moment_sample_is_found_against(tmp_path):
    frame = _moment_histories(42, 400, 6).sort_values(["sampled_on", "oil_hours"], kind="stable")
    samples = tmp_path / "samples.csv"
    frame.to_csv(samples, index=False)
    whole, chunked = tmp_path / "whole.jsonl", tmp_path / "chunked.jsonl"
    assert run_cli("grade", samples, "--rules", RULES, "--out", whole).code == 0
    records = _without_forecasts(whole.read_text())
    moment = list(zip(frame["unit_id"], frame["sampled_on"], frame["oil_hours"]))
    for rows in (1, 2, 7):
        run = run_cli("grade", samples, "--rules", RULES, "--chunk-rows", rows, "--out", chunked)
        assert run.code == 0, run.err
        # a sample whose twin comes in a later chunk is graded before the twin can be seen, so it keeps
        # its step (as one without oil hours does before a later oil change); every other record agrees
        early = {k for k, m in enumerate(moment) if any(moment[j] == m for j in range(k + 1, len(moment))
                                                       if j // rows > k // rows)}
        got = _without_forecasts(chunked.read_text())
        assert [r for k, r in enumerate(got) if k not in early] == [r for k, r in enumerate(records) if k not in early]
        assert len(early) < len(moment) // 4, rows
    assert [c["caveat"] for r in records for c in r["caveats"]].count("one-moment") > 40
