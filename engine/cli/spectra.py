"""`sumpwise spectra FILES_OR_DIRS... [--reference FILE] [--path-length MM] [--dilution F] [--out FILE] [--bands FILE]`.

Writes exactly one CSV row per spectrum file, whatever its damage: measured
(bands that could not be measured are empty, with a note) or rejected with its
reason. Exit status:
- 0: at least one spectrum was measured; each rejected spectrum is a row
  with its reason in `rejection` and a line on stderr;
- 2: nothing could be measured: no input files, an unreadable band file or
  --reference file, a bad option value, or every spectrum rejected (the CSV
  is still written, so the reasons are kept).
"""

from __future__ import annotations

import argparse
from pathlib import Path

from sumpwise.cli.exit_codes import OK, USAGE
from sumpwise.cli.options import output_file, refuse_overwriting
from sumpwise.intake.spectra.bands import BandFileError, load_bands
from sumpwise.intake.spectra.batch import (check_dilution, check_path_length, expand_inputs, measure_spectra,
                                           read_spectrum)
from sumpwise.intake.spectra.spectrum import SpectrumError
from sumpwise.vocabulary.cautions import CAUTIONS

CAUTION = "sumpwise spectra: " + " ".join(CAUTIONS)


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Declare the `spectra` subcommand's arguments on the parser the lead mounts."""
    parser.add_argument("inputs", nargs="+", metavar="FILES_OR_DIRS",
                        help="JCAMP-DX (.jdx .dx .jcm .jcamp) or two-column CSV spectra, or folders of them")
    parser.add_argument("--reference", metavar="FILE",
                        help="new-oil spectrum of the same lubricant: read every spectrum by spectral subtraction")
    parser.add_argument("--path-length", metavar="MM", default="0.1", dest="path_length",
                        help="cell path length in mm for files without their own ##PATH LENGTH= (default 0.100); "
                             "values are normalised to 0.100 mm")
    parser.add_argument("--reference-path-length", metavar="MM", default=None, dest="reference_path_length",
                        help="the reference's cell path length in mm, if its file does not say (default: --path-length)")
    parser.add_argument("--dilution", metavar="FACTOR", default="1",
                        help="dilution factor of the used-oil samples (volume diluted / volume of oil; default 1)")
    parser.add_argument("--out", metavar="FILE", type=output_file,
                        help="write the CSV here instead of standard output")
    parser.add_argument("--bands", metavar="FILE", help="band definitions to use instead of the packaged set")


def run(args, stdout, stderr) -> int:
    """Measure the spectra named in args; write CSV to --out or stdout, problems to stderr."""
    try:
        path_length = check_path_length(args.path_length, "--path-length")
        reference_path_length = (None if args.reference_path_length is None
                                 else check_path_length(args.reference_path_length, "--reference-path-length"))
        dilution = check_dilution(args.dilution, "--dilution")
    except ValueError as exc:
        print(f"sumpwise spectra: {exc}", file=stderr)
        return USAGE
    try:
        bands = load_bands(args.bands)
    except BandFileError as exc:
        print(f"sumpwise spectra: {exc}", file=stderr)
        return USAGE
    missing = [item for item in args.inputs if not Path(item).exists()]
    if missing:
        print(f"sumpwise spectra: no such file or folder: {', '.join(missing)}", file=stderr)
        return USAGE
    paths = expand_inputs(args.inputs)
    if not paths:
        print("sumpwise spectra: no spectrum files found in " + ", ".join(args.inputs), file=stderr)
        return USAGE
    refuse_overwriting([("--out", args.out)], [("the spectrum", path) for path in paths]
                       + [("--reference", args.reference), ("--bands", args.bands)])
    references = None
    if args.reference:
        try:
            read_spectrum(args.reference)
        except SpectrumError as exc:
            print(f"sumpwise spectra: reference spectrum unusable: {exc}", file=stderr)
            return USAGE
        references = {str(p): Path(args.reference) for p in paths}
    frame, rejections = measure_spectra(paths, references, path_length, bands, reference_path_length,
                                        dilutions=[dilution] * len(paths))
    for rejection in rejections:
        print(f"rejected: {rejection.message}", file=stderr)
    text = frame.to_csv(index=False, float_format="%.6g", lineterminator="\n")
    if args.out:
        try:
            Path(args.out).write_text(text, encoding="utf-8")
        except OSError as exc:
            print(f"sumpwise spectra: cannot write {args.out}: {exc.strerror}", file=stderr)
            return USAGE
    else:
        stdout.write(text)
    measured = len(paths) - len(rejections)
    print(f"sumpwise spectra: {measured} of {len(paths)} spectra measured, {len(rejections)} rejected "
          f"(bands: {bands.origin})", file=stderr)
    print(CAUTION, file=stderr)
    return OK if measured else USAGE
