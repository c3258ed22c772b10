"""A field condition compares text as the lead wrote it: `equals: 1.10` is the sample point "1.10".

Brackwater Point numbers its sample points line.point: 1.1 (line 1, point 1) and 1.10 (line 1,
point 10, the drain). Up to engine 0.8.0 an unquoted `in: [1.10]` was read as the float 1.1
and compared as the text "1.1": the drain's water rule fired on point 1.1 and never on the
drain. A field is text (README, condition rules); YAML's float reading must not rewrite it.
Water figures: limits.md, common practice, no source.
"""

from __future__ import annotations

from grade_runs import fired_rules, graded_run

from sumpwise.ruleset.compiler import load_ruleset

RULES = """\
ruleset: brackwater-points
version: 1
fields: [sample_point]
classes:
  steam-turbine:
    rules:
      - id: water
        measure: water
        above: {watch: 200, alert: 500}
        message: Water in the oil
        source: common practice, no source
      - id: drain-wet
        when:
          all:
            - {field: sample_point, in: [1.10, 2.10]}
            - {measure: water, above: 100}
        grade: alert
        message: Free water at a drain point
        source: site practice
"""

SAMPLES = ("sample_id,unit_id,class,lubricant,sampled_on,sample_point,water\n"
           "BP-0501,ST-1,steam-turbine,TURB-46-M,2026-05-04,1.1,150\n"
           "BP-0502,ST-1,steam-turbine,TURB-46-M,2026-05-04,1.10,150\n"
           "BP-0503,ST-2,steam-turbine,TURB-46-M,2026-05-04,2.10,80\n")


def test_a_decimal_sample_point_matches_as_written(tmp_path):
    path = tmp_path / "points.yaml"
    path.write_text(RULES, encoding="utf-8")
    records, _ = graded_run("-", "--rules", str(path), stdin=SAMPLES)
    assert {sid: r["grade"] for sid, r in records.items()} == {"BP-0501": "normal", "BP-0502": "alert",
                                                               "BP-0503": "normal"}
    assert fired_rules(records["BP-0502"]) == {"drain-wet"}


def test_the_canonical_form_keeps_the_text_and_reloads_to_the_same_fingerprint(tmp_path):
    path = tmp_path / "points.yaml"
    path.write_text(RULES, encoding="utf-8")
    ruleset = load_ruleset(path)
    assert '"in":["1.10","2.10"]' in ruleset.canonical
    again = tmp_path / "canonical.yaml"
    again.write_text(ruleset.canonical, encoding="utf-8")  # JSON is YAML: the canonical form is a rule set
    assert load_ruleset(again).sha256 == ruleset.sha256
