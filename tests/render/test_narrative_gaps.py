"""How explain words a rule left undecided: a bound as the lab wrote it, or a noisy rate's interval.

The resample fixture (tests/data/derive_found4/resample.csv, invented): HPU-3 resampled 20 oil
hours on, iron 9 -> 11 ppm, a step of 2 within the rule set's 2 ppm noise margin. The rate's
record says its number, its interval and the margin; explain said "lacks  (... written '100,
[0, 200] ...')", as if the rule lacked an input and the lab had written the interval.
"""

from __future__ import annotations

from sumpwise.render.narrative import gap_phrase
from tests.conftest import DATA, run_cli


def test_a_noisy_rate_is_said_as_its_interval_not_as_a_written_reading():
    run = run_cli("explain", "B-603", "--samples", DATA / "derive_found4" / "resample.csv",
                  "--rules", DATA / "derive_found4" / "rules.yaml")
    said = " ".join(run.out.split())
    assert run.code == 0
    assert ("iron-rate: iron_step_per_1000h 100, [0, 200] from a step of 2 within its noise margin of 2 over "
            "20 h does not decide it") in said
    assert "lacks" not in said and "written '100" not in said


def test_a_censored_reading_is_said_as_written_beside_what_the_rule_lacks():
    assert gap_phrase("water", (), (("water", "<200"),)) == "water: water written '<200' does not decide it"
    assert gap_phrase("wet-and-acid", ("an",), (("water", ">500"),)) == (
        "wet-and-acid: lacks an (water written '>500' does not decide it)")


def test_clause_values_keep_their_own_spelling_beside_the_rate_wording():
    # The rate interval's numbers are spelled as the engine spells a bound; a clause's value and limit
    # keep explain's own spelling (six significant figures, "missing"). A rate-wording helper once
    # shadowed explain's number spelling: a missing value read "(none)" and a pair limit broke.
    from sumpwise.render.narrative import _clause_line
    from sumpwise.results.records import Clause
    assert _clause_line(Clause("missing", True, True, None, measure="water")) == "water is missing: holds (value missing)"
    assert _clause_line(Clause("between", [40.0, 50.0], True, 45.5, measure="kv40")) == (
        "kv40 = 45.5 mm2/s, test between 40 and 50 mm2/s: holds")
    assert _clause_line(Clause("above", 0.5, True, 0.123456789, measure="an")) == (
        "an = 0.123457 mg KOH/g, test above 0.5 mg KOH/g: holds")
