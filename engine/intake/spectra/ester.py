"""Infer an ester base stock from the new-oil reference spectrum, and weigh it against a declaration.

Why: an ester's own carbonyl fills the oxidation window (ftir.md), so the
grading needs to know the base stock. A declared base stock always wins;
the spectrum only fills a gap, and a disagreement is returned as evidence
for the caller to turn into a caveat.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sumpwise.intake.spectra.bands import BandSet, load_bands, measure_block, plan_bands, saturated_bands
from sumpwise.intake.spectra.spectrum import Spectrum
from sumpwise.vocabulary.base_stocks import BaseStockError, canonical_base_stock, has_ester_carbonyl

PRESENT = "ester carbonyl present (an ester base stock or an ester additive)"

REFERENCE_PATH_MM = 0.1


@dataclass(frozen=True)
class EsterEvidence:
    """What the reference spectrum shows near the ester carbonyl, against the threshold."""

    inferred: bool
    peak_position_cm1: float
    peak_absorbance: float
    threshold: float
    unit: str
    window_cm1: tuple[float, float]
    source: str
    sentence: str


@dataclass(frozen=True)
class BaseStockFinding:
    """The base stock to grade with, where it came from, and whether declaration and spectrum disagree."""

    base_stock: str | None
    basis: str  # "declared" | "inferred from spectrum" | "unknown"
    conflict: bool
    evidence: EsterEvidence | None
    sentence: str


def detect_ester(reference_spectrum: Spectrum, path_length_mm: float = 0.1, bands: BandSet | None = None) -> EsterEvidence:
    """Peak height above baseline in the ester carbonyl window of a new-oil spectrum, path-normalised."""
    bands = bands or load_bands()
    rule = bands.ester
    low, high = rule.region
    plan = plan_bands(reference_spectrum.wavenumber, (rule,))
    if rule.name in plan.uncovered:
        return EsterEvidence(False, float("nan"), float("nan"), bands.ester_threshold, "abs/0.1mm", rule.region,
                             bands.ester_source,
                             f"{reference_spectrum.source}: not inferred: {plan.uncovered[rule.name]}")
    saturated = bool(saturated_bands(plan, reference_spectrum.absorbance[:, None], bands.saturation_absorbance)
                     .get(rule.name, [False])[0])
    scaled = reference_spectrum.absorbance[None, :] * (REFERENCE_PATH_MM / path_length_mm)
    measures = measure_block(plan, scaled)
    height = float(measures.values[rule.name][0])
    position = float(measures.peak_positions[rule.name][0])
    inferred = saturated or bool(np.isfinite(height) and height >= bands.ester_threshold)
    if saturated:
        found = (f"carbonyl band saturated (absorbance above {bands.saturation_absorbance:g} as recorded) "
                 f"within {low:g}-{high:g} cm-1")
    else:
        verdict = "at or above" if inferred else "below"
        found = (f"carbonyl peak {height:.3g} abs/0.1mm above baseline at {position:.0f} cm-1 (window {low:g}-"
                 f"{high:g} cm-1), {verdict} the threshold {bands.ester_threshold:g} abs/0.1mm")
    sentence = f"{reference_spectrum.source}: {found}: " + (PRESENT if inferred else "no ester carbonyl")
    return EsterEvidence(inferred, position, height, bands.ester_threshold, "abs/0.1mm", rule.region,
                         bands.ester_source, sentence)


def resolve_base_stock(declared: str | None, evidence: EsterEvidence | None) -> BaseStockFinding:
    """Declared wins; otherwise 'ester' if the spectrum shows an ester carbonyl; a disagreement is flagged.

    A phosphate ester has no carbonyl, so a declared phosphate ester without one agrees.
    """
    declared = declared.strip() if isinstance(declared, str) and declared.strip() else None
    if declared is not None:
        try:
            carbonyl = has_ester_carbonyl(canonical_base_stock(declared))
        except BaseStockError:
            carbonyl = None
        known = evidence is not None and (evidence.inferred or np.isfinite(evidence.peak_absorbance))
        conflict = carbonyl is not None and known and evidence.inferred != carbonyl
        sentence = f"base stock {declared!r} as declared"
        if conflict:
            sentence += f"; the reference spectrum disagrees: {evidence.sentence}"
        return BaseStockFinding(declared, "declared", bool(conflict), evidence, sentence)
    if evidence is not None and evidence.inferred:
        return BaseStockFinding("ester", "inferred from spectrum", False, evidence,
                                f"{PRESENT}, so graded with the ester caveats: {evidence.sentence}")
    reason = evidence.sentence if evidence is not None else "no reference spectrum"
    return BaseStockFinding(None, "unknown", False, evidence, f"base stock not declared and not inferred: {reason}")
