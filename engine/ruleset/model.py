"""The compiled rule set: immutable, typed, limits in canonical units, ready to evaluate.

Grades are held as levels (positions on the ladder) so evaluation works on small
integers; names come back only when results are rendered.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import ClassVar, Union

from sumpwise.vocabulary.measures import measure_unit


@dataclass(frozen=True)
class Origin:
    """Where a rule, caveat or clause was written: for error messages and the audit trail."""

    file: str
    line: int
    column: int
    path: str


@dataclass(frozen=True)
class MeasureTest:
    """`{measure: M, above|below|outside|between: x}`; limit is a float or a (low, high) pair.

    The test's meaning (evaluation, region, words) is sumpwise.vocabulary.limit_tests.
    """

    kind: ClassVar[str] = "measure"
    parts: ClassVar[tuple] = ()
    measure: str
    test: str
    limit: Union[float, tuple]


@dataclass(frozen=True)
class MissingTest:
    """`{measure: M, missing: true|false}`: always known, whatever the value."""

    kind: ClassVar[str] = "missing"
    parts: ClassVar[tuple] = ()
    measure: str
    missing: bool


@dataclass(frozen=True)
class FieldTest:
    """`{field: F, in: [...]}` or `{field: F, equals: v}`, compared as text."""

    kind: ClassVar[str] = "field"
    parts: ClassVar[tuple] = ()
    field: str
    test: str
    values: tuple


@dataclass(frozen=True)
class AllOf:
    """`all: [...]`: true when every part is, false when one is false, else unknown."""

    kind: ClassVar[str] = "all"
    parts: tuple


@dataclass(frozen=True)
class AnyOf:
    """`any: [...]`: true when one part is, false when every part is false, else unknown."""

    kind: ClassVar[str] = "any"
    parts: tuple


@dataclass(frozen=True)
class Not:
    """`not: {...}`: the part's truth reversed; unknown stays unknown."""

    kind: ClassVar[str] = "not"
    part: object

    @property
    def parts(self) -> tuple:
        return (self.part,)


Condition = Union[MeasureTest, MissingTest, FieldTest, AllOf, AnyOf, Not]


@dataclass(frozen=True)
class NextStep:
    """What the site wants done when a rule fires or a caveat applies (`next_step:`).

    `task` is the site's own words; `within_days`, when given, is how soon after the sample.
    """

    task: str
    within_days: int | None = None


@dataclass(frozen=True)
class LadderRule:
    """One measure, one limit per grade; the highest grade whose limit is crossed fires.

    `steps` is ((level, limit), ...) in ascending level; a limit is a float, or a
    (low, high) pair for `outside`.
    """

    id: str
    measure: str
    test: str
    steps: tuple
    message: str
    source: str
    origin: Origin = field(compare=False)
    next_step: NextStep | None = None

    @property
    def reads(self) -> frozenset:
        return frozenset([self.measure])


@dataclass(frozen=True)
class ConditionRule:
    """A `when` condition and the grade it gives."""

    id: str
    when: Condition
    level: int
    message: str
    source: str
    origin: Origin = field(compare=False)
    next_step: NextStep | None = None

    @property
    def reads(self) -> frozenset:
        return frozenset(condition_measures(self.when))


Rule = Union[LadderRule, ConditionRule]


@dataclass(frozen=True)
class Cap:
    """Limits what rules reading `measures` can contribute, unless `unless` holds."""

    measures: frozenset
    level: int
    unless: Condition | None


@dataclass(frozen=True)
class Caveat:
    id: str
    when: Condition
    cap: Cap | None
    message: str
    source: str
    origin: Origin = field(compare=False)
    next_step: NextStep | None = None


@dataclass(frozen=True)
class Lubricant:
    """New-oil reference values of one lubricant, in canonical units."""

    code: str
    base_stock: str | None = None
    iso_vg: float | None = None
    kv40: float | None = None
    kv100: float | None = None
    an: float | None = None
    bn: float | None = None
    oxidation: float | None = None
    rpvot: float | None = None
    reference_spectrum: str | None = None
    description: str | None = None


@dataclass(frozen=True)
class Example:
    """A sample written inside the rule set and what must come of it (checked by `check`)."""

    name: str
    sample: dict
    expect: dict
    origin: Origin = field(compare=False)


@dataclass(frozen=True)
class RuleSet:
    """A resolved, validated rule set, and the fingerprint of its canonical form."""

    id: str
    version: object
    title: str
    grades: tuple
    notice: str
    lubricants: dict
    classes: dict  # class name -> tuple of the class's own rules
    rules: tuple  # top-level rules: they apply to every class the rule set knows
    caveats: tuple
    measures: tuple  # measures declared by the rule set beyond the built-in ones
    fields: tuple
    files: tuple
    canonical: str = field(repr=False)
    sha256: str = ""
    examples: tuple = ()
    # measure -> the step (canonical unit) a trend must exceed to count as a rise (`noise_margins:`)
    noise_margins: dict = field(default_factory=dict)
    # class name -> ids of top-level rules the class drops (`drop:` under the class)
    class_drops: dict = field(default_factory=dict)
    # Where each class was last declared, and each file's `units:`: marks for lint messages.
    class_origins: dict = field(default_factory=dict, compare=False, repr=False)
    file_units: dict = field(default_factory=dict, compare=False, repr=False)
    # The unit each declared measure is written in (`measures: {iron: {unit: ppm}}`), for records.
    measure_units: dict = field(default_factory=dict, compare=False, repr=False)
    lubricant_origins: dict = field(default_factory=dict, compare=False, repr=False)

    def unit_of(self, measure: str) -> str:
        """A measure's unit: the vocabulary's, or the one the rule set declares for it."""
        return measure_unit(measure) or self.measure_units.get(measure, "")

    def level_of(self, grade: str) -> int:
        return self.grades.index(grade)

    def rules_for(self, class_name: str) -> tuple:
        """A class's rules: its own, then the top-level ones it does not override or drop by id."""
        own = self.classes.get(class_name, ())
        taken = {rule.id for rule in own} | set(self.class_drops.get(class_name, ()))
        return own + tuple(rule for rule in self.rules if rule.id not in taken)


def leaves(condition) -> list:
    """The leaf tests of a condition in the order written: the one walk every stage uses.

    Combinations (`all`, `any`, `not`) have parts; leaves (measure, missing and field
    tests) have none. Evaluation records its leaves' truth in this same order.
    """
    if not condition.parts:
        return [condition]
    return [leaf for part in condition.parts for leaf in leaves(part)]


def condition_measures(condition) -> list[str]:
    """Every measure a condition reads, in the order written."""
    return [leaf.measure for leaf in leaves(condition) if leaf.kind != "field"]

