"""A child rule set that gives some of a lubricant's new-oil values keeps the rest from its parent.

Up to engine 0.3.3 a child's entry for a lubricant code replaced the parent's whole: a site that
wrote only its own new-oil acid number and carbonyl for a polyol-ester oil lost the base stock
(so the ester caveat's cap no longer applied and the ester's own carbonyl graded alert) and the
viscosities (so viscosity drift went unevaluated), with `check` saying nothing. Sources: the ester
carbonyl overlaps the FTIR oxidation window (Tribology Transactions 55 (2012) 872, via the
project's FTIR fact sheet); 1 abs/0.1mm = 100 abs/cm (ASTM D7412 §12.1-12.2); the limits are
common practice, no source (limits.md: KV40 ±5 % caution, acid number +0.2).
"""

import pandas as pd
import pytest
from conftest import DATA

from sumpwise import grade, load_ruleset

FOUND = DATA / "rulesets" / "found2"
SAMPLE = {"sample_id": "BP-0412", "unit_id": "AC-3", "class": "screw-compressor", "lubricant": "COMP-46-PE",
          "sampled_on": "2026-11-02", "oil_hours": 3100}


def _grade(path, **values):
    graded = grade(pd.DataFrame([{**SAMPLE, **values}]), load_ruleset(FOUND / path))
    assert graded.counts()["rejected"] == 0
    return graded.result(0)


def test_the_childs_values_win_and_the_parents_others_stay():
    lub = load_ruleset(FOUND / "lubricant-own-sample.yaml").lubricants["COMP-46-PE"]
    assert (lub.base_stock, lub.iso_vg, lub.kv40, lub.kv100) == ("polyol-ester", 46, 46.3, 7.55)  # parent's
    assert (lub.an, lub.oxidation) == (0.06, 176.0)  # the child's, its 1.76 abs/0.1mm read in abs/cm


def test_an_ester_keeps_its_cap_when_the_site_gives_its_own_new_oil_sample():
    # carbonyl 200 abs/cm: a rise of 24 over the site's 176 (alert by itself); acid 0.14, a rise
    # of 0.08, does not lift the cap; kv40 49.0 is 5.8 % above the parent's 46.3: watch
    result = _grade("lubricant-own-sample.yaml", oxidation=200.0, an=0.14, kv40=49.0)
    fired = {r.rule: (r.grade, r.capped_from) for r in result.reasons}
    assert fired == {"carbonyl-rise": ("watch", "alert"), "visc-drift": ("watch", None)}
    assert [c.caveat for c in result.caveats] == ["ester-carbonyl"]
    assert result.not_evaluated == ()
    assert result.grade == "watch"


def test_the_same_sample_under_the_parent_alone():
    # the parent's own new-oil carbonyl, 172: a rise of 28, still capped at watch
    result = _grade("lubricant-parent.yaml", oxidation=200.0, an=0.14, kv40=49.0)
    assert {r.rule: (r.grade, r.capped_from) for r in result.reasons} == {
        "carbonyl-rise": ("watch", "alert"), "visc-drift": ("watch", None)}


def test_an_entry_with_another_base_stock_is_another_oil():
    # the mineral oil now behind the code has no new-oil carbonyl: the ester's 172 must not be
    # subtracted from a mineral reading (24.5 - 172 would pass as a fall of 147.5)
    lub = load_ruleset(FOUND / "lubricant-other-oil.yaml").lubricants["COMP-46-PE"]
    assert (lub.base_stock, lub.kv40, lub.an, lub.oxidation, lub.kv100) == ("mineral", 45.8, 0.09, None, None)
    result = _grade("lubricant-other-oil.yaml", oxidation=24.5, an=0.14, kv40=46.0)
    assert [g.rule for g in result.not_evaluated] == ["carbonyl-rise"]
    assert result.not_evaluated[0].missing == ("new_oxidation",)
    assert result.caveats == ()
    assert result.grade == "normal"


def test_a_grandparent_shared_by_two_parents_does_not_undo_the_first_parents_values(tmp_path):
    # diamond: both parents extend the defaults; the first gives the site's acid number. The
    # second parent's view of the code is the defaults' (applied last, as rules are), so the
    # defaults' acid number returns; its other values were never lost.
    (tmp_path / "defaults.yaml").write_text((FOUND / "lubricant-parent.yaml").read_text(encoding="utf-8"),
                                            encoding="utf-8")
    (tmp_path / "a.yaml").write_text("ruleset: a\nversion: 1\nextends: defaults.yaml\n"
                                     "lubricants: {COMP-46-PE: {an: 0.06}}\n", encoding="utf-8")
    (tmp_path / "b.yaml").write_text("ruleset: b\nversion: 1\nextends: defaults.yaml\n"
                                     "lubricants: {COMP-46-PE: {kv100: 7.6}}\n", encoding="utf-8")
    (tmp_path / "site.yaml").write_text("ruleset: site\nversion: 1\nextends: [a.yaml, b.yaml]\n", encoding="utf-8")
    lub = load_ruleset(tmp_path / "site.yaml").lubricants["COMP-46-PE"]
    assert (lub.base_stock, lub.kv40, lub.kv100, lub.an) == ("polyol-ester", 46.3, 7.6, 0.08)
