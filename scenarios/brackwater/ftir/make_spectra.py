"""Write the Brackwater Point FTIR demo: synthetic spectra and the samples that point to them.

All invented: the spectra are sums of Gaussian bands (synthetic_spectra), with the
carbonyl peak growing as the oil ages, at realistic heights (0.03-0.25 absorbance at
0.1 mm). The ester oils' own carbonyl saturates a 0.1 mm cell, so their spectra (and
their new-oil references) are recorded in a 0.025 mm cell and say so in
`##PATH LENGTH=`; sumpwise normalises them to 0.1 mm. Deterministic; run with the project's venv:

    .venv/bin/python scenarios/brackwater/ftir/make_spectra.py
"""

from __future__ import annotations

import csv
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[3] / "tests" / "support"))  # synthetic spectra
from synthetic_spectra import oil_spectrum, wavenumber_grid, write_jcampdx

HERE = Path(__file__).resolve().parent
SPECTRA = HERE / "spectra"

# (sample id, unit, class, lubricant, date, oil hours, kv40, an, base stock of the spectrum,
#  carbonyl peak height added to the new oil (absorbance at 0.1 mm), nitration height, JCAMP-DX form)
SAMPLES = [
    ("FT-001", "ST-1", "steam-turbine", "TURB-46-M", "2026-02-02", 40100, 46.4, 0.12, "mineral", 0.03, 0.0, "SQZ"),
    ("FT-002", "ST-1", "steam-turbine", "TURB-46-M", "2026-05-04", 42300, 46.9, 0.19, "mineral", 0.06, 0.01, "DIF"),
    ("FT-003", "ST-1", "steam-turbine", "TURB-46-M", "2026-08-03", 44500, 47.6, 0.29, "mineral", 0.11, 0.02,
     "DIFDUP"),
    ("FT-004", "ST-1", "steam-turbine", "TURB-46-M", "2026-11-02", 46700, 48.3, 0.41, "mineral", 0.17, 0.03,
     "DIFDUP"),
    ("FT-005", "AC-3", "screw-compressor", "COMP-46-PE", "2026-03-09", 1400, 46.3, 0.12, "ester", 0.04, 0.0,
     "AFFN"),
    ("FT-006", "AC-3", "screw-compressor", "COMP-46-PE", "2026-09-07", 5700, 47.0, 0.34, "ester", 0.19, 0.0,
     "DIFDUP"),
    ("FT-007", "AC-4", "screw-compressor", "COMP-46-SYN", "2026-10-05", 900, 46.2, 0.10, "ester", 0.13, 0.0, "SQZ"),
    ("FT-008", "AC-4", "screw-compressor", "COMP-46-SYN", "2026-11-09", 1600, 46.4, 0.33, "ester", 0.18, 0.0,
     "DIF"),
]
THIN_CELL_MM = 0.025  # the ester oils: a quarter of the 0.1 mm path keeps their carbonyl below saturation
REFERENCES = [("new-TURB-46-M.jdx", "mineral", "AFFN"), ("new-COMP-46-PE.jdx", "ester", "DIF"),
              ("new-COMP-46-SYN.jdx", "ester", "DIFDUP")]
BROKEN = ("FT-009", "AC-3", "screw-compressor", "COMP-46-PE", "2026-11-16", 6500, 47.1, 0.36)


def _cell(base: str) -> float:
    return THIN_CELL_MM if base == "ester" else 0.1


def main() -> None:
    SPECTRA.mkdir(exist_ok=True)
    x = wavenumber_grid()
    for name, base, form in REFERENCES:
        cell = _cell(base)
        write_jcampdx(SPECTRA / name, x, oil_spectrum(x, base_stock=base, path_mm=cell), form=form,
                      title=f"Brackwater Point new-oil reference {name[4:-4]} (synthetic)",
                      path_length=f"{cell:g} MM")
    rows = []
    for sid, unit, cls, lub, date, hours, kv40, an, base, oxidation, nitration, form in SAMPLES:
        name = f"{unit}-{date}.jdx"
        cell = _cell(base)
        y = oil_spectrum(x, base_stock=base, oxidation=oxidation, nitration=nitration, path_mm=cell)
        write_jcampdx(SPECTRA / name, x, y, form=form, title=f"Brackwater Point {unit} {date} (synthetic)",
                      path_length=f"{cell:g} MM")
        rows.append([sid, unit, cls, lub, date, hours, kv40, an, f"spectra/{name}"])
    sid, unit, cls, lub, date, hours, kv40, an = BROKEN
    whole = SPECTRA / "whole.tmp"
    write_jcampdx(whole, x, oil_spectrum(x, base_stock="ester", oxidation=0.2, path_mm=THIN_CELL_MM), form="DIFDUP",
                  path_length=f"{THIN_CELL_MM:g} MM")
    text = whole.read_text()
    whole.unlink()
    broken = f"{unit}-{date}-truncated.jdx"
    (SPECTRA / broken).write_text(text[: len(text) // 2])  # cut off in transfer: no ##END
    rows.append([sid, unit, cls, lub, date, hours, kv40, an, f"spectra/{broken}"])
    with open(HERE / "samples.csv", "w", newline="", encoding="utf-8") as out:
        writer = csv.writer(out, lineterminator="\n")
        writer.writerow(["sample_id", "unit_id", "class", "lubricant", "sampled_on", "oil_hours", "kv40", "an",
                         "spectrum"])
        writer.writerows(rows)


if __name__ == "__main__":
    main()
