"""FTIR measures from the spectra a samples file points to, computed before grading.

A sample row may name its used-oil spectrum in a `spectrum` column (a JCAMP-DX or
two-column CSV file, relative to the samples file). With a new-oil reference spectrum
for the row's lubricant (`--reference LUBRICANT=FILE`, or `reference_spectrum` in the
rule set's lubricants table) the bands are read by differential trend (spectral
subtraction, abs/cm; `method` subtraction, graded as `oxidation_differential`); without
one, by direct trend (abs/0.1 mm, converted to the engine's abs/cm; graded as
`oxidation`). Each row is read against its own lubricant's reference, even when rows
share a spectrum file. A row may give `path_length_mm` (used when the file has no
`##PATH LENGTH=`) and `dilution`.

A reference spectrum also tells whether the oil carries an ester carbonyl. Where no base
stock is declared, sumpwise infers "ester carbonyl present (an ester base stock or an
ester additive)" from it, so the rule set's ester caveats apply, and says so; a declared
base stock always wins, and a disagreement is a caveat of its own.
"""

from __future__ import annotations

import math
import os
from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd

from sumpwise.vocabulary.measures import OXIDATION_CONVENTIONS
from sumpwise.vocabulary.problems import InputError
from sumpwise.vocabulary.caveats import EngineCaveat
from sumpwise.vocabulary.texts import lubricant_key
from sumpwise.ruleset.model import RuleSet
from sumpwise.intake.samples import Reject, SampleBatch
from sumpwise.intake.spectra.bands import load_bands
from sumpwise.intake.spectra.batch import (SUBTRACTION, check_dilution, check_path_length, measure_spectra,
                                           read_spectrum)
from sumpwise.intake.spectra.ester import detect_ester, resolve_base_stock
from sumpwise.intake.spectra.spectrum import SpectrumError, path_problem, sampling_problem
from sumpwise.vocabulary.units import factor_to_canonical

# Band columns that are engine measures; the band file's water and fuel bands are
# absorbances, not ppm or percent, and oxidation_area is D7214's quantity, so they stay
# out of the grading.
GRADED_BANDS = ("oxidation", "nitration", "sulfation", "antiwear", "soot")

# Only oxidation has a measure per convention (oxidation, oxidation_differential). The others
# hold one convention, the direct reading on the used oil (soot is a direct-trend figure,
# ASTM WK35480 scope; a row's `method` speaks for its oxidation only), so they are read
# directly even when the row's oxidation is read by subtraction: a differential nitration
# under the same name would be held to limits written for direct readings, and the grade
# would change with whether a reference was given.
DIRECT_ONLY_BANDS = ("nitration", "sulfation", "antiwear", "soot")

# A differential carbonyl area this far below zero is not noise: the reference is not this
# oil's new oil. Read on the area, since a peak height (a maximum) of a band that went
# negative stays near zero. -0.5 absorbance x cm-1 at 0.1 mm is about 100 times the SD
# the area takes from white noise of SD 2e-4 absorbance in both spectra (2.8e-4 x 2 cm-1 x
# sqrt(65 points) ~ 0.005). Our choice, no source.
REFERENCE_MISMATCH_AREA = -0.5

# A carbonyl the oil gained is a band: its area over the 1800-1670 cm-1 window is its height times a
# width, about 35 cm-1 for a Gaussian of sigma 14 (2.5 sigma) and more for the broader envelopes of
# oxidised oils (from memory). A reference recorded otherwise than its sample (its wavenumber axis
# shifted, another resolution) leaves a residue of the ester's or an additive's own sharp carbonyl
# whose lobes cancel in area, so the height rises while the area does not: a polyol ester new oil
# against itself shifted 2 cm-1 read 19.5 abs/cm (area 0), 10 abs/cm a cm-1; at 16 cm-1 resolution
# against 4, 24 abs/cm (tests/support/synthetic_spectra.py). Below 25 cm-1 of area per unit height
# (a Gaussian of sigma 10, FWHM 24 cm-1, narrower than an oxidation envelope) from 3 abs/cm up (far
# above noise: 0.06 abs/cm at the 99th percentile) the height is such a residue. Our choice, no source.
RESIDUE_WIDTH_CM1 = 25.0
RESIDUE_MIN_HEIGHT = 3.0

SPECTRUM_CAVEATS = (
    EngineCaveat("base-stock-inferred", "base_stock_inferred_note",
                 "sumpwise engine: ester carbonyl band of the lubricant's new-oil reference spectrum "
                 "(band position: Tribology Transactions 55 (2012) 872 and IR correlation tables; threshold: our estimate, "
                 "see the band file)"),
    EngineCaveat("base-stock-conflict", "base_stock_conflict_note",
                 "sumpwise engine: declared base stock against the new-oil reference spectrum"),
    EngineCaveat("ftir-band-not-measured", "ftir_band_note",
                 "sumpwise engine: a band left empty (saturated, or outside the spectrum's range); saturation "
                 "threshold: common practice, no source (see the band file)"),
    EngineCaveat("reference-mismatch", "reference_mismatch_note",
                 "sumpwise engine: a differential carbonyl area far below zero, or a height above the saturation "
                 "threshold at 0.1 mm, means the subtracted reference is not this oil's new oil at this cell and "
                 "dilution, and a height with less than 25 cm-1 of area per unit of it is the residue of a reference "
                 "recorded otherwise (shifted axis, another resolution), and one peaking in the ester carbonyl band "
                 "(1725-1770 cm-1, above the oxidation products: Tribology Transactions 55 (2012) 872) is an ester "
                 "carbonyl the reference lacks; the -0.5 absorbance x cm-1 and 25 cm-1 figures are our choice, no "
                 "source, the threshold is the band file's"),
    EngineCaveat("ftir-other-convention", "ftir_convention_note",
                 "sumpwise engine: FTIR conventions (README, FTIR conventions): direct and differential "
                 "readings are never compared with each other's limits"),
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
    for column in ("ftir_band_note", "reference_mismatch_note"):
        frame[column] = None
    notes = list(batch.notes)
    if "spectrum" in frame.columns and frame["spectrum"].notna().any():
        declared = frame["method"].copy() if "method" in frame.columns else None
        frame, bad = _measure(frame, refs, Path(batch.source).parent if batch.source != "<stdin>" else Path("."),
                              path_length_mm)
        rejects.extend(bad)
        notes += _method_notes(declared, frame)
    rejects.sort(key=lambda r: (r.row, r.field))
    return replace(batch, frame=frame, rejects=tuple(rejects), notes=tuple(notes))


def _method_notes(declared: pd.Series | None, frame: pd.DataFrame) -> list[str]:
    """Rows whose `method` said one FTIR convention while their spectrum was read by the other:
    the spectrum decides (with a reference for the lubricant it is subtracted, without one it is
    read directly), and the run says so rather than drop the lab's word without one."""
    if declared is None:
        return []
    said = declared.where(declared.notna(), "").astype(str).to_numpy()
    read = frame["method"].where(frame["method"].notna(), "").astype(str).to_numpy()
    differs = (said != "") & (read != "") & (said != read) & frame["spectrum"].notna().to_numpy()
    found = []
    for (was, now), group in pd.DataFrame({"was": said[differs], "now": read[differs],
                                           "row": frame.index[differs]}).groupby(["was", "now"], sort=True):
        why = ("no new-oil reference spectrum is given for their lubricant" if now == "direct"
               else "a new-oil reference spectrum is given for their lubricant")
        rows = ", ".join(str(row) for row in group["row"].head(5)) + (" ..." if len(group) > 5 else "")
        found.append(f"{len(group)} row(s) (row {rows}) say method {was}, but their spectrum was read by {now} "
                     f"trend: {why}; the record says {now}")
    return found


def _ester_evidence(refs: dict[str, Path], path_length_mm: float) -> dict:
    evidence = {}
    for code, path in refs.items():
        try:
            spectrum = read_spectrum(path)
        except (SpectrumError, OSError) as exc:
            raise InputError(f"new-oil reference spectrum for {code}: {exc}") from None
        length = spectrum.path_length_mm or path_length_mm
        problem = ("a difference spectrum is not a new oil" if spectrum.difference else
                   sampling_problem(spectrum, length, load_bands().saturation_absorbance))
        if problem is None and spectrum.path_length_mm is None:
            problem = path_problem(spectrum, length, True, load_bands().saturation_absorbance,
                                   "a path assumed: no ##PATH LENGTH= in the file")
        if problem is not None:  # it would misread every sample of that lubricant, as an unreadable one would
            raise InputError(f"new-oil reference spectrum for {code}: {path}: {problem}")
        evidence[code] = detect_ester(spectrum, length)
    return evidence


def _base_stocks(frame: pd.DataFrame, ruleset: RuleSet, evidence: dict) -> pd.DataFrame:
    inferred = np.full(len(frame), None, dtype=object)
    conflict = np.full(len(frame), None, dtype=object)
    if evidence:
        lubricant = _text(frame, "lubricant")
        own = _text(frame, "base_stock")
        base = own.copy()
        codes, uniques = pd.factorize(lubricant)  # each distinct code keyed once
        keys = np.array([lubricant_key(code) if code else "" for code in uniques] + [""], dtype=object)[codes]
        table_codes = {lubricant_key(code): code for code in ruleset.lubricants}
        for code, found in evidence.items():
            rows = keys == lubricant_key(code)
            listed = ruleset.lubricants.get(code) or ruleset.lubricants.get(table_codes.get(lubricant_key(code)))
            table = listed.base_stock if listed else None
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


def _per_row_numbers(frame, rows, column, check, default):
    """A per-row option column (path_length_mm, dilution) checked, as (values, reasons: "" where fine)."""
    values = np.full(len(rows), default, dtype=float)
    reasons = np.full(len(rows), "", dtype=object)
    if column not in frame.columns:
        return values, reasons
    for k, cell in enumerate(frame.loc[rows, column].to_numpy(dtype=object)):
        if cell is None or (isinstance(cell, float) and math.isnan(cell)) or cell == "":
            continue
        try:
            values[k] = check(cell, column)
        except ValueError as exc:
            reasons[k] = str(exc)
    return values, reasons


def _measure(frame: pd.DataFrame, refs: dict[str, Path], base: Path, path_length_mm: float):
    has = frame["spectrum"].notna().to_numpy()
    rows = frame.index[has]
    named = frame.loc[has, "spectrum"].astype(str)
    lubricant = _text(frame, "lubricant")[has]
    paths_lengths, bad_length = _per_row_numbers(frame, rows, "path_length_mm", check_path_length, math.nan)
    dilutions, bad_dilution = _per_row_numbers(frame, rows, "dilution", check_dilution, 1.0)
    option_bad = (bad_length != "") | (bad_dilution != "")
    paths = [base / p for p in named]
    by_key = {lubricant_key(code): path for code, path in refs.items()}
    references = [refs.get(code) or (by_key.get(lubricant_key(code)) if code else None) for code in lubricant]

    ok = np.zeros(len(rows), dtype=bool)
    why = np.full(len(rows), "", dtype=object)
    codes = np.full(len(rows), "F001", dtype=object)
    measured = {}
    # one call per distinct fallback path length (usually one): the file's own ##PATH LENGTH= wins.
    # A row's path_length_mm is its sample's cell, not the reference's: a reference file without
    # its own ##PATH LENGTH= is read at the run's path length, as its ester check is.
    fallback = np.where(np.isnan(paths_lengths), path_length_mm, paths_lengths)
    for length in pd.unique(fallback):
        pick = np.flatnonzero((fallback == length) & ~option_bad)
        if not pick.size:
            continue
        # a row's own path_length_mm is a declaration: the C-H bend judges only a path the run assumed
        part, rejections = measure_spectra([paths[k] for k in pick], [references[k] for k in pick], float(length),
                                           reference_path_length_mm=path_length_mm, dilutions=dilutions[pick],
                                           needed=GRADED_BANDS, direct_bands=DIRECT_ONLY_BANDS,
                                           declared=~np.isnan(paths_lengths[pick]), peaks=("oxidation",))
        part.index = pick
        measured[float(length)] = part
        ok[pick] = part["rejection"].to_numpy() == ""
        why[pick] = part["rejection"].to_numpy(dtype=object)
        codes[pick[~ok[pick]]] = [r.code for r in rejections]  # one per rejected row, in row order
    table = pd.concat(measured.values()).sort_index() if measured else None

    good = np.flatnonzero(ok)
    # A differential carbonyl above the band file's saturation threshold at 0.1 mm (1.5 absorbance,
    # 150 abs/cm) is a gain no 0.1 mm cell could read: used oils gain 0.05-0.5 (common practice, no
    # source). It comes from a reference of another oil, cell or dilution (a new ester diluted 1:4 like
    # its samples but read as neat left three quarters of its carbonyl in: 150 abs/cm, urgent).
    gain_limit = load_bands().saturation_absorbance * factor_to_canonical("absorbance", "abs/0.1mm")
    # Where a differential carbonyl peaks tells what was gained: oxidation products absorb at 1725-1650 cm-1,
    # ester carbonyls at 1770-1725 (Tribology Transactions 55 (2012) 872, confirmed; the band file's ester
    # window). A gain from RESIDUE_MIN_HEIGHT up that peaks in the ester band is an ester carbonyl the sample's
    # oil has and its reference has not (a polymethacrylate viscosity modifier at a few percent carries up to
    # about 1 absorbance of it at 0.1 mm: the band file's note, from memory): a mineral oil with 0.1 of it,
    # against a new oil without it, read 10.4 abs/cm (watch) for 3.0 gained, with 0.5 of it 50 (urgent), both
    # peaking at 1738-1740 cm-1 (tests/support/synthetic_spectra.py), while a carbonyl gained alone peaks at 1712.
    # So does an ester oil's own carbonyl when its reference's cell was thinner than declared: 4 % (0.024 mm read
    # as 0.025) read 9.1 abs/cm for 6.5 gained, 10 % read 21.0, peaking at 1738-1740.
    ester_low, ester_high = load_bands().ester.region
    band_note = np.full(len(frame), None, dtype=object)
    mismatch = np.full(len(frame), None, dtype=object)
    if table is not None and good.size:
        picked = table.loc[good]
        differential = picked["method"].to_numpy() == SUBTRACTION
        for column in GRADED_BANDS:
            values = picked[column].to_numpy(dtype=float)
            values = np.where(differential, values, values * factor_to_canonical("absorbance", "abs/0.1mm"))
            # 0.0001 abs/cm is far below FTIR repeatability (D7624: 0.078 abs/cm); finer digits are noise
            values = np.round(values, 4)
            if column == "oxidation":
                area = picked["oxidation_area"].to_numpy(dtype=float) / 100.0  # back to abs x cm-1 at 0.1 mm
                far = differential & (area < REFERENCE_MISMATCH_AREA)
                at = np.flatnonzero(has)[good[far]]
                mismatch[at] = [f"differential carbonyl area {a:.2f} absorbance x cm-1 at 0.1 mm against reference "
                                f"{r}: far below zero, so the reference does not match this oil; the oxidation "
                                "rules are not evaluated" for a, r in zip(area[far], picked["reference"].to_numpy()[far])]
                values = np.where(far, np.nan, values)
                over = differential & ~far & (values > gain_limit)
                at = np.flatnonzero(has)[good[over]]
                mismatch[at] = [f"differential carbonyl {v:.0f} abs/cm against reference {r}: above {gain_limit:.0f} "
                                "abs/cm, past the saturation threshold at 0.1 mm, so the reference does not match "
                                "this oil, its cell or its dilution; the oxidation rules are not evaluated"
                                for v, r in zip(values[over], picked["reference"].to_numpy()[over])]
                values = np.where(over, np.nan, values)
                with np.errstate(invalid="ignore"):
                    residue = (differential & ~far & ~over & (values >= RESIDUE_MIN_HEIGHT)
                               & (area * 100.0 < RESIDUE_WIDTH_CM1 * values))
                at = np.flatnonzero(has)[good[residue]]
                mismatch[at] = [f"differential carbonyl {v:.1f} abs/cm against reference {r} with an area of "
                                f"{100 * a:.0f} abs/cm x cm-1, {100 * a / v:.0f} cm-1 per unit of height, where a band "
                                f"gained has at least {RESIDUE_WIDTH_CM1:g}: the height is the residue of a reference "
                                "recorded otherwise (its wavenumber axis shifted, or another resolution); the "
                                "oxidation rules are not evaluated"
                                for v, a, r in zip(values[residue], area[residue],
                                                   picked["reference"].to_numpy()[residue])]
                values = np.where(residue, np.nan, values)
                peak = picked["oxidation_peak_cm1"].to_numpy(dtype=float)
                with np.errstate(invalid="ignore"):
                    ester = differential & (values >= RESIDUE_MIN_HEIGHT) & (peak >= ester_low) & (peak <= ester_high)
                at = np.flatnonzero(has)[good[ester]]
                mismatch[at] = [f"differential carbonyl {v:.1f} abs/cm against reference {r} peaks at {p:.0f} cm-1, "
                                f"within the ester carbonyl band ({ester_low:g}-{ester_high:g} cm-1), not among the "
                                "oxidation products below it (Tribology Transactions 55 (2012) 872): the oil carries more "
                                "ester carbonyl than its reference (an ester additive the reference lacks, such as a "
                                "viscosity modifier; a reference of another formulation; or one recorded through a "
                                "thinner cell or more diluted than its path length and dilution say); subtract the "
                                "same formulation's new oil, recorded alike; the oxidation rules are not evaluated"
                                for v, p, r in zip(values[ester], peak[ester], picked["reference"].to_numpy()[ester])]
                values = np.where(ester, np.nan, values)
            if column not in frame.columns:
                frame[column] = np.nan
            frame[column] = frame[column].astype(float)
            frame.loc[rows[good], column] = values
        frame["method"] = frame["method"].astype(object) if "method" in frame.columns else None
        frame.loc[rows[good], "method"] = picked["method"].to_numpy(dtype=object)
        frame["reference_spectrum"] = None
        frame.loc[rows[good], "reference_spectrum"] = picked["reference"].replace("", None).to_numpy(dtype=object)
        notes = picked["notes"].to_numpy(dtype=object)
        graded_notes = ["; ".join(n for n in note.split("; ") if n.split(":")[0] in GRADED_BANDS) or None
                        for note in notes]
        band_note[np.flatnonzero(has)[good]] = graded_notes
    else:
        frame["reference_spectrum"] = None
    frame["ftir_band_note"] = band_note
    frame["reference_mismatch_note"] = mismatch

    sample_ids = frame.loc[has, "sample_id"].to_numpy(dtype=object)
    bad = []
    for k in np.flatnonzero(~ok):
        if bad_length[k]:
            bad.append(Reject(int(rows[k]), sample_ids[k], "path_length_mm", bad_length[k], "F001"))
        elif bad_dilution[k]:
            bad.append(Reject(int(rows[k]), sample_ids[k], "dilution", bad_dilution[k], "F001"))
        else:
            bad.append(Reject(int(rows[k]), sample_ids[k], "spectrum", why[k] or "spectrum rejected", codes[k]))
    keep = np.ones(len(frame), dtype=bool)
    keep[np.flatnonzero(has)[~ok]] = False
    return frame[keep], bad


def convention_notes(measured: pd.DataFrame, ruleset: RuleSet) -> np.ndarray:
    """Per row: the class's rules written for the other FTIR convention, when none of its rules grades the
    row's own reading, so the reading would otherwise go ungraded without a word.

    Read from the measured frame (a differential reading sits in `oxidation_differential`, a direct
    one in `oxidation`), so a DataFrame graded through the API gets the same caveat as a file. Where
    the class has rules for both conventions, the other convention's rules are simply not this
    reading's: a caveat on every FTIR sample would be noise that hides the caveats that matter.
    """
    notes = np.full(len(measured), None, dtype=object)
    if "class" not in measured.columns:
        return notes
    classes = measured["class"].to_numpy(dtype=object)
    words = {"direct": "direct-trend", "subtraction": "differential (spectral subtraction)"}
    for convention, other, column in (("direct", "subtraction", "oxidation"),
                                      ("subtraction", "direct", "oxidation_differential")):
        if column not in measured.columns:
            continue
        present = measured[column].notna().to_numpy()
        for cls in pd.unique(classes[present]):
            if cls not in ruleset.classes:
                continue
            rules = ruleset.rules_for(cls)
            ids = [rule.id for rule in rules if rule.reads & set(OXIDATION_CONVENTIONS[other])]
            graded = [rule.id for rule in rules if rule.reads & set(OXIDATION_CONVENTIONS[convention])]
            if ids and not graded:
                notes[present & (classes == cls)] = (
                    f"the FTIR oxidation reading is {words[convention]}; rule(s) {', '.join(ids)} are "
                    f"written for {words[other]} readings and are not evaluated on it")
    return notes