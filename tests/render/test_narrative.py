"""The narrative of one sample names every reason with value, limit and source, the caveats,
what was not evaluated, the notice and the cautions."""

from conftest import DATA

from sumpwise import grade, load_ruleset, read_samples
from sumpwise.render.narrative import explain_lines


def test_explain_tells_the_whole_story():
    rs = load_ruleset(DATA / "rulesets" / "draft.yaml")
    result = grade(read_samples(DATA / "samples" / "draft-record.csv"), rs).result(0)
    text = "\n".join(explain_lines(result, rs.grades))
    assert "Grade: WATCH (level 1 on the ladder normal < watch < alert < urgent)" in text
    assert "an_rise = 0.15 mg KOH/g, above 0.1 mg KOH/g (the watch limit)." in text
    assert "carbonyl-rise: watch (would be alert; capped by caveat ester-carbonyl)" in text
    assert "oil_hours = 1500 h, test below 2000 h: holds" in text  # each clause read with its measure's unit
    assert "Read from " in text and "draft-record.csv, row 1." in text  # where the sample came from
    assert "Source: site practice" in text
    assert "ester-carbonyl: Ester base stock" in text
    assert "visc-drift: lacks kv40" in text
    assert rs.sha256 in text
    assert "Notice: Screening guidance only." in text
    assert "Confirm a severe finding by resampling" in text


def test_explain_says_when_a_cap_held_because_its_exception_went_unchecked():
    import io
    rs = load_ruleset(DATA / "rulesets" / "draft.yaml")
    csv = "sample_id,class,lubricant,oxidation,oil_hours\nx,screw-compressor,COMP-68-DE,210,5000\n"
    result = grade(read_samples(io.StringIO(csv)), rs).result(0)
    text = " ".join(explain_lines(result, rs.grades))
    assert "could not be checked: it lacks an." in " ".join(text.split())


def test_explain_says_a_grade_from_a_reading_written_as_a_bound_is_the_least_it_can_be():
    # The README's example: water '>1500' against the site's gearbox water steps (watch above 300,
    # alert above 1000, urgent above 2000 ppm; scenarios/brackwater/site.yaml, invented) is known above
    # the alert step and undecided against urgent: alert is a lower bound, and explain must say so.
    import io
    from conftest import ROOT
    rs = load_ruleset(ROOT / "scenarios" / "brackwater" / "site.yaml")
    csv = "sample_id,class,lubricant,water\nW1,gearbox,GEAR-320-PAO,>1500\nW2,gearbox,GEAR-320-PAO,1500\n"
    graded = grade(read_samples(io.StringIO(csv)), rs)
    told = " ".join(" ".join(explain_lines(graded.result(0), rs.grades)).split())
    assert "water = >1500 ppm, above 1000 ppm (the alert limit)." in told
    assert "The lab wrote a bound (>1500): the reading lies somewhere above it, so alert is the least this rule " \
           "gives the sample." in told
    plain = " ".join(" ".join(explain_lines(graded.result(1), rs.grades)).split())
    assert "The lab wrote a bound" not in plain


def test_a_measure_without_a_value_says_where_it_has_none(tmp_path):
    """`lacks vi` beside kv40 and kv100 both present sent a reader looking for a missing reading.
    ASTM D2270 section 1.2 (the shared viscosity fact sheet): VI is defined for kv100 of 2 mm2/s
    and up; a rate per 1000 h has no value over 0 oil hours. The narrative says both, from the
    measure table; a rule that lacks a reading keeps the plain sentence."""
    import io
    from conftest import ROOT
    site = load_ruleset(ROOT / "scenarios" / "brackwater" / "site.yaml")
    csv = "sample_id,class,lubricant,kv40,kv100\nV1,hydraulic,HYD-46-HV,4.1,1.5\n"  # a thin fluid, not an HV oil
    text = "\n".join(explain_lines(grade(read_samples(io.StringIO(csv)), site).result(0), site.grades, width=200))
    assert "hv-shear-loss: lacks vi (vi has no value where kv100 is below 2 mm2/s" in text
    assert "water: lacks water\n" in text + "\n"
    rules = tmp_path / "rate.yaml"
    rules.write_text("ruleset: rate\nversion: 1\nlubricants:\n  T-46: {an: 0.05}\nclasses:\n  turbine:\n    rules:\n"
                     "      - {id: acid-fast, measure: an_rise_per_1000h, above: {watch: 0.1}, message: m, source: s}\n")
    rate = load_ruleset(rules)
    csv = "sample_id,class,lubricant,an,oil_hours\nR1,turbine,T-46,0.3,0\n"
    text = "\n".join(explain_lines(grade(read_samples(io.StringIO(csv)), rate).result(0), rate.grades, width=200))
    assert "acid-fast: lacks an_rise_per_1000h (an_rise_per_1000h has no value where the oil has 0 hours" in text
