"""Noise alone reads within the method's repeatability of zero (issue 11), over many noise draws.

Noise: white, SD 2e-4 absorbance in each spectrum, on a 2 cm-1 grid. ASTM D7418 sets
maximum allowable spectral noise levels (section 1.2, confirmed from its public scope);
the figure itself was not found in any public summary, so 2e-4 is from memory.
Repeatability: ASTM D7624's preliminary r = 0.078 abs/cm for Procedures A and B
(section 13.1, confirmed from a published excerpt; a nitration peak height). D7414's own
oxidation figure was not found, so D7624's serves as the yardstick for every peak height.
r is the difference two results exceed in one case in 20, so a method that meets it
reads noise within r in at least 95 % of draws; these tests ask for 99 %.

A peak height is read from a quadratic least-squares fit over +-6 cm-1 around each point
(the band file's peak_smoothing). The raw maximum of the ~66 points of the carbonyl
window is the largest of 66 noisy values: its 95th percentile lies above r, which the
last test shows with the same draws.
"""

import numpy as np
import pytest

from sumpwise.intake.spectra.bands import load_bands, parse_bands
from sumpwise.intake.spectra.batch import measure_matrix
from synthetic_spectra import oil_spectrum, wavenumber_grid

X = wavenumber_grid()
NOISE_SD = 2e-4  # absorbance, from memory (see above)
REPEATABILITY_ABS_CM = 0.078  # ASTM D7624 13.1
DRAWS = 2000
PEAKS = ("oxidation", "nitration", "sulfation", "antiwear")


def _noisy_new_oils(seed):
    rng = np.random.default_rng(seed)
    new = oil_spectrum(X)
    return new, new[None, :] + rng.normal(0, NOISE_SD, size=(DRAWS, X.size))


def _differential(bands, seed=20261205):
    """A new oil with noise minus the same new oil with its own noise, DRAWS times: abs/cm."""
    new, used = _noisy_new_oils(seed)
    reference = new[None, :] + np.random.default_rng(seed + 1).normal(0, NOISE_SD, size=(DRAWS, X.size))
    values, _, _ = measure_matrix(X, used, bands, reference=reference)
    return values


def _raw_maximum_bands():
    """The packaged band file with the peak fit switched off (half_width 0): heights from the raw maximum."""
    import yaml
    from importlib import resources

    document = yaml.safe_load(resources.files("sumpwise.intake.spectra").joinpath("ftir_bands.yaml").read_text())
    document["peak_smoothing"] = {"half_width": 0}
    return parse_bands(document, "raw maximum")


def test_new_oil_minus_itself_with_noise_reads_within_repeatability_in_99_percent_of_draws():
    values = _differential(load_bands())
    for name in PEAKS:
        reading = values[name]  # abs/cm, differential peak height
        assert np.isfinite(reading).all(), name
        # measured with this seed: oxidation median 0.035, 95th 0.051, 99th 0.060 abs/cm; none outside r
        assert np.quantile(np.abs(reading), 0.99) < REPEATABILITY_ABS_CM, name
        assert np.median(reading) < REPEATABILITY_ABS_CM / 2, name
    assert not (values["oxidation"] > 8).any()  # none near the shipped watch limit (88 % crossed it once)
    # the mean of each baseline window is unbiased: the carbonyl area of noise averages zero
    assert abs(np.mean(values["oxidation_area"])) < 0.05 * 100 * NOISE_SD * 130


def test_direct_reading_of_a_noisy_new_oil_stays_within_repeatability_of_the_clean_one():
    # Direct trend: the same new oil measured with noise and without; the difference, rescaled to abs/cm
    # (x 100, ASTM D7412 12.2) to meet the repeatability's unit, is the noise's share of a direct reading.
    new, noisy = _noisy_new_oils(20261206)
    clean, _, _ = measure_matrix(X, new[None, :], load_bands())
    read, _, _ = measure_matrix(X, noisy, load_bands())
    for name in PEAKS:
        spread = 100 * (read[name] - clean[name][0])
        # measured: oxidation 1st-99th percentile -0.024 to 0.029 abs/cm; bands with no peak in the new oil
        # (nitration, sulfation) read the noise's maximum, up to 0.04 abs/cm at the 99th percentile
        assert np.quantile(np.abs(spread), 0.99) < REPEATABILITY_ABS_CM, name
    assert abs(np.median(100 * (read["oxidation"] - clean["oxidation"][0]))) < 0.01


def test_the_raw_maximum_reads_noise_outside_repeatability_which_the_fit_prevents():
    # The same draws without the fit: the check above is one that can fail.
    raw = _differential(_raw_maximum_bands())["oxidation"]
    fitted = _differential(load_bands())["oxidation"]
    # measured with this seed: raw median 0.065, 95th 0.089, 99th 0.103 abs/cm; 17 % outside r
    assert np.quantile(raw, 0.95) > REPEATABILITY_ABS_CM
    assert np.mean(raw > REPEATABILITY_ABS_CM) > 0.05
    assert np.median(fitted) == pytest.approx(np.median(raw) / 2, rel=0.25)
