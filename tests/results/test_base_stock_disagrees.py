"""A row's base stock against its lubricant's in the rule set, on the ester carbonyl.

An ester base stock carries its own carbonyl, so its new oil already reads high by direct
FTIR (Tribology Transactions 55 (2012) 872; the shipped screw-compressor lubricants table
gives the ester COMP-46-PE a new-oil reading of about 172 abs/cm and the mineral COMP-46-M a low one). The
ester caveats follow the row's `base_stock`, the new-oil values follow the table. When the
two disagree only one describes the oil, and the grade may be wrong either way: a row
saying `mineral` under the ester code graded 40 abs/cm direct normal, with no word of it.
"""

import io

from conftest import ROOT, run_cli

from sumpwise import grade, load_ruleset, read_samples

SITE = ROOT / "scenarios" / "brackwater" / "site.yaml"
ROWS = ("sample_id,unit_id,class,lubricant,base_stock,sampled_on,oil_hours,oxidation\n"
        "E1,SC-1,screw-compressor,COMP-46-M,ester,2026-01-05,3000,40\n"
        "E2,SC-2,screw-compressor,COMP-46-PE,mineral,2026-01-05,3000,40\n"
        "E3,SC-3,screw-compressor,COMP-46-PE,polyol-ester,2026-01-05,3000,40\n"
        "E4,SC-4,screw-compressor,COMP-46-M,,2026-01-05,3000,40\n")


def test_a_disagreement_on_the_ester_carbonyl_is_a_caveat_and_agreement_is_not():
    site = load_ruleset(SITE)
    results = {r.sample_id: r for r in grade(read_samples(io.StringIO(ROWS)), site).results()}
    flagged = {sid for sid, r in results.items() if any(c.caveat == "base-stock-disagrees" for c in r.caveats)}
    assert flagged == {"E1", "E2"}
    note = next(c for c in results["E2"].caveats if c.caveat == "base-stock-disagrees").message
    assert "'mineral'" in note and "COMP-46-PE as 'ester'" in note
    # The grades themselves are as before: the caveat says they rest on two accounts of one oil.
    assert results["E2"].grade == "normal" and results["E4"].grade == "urgent"


def test_the_run_warns_and_a_pipeline_can_fail_on_it():
    run = run_cli("grade", "-", "--rules", SITE, "--fail-on-caveat", "base-stock-disagrees", "--format", "csv",
                  stdin=ROWS)
    assert run.code == 3
    assert "warning: <stdin>: 2 sample(s) with caveat base-stock-disagrees" in run.err
