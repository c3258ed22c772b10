"""Particle counts and ISO 4406 codes that rise with particle size are refused, not graded.

ISO 4406:1999 (the shared limits fact sheet): the code's three scale numbers are for the
counts per mL of particles >= 4, >= 6 and >= 14 um(c). The counts are cumulative (every
particle >= 14 um(c) is also >= 6 and >= 4 um(c)), so neither a count nor a scale number can
rise with size. Before this check a code written smallest size last, `14/16/18` (the
site's 18/16/14 read backwards), was graded alert on its "18 at 14 um(c)", and counts per
size range (a counter's differential export) were graded as cumulative ones.
"""

import io

import pytest
from conftest import ROOT, run_cli

from sumpwise.intake.samples import read_samples
from sumpwise.ruleset.compiler import load_ruleset
from sumpwise.vocabulary.measures import read_iso4406

SITE = ROOT / "scenarios" / "brackwater" / "site.yaml"  # hydraulics: watch 17/15/12, alert 19/17/14
HEADER = "sample_id,unit_id,class,lubricant,sampled_on,iso4406,particles_4um,particles_6um,particles_14um\n"


@pytest.mark.parametrize("code, numbers", [
    ("18/16/13", (18, 16, 13)), ("18/18/18", (18, 18, 18)), ("16/13", (None, 16, 13)),
    ("\u226514/16/13", (14, 16, 13)),  # fewer than 20 counted at 4 um(c): the true number may be 16 or more
    (">28/28/20", (29, 28, 20)),
])
def test_codes_that_fall_or_hold_with_size_are_read(code, numbers):
    assert read_iso4406(code) == numbers


@pytest.mark.parametrize("code", ["14/16/18", "13/16", "-/16/17", "16/\u226517/13", "16/14/\u226515"])
def test_codes_that_rise_with_size_are_refused(code):
    with pytest.raises(ValueError, match="rises with particle size"):
        read_iso4406(code)


def test_graded_through_the_command_line():
    # Counts per mL inside ISO 4406 Table 1's ranges: 2,000 is code 18, 500 is 16, 60 is 13.
    text = (HEADER + "H1,HY-1,hydraulic,HYD-46-M,2026-01-05,14/16/18,,,\n"
            "H2,HY-2,hydraulic,HYD-46-M,2026-01-05,,60,500,2000\n"
            "H3,HY-3,hydraulic,HYD-46-M,2026-01-05,,60,,2000\n"  # 6 um(c) not counted: 4 against 14
            "H4,HY-4,hydraulic,HYD-46-M,2026-01-05,18/16/13,,,\n"
            "H5,HY-5,hydraulic,HYD-46-M,2026-01-05,,2000,500,60\n")
    run = run_cli("grade", "-", "--rules", SITE, "--format", "csv", stdin=text)
    assert run.code == 0, run.err
    assert "read 5 row(s): 2 graded, 0 unrated, 3 rejected" in run.err
    assert "row 1 (sample H1): rejected D012: iso4406:" in run.err
    assert "row 2 (sample H2): rejected D022: particles_6um:" in run.err
    assert "row 3 (sample H3): rejected D022: particles_14um:" in run.err
    graded = {line.split(",")[0]: line.split(",")[7] for line in run.out.splitlines()[1:]}
    # 18/16/13, written or counted, against watch 17/15/12 and alert 19/17/14: watch
    assert graded == {"H4": "watch", "H5": "watch"}


def test_a_count_below_detection_and_equal_counts_are_no_contradiction():
    text = (HEADER + "C1,U,hydraulic,HYD-46-M,2026-01-05,,<100,150,20\n"  # <100 at 4 um(c): a bound, not a count
            "C2,U,hydraulic,HYD-46-M,2026-01-06,,40,40,40\n")  # all of them >= 14 um(c)
    batch = read_samples(io.StringIO(text), "<c>", numeric=())
    assert batch.rejects == () and list(batch.frame["sample_id"]) == ["C1", "C2"]


def test_a_rule_set_limit_code_that_rises_is_an_error_at_its_line(tmp_path):
    rules = tmp_path / "r.yaml"
    rules.write_text("ruleset: r\nversion: 1\nclasses:\n  hydraulic:\n    rules:\n"
                     "      - id: clean\n        iso4406: {watch: 12/15/17}\n        message: m\n        source: s\n")
    run = run_cli("check", rules)
    assert run.code == 2 and f"{rules}:7:" in run.err and "rises with particle size" in run.err, run.err
