"""FTIR spectra: read JCAMP-DX and CSV spectra, measure oil-condition bands, infer ester base stocks.

Data flows one way: read (jcampdx, spectrum_csv: files to Spectrum, errors
naming file and line) -> measure (bands: a packaged, overridable YAML band
file turned into fixed weights and windows per grid, applied to 2-D blocks)
-> batch (direct or spectral subtraction, path-normalised, method and unit
beside every value) -> command (CSV out, rejections on stderr). ester infers
a base stock from a new-oil reference and reports disagreement with a
declared one. synthetic makes closed-form test spectra and writes JCAMP-DX.

Public entry points: batch.measure_spectra, batch.read_spectra,
batch.measure_matrix, jcampdx.read_jcampdx, jcampdx.read_jcampdx_many,
spectrum_csv.read_spectrum_csv, bands.load_bands, ester.detect_ester,
ester.resolve_base_stock, command.add_arguments, command.run,
synthetic.write_jcampdx.
"""
