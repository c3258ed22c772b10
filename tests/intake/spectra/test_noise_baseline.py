"""A new oil subtracted from itself, with white noise, reads within repeatability of zero (issue 11).

Noise: white, SD 2e-4 absorbance in each spectrum (ASTM D7418 sets maximum allowable
spectral noise levels, section 1.2, confirmed; the figure itself is from memory, not
confirmed). Repeatability: ASTM D7624's preliminary 0.078 abs/cm (confirmed, for
nitration; D7414's own figure was not seen), used as the yardstick for a peak height.
"""

import numpy as np

from sumpwise.intake.spectra.bands import load_bands
from sumpwise.intake.spectra.batch import measure_matrix
from synthetic_spectra import oil_spectrum, wavenumber_grid

X = wavenumber_grid()
NOISE_SD = 2e-4
REPEATABILITY_ABS_CM = 0.078


def test_new_oil_minus_itself_with_noise_reads_near_zero_over_many_draws():
    rng = np.random.default_rng(20261205)
    new = oil_spectrum(X)
    draws = 2000
    used = new[None, :] + rng.normal(0, NOISE_SD, size=(draws, X.size))
    reference = new[None, :] + rng.normal(0, NOISE_SD, size=(draws, X.size))
    values, _, _ = measure_matrix(X, used, load_bands(), reference=reference)
    oxidation = values["oxidation"]  # abs/cm, differential peak height
    assert np.isfinite(oxidation).all()
    # a peak height is the largest of ~66 noisy points, so it sits a little above zero: the median
    # reading is within repeatability; the 95th percentile (about 0.09) within 0.1 abs/cm
    assert abs(np.median(oxidation)) < REPEATABILITY_ABS_CM
    assert np.quantile(np.abs(oxidation), 0.95) < 0.1
    assert not (oxidation > 8).any()  # none crosses the shipped watch limit (88 % did with minimum baselines)
    # the old minimum-of-raw-points baseline read noise as oxidation; the mean of a window does not bias it
    assert abs(np.mean(values["oxidation_area"])) < 0.05 * 100 * NOISE_SD * 130
