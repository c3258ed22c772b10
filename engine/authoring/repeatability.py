"""The published repeatability of the lab tests behind the measures, for spacing proposed limits.

Repeatability r is the difference two results of the same operator, apparatus and
material exceed only one time in twenty. Two ladder levels closer than r cannot be told
apart by the test, so a proposal keeps every step between levels at least r (ASTM D7669,
as the project's fact sheet gives it: the spread between control limits should exceed the
test method's repeatability). Where a figure could not be confirmed it says "from memory".
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable


@dataclass(frozen=True)
class Repeatability:
    """r as a function of the result level X, in the reading's canonical unit."""

    reading: str
    method: str
    formula: str
    at: Callable[[float], float]
    status: str

    def words(self, level: float, value: float, unit: str) -> str:
        return (f"{self.method}: {self.formula}, {value:.3g} {unit} at {level:.4g} {unit} "
                f"({self.status})").replace("  ", " ")


_D445 = ("ISO 3104 / ASTM D445, formulated oils at 40 and 100 C", "r = 0.0026 X",
         "confirmed: ISO 3104 §14.2 as reproduced, and the project's fact sheet; used-oil precision was not "
         "determined and is expected to be poorer (from memory)")

REPEATABILITY = {
    "an": Repeatability("an", "ASTM D664, used oils (buffer end point)", "r = 0.117 X", lambda x: 0.117 * abs(x),
                        "confirmed: D664's precision section in two reproductions (§15.1.1 of an older edition, "
                        "§16.1.1 of a later one) and the project's fact sheet; D974's own figures were not found"),
    "kv40": Repeatability("kv40", _D445[0], _D445[1], lambda x: 0.0026 * abs(x), _D445[2]),
    "kv100": Repeatability("kv100", _D445[0], _D445[1], lambda x: 0.0026 * abs(x), _D445[2]),
    "water": Repeatability("water", "ASTM D6304 Procedure A", "r = 0.08852 X^0.7 (mg/kg)",
                           lambda x: 0.08852 * abs(x) ** 0.7, "from memory"),
}
