"""The authoring commands end to end: check (lint, --strict, examples), compare, propose-limits.

propose-limits is checked against numpy on seeded data of a known distribution.
Method source: ASTM D7720 §1.2 (SPC limits, mean + k SD, for normal, in-control
data) and §1.3 (percentiles of the sorted data for data that are not), as the
project's fact sheet (../shared/reference/limits.md) gives them. The levels (2/2.5/3
SD; 95th/97.5th/99th percentile) and the minimum counts are common practice, no
source: D7720's own were not found.
"""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
import yaml

from conftest import ROOT, run_cli
from sumpwise.ruleset.compiler import load_ruleset

DATA = ROOT / "tests" / "data" / "authoring"


def test_check_clean_rule_set_exit_0_with_examples_counted():
    run = run_cli("check", DATA / "clean.yaml")
    assert run.code == 0, run.err
    assert ": ok: rule set authoring-clean" in run.out and "0 warning(s); 2 of 2 example(s) hold" in run.out
    assert run.err == ""


def test_check_warnings_allowed_unless_strict():
    plain = run_cli("check", DATA / "lint-shadowed.yaml")
    assert plain.code == 0 and "1 warning(s)" in plain.out
    assert "lint-shadowed.yaml:8:9: warning W001: in class 'pump', rule 'acid-high' is always shadowed" in plain.err
    assert "\n    hint: remove 'acid-high'" in plain.err
    strict = run_cli("check", "--strict", DATA / "lint-shadowed.yaml")
    assert strict.code == 2 and ": failed: " in strict.out and "(--strict: warnings are errors)" in strict.out
    assert run_cli("check", "--strict", DATA / "clean.yaml").code == 0


def test_check_failed_example_exit_2_with_the_diff():
    run = run_cli("check", DATA / "examples-fail.yaml")
    assert run.code == 2
    assert ": failed: " in run.out and "1 of 5 example(s) hold" in run.out
    assert "examples-fail.yaml:9:5: error E001: example 'wrong grade and a rule that fired' does not hold\n" \
           "    - grade: expected normal, got watch\n" in run.err


def test_check_reports_each_file_and_fails_if_any_fails():
    run = run_cli("check", DATA / "clean.yaml", DATA / "examples-fail.yaml")
    assert run.code == 2 and run.out.count(": ok: ") == 1 and run.out.count(": failed: ") == 1


def test_shipped_rule_sets_check_with_all_examples_holding():
    paths = sorted((ROOT / "rules").glob("*.yaml")) + [ROOT / "scenarios" / "brackwater" / "site.yaml"]
    run = run_cli("check", *paths)
    assert run.code == 0, run.err
    assert run.out.count(": ok: ") == len(paths) and "error:" not in run.err
    for line in (x for x in run.out.splitlines() if not x.startswith("! ")):  # the cautions follow the verdicts
        held, total = line.rsplit("; ", 1)[1].split(" example(s)")[0].split(" of ")
        assert held == total and int(total) > 0, line


def test_compare_exit_3_when_samples_move_and_0_when_none():
    moved = run_cli("compare", DATA / "compare-old.yaml", DATA / "compare-new.yaml",
                    "--samples", DATA / "compare-samples.csv")
    assert moved.code == 3, moved.err
    assert "3 moved to another grade" in moved.out and "P-02 (pump): normal -> watch: acid-rise quiet -> watch" in moved.out
    assert "Screening aid only" in moved.out
    same = run_cli("compare", DATA / "compare-old.yaml", DATA / "compare-old.yaml",
                   "--samples", DATA / "compare-samples.csv")
    assert same.code == 0 and "0 moved" in same.out


def test_compare_through_the_console_script():
    script = ROOT / ".venv" / "bin" / "sumpwise"
    command = [str(script)] if script.exists() else [sys.executable, "-m", "sumpwise"]
    done = subprocess.run(command + ["compare", str(DATA / "compare-old.yaml"), str(DATA / "compare-new.yaml"),
                                     "--samples", str(DATA / "compare-samples.csv")], capture_output=True, text=True)
    assert done.returncode == 3, done.stderr
    assert "moved:" in done.stdout


def test_compare_bad_rule_set_is_exit_2(tmp_path):
    bad = tmp_path / "bad.yaml"
    bad.write_text("ruleset: bad\nversion: 1\nclasses: {x: {rules: [{id: r, measure: nope, above: {watch: 1}, "
                   "message: m, source: site practice}]}}\n")
    run = run_cli("compare", DATA / "compare-old.yaml", bad, "--samples", DATA / "compare-samples.csv")
    assert run.code == 2 and "unknown measure 'nope'" in run.err


def _write_samples(path, an_values, water_values=None, lubricant="PUMP-46-M", measure="an"):
    n = len(an_values)
    dates = pd.date_range("2025-01-01", periods=n, freq="D").strftime("%Y-%m-%d")
    frame = pd.DataFrame({"sample_id": [f"S-{i:04d}" for i in range(n)], "class": "pump", "lubricant": lubricant,
                          "sampled_on": dates, measure: an_values})
    if water_values is not None:
        frame["water"] = water_values
    # Rows of another class and lubricant must not be used.
    other = pd.DataFrame({"sample_id": ["X-1", "X-2"], "class": ["fan", "pump"], "lubricant": ["PUMP-46-M", "OTHER"],
                          "sampled_on": ["2024-01-01", "2024-01-02"], "an": [99.0, 99.0]})
    pd.concat([frame, other]).to_csv(path, index=False)
    return path


def _snippet_rule(text: str) -> dict:
    [rule] = yaml.safe_load(text)
    return rule


def test_propose_limits_spc_equals_numpy_mean_plus_k_sd(tmp_path):
    # kv40 of an ISO VG 320 gear oil, mm2/s: its spread (SD 4) is far wider than D445's repeatability,
    # so no step is widened and the limits are the statistics' own.
    values = np.round(np.random.default_rng(7720).normal(320.0, 4.0, 400), 2)
    samples = _write_samples(tmp_path / "s.csv", values, measure="kv40")
    run = run_cli("propose-limits", "--samples", samples, "--class", "pump", "--measure", "kv40",
                  "--lubricant", "PUMP-46-M", "--method", "spc")
    assert run.code == 0, run.err
    # ASTM D7720 §1.2 approach: mean + k * SD (sample SD, ddof=1), k = 2, 2.5, 3 (common practice, no source).
    mean, sd = np.mean(values), np.std(values, ddof=1)
    expected = [float(f"{mean + k * sd:.4g}") for k in (2, 2.5, 3)]
    rule = _snippet_rule(run.out)
    assert rule["measure"] == "kv40" and list(rule["above"]) == ["watch", "alert", "urgent"]
    assert list(rule["above"].values()) == expected
    assert "count: 400 result(s) used" in run.out and "dates: 2025-01-01 to 2026-02-04" in run.out
    assert f"mean {mean:.6g}, SD {sd:.6g}" in run.out
    assert "Proposed from 400 results" in rule["source"] and "ASTM D7720 approach (§1.2 SPC)" in rule["source"]
    assert "class pump, lubricant PUMP-46-M, sampled 2025-01-01 to 2026-02-04" in rule["source"]
    assert "# Proposed limits. Screening aid only, not a substitute for a qualified lubricant analyst." in run.out
    assert "note: the normality test rejects" not in run.out  # seeded normal data pass Jarque-Bera here


def test_propose_limits_spc_on_skewed_data_says_percentiles_would_suit(tmp_path):
    water = np.round(np.random.default_rng(7723).lognormal(np.log(120.0), 0.6, 100), 1)
    samples = _write_samples(tmp_path / "s.csv", np.full(100, 0.3), water)
    run = run_cli("propose-limits", "--samples", samples, "--class", "pump", "--measure", "water", "--method", "spc")
    assert run.code == 0, run.err
    assert "# note: the normality test rejects normal data" in run.out and "D7720 §1.3 takes percentiles" in run.out


def test_propose_limits_auto_takes_percentiles_of_skewed_data(tmp_path):
    water = np.round(np.random.default_rng(7721).lognormal(np.log(120.0), 0.6, 600), 1)
    samples = _write_samples(tmp_path / "s.csv", np.full(600, 0.3), water)
    out = tmp_path / "water.yaml"
    run = run_cli("propose-limits", "--samples", samples, "--class", "pump", "--measure", "water", "--out", out)
    assert run.code == 0, run.err
    # ASTM D7720 §1.3 approach: percentiles of the sorted data; numpy's default (linear) interpolation.
    expected = [float(f"{q:.4g}") for q in np.percentile(water, [95, 97.5, 99])]
    text = out.read_text(encoding="utf-8")
    assert list(_snippet_rule(text)["above"].values()) == expected
    assert "method: percentiles of the sorted data" in run.out and f"wrote {out}" in run.out


def test_propose_limits_derived_measure_uses_the_rule_set_new_oil_value(tmp_path):
    values = np.round(np.random.default_rng(7722).normal(0.30, 0.04, 300), 4)
    samples = _write_samples(tmp_path / "s.csv", values)
    run = run_cli("propose-limits", "--samples", samples, "--class", "pump", "--measure", "an_rise",
                  "--rules", DATA / "clean.yaml", "--method", "spc")
    assert run.code == 0, run.err
    rise = values - 0.10  # clean.yaml: PUMP-46-M new-oil acid number 0.10
    mean, sd = np.mean(rise), np.std(rise, ddof=1)
    # clean.yaml's ladder is [normal, watch, alert]: watch at mean + 2 SD; alert at mean + 2.5 SD would be
    # 0.02 mg KOH/g higher, under ASTM D664's used-oil repeatability r = 0.117 X (about 0.047 at an acid
    # number of 0.4), so alert is widened to watch + r.
    watch, alert = _snippet_rule(run.out)["above"].values()
    assert watch == float(f"{mean + 2 * sd:.4g}")
    assert alert - watch >= 0.117 * (alert + 0.10) > (mean + 2.5 * sd) - (mean + 2 * sd)
    assert "# note: alert widened from" in run.out and "ASTM D664" in run.out


@pytest.mark.parametrize("rows, needed", [(29, 30), (0, 30)])
def test_propose_limits_refuses_too_little_data(tmp_path, rows, needed):
    samples = _write_samples(tmp_path / "s.csv", np.linspace(0.2, 0.4, rows))
    run = run_cli("propose-limits", "--samples", samples, "--class", "pump", "--measure", "an",
                  "--lubricant", "PUMP-46-M")
    assert run.code == 2 and run.out == ""
    assert "refused, no limit proposed" in run.err and f"{rows} results found, at least {needed} needed" in run.err


def test_propose_limits_unknown_measure_is_a_clear_error(tmp_path):
    samples = _write_samples(tmp_path / "s.csv", np.linspace(0.2, 0.4, 40))
    run = run_cli("propose-limits", "--samples", samples, "--class", "pump", "--measure", "acid")
    assert run.code == 2 and "unknown measure 'acid'" in run.err


def test_grade_refuses_a_rule_set_whose_examples_fail_unless_allowed(tmp_path):
    samples = DATA / "compare-samples.csv"
    refused = run_cli("grade", samples, "--rules", DATA / "examples-fail.yaml")
    assert refused.code == 2 and refused.out == ""
    assert "error E001: example 'wrong grade and a rule that fired' does not hold" in refused.err
    assert "nothing was graded" in refused.err and "--allow-failing-examples" in refused.err
    # The ledger import is the same command with --db: nothing is recorded either.
    ledger = tmp_path / "l.db"
    assert run_cli("grade", samples, "--rules", DATA / "examples-fail.yaml", "--db", ledger).code == 2
    assert not ledger.exists()
    allowed = run_cli("grade", samples, "--rules", DATA / "examples-fail.yaml", "--allow-failing-examples")
    assert allowed.code == 0 and allowed.out.count("\n") > 0
    assert "grading anyway (--allow-failing-examples)" in allowed.err
    assert run_cli("grade", samples, "--rules", DATA / "clean.yaml").code == 0


def test_compare_warns_when_id_and_version_match_but_content_differs(tmp_path):
    changed = tmp_path / "same-name.yaml"
    changed.write_text((DATA / "compare-new.yaml").read_text().replace("version: 2", "version: 1")
                       .replace("extends: compare-old.yaml", f"extends: {DATA / 'compare-old.yaml'}")
                       .replace("ruleset: compare-pump-next", "ruleset: compare-pump"))
    run = run_cli("compare", DATA / "compare-old.yaml", changed, "--samples", DATA / "compare-samples.csv")
    assert "warning W013: both rule sets are 'compare-pump' version 1, but their content differs" in run.err
    same = run_cli("compare", DATA / "compare-old.yaml", DATA / "compare-old.yaml",
                   "--samples", DATA / "compare-samples.csv")
    assert "W013" not in same.err


def test_compare_a_rule_set_stored_in_the_ledger_with_a_file(tmp_path):
    ledger = tmp_path / "l.db"
    samples = DATA / "compare-samples.csv"
    assert run_cli("grade", samples, "--rules", DATA / "compare-old.yaml", "--db", ledger).code == 0
    stored = load_ruleset(DATA / "compare-old.yaml").sha256
    run = run_cli("compare", f"sha256:{stored}", DATA / "compare-new.yaml", "--db", ledger)
    assert run.code == 3 and f"sha256 {stored[:12]}" in run.out
    file_run = run_cli("compare", DATA / "compare-old.yaml", DATA / "compare-new.yaml", "--samples", samples)
    assert run.out.split("\n", 2)[2] == file_run.out.split("\n", 2)[2]  # same moves as from the file
    missing = run_cli("compare", "sha256:" + "0" * 64, DATA / "compare-new.yaml", "--db", ledger)
    assert missing.code == 2 and "not stored intact" in missing.err
    no_db = run_cli("compare", f"sha256:{stored}", DATA / "compare-new.yaml", "--samples", samples)
    assert no_db.code == 2 and "needs --db" in no_db.err
