"""propose-limits on realistic site histories: censored readings and oils whose reading falls in service.

Outside sources beside each check: numpy.percentile and scipy.stats (general-purpose reference
libraries) for the statistics; the censored-reading rule (a `<50` is an interval, never its bound's
number) is the project's intake contract (README, censored readings). The histories are invented,
Brackwater Point style: tens of units, a skewed water distribution, one unit contributing most
samples, a lab that writes water below its reporting limit as `<50`.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml
from scipy import stats

from conftest import run_cli
from sumpwise.authoring.limit_statistics import censored_percentiles, moments, jarque_bera_p, propose_ladder
from sumpwise.ruleset.compiler import load_ruleset

REPORTING_LIMIT = 50.0  # ppm: the lab writes `<50` below it (common practice for KF water, no source)


def _history(path, columns: dict, cls="gearbox", lubricant="GEAR-320-M", units=12, busy_share=0.0, seed=0):
    """A site history: `units` units, one of them (GB-1) taking `busy_share` of the samples."""
    n = len(next(iter(columns.values())))
    rng = np.random.default_rng(seed)
    unit = np.where(rng.random(n) < busy_share, 0, rng.integers(0, units, n))
    frame = pd.DataFrame({"sample_id": [f"BP-{i:05d}" for i in range(n)], "class": cls,
                          "unit_id": [f"GB-{u + 1}" for u in unit], "lubricant": lubricant,
                          "sampled_on": pd.date_range("2021-03-01", periods=n, freq="16h").strftime("%Y-%m-%d"),
                          "oil_hours": np.round(rng.uniform(100, 8000, n)), **columns})
    frame.to_csv(path, index=False)
    return path


def _rule(text: str) -> dict:
    [rule] = yaml.safe_load("\n".join(line for line in text.splitlines() if not line.startswith("#")))
    return rule


def _water(n=1200, seed=1):
    """Lognormal water (median 60 ppm), as the lab reports it: `<50` below its reporting limit."""
    water = np.round(np.random.default_rng(seed).lognormal(np.log(60.0), 0.8, n))
    cells = np.where(water < REPORTING_LIMIT, f"<{REPORTING_LIMIT:g}", water.astype(int).astype(str))
    return water, cells


def test_censored_water_readings_are_ranked_not_dropped(tmp_path):
    # 507 of 1200 results are `<50`. Engines up to 0.7.0 counted them as "without a value dropped" and took
    # percentiles of the 693 detected readings alone: watch above 263.6, alert 326.1, urgent 445.7 ppm, where
    # the site's own 95th / 97.5th / 99th percentiles are 217.2 / 270 / 343 ppm (numpy.percentile of every
    # result). Each level sat far above what it claims, so about half the samples it should flag went unflagged.
    water, cells = _water()
    assert (cells == "<50").sum() == 507
    run = run_cli("propose-limits", "--samples", _history(tmp_path / "s.csv", {"water": cells}, busy_share=0.4),
                  "--class", "gearbox", "--measure", "water", "--method", "percentile")
    assert run.code == 0, run.err
    expected = np.percentile(water, [95.0, 97.5, 99.0])  # numpy: every result, the censored ones at their truth
    assert list(_rule(run.out)["above"].values()) == [float(f"{x:.4g}") for x in expected]
    assert "count: 1200 result(s) used, 0 without a value dropped" in run.out
    assert "507 of them censored" in run.out
    # The share each level flags is of all 1200 results: a censored `<50` counts as not beyond.
    flags = next(line for line in run.out.splitlines() if line.startswith("# flags"))
    assert "watch 5 % (5 %)" in flags


def test_auto_takes_percentiles_when_readings_are_censored_and_spc_refuses(tmp_path):
    _, cells = _water()
    samples = _history(tmp_path / "s.csv", {"water": cells})
    auto = run_cli("propose-limits", "--samples", samples, "--class", "gearbox", "--measure", "water")
    assert auto.code == 0, auto.err
    assert "percentiles because 507 results are censored" in _rule(auto.out)["source"]
    spc = run_cli("propose-limits", "--samples", samples, "--class", "gearbox", "--measure", "water", "--method", "spc")
    assert spc.code == 2 and spc.out == ""
    assert "507 of the 1200 results are censored" in spc.err


def test_a_percentile_among_the_censored_readings_is_refused(tmp_path):
    # A dry site: 97 % of results `<50`. The 95th percentile lies somewhere under 50, but where is unknown:
    # no limit rests on the bound as if it were a reading.
    rng = np.random.default_rng(3)
    cells = np.where(rng.random(1000) < 0.97, "<50", np.round(rng.uniform(60, 400, 1000)).astype(int).astype(str))
    run = run_cli("propose-limits", "--samples", _history(tmp_path / "s.csv", {"water": cells}),
                  "--class", "gearbox", "--measure", "water", "--method", "percentile")
    assert run.code == 2 and run.out == ""
    assert "95th" in run.err and "percentile falls among the" in run.err


def test_censored_percentiles_agree_with_numpy_where_the_bounds_cannot_move_them():
    # Reference: numpy.percentile (linear) of the true values. Censored values are drawn below their bound.
    rng = np.random.default_rng(11)
    true = rng.gamma(2.0, 40.0, 800)
    hidden = true < 30.0
    low, high = np.zeros(hidden.sum()), np.full(hidden.sum(), 30.0)
    got = censored_percentiles(true[~hidden], low, high, [90.0, 95.0, 99.0])
    np.testing.assert_allclose(got, np.percentile(true, [90.0, 95.0, 99.0]), rtol=0, atol=1e-12)
    with pytest.raises(ValueError, match="the 10th percentile"):
        censored_percentiles(true[~hidden], low, high, [10.0, 95.0])


def test_moments_and_normality_p_agree_with_scipy():
    # scipy.stats.skew / kurtosis (biased, as the Jarque-Bera statistic takes them) and jarque_bera.
    water, _ = _water()
    mean, sd, g1, g2 = moments(water)
    assert mean == pytest.approx(np.mean(water)) and sd == pytest.approx(np.std(water, ddof=1))
    assert g1 == pytest.approx(stats.skew(water)) and g2 == pytest.approx(stats.kurtosis(water))
    normal = np.random.default_rng(5).normal(46.0, 0.4, 300)
    result = stats.jarque_bera(normal)
    assert jarque_bera_p(300, *moments(normal)[2:]) == pytest.approx(result.pvalue, rel=1e-9)


def test_percentile_limits_are_numpys_on_a_skewed_history_with_one_busy_unit():
    values = np.random.default_rng(9).lognormal(np.log(0.3), 0.5, 600)
    proposal = propose_ladder(values, ("watch", "alert", "urgent"), "above", method="percentile")
    assert proposal.limits == tuple(np.percentile(values, [95.0, 97.5, 99.0]).tolist())
    low = propose_ladder(values, ("watch", "alert"), "below", method="percentile")
    assert low.limits == tuple(np.percentile(values, [5.0, 2.5]).tolist())


def _anti_wear_history(path):
    # An anti-wear hydraulic oil: new acid number 0.80 mg KOH/g (its additive titrates as acid); in service
    # the additive is used up and the acid number falls, here to 0.45 +/- 0.06 across 20 units.
    an = np.round(np.random.default_rng(7).normal(0.45, 0.06, 300), 2)
    return _history(path, {"an": an, "new_an": np.full(300, 0.80)}, cls="hydraulic", lubricant="HYD-46-AW", units=20)


@pytest.mark.parametrize("measure", ["an", "an_rise"])
def test_no_limit_that_the_new_oil_itself_crosses(tmp_path, measure):
    # Engines up to 0.7.0 proposed `an above {watch: 0.553, alert: 0.6263, urgent: 0.7093}` (and an_rise above
    # -0.247 / -0.1737 / -0.09071): every fresh charge (an 0.80, rise 0) graded urgent at its first sample.
    run = run_cli("propose-limits", "--samples", _anti_wear_history(tmp_path / "s.csv"), "--class", "hydraulic",
                  "--measure", measure)
    assert run.code == 2 and run.out == ""
    assert "already crossed by" in run.err and "--direction below" in run.err


def test_limits_beyond_the_new_oil_still_pass(tmp_path):
    # The same oil, limits on the fall: the new oil (0.80) is above every `below` limit, so none flags it.
    run = run_cli("propose-limits", "--samples", _anti_wear_history(tmp_path / "s.csv"), "--class", "hydraulic",
                  "--measure", "an", "--direction", "below", "--method", "spc")
    assert run.code == 0, run.err
    limits = list(_rule(run.out)["below"].values())
    assert all(limit < 0.80 for limit in limits)


def test_until_takes_the_whole_day_of_a_timed_sample(tmp_path):
    # `--until DATE` is "sampled on or before this date" (its help). Lab exports carry a time of day; engines up
    # to 0.7.0 compared with midnight and dropped the day's own samples (56 of 60 here, without a word).
    n = 60
    kv40 = np.round(np.random.default_rng(2).normal(320.0, 4.0, n), 1)
    frame = pd.DataFrame({"sample_id": [f"BP-{i:05d}" for i in range(n)], "class": "gearbox", "unit_id": "GB-1",
                          "lubricant": "GEAR-320-M", "oil_hours": np.arange(n) * 50.0 + 100.0, "kv40": kv40,
                          "sampled_on": [f"2024-03-{1 + i // 4:02d}T{8 + i % 4:02d}:30" for i in range(n)]})
    frame.to_csv(tmp_path / "s.csv", index=False)
    run = run_cli("propose-limits", "--samples", tmp_path / "s.csv", "--class", "gearbox", "--measure", "kv40",
                  "--method", "spc", "--since", "2024-03-02", "--until", "2024-03-15")
    assert run.code == 0, run.err
    assert "count: 56 result(s) used" in run.out  # 2 to 15 March: 14 days x 4 samples
    mean, sd = np.mean(kv40[4:]), np.std(kv40[4:], ddof=1)
    assert _rule(run.out)["above"]["watch"] == float(f"{mean + 2 * sd:.4g}")


def test_one_unit_giving_most_results_is_said(tmp_path):
    _, cells = _water(seed=4)
    busy = run_cli("propose-limits", "--samples", _history(tmp_path / "b.csv", {"water": cells}, busy_share=0.7),
                   "--class", "gearbox", "--measure", "water")
    assert busy.code == 0, busy.err
    note = next(line for line in busy.out.splitlines() if line.startswith("# note: unit "))
    assert note.startswith("# note: unit GB-1 gives ")
    spread = run_cli("propose-limits", "--samples", _history(tmp_path / "e.csv", {"water": cells}),
                     "--class", "gearbox", "--measure", "water")
    assert spread.code == 0 and "# note: unit " not in spread.out


def test_rows_rejected_when_read_are_listed_and_said_beside_the_limits(tmp_path):
    # A lab export that writes water above 1000 ppm as a percentage (`0.12%`): intake cannot tell whether
    # the small plain numbers are ppm or per cent and rejects them (D018), with the percentage cells. Engines
    # up to 0.7.0 proposed from the 1020 rows left without a word: a pool cut at both ends.
    rng = np.random.default_rng(5)
    water = np.round(rng.lognormal(np.log(150.0), 0.9, 1500))
    cells = np.array([f"{w / 10000:.2f}%" if w >= 1000 else f"{w:.0f}" for w in water], dtype=object)
    run = run_cli("propose-limits", "--samples", _history(tmp_path / "s.csv", {"water": cells}),
                  "--class", "gearbox", "--measure", "water", "--method", "percentile")
    assert run.code == 0, run.err
    rejected = [line for line in run.err.splitlines() if " rejected D018: water: " in line]
    assert len(rejected) == 480
    assert "count: 1020 result(s) used" in run.out  # every row is used or rejected: 1020 + 480 = 1500
    assert "# note: 480 row(s) of " in run.out and "s.csv were rejected when read" in run.out
    assert "(480 rejected rows not in them)" in " ".join(_rule(run.out)["source"].split())


def test_a_lubricant_without_a_new_oil_value_is_named_not_silently_left_out(tmp_path):
    # Two gear oils in one class; the rule set knows the new-oil acid number of one only, so an_rise exists for
    # that oil's results alone. The proposal is that oil's, and says the other oil's results have no value.
    rng = np.random.default_rng(8)
    oil = np.where(rng.random(300) < 0.5, "GEAR-320-M", "GEAR-220-S")
    an = np.round(np.where(oil == "GEAR-320-M", 0.3, 0.9) + np.abs(rng.normal(0.1, 0.05, 300)), 2)
    samples = _history(tmp_path / "s.csv", {"an": an})
    frame = pd.read_csv(samples)
    frame["lubricant"] = oil
    frame.to_csv(samples, index=False)
    rules = tmp_path / "rules.yaml"
    rules.write_text("ruleset: found6-gear\nversion: 1\nlubricants:\n  GEAR-320-M: {base_stock: mineral, "
                     "iso_vg: 320, kv40: 320.0, an: 0.3}\nclasses:\n  gearbox:\n    rules:\n      - id: acid-rise\n"
                     "        measure: an_rise\n        above: {watch: 0.2}\n        message: Acid number has risen\n"
                     "        source: common practice, no source\n", encoding="utf-8")
    run = run_cli("propose-limits", "--samples", samples, "--class", "gearbox", "--measure", "an_rise",
                  "--rules", rules)
    assert run.code == 0, run.err
    counted = int((oil == "GEAR-220-S").sum())
    assert f"lubricant(s) GEAR-220-S ({counted} results) of this class have no an_rise value" in run.out
    assert "new_an is not known for them" in run.out
    assert "lubricant GEAR-320-M (the only one whose results have a value)" in run.out


def test_the_source_says_steps_were_widened_only_when_one_was(tmp_path):
    # FTIR oxidation has no published repeatability here, so nothing is widened; engines up to 0.7.0 still
    # wrote "Steps widened to at least the test's repeatability." into the pasted rule's source, because the
    # note saying no repeatability applies counted as a widening.
    oxidation = np.round(np.random.default_rng(12).normal(9.0, 1.5, 400), 2)
    run = run_cli("propose-limits", "--samples", _history(tmp_path / "s.csv", {"oxidation": oxidation}),
                  "--class", "gearbox", "--measure", "oxidation", "--method", "spc")
    assert run.code == 0, run.err
    assert "no published repeatability applies to oxidation" in run.out
    assert "widened" not in " ".join(_rule(run.out)["source"].split())
    an = np.round(np.random.default_rng(664).normal(0.50, 0.02, 400), 3)  # SPC steps under D664's r
    run = run_cli("propose-limits", "--samples", _history(tmp_path / "a.csv", {"an": an}),
                  "--class", "gearbox", "--measure", "an", "--method", "spc")
    assert run.code == 0, run.err
    assert "Steps widened to at least the test's repeatability." in " ".join(_rule(run.out)["source"].split())


def test_a_lubricant_code_in_another_case_is_the_same_oil(tmp_path):
    # Grading reads a lab's `gear-320-m` as the table's GEAR-320-M (vocabulary.texts.lubricant_key). Engines up
    # to 0.7.0 proposed `--lubricant GEAR-320-M` from the 120 results spelt that way, leaving out the 80 the lab
    # spelt in lower case (the later, thicker ones), and without --lubricant refused the class as two oils.
    kv40 = np.round(np.random.default_rng(9).normal(320.0, 4.0, 200), 1)
    kv40[120:] += 6.0
    samples = _history(tmp_path / "s.csv", {"kv40": kv40})
    frame = pd.read_csv(samples)
    frame["lubricant"] = np.where(np.arange(200) < 120, "GEAR-320-M", "gear-320-m")
    frame.to_csv(samples, index=False)
    mean, sd = np.mean(kv40), np.std(kv40, ddof=1)  # numpy, every result of the oil
    for extra in (["--lubricant", "GEAR-320-M"], ["--lubricant", "Gear-320-M"], []):
        run = run_cli("propose-limits", "--samples", samples, "--class", "gearbox", "--measure", "kv40",
                      "--method", "spc", *extra)
        assert run.code == 0, (extra, run.err)
        assert "count: 200 result(s) used" in run.out
        assert _rule(run.out)["above"]["watch"] == float(f"{mean + 2 * sd:.4g}")


PASTE = Path(__file__).resolve().parents[1] / "data" / "authoring_found6" / "paste-units.yaml"


@pytest.mark.parametrize("measure, values", [
    ("water", np.round(np.random.default_rng(21).lognormal(np.log(30.0), 0.4, 600))),     # a dry gearbox, ppm
    ("oxidation_rise", np.round(np.random.default_rng(22).gamma(4.0, 1.5, 600), 2)),       # abs/cm
])
def test_a_snippet_pasted_into_its_rules_file_grades_at_the_proposed_limits(tmp_path, measure, values):
    # The class's file reads water in % and FTIR in abs/0.1mm. Engines up to 0.7.0 wrote the engine's units
    # (ppm, abs/cm) into the snippet: pasted there, water above 62 ppm read as 62 % (no error below 100 %) and
    # a carbonyl rise above 12 abs/cm as 12 abs/0.1mm (1200 abs/cm). The check: paste it, load the file, and
    # the compiled limits (canonical units, by the file's own `units:`) are the proposal's figures.
    column = "oxidation" if measure == "oxidation_rise" else measure
    readings = values + 2.0 if measure == "oxidation_rise" else values  # new oil 0.02 abs/0.1mm = 2 abs/cm
    run = run_cli("propose-limits", "--samples", _history(tmp_path / "s.csv", {column: readings}),
                  "--class", "gearbox", "--measure", measure, "--rules", PASTE, "--method", "percentile")
    assert run.code == 0, run.err
    figures = next(line for line in run.out.splitlines() if line.startswith("# limits: "))
    proposed = [float(part.split()[-1]) for part in figures.removeprefix("# limits: ").split(", ")]
    assert "# written in " in run.out and "the engine's unit:" not in run.out
    rule = _rule(run.out)
    pasted = PASTE.read_text(encoding="utf-8") + "\n".join(
        "      " + line for line in yaml.safe_dump([rule], sort_keys=False).splitlines()) + "\n"
    (tmp_path / "pasted.yaml").write_text(pasted, encoding="utf-8")
    compiled = next(r for r in load_ruleset(tmp_path / "pasted.yaml").rules_for("gearbox") if r.id == rule["id"])
    assert [limit for _, limit in compiled.steps] == pytest.approx(proposed, rel=1e-3)  # 4 significant figures


def test_without_rules_the_snippet_says_its_units(tmp_path):
    water = np.round(np.random.default_rng(21).lognormal(np.log(30.0), 0.4, 600))
    run = run_cli("propose-limits", "--samples", _history(tmp_path / "s.csv", {"water": water}),
                  "--class", "gearbox", "--measure", "water", "--method", "percentile")
    assert run.code == 0, run.err
    assert "# written in ppm, the engine's unit: a file whose `units:` reads water in another unit" in run.out


def test_acid_steps_are_taken_within_each_oil_charge_as_pandas_recomputes_them(tmp_path):
    # 20 gearboxes, 40 samples each, the oil changed every 15 samples (oil hours restart). The steps the
    # proposal pools are recomputed independently with pandas (diff within unit and charge): 740 steps, none
    # across an oil change; the first level is numpy's 95th percentile of them (the higher two are widened to
    # D664's repeatability, r = 0.117 X, and say so).
    rng = np.random.default_rng(31)
    rows = []
    for u in range(20):
        hours, an = 0.0, 0.1
        start = pd.Timestamp("2022-01-01") + pd.Timedelta(days=int(rng.integers(0, 30)))
        for k in range(40):
            if k and k % 15 == 0:
                hours, an = 0.0, 0.1
            hours += rng.uniform(200, 400)
            an += abs(rng.normal(0.01, 0.02))
            rows.append({"sample_id": f"BP-{u:02d}-{k:02d}", "class": "gearbox", "unit_id": f"GB-{u + 1}",
                         "lubricant": "GEAR-320-M", "sampled_on": (start + pd.Timedelta(days=30 * k)).strftime("%Y-%m-%d"),
                         "oil_hours": round(hours), "an": round(an, 3)})
    frame = pd.DataFrame(rows).sort_values(["sampled_on", "unit_id"]).reset_index(drop=True)  # as a lab lists them
    frame.to_csv(tmp_path / "s.csv", index=False)
    by_unit = frame.sort_values(["unit_id", "sampled_on"])
    charge = (by_unit.groupby("unit_id")["oil_hours"].diff() < 0).groupby(by_unit["unit_id"]).cumsum()
    steps = by_unit.groupby([by_unit["unit_id"], charge])["an"].diff().dropna().to_numpy()
    run = run_cli("propose-limits", "--samples", tmp_path / "s.csv", "--class", "gearbox", "--measure", "an_step",
                  "--method", "percentile")
    assert run.code == 0, run.err
    assert steps.size == 740 and "count: 740 result(s) used, 60 without a value dropped" in run.out
    limits = list(_rule(run.out)["above"].values())
    assert limits[0] == float(f"{np.percentile(steps, 95.0):.4g}")
    r = 0.117 * np.median(frame["an"])  # D664 at the readings' median level, as a step of two readings
    assert all(high - low >= r - 1e-9 for low, high in zip(limits, limits[1:]))
