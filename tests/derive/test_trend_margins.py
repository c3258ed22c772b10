"""Trend measures on declared measures and cleanliness, noise margins, and ISO 4406 rules, graded.

Published repeatability figures (vocabulary.measures): ASTM D664 15.1.1, used oils, buffer end
point, r = 0.117 X; ISO 3104 14.2 (the ISO twin of ASTM D445), formulated oils at 40 and
100 C, r = 0.0026 x; X and x are the mean of the two results. A step no larger than r is
not a rise. The test rule set (tests/data/trends/rules.yaml) and its samples are invented.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest

import sumpwise
from sumpwise.ruleset.compiler import load_ruleset
from sumpwise.vocabulary.measures import measure_needs
from sumpwise.vocabulary.problems import InvalidFile
from tests.conftest import DATA

RULES = DATA / "trends" / "rules.yaml"


def _frame(**columns):
    n = len(next(iter(columns.values())))
    frame = pd.DataFrame({"sample_id": [f"S{k}" for k in range(n)], "unit_id": "HPU-7", "class": "hydraulic",
                          "lubricant": "TEST-46",
                          "sampled_on": [f"2026-{k + 1:02d}-10" for k in range(n)],
                          "oil_hours": [500.0 * (k + 1) for k in range(n)]})
    for name, values in columns.items():
        frame[name] = values
    return frame


def _graded(frame):
    return sumpwise.grade(frame, sumpwise.load_ruleset(RULES))


def test_declared_measures_get_step_rate_and_rises_with_the_rule_sets_margin():
    # noise_margins: iron 2 ppm. Steps +1, +3, +2, +5, +4: only those above 2 ppm are rises.
    graded = _graded(_frame(iron=[10.0, 11.0, 14.0, 16.0, 21.0, 25.0]))
    m = graded.measured
    assert m["iron_step"].tolist()[1:] == [1.0, 3.0, 2.0, 5.0, 4.0]
    assert m["iron_step_per_1000h"].tolist()[1:] == [2.0, 6.0, 4.0, 10.0, 8.0]
    assert m["iron_rising"].tolist()[1:] == [0.0, 1.0, 0.0, 1.0, 2.0]
    assert measure_needs("iron_step") == ("iron", "previous_iron")
    assert [r.sample_id for r in graded.results() if any(x.rule == "iron-climbing" for x in r.reasons)] == []


def test_without_a_margin_every_rise_counts():
    # The same steps with a rule set that gives no margin for iron: every rise counts.
    rs = sumpwise.load_ruleset(RULES)
    bare = sumpwise.grade(_frame(iron=[10.0, 11.0, 14.0, 16.0, 21.0, 25.0]),
                          type(rs)(**{**rs.__dict__, "noise_margins": {}}))
    assert bare.measured["iron_rising"].tolist()[1:] == [1.0, 2.0, 3.0, 4.0, 5.0]
    fired = [r.sample_id for r in bare.results() if any(x.rule == "iron-climbing" for x in r.reasons)]
    assert fired == ["S3", "S4", "S5"]


def test_acid_number_rises_count_only_above_the_d664_repeatability():
    # D664 15.1.1 used oils: r = 0.117 X. 0.50 -> 0.55: r(0.525) = 0.0614 > 0.05, noise.
    # 0.55 -> 0.70: r(0.625) = 0.0731 < 0.15, a rise; 0.70 -> 0.80: r(0.75) = 0.0878 < 0.10, a rise.
    graded = _graded(_frame(an=[0.50, 0.55, 0.70, 0.80]))
    assert graded.measured["an_rising"].tolist()[1:] == [0.0, 1.0, 2.0]
    # The first sample has nothing any rule can read: unrated, never normal.
    assert [r.grade for r in graded.results()] == ["unrated", "normal", "normal", "watch"]


def test_viscosity_rises_count_only_above_the_iso_3104_repeatability():
    # ISO 3104 14.2 formulated oils: r = 0.0026 x; at 46 mm2/s that is 0.12 mm2/s.
    graded = _graded(_frame(kv40=[46.0, 46.1, 46.3, 46.5]))
    measured = graded.measured
    assert measured["kv40_step"].tolist()[1:] == pytest.approx([0.1, 0.2, 0.2])
    assert measured["kv40_rising"].tolist()[1:] == [0.0, 1.0, 2.0]


def test_cleanliness_codes_and_counts_are_graded_against_the_target():
    # Target 17/15/12 at watch, -/17/14 at alert (tests/data/trends/rules.yaml).
    frame = _frame(iso4406=["16/14/11", "18/16/13", "-/18/15", None],
                   particles_4um=[np.nan, np.nan, np.nan, 900.0],  # 640 to 1,300 /mL: 17
                   particles_6um=[np.nan, np.nan, np.nan, 350.0],  # 320 to 640: 16
                   particles_14um=[np.nan, np.nan, np.nan, 30.0])  # 20 to 40: 12
    graded = _graded(frame)
    assert graded.measured[["iso4406_4um", "iso4406_6um", "iso4406_14um"]].to_numpy().tolist()[3] == [17, 16, 12]
    results = list(graded.results())
    assert [r.grade for r in results] == ["normal", "watch", "alert", "watch"]

    def clean(result):
        return sorted((x.rule, x.grade) for x in result.reasons if x.rule.startswith("cleanliness"))
    assert clean(results[1]) == [("cleanliness-14um", "watch"), ("cleanliness-4um", "watch"),
                                 ("cleanliness-6um", "watch")]
    assert clean(results[2]) == [("cleanliness-14um", "alert"), ("cleanliness-6um", "alert")]
    assert clean(results[3]) == [("cleanliness-6um", "watch")]
    assert "cleanliness-4um" in {n.rule for n in results[2].not_evaluated}  # '-' at 4 um(c): not a pass
    assert graded.measured["iso4406"].tolist()[1] == "18/16/13"  # the code as written is kept


def test_cleanliness_scale_numbers_have_trends():
    graded = _graded(_frame(iso4406=["15/13/10", "16/14/11", "18/16/13"]))
    assert graded.measured["iso4406_14um_step"].tolist()[1:] == [1.0, 2.0]
    assert [x.rule for x in graded.result(2).reasons if x.rule == "dirt-jump"] == ["dirt-jump"]


def _compile(tmp_path, text):
    path = tmp_path / "rules.yaml"
    path.write_text("ruleset: t\nversion: 1\n" + text)
    return load_ruleset(path)


def test_a_margin_for_a_measure_without_trends_or_a_bad_code_is_a_problem(tmp_path):
    with pytest.raises(InvalidFile) as caught:
        _compile(tmp_path, "noise_margins: {vi: 1, oil_hours: 5}\n")
    assert sorted(p.code for p in caught.value.problems) == ["C014", "C014"]
    with pytest.raises(InvalidFile) as caught:
        _compile(tmp_path, "classes:\n  hydraulic:\n    rules:\n      - id: c\n        iso4406: {watch: 17--12}\n"
                           "        message: m\n        source: s\n")
    assert [(p.code, p.line) for p in caught.value.problems] == [("C015", 7)]


def test_margins_and_iso4406_rules_in_canonical_form_reload_to_the_same_fingerprint(tmp_path):
    rs = sumpwise.load_ruleset(RULES)
    doc = json.loads(rs.canonical)
    assert doc["noise_margins"] == {"iron": 2, "water": 30}
    assert [r["id"] for r in doc["classes"]["hydraulic"]["rules"]][3:6] == [
        "cleanliness-4um", "cleanliness-6um", "cleanliness-14um"]
    again = tmp_path / "canonical.json"
    again.write_text(rs.canonical)
    assert load_ruleset(again).sha256 == rs.sha256


def test_a_water_margin_in_percent_is_converted(tmp_path):
    rs = _compile(tmp_path, "units: {water: '%'}\nnoise_margins: {water: 0.005}\n")
    assert math.isclose(rs.noise_margins["water"], 50.0)


def test_rises_agree_with_a_per_unit_loop_on_random_data():
    """The vectorized margin against a plain loop written from D664 15.1.1 (r = 0.117 x mean)."""
    from sumpwise.derive.row_measures import derive_measures
    from sumpwise.derive.trends import add_trend_measures, noise_margins

    rs = sumpwise.load_ruleset(RULES)
    assert noise_margins(rs, ("an", "iron")) == {"an": (0.0, 0.117, 0.0), "iron": (2.0, 0.0, 0.0)}
    rng = np.random.default_rng(11)
    n = 2000
    frame = pd.DataFrame({"sample_id": [f"S{i:05d}" for i in range(n)],
                          "unit_id": [f"U-{u}" for u in rng.integers(0, 25, n)],
                          "class": "hydraulic", "lubricant": "TEST-46",
                          "sampled_on": (pd.Timestamp("2025-01-01")
                                         + pd.to_timedelta(rng.permutation(n), unit="D")).strftime("%Y-%m-%d"),
                          "oil_hours": 1000.0, "an": np.round(rng.uniform(0.05, 1.5, n), 2),
                          "iron": np.round(rng.uniform(5, 40, n))})
    frame["oil_hours"] = frame.groupby("unit_id")["sampled_on"].rank() * 250.0
    measured = derive_measures(frame, rs.lubricants, rs.measures)
    out = add_trend_measures(measured, None, None, ("an", "iron"), noise_margins(rs, ("an", "iron")))
    out = out.set_index("sample_id")
    for _, unit in frame.sort_values("sampled_on").groupby("unit_id"):
        runs = {"an": 0, "iron": 0}
        for k, row in enumerate(unit.itertuples()):
            for name, margin in (("an", None), ("iron", 2.0)):
                if k == 0:
                    assert math.isnan(out.at[row.sample_id, f"{name}_rising"])
                    continue
                before, now = getattr(previous, name), getattr(row, name)
                allowed = margin if margin is not None else 0.117 * (before + now) / 2
                runs[name] = runs[name] + 1 if round(now - before, 9) > allowed else 0
                assert out.at[row.sample_id, f"{name}_rising"] == runs[name], (row.sample_id, name)
            previous = row
