"""Unit factors: ASTM D7412 §12.1-12.2 gives abs/cm = abs/0.100 mm x 100 (per the fact sheet
reference/ftir.md, confirmed); 1 % = 10 000 ppm by definition of parts per million."""

from sumpwise.vocabulary.units import factor_to_canonical, known_units


def test_absorbance_per_tenth_millimetre_is_100_per_centimetre():
    assert factor_to_canonical("absorbance", "abs/0.1mm") == 100.0
    assert factor_to_canonical("absorbance", "abs/cm") == 1.0


def test_percent_water_is_ten_thousand_ppm():
    assert factor_to_canonical("water", "%") == 10_000.0
    assert 0.1 * factor_to_canonical("water", "%") == 1000.0  # D4378's 0.1 % = 1000 ppm (fact sheet)


def test_known_units_are_listed_for_messages():
    assert known_units("water") == ["%", "ppm"]
