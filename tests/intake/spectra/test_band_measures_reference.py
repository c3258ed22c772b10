"""The vectorised band measures against a plain per-spectrum computation written from the band definitions.

Reference: numpy.interp for values between grid points, numpy.trapezoid for
the area of (spectrum - straight baseline) over the region with the region
ends interpolated, numpy.argmin for the first minimum, numpy.mean for a
window's mean, numpy.polyfit for a peak height's local quadratic fit (the
definitions in the band file: "the mean of the spectrum's points in that
window", "the spectrum's minimum", "a quadratic least-squares fit through the
grid points within half_width cm-1 of each point"). Nothing here shares code
with sumpwise.intake.spectra.bands except the band file itself. Data include quantised spectra (ties between
equal minima, as stored JCAMP-DX integers give) and NaN points.
"""

import numpy as np
import pytest

from sumpwise.intake.spectra.bands import load_bands, measure_block, measure_columns, plan_bands
from sumpwise.intake.spectra.batch import measure_matrix
from synthetic_spectra import random_used_oils, wavenumber_grid

X = wavenumber_grid()  # 550-4000 cm-1, 2 cm-1
BANDS = load_bands()


def _anchor(x, y, anchor):
    if anchor.at is not None:
        return anchor.at, np.interp(anchor.at, x, y)
    low, high = anchor.mean_in if anchor.mean_in is not None else anchor.minimum_in
    inside = np.flatnonzero((x >= low) & (x <= high))
    if anchor.mean_in is not None:  # the band file's "mean of the spectrum's points in that window"
        return np.mean(x[inside]), np.mean(y[inside])
    k = inside[np.argmin(y[inside])]
    return x[k], y[k]


def _reference(x, y, band):
    """One spectrum, one band, the slow and obvious way."""
    if band.baseline:
        (xa, ya), (xb, yb) = (_anchor(x, y, a) for a in band.baseline)
        line = lambda v: ya + (v - xa) * (yb - ya) / (xb - xa)
    else:
        line = lambda v: 0.0 * v
    if band.measure == "point":
        return np.interp(band.region[0], x, y) - line(band.region[0]), None
    low, high = band.region
    if band.measure == "area":
        inner = x[(x > low) & (x < high)]
        xs = np.concatenate(([low], inner, [high]))
        return np.trapezoid(np.interp(xs, x, y) - line(xs), xs), None
    inside = np.flatnonzero((x >= low) & (x <= high))
    m = int(round(band.smoothing / (x[1] - x[0])))  # the grid here is even
    fitted = np.array([np.polyval(np.polyfit(x[i - m : i + m + 1] - x[i], y[i - m : i + m + 1], 2), 0.0)
                       for i in inside])
    above = fitted - line(x[inside])
    return np.max(above), dict(zip(x[inside], above))


def _spectra(count, seed):
    block = random_used_oils(X, count, seed=seed)
    quantised = np.round(block[: count // 2] * 200) / 200  # coarse steps: many equal minima
    return np.concatenate([quantised, block[count // 2 :]])


@pytest.mark.parametrize("seed", [3, 11])
def test_block_measures_equal_the_per_spectrum_reference(seed):
    spectra = _spectra(40, seed)
    plan = plan_bands(X, BANDS.bands)
    measured = measure_block(plan, spectra)
    for band in BANDS.bands:
        for k, y in enumerate(spectra):
            value, position = _reference(X, y, band)
            # floating-point noise only: summation order differs; scale is the band's own magnitude
            assert measured.values[band.name][k] == pytest.approx(value, rel=1e-10, abs=1e-12), (band.name, k)
            if position is not None:  # at a maximum of the reference fit (quantised spectra tie, and
                # polyfit rounds differently from the band plan's weights, so the first of ties may differ)
                at = position[measured.peak_positions[band.name][k]]
                assert at == pytest.approx(value, rel=1e-10, abs=1e-12), (band.name, k)


def test_column_order_and_row_order_give_the_same_numbers():
    spectra = _spectra(30, 5)
    plan = plan_bands(X, BANDS.bands)
    by_row = measure_block(plan, spectra)
    by_column = measure_columns(plan, np.ascontiguousarray(spectra.T), with_positions=True)
    for name in BANDS.names:
        np.testing.assert_array_equal(by_row.values[name], by_column.values[name])
    # the faster height path without positions adds the line's terms in another order: equal within rounding
    fast = measure_columns(plan, np.ascontiguousarray(spectra.T))
    for name in BANDS.names:
        np.testing.assert_allclose(fast.values[name], by_row.values[name], rtol=1e-12, atol=1e-15)


def test_nan_inside_a_baseline_window_gives_nan_for_the_bands_that_use_it():
    spectra = _spectra(6, 2)
    spectra[1, np.searchsorted(X, 2100)] = np.nan  # inside the 1900-2200 minimum window
    spectra[2, np.searchsorted(X, 3900)] = np.nan  # inside the 3680-4000 window (water only)
    spectra[3, np.searchsorted(X, 1710)] = np.nan  # inside the oxidation peak window
    values, positions, _ = measure_matrix(X, spectra, BANDS)
    uses_1900 = [b.name for b in BANDS.bands if any(a.minimum_in == (1900.0, 2200.0) for a in b.baseline)]
    for band in BANDS.bands:
        for k in range(6):
            value, position = _reference(X, spectra[k], band)
            if np.isnan(value):
                assert np.isnan(values[band.name][k]), (band.name, k)
            else:
                assert values[band.name][k] == pytest.approx(value, rel=1e-10, abs=1e-12), (band.name, k)
    assert all(np.isnan(values[name][1]) for name in uses_1900)
    assert np.isnan(values["water"][2]) and np.isfinite(values["oxidation_area"][2])
    assert np.isnan(values["oxidation"][3])
    assert np.isfinite(values["fuel_diesel"][1:4]).all()


def test_blocks_split_across_block_size_equal_one_block():
    spectra = _spectra(25, 9)
    whole, _, _ = measure_matrix(X, spectra, BANDS)
    split, _, _ = measure_matrix(X, spectra, BANDS, block_size=7)
    for name in BANDS.names:
        np.testing.assert_allclose(split[name], whole[name], rtol=1e-13, atol=1e-15)


def test_float32_blocks_give_the_float64_numbers_within_float32_rounding():
    # float32 is the benchmark's other path: the peak fit's weights follow the block's type.
    spectra = random_used_oils(X, 20, seed=6)
    plan = plan_bands(X, BANDS.bands)
    wide = measure_columns(plan, np.ascontiguousarray(spectra.T))
    narrow = measure_columns(plan, np.ascontiguousarray(spectra.T, dtype=np.float32))
    for name in BANDS.names:
        # absorbances of order 1 held to ~7 digits; areas sum ~100 such terms
        np.testing.assert_allclose(narrow.values[name], wide.values[name], rtol=0, atol=2e-4, err_msg=name)
