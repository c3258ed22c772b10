"""kv40 and kv100 swapped by an export: the row is refused, not graded as a collapsed viscosity.

ASTM D341 (the shared viscosity fact sheet): log log (ν + 0.7) = A − B·log T with B > 0 for
oils, so an oil's viscosity at 100 °C is below its viscosity at 40 °C. Before this check a
turbine oil written kv40 6.91, kv100 46.75 (the two columns swapped) graded alert on
visc-drift, "kv40 85 % below new": a wrong finding with a wrong cause.
"""

import io
import json

from conftest import ROOT, run_cli

from sumpwise.intake.samples import read_samples

SITE = ROOT / "scenarios" / "brackwater" / "site.yaml"
HEADER = "sample_id,unit_id,class,lubricant,sampled_on,oil_hours,kv40,kv100,an\n"


def test_a_swapped_pair_is_rejected_and_the_rest_graded():
    # An ISO VG 46 turbine oil: about 46 mm²/s at 40 °C and 6.9 at 100 °C (from memory; VG 46 is
    # 41.4-50.6 mm²/s at 40 °C by ISO 3448).
    text = (HEADER + "BP-1,ST-1,steam-turbine,TURB-46-M,2026-01-05,3000,6.91,46.75,0.15\n"
            "BP-2,ST-2,steam-turbine,TURB-46-M,2026-01-05,3000,46.75,6.91,0.15\n")
    run = run_cli("grade", "-", "--rules", SITE, "--format", "csv", stdin=text)
    assert run.code == 0, run.err
    assert "read 2 row(s): 1 graded, 0 unrated, 1 rejected" in run.err
    assert "row 1 (sample BP-1): rejected D021: kv100:" in run.err
    graded = run.out.splitlines()[1:]
    assert len(graded) == 1 and graded[0].startswith("BP-2,") and ",normal," in graded[0]


def test_equal_viscosities_are_refused_and_a_thin_fluid_is_not():
    """The boundary: B = 0 (equal) is no oil; a thin fluid of 2.0 / 1.0 mm²/s is one (B > 0)."""
    text = (HEADER + "T-1,U,hydraulic,HYD-46-Z,2026-01-05,10,9.5,9.5,0.3\n"
            "T-2,U,hydraulic,HYD-46-Z,2026-01-06,20,2.0,1.0,0.3\n")
    batch = read_samples(io.StringIO(text), "<t>")
    assert [(r.row, r.field, r.code) for r in batch.rejects] == [(1, "kv100", "D021")]
    assert list(batch.frame["sample_id"]) == ["T-2"]


def test_the_new_oil_pair_and_json_lines_too():
    lines = [{"sample_id": "J-1", "class": "hydraulic", "kv40": 44.0, "kv100": 6.7, "new_kv40": 6.8, "new_kv100": 46.0},
             {"sample_id": "J-2", "class": "hydraulic", "kv40": 6.7, "kv100": 44.0}]
    batch = read_samples(io.StringIO("".join(json.dumps(line) + "\n" for line in lines)), "<j>", fmt="jsonl")
    assert sorted((r.sample_id, r.field, r.code) for r in batch.rejects) == [("J-1", "new_kv100", "D021"),
                                                                             ("J-2", "kv100", "D021")]
    assert batch.rejected_rows + len(batch.frame) == batch.rows_read == 2


def test_a_row_refused_for_its_own_value_keeps_one_reason():
    batch = read_samples(io.StringIO(HEADER + "N-1,U,hydraulic,HYD-46-Z,2026-01-05,10,-46.1,6.9,0.3\n"), "<n>")
    assert [(r.field, r.code) for r in batch.rejects] == [("kv40", "D005")]
