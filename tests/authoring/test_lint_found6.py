"""Lint on limits written in the wrong scale, and a ladder out of order (tests/data/authoring_found6/).

Outside facts: kinematic viscosity repeatability for formulated oils at 40 and 100 C is 0.26 % of the
value (ISO 3104 §14.2, confirmed in the project's fact sheet ../shared/reference/viscosity.md), so a
viscosity-change limit of 0.1 % is inside the test's noise; 1 % = 10 000 ppm (by definition), so a
water limit of 0.1 ppm is 0.00001 %, below what a Karl Fischer titration reports.
"""

from __future__ import annotations

from pathlib import Path

from sumpwise.authoring.lint import lint_ruleset, unit_trouble
from sumpwise.ruleset.compiler import check_ruleset

FIXTURE = Path(__file__).resolve().parents[1] / "data" / "authoring_found6" / "lint-scale.yaml"


def _found():
    checked = check_ruleset(FIXTURE)
    problems = list(checked.problems) + list(lint_ruleset(checked.ruleset, partial=checked.partial))
    return [(p.code, Path(p.file).name, p.line, p.message) for p in problems]


def test_a_viscosity_change_written_as_a_fraction_is_warned_at_its_line():
    # `kv40_change_pct outside {watch: 0.05, alert: 0.1}` meant 5 % and 10 %. Engines up to 0.7.0 said nothing
    # about the scale, and only told the author to remove the correct 5 % / 10 % rule as shadowed by it.
    warned = [(line, message) for code, file, line, message in _found()
              if code == "W009" and file == "lint-scale.yaml"]
    assert [line for line, _ in warned] == [8, 18]
    assert "kv40_change_pct limit(s) 0.05, 0.1 %" in warned[0][1]
    assert "water limit(s) 0.05, 0.1 ppm" in warned[1][1]


def test_a_ladder_out_of_order_is_an_error_at_its_limit():
    [(code, file, line)] = [(c, f, ln) for c, f, ln, m in _found() if "visc-order" in m and c.startswith("C")]
    assert (code, file, line) == ("C006", "lint-scale.yaml", 15)


def test_the_scale_check_spares_real_viscosity_change_limits():
    # The fact sheet's rules of thumb: +/-5 % caution, +/-10 % critical (common practice, no source).
    for limit in (5.0, -5.0, 10.0, 1.0, 0.0):
        assert unit_trouble("kv40_change_pct", limit) is None, limit
    for limit in (0.1, -0.05, 0.5):
        assert unit_trouble("kv100_change_pct", limit) is not None, limit
