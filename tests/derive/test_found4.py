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
from conftest import DATA, run_cli

FOUND = DATA / "derive_found4"
RULES = FOUND / "rules.yaml"


def _graded(name):
    return sumpwise.grade(sumpwise.read_samples(FOUND / name), sumpwise.load_ruleset(RULES))


def _caveats(result):
    return [c.caveat for c in result.caveats if c.caveat != "few-rules-evaluated"]


def _fired(result):
    return {(r.rule, r.grade) for r in result.reasons}


def _unevaluated(result):
    return {n.rule for n in result.not_evaluated}


def test_a_unit_id_reused_for_another_machine_restarts_its_trend():
    # PK-4 was a hydraulic power unit (iron 6-7 ppm); the id was given to a gearbox, whose first
    # sample reads 48 ppm iron, ordinary for gears, with no lubricant code and oil hours that do
    # not fall. Before: +42 ppm over 400 h, 105 ppm per 1000 h across two machines, fired
    # gear-iron-rate at watch.
    graded = _graded("id-reused.csv")
    gearbox = graded.find("B-404")
    assert gearbox.grade == "normal"
    assert _fired(gearbox) == set()
    assert _unevaluated(gearbox) == {"gear-iron-rate"}
    assert _caveats(gearbox) == ["class-changed"]
    assert gearbox.caveats[0].message.startswith(
        "class changed from hydraulic to gearbox since the previous sample of unit PK-4 (B-403, 2026-01-06)")
    assert math.isnan(graded.measured.set_index("sample_id").at["B-404", "iron_step"])
    # the gearbox trends from its own first sample: +4 ppm over 500 h
    after = graded.find("B-405")
    assert _caveats(after) == [] and after.grade == "normal"
    assert graded.measured.set_index("sample_id").at["B-405", "iron_step_per_1000h"] == pytest.approx(8.0)


def test_a_class_typed_wrong_once_is_said_on_it_and_on_the_sample_after():
    # GB-2 is a gearbox; one sample was entered as hydraulic. It is graded under the hydraulic
    # rules (iron 57 ppm above their watch limit of 30): the caveat is what tells the reader.
    graded = _graded("class-typo.csv")
    typo = graded.find("B-503")
    assert typo.grade == "watch" and _fired(typo) == {("iron", "watch")}
    assert _caveats(typo) == ["class-changed"]
    assert {"iron-rate", "acid-rate", "iron-climbing"} <= _unevaluated(typo)
    back = graded.find("B-504")
    assert _caveats(back) == ["class-changed"]
    assert "from hydraulic to gearbox" in back.caveats[0].message
    assert [_caveats(graded.find(s)) for s in ("B-501", "B-502", "B-505")] == [[], [], []]


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
    })


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
