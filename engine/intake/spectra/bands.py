"""Band definitions (a data file, not constants) and their vectorised measurement.

Why weights: trapezoid integration of the piecewise-linear spectrum over a
fixed region is a fixed linear combination of its points, and the integral
of a straight baseline is exact, so a band's areas for a whole block are one
weighted sum of grid rows; baseline means and minima and peak heights are
reductions over a narrow, contiguous slab of a wavenumber-major block (a peak
height's local fit is a weighted sum of a few neighbouring rows). No Python
loop runs per spectrum.
"""

from __future__ import annotations

from dataclasses import dataclass
from importlib import resources
from pathlib import Path

import numpy as np
import yaml

MEASURE_KINDS = ("area", "height", "point")
DEFAULT_BANDS_RESOURCE = "ftir_bands.yaml"
DEFAULT_PEAK_HALF_WIDTH = 6.0  # cm-1; a band file without peak_smoothing gets this (see ftir_bands.yaml)


class BandFileError(ValueError):
    """A band file that does not describe bands: names file, band and field."""


@dataclass(frozen=True)
class Anchor:
    """One end of a straight baseline: a fixed abscissa, the mean of a window, or its minimum.

    Why the mean: the minimum of raw points is biased low by noise (the lowest of
    many noisy points), so a new oil subtracted from itself would read as
    oxidation; the mean of a window is unbiased, and for a straight baseline
    it sits exactly on the line at the mean abscissa of the window's points.
    `minimum_in` stays readable for band files written for it.
    """

    at: float | None = None
    minimum_in: tuple[float, float] | None = None
    mean_in: tuple[float, float] | None = None

    def span(self):
        if self.at is not None:
            return (self.at, self.at)
        return self.mean_in if self.mean_in is not None else self.minimum_in

    def key(self):
        if self.at is not None:
            return ("at", self.at)
        return ("mean", self.mean_in) if self.mean_in is not None else ("minimum", self.minimum_in)


@dataclass(frozen=True)
class Band:
    name: str
    measure: str
    region: tuple[float, float]
    baseline: tuple[Anchor, ...]
    source: str
    status: str
    saturation_window: tuple[float, float] | None = None  # where absorbance above the threshold voids the band
    smoothing: float = 0.0  # height bands: half-width (cm-1) of the local quadratic fit; 0 reads raw points

    def span(self):
        """Lowest and highest wavenumber the band reads, baseline included."""
        spans = [self.region] + [anchor.span() for anchor in self.baseline]
        return min(s[0] for s in spans), max(s[1] for s in spans)


@dataclass(frozen=True)
class BandSet:
    """The bands to measure, the ester-detection rule, and where they came from."""

    bands: tuple[Band, ...]
    ester: Band
    ester_threshold: float
    ester_source: str
    origin: str
    saturation_absorbance: float = 1.5
    saturation_source: str = ""
    smoothing_source: str = ""

    @property
    def names(self):
        return tuple(band.name for band in self.bands)


def load_bands(path: Path | str | None = None) -> BandSet:
    """Load a band file (the packaged engine/data/ftir_bands.yaml when path is None)."""
    if path is None:
        text = resources.files("sumpwise.intake.spectra").joinpath(DEFAULT_BANDS_RESOURCE).read_text(encoding="utf-8")
        origin = f"engine/intake/spectra/{DEFAULT_BANDS_RESOURCE}"
    else:
        origin = str(path)
        try:
            text = Path(path).read_text(encoding="utf-8")
        except OSError as exc:
            raise BandFileError(f"{origin}: cannot read band file: {exc.strerror}") from exc
    try:
        document = yaml.safe_load(text)
    except yaml.YAMLError as exc:
        raise BandFileError(f"{origin}: not valid YAML: {exc}") from exc
    return parse_bands(document, origin)


def parse_bands(document, origin: str) -> BandSet:
    if not isinstance(document, dict) or not isinstance(document.get("bands"), list) or not document["bands"]:
        raise BandFileError(f"{origin}: expected a mapping with a non-empty 'bands' list")
    smoothing = document.get("peak_smoothing", {"half_width": DEFAULT_PEAK_HALF_WIDTH})
    if not isinstance(smoothing, dict):
        raise BandFileError(f"{origin}: peak_smoothing: expected a mapping with 'half_width' (cm-1) and 'source'")
    half_width = smoothing.get("half_width")
    if not isinstance(half_width, (int, float)) or isinstance(half_width, bool) or not 0 <= half_width <= 50:
        raise BandFileError(f"{origin}: peak_smoothing.half_width: expected a number of cm-1 from 0 to 50, "
                            f"got {half_width!r}")
    bands = tuple(_parse_band(item, origin, f"bands[{i}]", float(half_width))
                  for i, item in enumerate(document["bands"]))
    names = [band.name for band in bands]
    duplicates = sorted({name for name in names if names.count(name) > 1})
    if duplicates:
        raise BandFileError(f"{origin}: band names must be unique; repeated: {', '.join(duplicates)}")
    ester = document.get("ester_detection")
    if not isinstance(ester, dict):
        raise BandFileError(f"{origin}: 'ester_detection' mapping missing")
    ester_band = _parse_band({**ester, "name": "ester_carbonyl", "measure": "height"}, origin, "ester_detection",
                             float(half_width))
    threshold = ester.get("threshold")
    if not isinstance(threshold, (int, float)) or isinstance(threshold, bool) or not 0 < threshold < 10:
        raise BandFileError(f"{origin}: ester_detection.threshold: expected a positive number, got {threshold!r}")
    saturation = document.get("saturation", {"absorbance": 1.5})
    if not isinstance(saturation, dict):
        raise BandFileError(f"{origin}: saturation: expected a mapping with 'absorbance' and 'source'")
    limit = saturation.get("absorbance")
    if not isinstance(limit, (int, float)) or isinstance(limit, bool) or not 0 < limit < 10:
        raise BandFileError(f"{origin}: saturation.absorbance: expected a number between 0 and 10, got {limit!r}")
    return BandSet(bands, ester_band, float(threshold), str(ester.get("source", "")), origin, float(limit),
                   str(saturation.get("source", "")), str(smoothing.get("source", "")))


def _parse_band(item, origin, where, half_width=0.0):
    if not isinstance(item, dict):
        raise BandFileError(f"{origin}: {where}: expected a mapping")
    name = item.get("name")
    if not isinstance(name, str) or not name.isidentifier():
        raise BandFileError(f"{origin}: {where}.name: expected an identifier such as 'oxidation', got {name!r}")
    where = f"{where} ({name})"
    measure = item.get("measure")
    if measure not in MEASURE_KINDS:
        raise BandFileError(f"{origin}: {where}.measure: expected one of {', '.join(MEASURE_KINDS)}, got {measure!r}")
    if measure == "point":
        at = _number(item.get("at"), origin, f"{where}.at")
        region = (at, at)
    else:
        region = _window(item.get("region"), origin, f"{where}.region")
    raw_baseline = item.get("baseline")
    if not isinstance(raw_baseline, list) or len(raw_baseline) not in (0, 2):
        raise BandFileError(f"{origin}: {where}.baseline: expected a list of two anchors, or [] for none")
    if measure != "point" and not raw_baseline:
        raise BandFileError(f"{origin}: {where}.baseline: an {measure} band needs two baseline anchors")
    baseline = tuple(_anchor(a, origin, f"{where}.baseline[{i}]") for i, a in enumerate(raw_baseline))
    if len(baseline) == 2 and _anchor_centre(baseline[0]) == _anchor_centre(baseline[1]):
        raise BandFileError(f"{origin}: {where}.baseline: the two anchors must lie at different wavenumbers")
    saturation_window = None
    if measure != "point":
        saturation_window = region
        if "saturation_window" in item:
            saturation_window = _window(item["saturation_window"], origin, f"{where}.saturation_window")
    return Band(name, measure, region, baseline, str(item.get("source", "")), str(item.get("status", "")),
                saturation_window, half_width if measure == "height" else 0.0)


def _anchor(item, origin, where):
    if isinstance(item, dict) and set(item) == {"at"}:
        return Anchor(at=_number(item["at"], origin, f"{where}.at"))
    if isinstance(item, dict) and set(item) == {"mean_in"}:
        return Anchor(mean_in=_window(item["mean_in"], origin, f"{where}.mean_in"))
    if isinstance(item, dict) and set(item) == {"minimum_in"}:
        return Anchor(minimum_in=_window(item["minimum_in"], origin, f"{where}.minimum_in"))
    raise BandFileError(f"{origin}: {where}: expected {{at: x}}, {{mean_in: [low, high]}} or "
                        f"{{minimum_in: [low, high]}}, got {item!r}")


def _anchor_centre(anchor):
    low, high = anchor.span()
    return (low + high) / 2


def _number(value, origin, where):
    if not isinstance(value, (int, float)) or isinstance(value, bool) or not np.isfinite(value):
        raise BandFileError(f"{origin}: {where}: expected a finite number of cm-1, got {value!r}")
    return float(value)


def _window(value, origin, where):
    if not isinstance(value, list) or len(value) != 2:
        raise BandFileError(f"{origin}: {where}: expected [low, high] in cm-1, got {value!r}")
    low, high = (_number(v, origin, where) for v in value)
    if not low < high:
        raise BandFileError(f"{origin}: {where}: expected low < high, got [{low:g}, {high:g}]")
    return (low, high)


def trapezoid_weights(x: np.ndarray, low: float, high: float) -> np.ndarray:
    """Weights w with w @ y = integral over [low, high] of the linear interpolant of (x, y).

    x ascending; the ends of the window are interpolated, so the weights are
    exact for any piecewise-linear y, including a straight baseline.
    """
    left, right = x[:-1], x[1:]
    width = right - left
    a = np.clip(low, left, right)
    b = np.clip(high, left, right)
    length = b - a
    frac_a = (a - left) / width
    frac_b = (b - left) / width
    weights = np.zeros_like(x, dtype=float)
    weights[:-1] += length * (2.0 - frac_a - frac_b) / 2.0
    weights[1:] += length * (frac_a + frac_b) / 2.0
    return weights


@dataclass(frozen=True)
class BandPlan:
    """Everything about a band set that depends only on the grid.

    areas: band region -> (column slice, weights on that slice);
    points: abscissa -> (left index, fraction towards the right one);
    windows: window -> column slice; uncovered: band name -> sentence;
    saturation: band name -> column slice of its saturation window;
    peaks: (region, smoothing) of a height band -> (column slice of the region
    widened by the fit's reach, fit weights: one row per region point).
    Only the columns a band reads are touched, which is what makes a block
    of spectra cheap: most of a spectrum is never read.
    """

    x: np.ndarray
    bands: tuple[Band, ...]
    areas: dict
    points: dict
    windows: dict
    uncovered: dict
    saturation: dict
    peaks: dict


def plan_bands(x: np.ndarray, bands: tuple[Band, ...]) -> BandPlan:
    """Precompute weights and index windows for one ascending wavenumber grid."""
    areas, points, windows, uncovered, saturation, peaks = {}, {}, {}, {}, {}, {}
    steps = (float(x[1] - x[0]), float(x[-1] - x[-2])) if x.size > 1 else (0.0, 0.0)
    for band in bands:
        low, high = band.span()
        need_low, need_high = _required_span(band, *steps)
        if need_low < x[0] or need_high > x[-1]:
            uncovered[band.name] = (
                f"x range {x[0]:g}-{x[-1]:g} cm-1 does not cover band {band.name} "
                f"({low:g}-{high:g} cm-1 with its baseline)"
            )
            continue
        empty = next((w for w in _windows_read(band) if _holds_no_point(x, w)), None)
        if empty is not None:  # a coarse or gapped grid: this band is not measured, the others are
            uncovered[band.name] = (
                f"the grid (points {np.median(np.diff(x)):.3g} cm-1 apart) has no point within "
                f"{empty[0]:g}-{empty[1]:g} cm-1, which band {band.name} reads"
            )
            continue
        if band.measure == "height":
            window = _index_window(x, band.region, band.name)
            peak = _peak_fit(x, window, band.smoothing)
            if peak is None:
                uncovered[band.name] = (
                    f"x range {x[0]:g}-{x[-1]:g} cm-1 leaves no room for the {band.smoothing:g} cm-1 "
                    f"peak fit at the edge of band {band.name} ({band.region[0]:g}-{band.region[1]:g} cm-1)"
                )
                continue
            windows[band.region] = window
            peaks[(band.region, band.smoothing)] = peak
        elif band.measure == "area":
            weights = trapezoid_weights(x, *band.region)
            used = np.flatnonzero(weights)
            columns = slice(int(used[0]), int(used[-1]) + 1)
            areas[band.region] = (columns, np.ascontiguousarray(weights[columns]))
        else:
            points[band.region[0]] = _interpolation_point(x, band.region[0])
        for anchor in band.baseline:
            if anchor.at is not None:
                points[anchor.at] = _interpolation_point(x, anchor.at)
            else:
                windows[anchor.span()] = _index_window(x, anchor.span(), band.name)
        if band.saturation_window is not None:
            saturation[band.name] = _index_window(x, band.saturation_window, band.name)
    return BandPlan(x, bands, areas, points, windows, uncovered, saturation, peaks)


def _required_span(band, first_step, last_step):
    """The wavenumbers the grid must reach for a band: its span, less up to the grid's step at that end
    where an outer mean or minimum window lies.

    Why: an instrument's grid is set by its laser, so an export of 4000-400 cm-1 often ends a fraction of
    a step short (3999.84 in a public export at 1.93 cm-1, 3999.79 at 0.96); the water band's 3680-4000
    window then holds all its points but the last, yet the band was left unmeasured. A mean window is
    read on the points it holds; a region or an `at` anchor is interpolated and is still needed whole.
    """
    strict = [band.region] + [anchor.span() for anchor in band.baseline if anchor.at is not None]
    windows = [anchor.span() for anchor in band.baseline if anchor.at is None]
    low = min([w[0] for w in strict] + [min(w[0] + first_step, w[1]) for w in windows])
    high = max([w[1] for w in strict] + [max(w[1] - last_step, w[0]) for w in windows])
    return low, high


def _windows_read(band):
    """The windows of a band that must each hold a grid point: a height's region, mean or minimum
    anchors, the saturation window (an area's region and an `at` are interpolated)."""
    found = [band.region] if band.measure == "height" else []
    found += [anchor.span() for anchor in band.baseline if anchor.at is None]
    return found + ([band.saturation_window] if band.saturation_window is not None else [])


def _holds_no_point(x, window):
    return np.searchsorted(x, window[1], side="right") <= np.searchsorted(x, window[0], side="left")


def _peak_fit(x, window, half_width):
    """(widened column slice, weights) giving each region point's value from a quadratic least-squares fit.

    Why: a peak height read as the largest raw point is the largest of many noisy
    points, so noise alone reads as a band (Savitzky and Golay, Anal. Chem. 36
    (1964) 1627: a local polynomial fit smooths noise and keeps a peak's height
    far better than a moving mean of the same reach). The fit at each point uses
    the 2m+1 grid points centred on it, m = half_width / the grid step, rounded;
    its weights come from the actual abscissae, so an uneven grid is fitted
    exactly too. A quadratic reproduces any straight line, so fitting the
    spectrum and then subtracting the baseline equals fitting the spectrum
    above its baseline. None when the grid ends within m points of the region.
    """
    start, stop = window.start, window.stop
    step = float(np.median(np.diff(x[max(start - 1, 0) : stop + 1])))
    m = int(round(half_width / step)) if half_width > 0 else 0
    if start - m < 0 or stop + m > x.size:
        return None
    taps = 2 * m + 1
    if m == 0:
        return slice(start, stop), np.ones((stop - start, 1))
    centres = np.arange(start, stop)
    offsets = x[centres[:, None] + np.arange(-m, m + 1)[None, :]] - x[centres][:, None]
    design = np.stack([np.ones_like(offsets), offsets, offsets**2], axis=2)  # (points, taps, 3)
    weights = np.linalg.pinv(design)[:, 0, :]  # the fitted value at offset 0
    return slice(start - m, stop + m), np.ascontiguousarray(weights.reshape(stop - start, taps))


def _interpolation_point(x, at):
    i = int(np.clip(np.searchsorted(x, at, side="right") - 1, 0, x.size - 2))
    return i, (at - x[i]) / (x[i + 1] - x[i])


def _index_window(x, window, name):
    start = int(np.searchsorted(x, window[0], side="left"))
    stop = int(np.searchsorted(x, window[1], side="right"))
    if stop <= start:
        raise BandFileError(f"band {name}: window {window[0]:g}-{window[1]:g} cm-1 holds no grid point")
    return slice(start, stop)


@dataclass(frozen=True)
class BlockMeasures:
    """Per-band arrays, one entry per spectrum of the block.

    values: NaN where the band cannot be read (a non-finite point inside what
    it reads, e.g. transmittance <= 0); peak_positions: wavenumber of the
    maximum, for height bands.
    """

    values: dict
    peak_positions: dict


def measure_block(plan: BandPlan, spectra: np.ndarray, with_positions: bool = True) -> BlockMeasures:
    """Band values for a block of spectra given as rows (one spectrum per row).

    The block is copied once to wavenumber-major order and measured by
    measure_columns; a caller that can build that order directly saves the copy.
    """
    spectra = np.atleast_2d(np.asarray(spectra))
    return measure_columns(plan, np.ascontiguousarray(spectra.T), with_positions)


def measure_columns(plan: BandPlan, columns: np.ndarray, with_positions: bool = False) -> BlockMeasures:
    """Band values for a block stored wavenumber-major: one row per grid point, one column per spectrum.

    Why that order: every band reads a narrow wavenumber range, which is then
    a contiguous slab of memory; minima, maxima and weighted sums run down
    its rows with whole-row numpy operations, never a per-spectrum loop.
    float32 blocks stay float32 (half the memory traffic); anything else is
    read as float64. NaN propagates, never hides. with_positions: also the
    wavenumber of each height band's maximum (slower; the ester inference uses it).
    """
    columns = np.asarray(columns)
    if columns.dtype not in (np.float32, np.float64):
        columns = columns.astype(np.float64)
    x = plan.x
    spectra = np.arange(columns.shape[1])
    anchors = {}

    def anchor_value(anchor):
        key = anchor.key()
        if key not in anchors:
            if anchor.at is not None:
                anchors[key] = (np.full(spectra.size, anchor.at), _point_value(columns, plan.points[anchor.at]))
            elif anchor.mean_in is not None:
                window = plan.windows[anchor.mean_in]
                anchors[key] = (np.full(spectra.size, x[window].mean()), columns[window].mean(axis=0))
            else:
                slab = columns[plan.windows[anchor.minimum_in]]
                j = _first_extreme_row(slab, slab.min(axis=0), np.argmin)
                anchors[key] = (x[plan.windows[anchor.minimum_in]][j], slab[j, spectra])
        return anchors[key]

    values, positions = {}, {}
    for band in plan.bands:
        if band.name in plan.uncovered:
            values[band.name] = np.full(spectra.size, np.nan)
            continue
        if band.baseline:
            (xa, ya), (xb, yb) = (anchor_value(a) for a in band.baseline)
            slope = (yb - ya) / (xb - xa)
        if band.measure == "area":
            low, high = band.region
            rows, weights = plan.areas[band.region]
            baseline_area = (high - low) * (ya + ((low + high) / 2 - xa) * slope)
            values[band.name] = _weighted_row_sum(columns[rows], weights.astype(columns.dtype, copy=False)) - baseline_area
        elif band.measure == "point":
            at = band.region[0]
            value = _point_value(columns, plan.points[at])
            values[band.name] = value - (ya + (at - xa) * slope) if band.baseline else value
        else:
            window = plan.windows[band.region]
            reach, weights = plan.peaks[(band.region, band.smoothing)]
            weights = weights.astype(columns.dtype, copy=False)
            if with_positions:
                fitted = _fitted_rows(columns[reach], weights)
                above = fitted - (ya[None, :] + (x[window][:, None] - xa[None, :]) * slope[None, :])
                j = _first_extreme_row(above, above.max(axis=0), np.argmax)
                values[band.name] = above[j, spectra]
                positions[band.name] = x[window][j]
            else:
                values[band.name] = _height_above_line(columns[reach], weights, x[window], xa, ya, slope)
    return BlockMeasures(values, positions)


def _fitted_rows(slab, weights):
    """The peak fit's value at every region point: a (points x spectra) array (positions path)."""
    points, taps = weights.shape
    fitted = weights[:, :1] * slab[:points]
    for t in range(1, taps):
        fitted += weights[:, t : t + 1] * slab[t : t + points]
    return fitted


def _height_above_line(slab, weights, xs, xa, ya, slope):
    """max over region points of fit - (ya + (x - xa) slope), one whole-row operation at a time.

    Why row by row: the line's value at x is ya - xa slope + x slope, so each row needs
    only its own x times the slope, and each fitted row is one weighted sum of a few
    neighbouring grid rows; no (rows x spectra) temporary is built. NaN propagates.
    """
    best = np.full(slab.shape[1], -np.inf, dtype=slab.dtype)
    row = np.empty_like(best)
    fitted = np.empty_like(best)
    slope = slope.astype(slab.dtype, copy=False)
    points, taps = weights.shape
    for k in range(points):
        if taps == 1:
            fitted = slab[k]
        else:
            np.einsum("t,tn->n", weights[k], slab[k : k + taps], out=fitted)
        np.multiply(slope, xs[k], out=row)
        np.subtract(fitted, row, out=row)
        np.maximum(best, row, out=best)
    return best - (ya - xa * slope)


def saturated_bands(plan: BandPlan, columns: np.ndarray, threshold: float) -> dict:
    """Band name -> bool per spectrum: absorbance above `threshold` somewhere in the band's saturation window.

    Read on the spectrum as recorded (before path normalisation or subtraction):
    saturation is a property of the light that reached the detector. NaN (no
    light at all, transmittance <= 0) counts as saturated.
    """
    found, by_window = {}, {}
    for name, window in plan.saturation.items():
        key = (window.start, window.stop)
        if key not in by_window:  # bands sharing a window (oxidation and its area) read it once
            by_window[key] = ~(columns[window].max(axis=0) <= threshold)
        found[name] = by_window[key]
    return found


def _first_extreme_row(slab, extreme, arg_extreme):
    """Row of the first occurrence of `extreme` in each column, as np.argmin/argmax along axis 0 would give.

    numpy's arg-reductions along axis 0 copy the slab to transposed order
    first; walking its rows from the last to the first, each a contiguous
    whole-block comparison, does not. A column holding NaN has a NaN extreme
    that equals nothing; those few columns go to arg_extreme itself, which
    reports the first NaN.
    """
    first = np.full(slab.shape[1], slab.shape[0] - 1, dtype=np.intp)
    equal = np.empty(slab.shape[1], dtype=bool)
    for row in range(slab.shape[0] - 2, -1, -1):
        np.equal(slab[row], extreme, out=equal)
        np.copyto(first, row, where=equal)
    unmatched = np.flatnonzero(np.isnan(extreme))
    if unmatched.size:
        first[unmatched] = arg_extreme(slab[:, unmatched], axis=0)
    return first


def _weighted_row_sum(slab, weights):
    """weights @ slab by numpy's own multiply-accumulate down the rows.

    Not BLAS: on a small shared machine a threaded gemv spends more time
    waiting for its second thread than summing (2-10 ms against ~2 ms for a
    176 x 10 000 slab, measured with benchmarks/bench_spectra.py's grid).
    """
    return np.einsum("k,kn->n", weights, slab)


def _point_value(columns, point):
    i, frac = point
    return columns[i] * (1.0 - frac) + columns[i + 1] * frac
