"""Limits from a site's own results: pick one class's (and lubricant's) values of one measure,
propose a ladder with sumpwise.authoring.limit_statistics, and record in the rule's source how it was derived.

The statistics live in sumpwise.authoring.limit_statistics (ASTM D7720's two approaches as the fact sheet
gives them: SPC limits for normal, in-control data, percentiles for data that are
not). Here: which rows were used, their date range, and the figures a reviewer needs.
D7720's own minimum counts and levels were not found; the defaults are common
practice, no source, and the output says so.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from sumpwise.derive.row_measures import derive_measures
from sumpwise.vocabulary.measures import DERIVED_MEASURES, INPUT_MEASURES, MEASURES
from sumpwise.vocabulary.problems import InputError
from sumpwise.authoring.limit_statistics import NORMALITY_ALPHA, NotEnoughData, Proposal, proposal_yaml, propose_ladder
from sumpwise.ruleset.model import RuleSet
from sumpwise.ruleset.resolve import DEFAULT_GRADES
from sumpwise.intake.samples import SampleBatch

@dataclass(frozen=True)
class DataProposal:
    """A proposal and the data it came from."""

    proposal: Proposal
    class_name: str
    lubricant: str | None
    measure: str
    unit: str
    first_sampled: str | None
    last_sampled: str | None
    undated: int
    source_name: str


def propose_from_samples(batch: SampleBatch, class_name: str, measure: str, lubricant: str | None = None,
                         ruleset: RuleSet | None = None, direction: str | None = None, method: str = "auto",
                         grades=None) -> DataProposal:
    """Propose limits for `measure` from the rows of `class_name` (and `lubricant`, when given).

    Derived measures take new-oil values from `ruleset`'s lubricants or the rows' own
    `new_*` columns. Raises sumpwise.authoring.limit_statistics.NotEnoughData when there are too few results.
    """
    extra = ruleset.measures if ruleset else ()
    if measure not in INPUT_MEASURES and measure not in DERIVED_MEASURES and measure not in extra:
        raise InputError(f"unknown measure '{measure}'; expected one of: "
                         f"{', '.join([*INPUT_MEASURES, *DERIVED_MEASURES, *extra])}")
    measured = derive_measures(batch.frame, ruleset.lubricants if ruleset else {}, extra,
                               ruleset.fields if ruleset else ())
    chosen = (measured["class"] == class_name).to_numpy(dtype=bool)
    if lubricant is not None:
        chosen = chosen & (measured["lubricant"] == lubricant).to_numpy(dtype=bool)
    values = measured[measure].to_numpy(dtype=float, na_value=np.nan)[chosen]
    grades = tuple(grades) if grades else tuple((ruleset.grades if ruleset else DEFAULT_GRADES)[1:])
    direction = direction or ("below" if MEASURES.get(measure) and MEASURES[measure].low_is_bad else "above")
    try:
        proposal = propose_ladder(values, grades, direction, method=method)
    except NotEnoughData:
        raise
    except ValueError as exc:  # limits that coincide, or a ladder the defaults do not cover
        raise InputError(f"no limit proposed: {exc}") from None

    dates = measured["sampled_on"].to_numpy(dtype=object)[chosen][~np.isnan(values)]
    dated = sorted(str(d) for d in dates if d is not None)
    first, last = (dated[0], dated[-1]) if dated else (None, None)
    who = f"class {class_name}" + (f", lubricant {lubricant}" if lubricant else ", every lubricant")
    when = f"sampled {first} to {last}" if dated else "no sampling dates"
    source = f"{proposal.source} Data: {batch.source}, {who}, {when}."
    unit = INPUT_MEASURES.get(measure) or (DERIVED_MEASURES[measure].unit if measure in DERIVED_MEASURES else "")
    return DataProposal(replace(proposal, source=source), class_name, lubricant, measure, unit, first, last,
                        len(dates) - len(dated), batch.source)


def figure_lines(found: DataProposal) -> list[str]:
    """The figures the limits rest on, for a reviewer to check."""
    p = found.proposal
    unit = f" {found.unit}" if found.unit else ""
    lines = [f"data: {found.source_name}: class {found.class_name}, "
             f"lubricant {found.lubricant or '(every lubricant)'}, measure {found.measure}{unit}",
             f"count: {p.count} result(s) used, {p.dropped_missing} without a value dropped "
             f"(at least {p.needed} needed for this method; minimum counts: common practice, no source)",
             f"dates: {found.first_sampled or '-'} to {found.last_sampled or '-'}"
             + (f" ({found.undated} result(s) undated)" if found.undated else ""),
             f"mean {p.mean:.6g}, SD {p.sd:.6g}, skewness {p.skewness:.3g}, excess kurtosis "
             f"{p.excess_kurtosis:.3g}, Jarque-Bera normality p = {p.normality_p:.3g}"]
    if p.method == "spc":
        how = ", ".join(f"{g} mean {'+' if p.direction == 'above' else '-'} {k:g} SD" for g, k in zip(p.grades, p.levels))
        lines.append(f"method: SPC limits (ASTM D7720 §1.2 approach, for normal, in-control data): {how}")
        if p.normality_p < NORMALITY_ALPHA:
            lines.append(f"note: the normality test rejects normal data (p = {p.normality_p:.3g} < "
                         f"{NORMALITY_ALPHA:g}); for data that are not normal D7720 §1.3 takes percentiles "
                         f"(--method percentile or auto)")
    else:
        how = ", ".join(f"{g} {q:g}th percentile" for g, q in zip(p.grades, p.percentiles))
        lines.append(f"method: percentiles of the sorted data (ASTM D7720 §1.3 approach, for data that are not "
                     f"normal): {how}")
    lines.append(f"levels: {p.levels_source}")
    lines.append("limits: " + ", ".join(f"{g} {p.direction} {limit:.6g}" for g, limit in p.ladder().items()))
    return lines


def snippet(found: DataProposal, rule_id: str | None = None, message: str | None = None) -> str:
    """The figures as YAML comments, then the ladder rule ready to paste under a class's `rules:`."""
    rule_id = rule_id or f"{found.measure.replace('_', '-')}-from-data"
    message = message or (f"{found.measure} is {found.proposal.direction} the usual spread of this site's "
                          f"{found.class_name} results")
    header = "".join(f"# {line}\n" for line in figure_lines(found))
    return header + proposal_yaml(found.proposal, rule_id, found.measure, message)
