"""Replay of a sample an older engine graded and this one refuses at reading (a rule of the
reading tightened): an engine change named with its reason, never an internal error.

ISO 4406:1999 counts are cumulative, so a code that rises with size (14/16/18) is refused
since engine 0.5.0 (D012). A ledger recorded before holds such a sample with its verdict;
replaying it crashed ("operands could not be broadcast together") because the re-grade had
one row fewer than the stored batch.
"""

from conftest import ROOT, run_cli

import sumpwise.ledger.store as store
import sumpwise.vocabulary.measures as measures
from sumpwise.intake.samples import read_samples
from sumpwise.ruleset.compiler import load_ruleset

SITE = ROOT / "scenarios" / "brackwater" / "site.yaml"


def test_a_stored_sample_this_engine_refuses_is_an_engine_change(tmp_path, monkeypatch):
    samples = tmp_path / "s.csv"
    samples.write_text("sample_id,unit_id,class,lubricant,sampled_on,iso4406\n"
                       "H1,HY-1,hydraulic,HYD-46-M,2026-01-05,18/16/13\n"
                       "H2,HY-2,hydraulic,HYD-46-M,2026-01-05,14/16/18\n"
                       "H3,HY-3,hydraulic,HYD-46-M,2026-01-05,16/14/11\n")
    db = tmp_path / "old.db"
    with monkeypatch.context() as older:  # recorded as an engine before the check would have
        older.setattr(measures, "_check_cumulative", lambda text, found: None)
        older.setattr(store, "engine_name", lambda: "sumpwise 0.4.0")
        graded, recorded = store.grade_into_ledger(db, read_samples(samples), load_ruleset(SITE))
    assert recorded.new == 3 and [r.grade for r in graded.results()] == ["watch", "alert", "normal"]
    run = run_cli("replay", "--db", db)
    assert run.code == 0, run.out + run.err  # an engine change fails only with --strict
    assert "engine change: H2 (batch 1): this engine refuses its stored values (D012, iso4406:" in run.out
    assert "H1" not in run.out and "H3" not in run.out  # the others are graded as recorded
    assert "integrity: clean" in run.out
    assert run_cli("replay", "--db", db, "--strict").code == 3
    # history shows it as recorded; explain under other limits says why it cannot re-grade it
    history = run_cli("history", "HY-2", "--db", db)
    assert history.code == 0 and "H2" in history.out and "alert" in history.out, history.err
    other = run_cli("explain", "H2", "--db", db, "--rules", SITE)
    assert other.code == 2 and "this engine refuses its stored values" in other.err and "D012" in other.err
    assert run_cli("explain", "H1", "--db", db, "--rules", SITE).code == 0
