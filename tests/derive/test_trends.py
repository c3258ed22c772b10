"""Trend measures: steps, rates per 1000 h, consecutive rises, oil changes and trend breaks.

The rate is the service-hours rule of the project's fact sheet (shared/reference/limits.md,
"Service hours", common practice): (x2 - x1) / (h2 - h1), per 1000 h for turbines and
hydraulics, with no rate across an oil change or where h2 - h1 <= 0. The expected numbers
below are worked by hand from that rule; the random-data check compares against a plain
per-unit loop written from the same rule, independent of the vectorized code.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

import sumpwise
from sumpwise.derive.row_measures import derive_measures
from sumpwise.vocabulary.measures import TREND_MEASURES, unit_key
from sumpwise.derive.trends import add_trend_measures, chain_frame
from tests.conftest import DATA

RULES = DATA / "ledger" / "trend-rules.yaml"
SAMPLES = DATA / "ledger" / "samples.csv"


def _row(sample_id, day, hours, oxidation, unit="U-1", **extra):
    row = {"sample_id": sample_id, "unit_id": unit, "class": "steam-turbine", "lubricant": "TEST-46",
           "sampled_on": f"2026-{day}", "oil_hours": str(hours), "oxidation": str(oxidation)}
    row.update({k: str(v) for k, v in extra.items()})
    return row


def _derived(rows):
    rs = sumpwise.load_ruleset(RULES)
    frame = pd.DataFrame(rows)
    flags = frame["oil_changed"].eq("true").to_numpy() if "oil_changed" in frame else None
    for name in ("oil_hours", "oxidation"):
        frame[name] = frame[name].astype(float)
    return derive_measures(frame, rs.lubricants), flags


def _trends(rows, history=None):
    measured, flags = _derived(rows)
    return add_trend_measures(measured, flags, history, ("oxidation",))


def test_step_rate_and_rises_by_hand():
    # limits.md "Service hours": rate = (x2 - x1) / (h2 - h1) x 1000.
    rows = [_row("A", "01-05", 1000, 5.0), _row("B", "02-05", 1500, 6.0), _row("C", "03-05", 2500, 5.5),
            _row("D", "04-05", 3000, 6.5), _row("E", "05-05", 3500, 7.0)]
    out = _trends(rows).set_index("sample_id")
    assert math.isnan(out.at["A", "oxidation_step"])  # first sample of the unit: no step
    assert out["oxidation_step"].iloc[1:].tolist() == [1.0, -0.5, 1.0, 0.5]
    assert out["oxidation_step_per_1000h"].iloc[1:].tolist() == [2.0, -0.5, 2.0, 1.0]
    assert out["oxidation_rising"].iloc[1:].tolist() == [1.0, 0.0, 1.0, 2.0]
    assert out.at["C", "hours_since_previous"] == 1000.0
    assert out.at["C", "previous_oxidation"] == 6.0


def test_order_is_by_date_then_hours_not_by_input_order():
    rows = [_row("C", "03-05", 2500, 5.5), _row("A", "01-05", 1000, 5.0), _row("B", "02-05", 1500, 6.0)]
    out = _trends(rows).set_index("sample_id")
    assert out.at["B", "oxidation_step"] == 1.0
    assert out.at["C", "oxidation_step"] == -0.5
    same_day = [_row("X2", "01-05", 1120, 7.0), _row("X1", "01-05", 1100, 6.0)]  # 20 h apart: one day holds them
    tied = _trends(same_day).set_index("sample_id")
    assert tied.at["X2", "oxidation_step"] == 1.0  # same date: oil hours decide


def test_no_rate_where_hours_do_not_advance():
    # limits.md: no rate where h2 - h1 <= 0 (the step itself is still the change).
    rows = [_row("A", "01-05", 1000, 5.0), _row("B", "01-06", 1000, 6.0)]
    out = _trends(rows).set_index("sample_id")
    assert out.at["B", "oxidation_step"] == 1.0
    assert math.isnan(out.at["B", "oxidation_step_per_1000h"])


def test_chain_restarts_at_an_oil_change_flag_or_falling_hours():
    rows = [_row("A", "01-05", 3000, 9.0), _row("B", "02-05", 3500, 10.0),
            _row("C", "03-05", 80, 1.0),  # oil hours went down: a new charge
            _row("D", "04-05", 500, 1.5), _row("E", "05-05", 900, 2.0, oil_changed="true")]
    out = _trends(rows).set_index("sample_id")
    assert math.isnan(out.at["C", "oxidation_step"]) and math.isnan(out.at["E", "oxidation_step"])
    assert math.isnan(out.at["C", "oxidation_rising"])
    assert out.at["D", "oxidation_step"] == 0.5
    assert out.at["C", "oil_change_note"] == (
        "first sample after an oil change (oil hours fell from 3500 to 80 since the previous sample of unit U-1 "
        "(B, 2026-02-05)); trend measures restart here, with no step")
    assert "oil_changed is set on this sample" in out.at["E", "oil_change_note"]
    assert out["oil_change_note"].notna().sum() == 2


def test_method_or_lab_change_is_a_trend_break():
    # A is a differential reading, the others direct ones (a differential reading has no direct
    # `oxidation`, so its own steps are empty: issue 11)
    rows = [_row("A", "01-05", 1000, 5.0, method="subtraction", lab="lab-a"),
            _row("B", "02-05", 1500, 2.0, method="direct", lab="lab-a"),
            _row("C", "03-05", 2000, 2.5, method="direct", lab="lab-b"),
            _row("D", "04-05", 2500, 3.0, method="direct", lab="lab-b")]
    out = _trends(rows).set_index("sample_id")
    assert math.isnan(out.at["B", "oxidation_step"]) and math.isnan(out.at["C", "oxidation_step"])
    assert out.at["D", "oxidation_step"] == 0.5
    assert out.at["B", "trend_break_note"] == (
        "method changed from subtraction to direct since the previous sample of unit U-1 (A, 2026-01-05); "
        "step measures across the change are not evaluated")
    assert out.at["C", "trend_break_note"].startswith("lab changed from lab-a to lab-b since")
    assert out.at["D", "trend_break_note"] is None
    assert out.at["A", "trend_break_note"] is None


def test_history_supplies_the_previous_sample():
    earlier, _ = _derived([_row("A", "01-05", 1000, 5.0)])
    out = _trends([_row("B", "02-05", 1500, 6.5)], history=chain_frame(earlier, None))
    assert out["oxidation_step"].tolist() == [1.5]
    assert out["oxidation_step_per_1000h"].tolist() == [3.0]


def _loop_oracle(frame: pd.DataFrame) -> dict:
    """Per-unit loop written from the limits.md rule, for comparison with the vectorized code."""
    expected = {}
    for _, unit in frame.groupby("unit_id", sort=False):
        unit = unit.sort_values(["sampled_on", "oil_hours"], kind="stable")
        previous = None
        rises = 0
        for row in unit.itertuples():
            step = rate = rising = math.nan
            fresh = previous is None or row.oil_changed or row.oil_hours < previous.oil_hours
            missing = math.isnan(row.oxidation) or math.isnan(previous.oxidation) if previous is not None else True
            if not fresh and row.method == previous.method and not missing:
                step = round(row.oxidation - previous.oxidation, 9)
                span = row.oil_hours - previous.oil_hours
                rate = round(step / span * 1000, 9) if span > 0 else math.nan
                rises = rises + 1 if step > 0 else 0
                rising = float(rises)
            else:
                rises = 0
            expected[row.sample_id] = (step, rate, rising)
            previous = row
    return expected


def test_agrees_with_a_per_unit_loop_on_random_data():
    rng = np.random.default_rng(7)
    n = 3000
    units = rng.integers(0, 40, n)
    days = rng.permutation(np.arange(n)) % 700
    frame = pd.DataFrame({
        "sample_id": [f"S{i:05d}" for i in range(n)], "unit_id": [f"U-{u}" for u in units],
        "class": "steam-turbine", "lubricant": "TEST-46",
        "sampled_on": (pd.Timestamp("2025-01-01") + pd.to_timedelta(days, unit="D")).strftime("%Y-%m-%d"),
        "oil_hours": (days * 20 + rng.integers(0, 15, n) - np.where(days > 400, 8000, 0)).clip(0).astype(str),
        "oxidation": np.round(rng.normal(10, 2, n), 1).astype(str),
        "method": np.where(rng.random(n) < 0.05, "subtraction", "direct"),
        "oil_changed": np.where(rng.random(n) < 0.02, "yes", "no"),
    })
    frame = frame.drop_duplicates(["unit_id", "sampled_on"])  # one sample a unit a day keeps the order unique
    graded = sumpwise.grade(frame, sumpwise.load_ruleset(RULES))
    out = graded.measured.set_index("sample_id")
    reference = graded.measured[["sample_id", "unit_id", "sampled_on", "oil_hours", "oxidation", "method"]].copy()
    reference["oil_changed"] = frame.set_index("sample_id").loc[reference["sample_id"], "oil_changed"].eq("yes").to_numpy()
    expected = _loop_oracle(reference)
    got = {sid: (out.at[sid, "oxidation_step"], out.at[sid, "oxidation_step_per_1000h"], out.at[sid, "oxidation_rising"])
           for sid in expected}
    for sid, want in expected.items():
        np.testing.assert_allclose(got[sid], want, rtol=1e-12, equal_nan=True, err_msg=sid)
    assert sum(not math.isnan(v[0]) for v in expected.values()) > 2000  # most samples have a step


def test_rules_on_trend_measures_grade_and_say_what_was_lacking():
    rs = sumpwise.load_ruleset(RULES)
    graded = sumpwise.grade(sumpwise.read_samples(SAMPLES), rs)
    first = graded.find("T-01")
    assert first.grade == "unrated"  # never "normal": the first sample has no step
    assert {n.rule: n.missing for n in first.not_evaluated}["carbonyl-jump"] == ("previous_oxidation",)
    assert graded.find("T-03").grade == "watch"  # an step 0.08 over 1000 h = 0.08 per 1000 h > 0.05
    fourth = graded.find("T-04")
    # 13.0 - 5.5 = 7.5 abs/cm; the limit 0.05 abs/0.1mm is 5 abs/cm (1 abs/0.1mm = 100 abs/cm, ASTM D7412).
    assert [(r.rule, r.grade, r.value) for r in fourth.reasons][0] == ("carbonyl-jump", "alert", 7.5)
    assert "viscosity-keeps-rising" in {r.rule for r in fourth.reasons}  # 46.0, 46.5, 47.0, 47.5: three rises
    broken = graded.find("T-05")
    # its reading is now differential, and this class grades only direct-trend oxidation: said, not silent
    assert [c.caveat for c in broken.caveats if c.caveat != "few-rules-evaluated"] == ["trend-break",
                                                                                        "ftir-other-convention"]
    assert "method changed from direct to subtraction and lab changed from lab-a to lab-b" in broken.caveats[0].message
    changed = graded.find("T-06")
    # The fixture writes TEST-46's new-oil carbonyl in abs/0.1 mm (100 abs/cm), so every direct reading
    # of it also carries oxidation-below-new (tests/derive/test_oxidation_below_new.py).
    assert [c.caveat for c in changed.caveats
            if c.caveat not in ("few-rules-evaluated", "oxidation-below-new")] == ["oil-changed"]
    assert graded.find("T-09").caveats[0].message.startswith("first sample after an oil change (oil_changed is set")


def test_bulk_writer_matches_the_per_record_api_with_trend_caveats():
    from sumpwise.render.jsonl import dumps, jsonl_lines
    graded = sumpwise.grade(sumpwise.read_samples(SAMPLES), sumpwise.load_ruleset(RULES))
    lines = "".join(jsonl_lines(graded)).splitlines()
    assert lines == [dumps(graded.result(i).to_record()) for i in range(len(graded))]


def test_trend_vocabulary_units_and_needs():
    assert unit_key("oxidation_step") == "oxidation"
    assert unit_key("oxidation_step_per_1000h") == "oxidation"
    assert unit_key("an_rising") is None
    assert TREND_MEASURES["kv40_step_per_1000h"].needs == ("kv40", "previous_kv40", "hours_since_previous")
    for name in ("oxidation_step", "an_step_per_1000h", "kv40_rising"):
        assert name in TREND_MEASURES


def test_a_bad_oil_changed_value_is_a_rejected_row():
    text = SAMPLES.read_text().replace("T-02,ST-1,steam-turbine,TEST-46,2026-02-05,1500,46.5,0.12,6.0,direct,lab-a,false",
                                       "T-02,ST-1,steam-turbine,TEST-46,2026-02-05,1500,46.5,0.12,6.0,direct,lab-a,maybe")
    import io
    graded = sumpwise.grade(sumpwise.read_samples(io.StringIO(text), "s.csv"), sumpwise.load_ruleset(RULES))
    assert [(r.row, r.sample_id, r.field) for r in graded.rejects] == [(2, "T-02", "oil_changed")]
    assert "expected true or false" in graded.rejects[0].reason and "'maybe'" in graded.rejects[0].reason
    counts = graded.counts()  # the rejected row is counted, not lost: graded + unrated + rejected == read
    assert counts["rejected"] == 1 and counts["graded"] + counts["unrated"] + 1 == counts["read"] == 9


@pytest.mark.parametrize("value, flag", [("yes", True), ("TRUE", True), ("1", True), ("no", False), ("", False)])
def test_oil_changed_spellings(value, flag):
    frame = pd.DataFrame([_row("A", "01-05", 1000, 5.0, oil_changed=value)])
    batch = sumpwise.grade(frame, sumpwise.load_ruleset(RULES))
    assert batch.measured["oil_change_note"].notna().tolist() == [flag]


def test_packed_sort_key_gives_numpy_lexsort_order():
    # Reference: numpy.lexsort (stable, last key first): unit, then date, then the oil-changed flag,
    # then oil hours with missing hours last.
    from sumpwise.derive.trends import _trend_order, date_keys
    rng = np.random.default_rng(11)
    n = 5000
    units = rng.integers(-1, 30, n)
    dates = date_keys(np.array(["2026-01-05", "2026-01-06", None, "not a date", "2025-12-31"],
                                dtype=object)[rng.integers(0, 5, n)])
    hours = rng.choice([0.0, -0.0, 10.0, 25.5, np.nan, np.inf, 1e9], n)
    expected = np.lexsort((np.arange(n), np.where(np.isnan(hours), np.inf, hours), dates, units))
    assert np.array_equal(_trend_order(units, dates, hours), expected)
    flags = rng.random(n) < 0.3  # on one date, a flagged sample after the others, then by oil hours
    expected = np.lexsort((np.arange(n), np.where(np.isnan(hours), np.inf, hours), flags, dates, units))
    assert np.array_equal(_trend_order(units, dates, hours, flags), expected)
    assert len(_trend_order(units[:0], dates[:0], hours[:0])) == 0
