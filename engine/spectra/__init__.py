"""FTIR spectra: read JCAMP-DX and CSV spectra, measure oil-condition bands, infer ester base stocks."""
