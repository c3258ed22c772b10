"""propose-limits: what a proposal must pass before anyone pastes it.

Repeatability figures: ASTM D664 used-oil acid number r = 0.117 X (the project's fact sheet,
../shared/reference/limits.md, confirmed); ISO 3104 §14.2 formulated oils r = 0.0026 X (confirmed,
fact sheet viscosity.md); ASTM D6304 r = 0.08852 X^0.7 (from memory). One oil per pool: ASTM E2412
Annex A3 (fact sheet). The 5 % first-level default is common practice, no source. Data are
seeded synthetic results of a known spread (invented, Brackwater Point style).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import yaml

from conftest import ROOT, run_cli

DATA = ROOT / "tests" / "data" / "authoring"


def _samples(path, columns: dict, lubricants=("GEAR-320-M",), units=("GB-1",)):
    n = len(next(iter(columns.values())))
    dates = pd.date_range("2024-01-01", periods=n, freq="D")
    frame = pd.DataFrame({"sample_id": [f"BP-{i:05d}" for i in range(n)], "class": "gearbox",
                          "unit_id": [units[i % len(units)] for i in range(n)],
                          "lubricant": [lubricants[i % len(lubricants)] for i in range(n)],
                          "sampled_on": dates.strftime("%Y-%m-%d"), "oil_hours": np.arange(n) * 100.0 + 100.0,
                          **columns})
    frame.to_csv(path, index=False)
    return path


def _rule(text: str) -> dict:
    body = "\n".join(line for line in text.splitlines() if not line.startswith("#"))
    [rule] = yaml.safe_load(body)
    return rule


def _propose(samples, measure, *extra):
    return run_cli("propose-limits", "--samples", samples, "--class", "gearbox", "--measure", measure, *extra)


def test_acid_number_steps_are_never_narrower_than_d664_repeatability(tmp_path):
    # A tight, in-control spread (SD 0.02 mg KOH/g at 0.5): the SPC steps (0.5 SD = 0.01) are far under
    # D664's r = 0.117 X (about 0.06 at 0.55), so every step is widened to at least r at its level.
    an = np.round(np.random.default_rng(664).normal(0.50, 0.02, 400), 3)
    run = _propose(_samples(tmp_path / "s.csv", {"an": an}), "an", "--method", "spc")
    assert run.code == 0, run.err
    limits = list(_rule(run.out)["above"].values())
    mean, sd = np.mean(an), np.std(an, ddof=1)
    assert limits[0] == float(f"{mean + 2 * sd:.4g}")  # the first level is the statistics' own
    for low, high in zip(limits, limits[1:]):
        assert high - low >= 0.117 * high  # D664, used oils: r = 0.117 X
    assert run.out.count("# note: ") >= 2 and "widened" in run.out


def test_kinematic_viscosity_and_water_steps_keep_their_repeatability(tmp_path):
    rng = np.random.default_rng(445)
    kv40 = np.round(rng.normal(46.0, 0.05, 400), 3)     # a very steady VG 46 oil: steps 0.025 under r
    water = np.round(rng.normal(150.0, 1.0, 400), 1)    # a tight water spread: steps 0.5 ppm under r
    samples = _samples(tmp_path / "s.csv", {"kv40": kv40, "water": water})
    for measure, r in (("kv40", lambda x: 0.0026 * x), ("water", lambda x: 0.08852 * x ** 0.7)):
        run = _propose(samples, measure, "--method", "spc")
        assert run.code == 0, run.err
        limits = list(_rule(run.out)["above"].values())
        assert all(high - low >= r(high) for low, high in zip(limits, limits[1:])), (measure, limits)


def test_a_wide_spread_is_left_as_the_statistics_give_it(tmp_path):
    kv40 = np.round(np.random.default_rng(446).normal(320.0, 4.0, 400), 2)
    run = _propose(_samples(tmp_path / "s.csv", {"kv40": kv40}), "kv40", "--method", "spc")
    mean, sd = np.mean(kv40), np.std(kv40, ddof=1)
    assert list(_rule(run.out)["above"].values()) == [float(f"{mean + k * sd:.4g}") for k in (2, 2.5, 3)]
    assert "widened" not in run.out


def test_each_level_says_what_share_of_in_control_samples_it_flags(tmp_path):
    kv40 = np.round(np.random.default_rng(447).normal(320.0, 4.0, 400), 2)
    run = _propose(_samples(tmp_path / "s.csv", {"kv40": kv40}), "kv40", "--method", "spc")
    line = next(line for line in run.out.splitlines() if line.startswith("# flags (normal model"))
    # One-sided normal tails beyond 2, 2.5 and 3 SD are 2.3 %, 0.62 % and 0.13 %; the written limits are
    # rounded to 4 figures, so the shares are taken at those limits, with the normal distribution
    # (scipy.stats.norm.sf as the outside reference).
    from scipy import stats
    mean, sd = np.mean(kv40), np.std(kv40, ddof=1)
    assert [f"{stats.norm.sf(k) * 100:.2g} %" for k in (2, 2.5, 3)] == ["2.3 %", "0.62 %", "0.13 %"]
    limits = _rule(run.out)["above"]
    for grade, limit in limits.items():
        assert f"{grade} {stats.norm.sf((limit - mean) / sd) * 100:.2g} %" in line
    assert stats.norm.sf((limits["watch"] - mean) / sd) <= 0.05
    assert "first level to about 5 %" in run.out


def test_trend_measures_are_proposed_too(tmp_path):
    # Three gearboxes sampled in turn; the acid number creeps up, so each unit's steps are positive.
    rng = np.random.default_rng(7669)
    an = np.round(0.30 + np.arange(600) * 0.0005 + rng.normal(0, 0.01, 600), 3)
    run = _propose(_samples(tmp_path / "s.csv", {"an": an}, units=("GB-1", "GB-2", "GB-3")), "an_step")
    assert run.code == 0, run.err
    rule = _rule(run.out)
    assert rule["measure"] == "an_step" and len(rule["above"]) == 3
    assert "count: 597 result(s) used, 3 without a value dropped" in run.out  # each unit's first sample


def test_several_lubricants_are_refused_unless_pooled_on_purpose(tmp_path):
    kv40 = np.round(np.random.default_rng(2412).normal(320.0, 4.0, 400), 2)
    samples = _samples(tmp_path / "s.csv", {"kv40": kv40}, lubricants=("GEAR-320-M", "GEAR-320-PAO"))
    refused = _propose(samples, "kv40")
    assert refused.code == 2 and refused.out == ""
    assert "mix 2 lubricants (GEAR-320-M 200, GEAR-320-PAO 200)" in refused.err
    assert "ASTM E2412 Annex A3" in refused.err and "--pool-lubricants" in refused.err
    assert _propose(samples, "kv40", "--lubricant", "GEAR-320-M").code == 0
    pooled = _propose(samples, "kv40", "--pool-lubricants")
    assert pooled.code == 0 and "every lubricant (pooled on request)" in pooled.out


def test_unit_and_date_filters_choose_the_results(tmp_path):
    kv40 = np.round(np.random.default_rng(3104).normal(320.0, 4.0, 600), 2)
    samples = _samples(tmp_path / "s.csv", {"kv40": kv40}, units=("GB-1", "GB-2"))
    one = _propose(samples, "kv40", "--unit", "GB-1", "--method", "spc")
    assert "count: 300 result(s)" in one.out and "unit(s) GB-1" in one.out
    dated = _propose(samples, "kv40", "--since", "2024-03-01", "--until", "2024-05-30", "--method", "spc")
    assert "count: 91 result(s)" in dated.out and "dates: 2024-03-01 to 2024-05-30" in dated.out
    bad = _propose(samples, "kv40", "--since", "2024-13-45")
    assert bad.code == 2 and "expected a date as YYYY-MM-DD" in bad.err


def test_one_huge_outlier_never_gives_a_limit_that_is_not_finite(tmp_path):
    an = np.round(np.random.default_rng(14).normal(0.5, 0.1, 300), 3)
    an[17] = 1e200
    samples = _samples(tmp_path / "s.csv", {"an": an})
    for method in ("auto", "spc", "percentile"):
        run = _propose(samples, "an", "--method", method)
        assert ".inf" not in run.out and "inf" not in run.out.lower().replace("info", "")
        if run.code == 0:
            limits = list(_rule(run.out)["above"].values())
            assert all(math.isfinite(v) for v in limits)
            checked = tmp_path / f"{method}.yaml"
            checked.write_text("ruleset: t\nversion: 1\nclasses:\n  gearbox:\n    rules:\n"
                               + "\n".join("      " + line for line in run.out.splitlines() if not line.startswith("#"))
                               .replace("      - ", "      - ", 1) + "\n")
            assert run_cli("check", checked).code in (0,), run_cli("check", checked).err
        else:
            assert run.code == 2 and "refused" in run.err


def test_a_limit_outside_the_measure_domain_is_refused(tmp_path):
    # Base number of an engine oil, low is bad: mean 1.0, SD 0.5 -> mean - 2.5 SD is below zero.
    bn = np.round(np.random.default_rng(2896).normal(1.0, 0.5, 400).clip(0.01), 3)
    run = _propose(_samples(tmp_path / "s.csv", {"bn": bn}), "bn", "--method", "spc")
    assert run.code == 2 and "can never be crossed: bn never takes such a value" in run.err


def test_a_derived_measure_without_new_oil_values_says_what_is_missing(tmp_path):
    an = np.round(np.random.default_rng(974).normal(0.5, 0.05, 100), 3)
    run = _propose(_samples(tmp_path / "s.csv", {"an": an}), "an_rise")
    assert run.code == 2
    assert "an_rise could not be computed for any of the 100 chosen result(s)" in run.err
    assert "none of them has new_an" in run.err and "no --rules was given" in run.err
