"""ISO 4406 cleanliness: codes as labs write them, and codes from particle counts per mL.

The scale-number table is checked row by row against ISO 4406:1999 Table 1 ("Allocation of
scale numbers", particles per mL, more than / up to and including), as reproduced in a filter
maker's published appendix ("Contamination Classification in accordance with ISO 4406:1999",
scale numbers 0 to 28); the worked example there, 14/12/>=7, is checked too.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from sumpwise.derive.cleanliness import MORE_THAN, UP_TO, cleanliness_measures, read_cleanliness_codes, scale_numbers
from sumpwise.intake.samples import SampleBatch
from sumpwise.vocabulary.measures import iso4406_parts, read_iso4406

# ISO 4406:1999 Table 1 (scale number: more than, up to and including), particles per mL.
PUBLISHED = {
    0: (0.00, 0.01), 1: (0.01, 0.02), 2: (0.02, 0.04), 3: (0.04, 0.08), 4: (0.08, 0.16), 5: (0.16, 0.32),
    6: (0.32, 0.64), 7: (0.64, 1.3), 8: (1.3, 2.5), 9: (2.5, 5), 10: (5, 10), 11: (10, 20), 12: (20, 40),
    13: (40, 80), 14: (80, 160), 15: (160, 320), 16: (320, 640), 17: (640, 1300), 18: (1300, 2500),
    19: (2500, 5000), 20: (5000, 10000), 21: (10000, 20000), 22: (20000, 40000), 23: (40000, 80000),
    24: (80000, 160000), 25: (160000, 320000), 26: (320000, 640000), 27: (640000, 1300000),
    28: (1300000, 2500000),
}


def test_every_row_of_the_table_is_the_published_one():
    assert len(UP_TO) == len(PUBLISHED)
    for number, (more_than, up_to) in PUBLISHED.items():
        assert (MORE_THAN[number], UP_TO[number]) == (more_than, up_to), number


@pytest.mark.parametrize("number", sorted(PUBLISHED))
def test_each_row_gives_its_scale_number_at_its_edges(number):
    more_than, up_to = PUBLISHED[number]
    inside = [up_to, (more_than + up_to) / 2] + ([more_than * 1.0001] if more_than else [0.0])
    assert scale_numbers(inside).tolist() == [number] * 3
    if number < 28:
        assert scale_numbers([up_to * 1.0001]).tolist() == [number + 1]


def test_the_scale_doubles_per_number_within_the_tables_rounding():
    # ISO 4406 4.1: "an increase in one code generally represents a doubling"; the table rounds
    # (1.3 and 2.5 after 0.64, restarting at 5 and 10), so each step is a doubling within 5 %.
    ratios = UP_TO[1:] / UP_TO[:-1]
    assert np.all((ratios > 1.9) & (ratios < 2.1))


def test_beyond_the_table_and_missing_counts():
    assert scale_numbers([2_500_001.0, np.nan]).tolist()[0] == 29  # written >28 by the standard
    assert np.isnan(scale_numbers([np.nan])[0])


def iso4406_at_least(text: str) -> tuple:
    return tuple(at_least for _, at_least in iso4406_parts(text))


def test_the_published_worked_example():
    # 14/12/>=7: more than 80 up to 160 at 4 um(c), 20 to 40 at 6 um(c), 0.64 to 1.3 at 14 um(c).
    assert scale_numbers([120.0, 33.0, 1.0]).tolist() == [14, 12, 7]
    assert read_iso4406("14/12/\u22657") == (14, 12, 7)
    # ISO 4406:1999 (the shared fact sheet, limits.md): the sign marks fewer than 20 particles
    # counted, so 7 is the least the code can be, not the code.
    assert iso4406_at_least("14/12/\u22657") == (False, False, True)


@pytest.mark.parametrize("written, marks", [
    ("18/16/13", (False, False, False)), ("20/18/>=14", (False, False, True)), (">=16/13", (False, True, False)),
    ("\u2265 18/-/\u226513", (True, False, True)),
])
def test_which_numbers_are_written_as_at_least(written, marks):
    assert iso4406_at_least(written) == marks


@pytest.mark.parametrize("written, numbers", [
    ("18/16/13", (18, 16, 13)), (" 18 / 16 / 13 ", (18, 16, 13)), ("16/13", (None, 16, 13)),
    ("-/16/13", (None, 16, 13)), ("*/16/13", (None, 16, 13)), ("18/-/13", (18, None, 13)),
    ("20/18/>=14", (20, 18, 14)),
    (">28/27/24", (29, 27, 24)),  # ISO 4406:1999 (shared fact sheet limits.md): above 2,500,000 per mL is ">28"
    ("> 28/>28/-", (29, 29, None)),
    # hyphens between numbers only: nothing else a hyphen could stand for there
    ("18-16-13", (18, 16, 13)), (" 18 - 16 - 13 ", (18, 16, 13)), ("16-13", (None, 16, 13)),
    ("*-16-13", (None, 16, 13)), ("20-18->=14", (20, 18, 14)),
])
def test_codes_as_labs_write_them(written, numbers):
    assert read_iso4406(written) == numbers


@pytest.mark.parametrize("written", ["-16-13", "18--13", "18/16/13/11", "18", "a/b/c", "31/16/13", "-/-/-", ""])
def test_codes_that_cannot_be_read(written):
    with pytest.raises(ValueError):
        read_iso4406(written)


def test_the_written_code_wins_and_counts_fill_what_it_leaves_out():
    codes = np.array(["18/16/13", "-/16/13", None, None], dtype=object)
    counts = {"4um": np.array([100.0, 2000.0, 2000.0, np.nan]), "6um": np.array([50.0, 600.0, 600.0, np.nan]),
              "14um": np.array([5.0, 60.0, 60.0, np.nan])}
    out, at_least, notes = cleanliness_measures(codes, counts)
    assert not at_least.any()
    # 100/50/5 per mL is 14/13/9, four or more from 18/16/13: the row says so (2000/600/60 is 18/16/13)
    assert [note is not None for note in notes] == [True, False, False, False]
    assert out["iso4406_4um"].tolist()[:3] == [18, 18, 18]  # as written; then from 2000 /mL (1300 to 2500)
    assert out["iso4406_6um"].tolist()[:3] == [16, 16, 16]
    assert out["iso4406_14um"].tolist()[:3] == [13, 13, 13]
    assert all(np.isnan(out[name][3]) for name in out)


def test_an_unreadable_code_rejects_its_row_with_field_and_code():
    frame = pd.DataFrame({"sample_id": ["A", "B", "C"], "iso4406": ["18/16/13", "18/16/13/11", None]},
                         index=[1, 2, 3])
    batch = read_cleanliness_codes(SampleBatch(frame, (), 3, "t.csv"))
    assert batch.frame["sample_id"].tolist() == ["A", "C"]
    assert [(r.row, r.sample_id, r.field, r.code) for r in batch.rejects] == [(2, "B", "iso4406", "D012")]


def test_a_censored_particle_count_gives_the_scale_numbers_it_can_be():
    # ISO 4406:1999 Table 1 (above): '>2500000' per mL is beyond scale 28, the standard's >28 (29 here);
    # '<0.5' per mL lies in scale 0 to 6 (6 holds more than 0.32 up to 0.64); '<=0.01' is scale 0
    # exactly (0 holds up to and including 0.01), so it is known. A code the lab wrote wins.
    import io
    from sumpwise.derive.row_measures import derive_measures
    from sumpwise.intake.samples import read_samples
    text = ("sample_id,class,particles_4um,particles_14um,iso4406\n"
            "P1,hydraulic,>2500000,<0.5,\nP2,hydraulic,1000,<=0.01,\nP3,hydraulic,>2500000,<0.5,18/16/13\n")
    m = derive_measures(read_samples(io.StringIO(text)).frame, {})
    assert m["iso4406_4um"].iloc[0] == 29 and m["iso4406_4um"].iloc[1] == 17  # 1000 is in 640..1300
    assert np.isnan(m["iso4406_14um"].iloc[0])
    assert (m["iso4406_14um:low"].iloc[0], m["iso4406_14um:high"].iloc[0]) == (0.0, 6.0)
    assert m["iso4406_14um:written"].iloc[0] == "[0, 6] from particles_14um '<0.5'"
    assert m["iso4406_14um"].iloc[1] == 0
    assert list(m[["iso4406_4um", "iso4406_14um"]].iloc[2]) == [18, 13]
    assert np.isnan(m["iso4406_14um:low"].iloc[2])


def test_censored_counts_grade_against_the_site_target_cleanliness():
    # The Brackwater site's hydraulic target (scenarios/brackwater/site.yaml, invented): watch above
    # 17/15/12, alert above 19/17/14. '<0.5' per mL at 14 um(c) is scale 0 to 6: known under 12, quiet;
    # '<100' is scale 0 to 14: undecided against 12, not evaluated (never a pass); '>2500000' at 4 um(c)
    # is above scale 28: alert.
    import io
    from conftest import ROOT
    from sumpwise import grade, load_ruleset
    from sumpwise.intake.samples import read_samples
    site = load_ruleset(ROOT / "scenarios" / "brackwater" / "site.yaml")
    text = ("sample_id,class,lubricant,particles_4um,particles_6um,particles_14um\n"
            "C1,hydraulic,HYD-46-M,100,20,<0.5\nC2,hydraulic,HYD-46-M,100,20,<100\n"
            "C3,hydraulic,HYD-46-M,>2500000,20,5\n")
    got = {r.sample_id: r for r in grade(read_samples(io.StringIO(text)), site).results()}
    gaps = {r: {n.rule for n in got[r].not_evaluated} for r in got}
    assert "cleanliness-14um" not in gaps["C1"] and not [x for x in got["C1"].reasons if x.rule.startswith("clean")]
    assert "cleanliness-14um" in gaps["C2"]
    assert [(x.rule, x.grade) for x in got["C3"].reasons if x.rule.startswith("clean")] == [("cleanliness-4um", "alert")]


SITE = Path(__file__).resolve().parents[2] / "scenarios" / "brackwater" / "site.yaml"


@pytest.mark.parametrize("code, grade, fired, undecided", [
    ("16/14/12", "normal", [], False),  # 12 is not above the site's 14 um(c) target of 12
    ("16/14/\u226512", "normal", [], True),  # 12 or more: above 12 or not cannot be known
    ("16/14/>=12", "normal", [], True),
    ("16/14/\u226513", "watch", ["cleanliness-14um"], False),  # 13 or more is above 12 whatever it is
    ("17/15/\u226515", "alert", ["cleanliness-14um"], False),  # 15 or more is above the alert code's 14
    # (16/14/>=15 was here: 14 um(c) particles are among the 6 um(c) ones, so no code reads so; now refused)
])
def test_a_code_written_at_least_is_graded_as_the_interval_it_is(code, grade, fired, undecided):
    """Once graded: `>=12` at 14 um(c) against the site's hydraulic target 17/15/12 (alert 19/17/14)
    must not pass as a plain 12 (it once did, graded normal without a word)."""
    import io
    from sumpwise.intake.samples import read_samples
    from sumpwise.results.pipeline import grade_batch
    from sumpwise.ruleset.compiler import load_ruleset
    text = ("sample_id,unit_id,class,lubricant,sampled_on,oil_hours,kv40,kv100,an,water,iso4406\n"
            f"H1,HPU-9,hydraulic,HYD-46-M,2026-03-01,1000,46,6.9,0.5,100,{code}\n")
    (result,) = list(grade_batch(read_samples(io.StringIO(text), "h.csv"), load_ruleset(SITE)).results())
    assert result.grade == grade
    assert [r.rule for r in result.reasons] == fired
    gaps = {n.rule: n for n in result.not_evaluated}
    assert ("cleanliness-14um" in gaps) == undecided
    if undecided:
        assert dict(gaps["cleanliness-14um"].undecided) == {"iso4406": code}
