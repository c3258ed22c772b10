"""FTIR measures from the spectra a samples file points to, computed before grading.

A sample row may name its used-oil spectrum in a `spectrum` column (a JCAMP-DX or
two-column CSV file, relative to the samples file). With a new-oil reference spectrum
for the row's lubricant (`--reference LUBRICANT=FILE`, or `reference_spectrum` in the
rule set's lubricants table) the bands are read by spectral subtraction (abs/cm, the new
oil is zero by construction); without one, directly (abs/0.1 mm, converted to the
engine's abs/cm). The row's FTIR measures and `method` then come from the spectrum, and
the record names the spectrum and the reference.

A reference spectrum also tells the base stock: a strong band near 1740 cm-1 is an
ester's own carbonyl. Where no base stock is declared, sumpwise infers `ester` from it
(so the rule set's ester caveat applies) and says so, with the evidence; a declared
base stock always wins, and a disagreement is a caveat of its own.
"""

from __future__ import annotations

import os
from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd

from sumpwise.vocabulary.problems import InputError
from sumpwise.vocabulary.caveats import EngineCaveat
from sumpwise.ruleset.model import RuleSet
from sumpwise.intake.samples import Reject, SampleBatch
from sumpwise.intake.spectra.batch import SUBTRACTION, measure_spectra, read_spectrum
from sumpwise.intake.spectra.ester import detect_ester, resolve_base_stock
from sumpwise.intake.spectra.spectrum import SpectrumError
from sumpwise.vocabulary.units import factor_to_canonical

# Band columns that are engine measures; the band file's water and fuel bands are
# absorbances, not ppm or percent, so they stay out of the grading.
GRADED_BANDS = ("oxidation", "nitration", "sulfation", "antiwear", "soot")

SPECTRUM_CAVEATS = (
    EngineCaveat("base-stock-inferred", "base_stock_inferred_note",
                 "sumpwise engine: ester carbonyl band of the lubricant's new-oil reference spectrum "
                 "(band position: standard IR correlation tables, from memory; threshold: our own choice)"),
    EngineCaveat("base-stock-conflict", "base_stock_conflict_note",
                 "sumpwise engine: declared base stock against the new-oil reference spectrum"),
)

# Columns a spectrum-read batch carries into the measured frame and the records.
SPECTRUM_COLUMNS = ("spectrum", "reference_spectrum") + tuple(c.message_column for c in SPECTRUM_CAVEATS)


def spectrum_caveat_flags(measured: pd.DataFrame) -> np.ndarray:
    """bool [rows, SPECTRUM_CAVEATS]: the base-stock notes that apply to each sample."""
    return np.stack([measured[c.message_column].notna().to_numpy() for c in SPECTRUM_CAVEATS], axis=1)


def parse_references(items) -> dict[str, Path]:
    """`LUBRICANT=FILE` options into a mapping; a malformed one is a usage error."""
    found = {}
    for item in items or ():
        code, sep, path = item.partition("=")
        if not sep or not code.strip() or not path.strip():
            raise InputError(f"--reference {item!r}: expected LUBRICANT=FILE, e.g. COMP-46-PE=new-oil.jdx")
        found[code.strip()] = Path(path.strip())
    return found


def reference_files(ruleset: RuleSet, given: dict[str, Path]) -> dict[str, Path]:
    """New-oil reference spectrum per lubricant code: the command line's, else the rule set's."""
    files = {code: _shorter(Path(lub.reference_spectrum)) for code, lub in ruleset.lubricants.items()
             if lub.reference_spectrum}
    files.update(given)
    return files


def _shorter(path: Path) -> Path:
    """A path below the working folder as a relative one, so messages read the same on every machine."""
    relative = Path(os.path.relpath(path))
    return path if relative.parts[:1] == ("..",) else relative


def measure_sample_spectra(batch: SampleBatch, ruleset: RuleSet, references: dict[str, Path] | None = None,
                           path_length_mm: float = 0.1) -> SampleBatch:
    """The batch with FTIR measures from its spectra and base stocks from reference spectra.

    Rows whose spectrum cannot be used are rejected (field `spectrum`, with the file, line
    and reason); every other row goes on. An unreadable reference spectrum stops the run:
    it would misread every sample of that lubricant.
    """
    refs = reference_files(ruleset, references or {})
    frame = batch.frame.copy()
    rejects = list(batch.rejects)
    evidence = _ester_evidence(refs, path_length_mm)
    frame = _base_stocks(frame, ruleset, evidence)
    if "spectrum" in frame.columns and frame["spectrum"].notna().any():
        frame, bad = _measure(frame, refs, Path(batch.source).parent if batch.source != "<stdin>" else Path("."),
                              path_length_mm)
        rejects.extend(bad)
    rejects.sort(key=lambda r: (r.row, r.field))
    return replace(batch, frame=frame, rejects=tuple(rejects))


def _ester_evidence(refs: dict[str, Path], path_length_mm: float) -> dict:
    evidence = {}
    for code, path in refs.items():
        try:
            spectrum = read_spectrum(path)
        except (SpectrumError, OSError) as exc:
            raise InputError(f"new-oil reference spectrum for {code}: {exc}") from None
        evidence[code] = detect_ester(spectrum, path_length_mm)
    return evidence


def _base_stocks(frame: pd.DataFrame, ruleset: RuleSet, evidence: dict) -> pd.DataFrame:
    inferred = np.full(len(frame), None, dtype=object)
    conflict = np.full(len(frame), None, dtype=object)
    if evidence:
        lubricant = _text(frame, "lubricant")
        own = _text(frame, "base_stock")
        base = own.copy()
        for code, found in evidence.items():
            rows = lubricant == code
            table = ruleset.lubricants[code].base_stock if code in ruleset.lubricants else None
            for declared in pd.unique(own[rows]):
                at = rows & (own == declared)
                finding = resolve_base_stock(declared or table, found)
                if finding.basis == "inferred from spectrum":
                    base[at] = finding.base_stock
                    inferred[at] = f"{code}: {finding.sentence}"
                if finding.conflict:
                    conflict[at] = f"{code}: {finding.sentence}"
        frame["base_stock"] = np.where(base == "", None, base)
    frame["base_stock_inferred_note"] = inferred
    frame["base_stock_conflict_note"] = conflict
    return frame


def _text(frame: pd.DataFrame, column: str) -> np.ndarray:
    """A text column as an object array with "" for missing, for comparisons."""
    if column not in frame.columns:
        return np.full(len(frame), "", dtype=object)
    values = frame[column].astype(object)
    return values.where(values.notna(), "").to_numpy(dtype=object)


def _measure(frame: pd.DataFrame, refs: dict[str, Path], base: Path, path_length_mm: float):
    has = frame["spectrum"].notna().to_numpy()
    named = frame.loc[has, "spectrum"].astype(str)
    paths = [base / p for p in named]
    lubricant = frame.loc[has, "lubricant"] if "lubricant" in frame.columns else pd.Series(None, index=named.index)
    references = {str(path): refs[code] for path, code in zip(paths, lubricant) if code in refs}
    measured, rejections = measure_spectra(paths, references, path_length_mm)
    why = {r.spectrum: r.message for r in rejections}

    rows = frame.index[has]
    ok = measured["rejection"].to_numpy() == ""
    for column in GRADED_BANDS:
        values = measured[column].to_numpy(dtype=float)
        direct = measured["method"].to_numpy() != SUBTRACTION
        values = np.where(direct, values * factor_to_canonical("absorbance", "abs/0.1mm"), values)
        # 0.0001 abs/cm is far below FTIR repeatability (D7624: 0.078 abs/cm); finer digits are noise
        values = np.round(values, 4)
        if column not in frame.columns:
            frame[column] = np.nan
        frame.loc[rows[ok], column] = values[ok]
    frame["method"] = frame["method"].astype(object) if "method" in frame.columns else None
    frame.loc[rows[ok], "method"] = measured["method"].to_numpy(dtype=object)[ok]
    reference = measured["reference"].replace("", None).to_numpy(dtype=object)
    frame["reference_spectrum"] = None
    frame.loc[rows[ok], "reference_spectrum"] = reference[ok]

    bad = [Reject(int(row), sid, "spectrum", why.get(str(path), "spectrum rejected"), "F001")
           for row, sid, path, good in zip(rows, frame.loc[has, "sample_id"], paths, ok) if not good]
    keep = np.ones(len(frame), dtype=bool)
    keep[np.flatnonzero(has)[~ok]] = False
    return frame[keep], bad
