"""Viscosity index (ASTM D2270), ISO viscosity grades (ISO 3448 / ASTM D2422).

All functions are pure and vectorized: they take array-likes (numpy arrays,
pandas Series, lists or scalars) in mm2/s and return float ndarrays, with NaN
where a value is undefined rather than an exception, so one bad sample never
stops a batch.
"""

from __future__ import annotations

import functools
from collections.abc import Mapping
from importlib import resources
from types import MappingProxyType
from typing import NamedTuple

import numpy as np

# ASTM D2270 §5.1.1/§6.1.1: VI is not defined below this KV100, and Table 1
# stops at the upper edge; above it the §5.1.2/§6.1.2 equations apply.
VI_KV100_MIN = 2.0
VI_TABLE_KV100_MAX = 70.0


@functools.cache
def _table1() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Read D2270 Table 1 (KV100, L, H) once; the arrays are read-only."""
    text = resources.files("sumpwise.derive").joinpath("d2270_table1.csv").read_text("utf-8")
    rows = [line for line in text.splitlines() if line and not line.startswith("#")]
    table = np.array([row.split(",") for row in rows[1:]], dtype=float)
    columns = tuple(np.ascontiguousarray(table[:, i]) for i in range(3))
    for column in columns:
        column.setflags(write=False)
    return columns


def d2270_table1() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The shipped D2270 Table 1 as read-only arrays (kv100, L, H), mm2/s."""
    return _table1()


def _as_float_array(values, name: str) -> np.ndarray:
    try:
        return np.asarray(values, dtype=float)
    except (TypeError, ValueError) as error:
        raise ValueError(f"{name}: expected numbers in mm2/s, got {values!r:.80}") from error


def _broadcast(kv40, kv100) -> tuple[np.ndarray, np.ndarray]:
    u = _as_float_array(kv40, "kv40")
    y = _as_float_array(kv100, "kv100")
    try:
        return np.broadcast_arrays(u, y)
    except ValueError as error:
        raise ValueError(
            f"kv40 and kv100 must have the same length: got shapes {u.shape} and {y.shape}"
        ) from error


def reference_l_h(kv100) -> tuple[np.ndarray, np.ndarray]:
    """L and H (KV40 of the VI-0 and VI-100 oils with this KV100), mm2/s.

    D2270 Table 1 interpolated linearly for 2.0 <= KV100 <= 70 (§5.1.1), the
    §5.1.2 / §6.1.2 equations above 70, NaN below 2.0 or for NaN input.
    """
    y = _as_float_array(kv100, "kv100")
    grid, l_grid, h_grid = d2270_table1()
    in_table = (y >= VI_KV100_MIN) & (y <= VI_TABLE_KV100_MAX)
    above_table = y > VI_TABLE_KV100_MAX
    low = np.where(
        in_table,
        np.interp(y, grid, l_grid),
        np.where(above_table, (0.8353 * y + 14.67) * y - 216.0, np.nan),
    )
    high = np.where(
        in_table,
        np.interp(y, grid, h_grid),
        np.where(above_table, (0.1684 * y + 11.85) * y - 97.0, np.nan),
    )
    return low, high


def viscosity_index(kv40, kv100, rounded: bool = True) -> np.ndarray:
    """ASTM D2270 viscosity index from KV40 and KV100 in mm2/s.

    Procedure A, VI = (L - U)/(L - H)*100, where U >= H (VI <= 100, §5.1.3);
    Procedure B, N = (log H - log U)/log Y, VI = (10**N - 1)/0.00715 + 100,
    where U < H (§6.1.3). At U = H both give 100.

    NaN where VI is undefined: KV100 < 2.0 (§1.2), a non-positive, NaN or
    infinite input, or a Procedure B result too large to represent.

    `rounded=True` rounds to the nearest whole number (§5.1.4, §6.1.4) with
    exact halves to the even number (numpy.rint), as ASTM E29 rounding does
    (from memory). The rounded result is still a float array, so NaN survives.
    """
    u, y = _broadcast(kv40, kv100)
    valid = np.isfinite(u) & np.isfinite(y) & (u > 0) & (y >= VI_KV100_MIN)
    low, high = reference_l_h(np.where(valid, y, np.nan))
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        procedure_a = (low - u) / (low - high) * 100.0
        n = (np.log10(high) - np.log10(u)) / np.log10(y)
        procedure_b = (np.power(10.0, n) - 1.0) / 0.00715 + 100.0
    vi = np.where(u >= high, procedure_a, procedure_b)
    vi = np.where(valid & np.isfinite(vi), vi, np.nan)
    return np.rint(vi) if rounded else vi


class VgBand(NamedTuple):
    """One ISO 3448 grade: midpoint KV40 and its +/-10 % limits, mm2/s."""

    midpoint: float
    minimum: float
    maximum: float


# ISO 3448 (= ASTM D2422 §4.1-4.3): grade -> midpoint, minimum, maximum KV40.
# Limits are the midpoint +/-10 %, written out so no float noise enters.
ISO_VG_GRADES: Mapping[int, VgBand] = MappingProxyType({
    2: VgBand(2.2, 1.98, 2.42),
    3: VgBand(3.2, 2.88, 3.52),
    5: VgBand(4.6, 4.14, 5.06),
    7: VgBand(6.8, 6.12, 7.48),
    10: VgBand(10.0, 9.00, 11.0),
    15: VgBand(15.0, 13.5, 16.5),
    22: VgBand(22.0, 19.8, 24.2),
    32: VgBand(32.0, 28.8, 35.2),
    46: VgBand(46.0, 41.4, 50.6),
    68: VgBand(68.0, 61.2, 74.8),
    100: VgBand(100.0, 90.0, 110.0),
    150: VgBand(150.0, 135.0, 165.0),
    220: VgBand(220.0, 198.0, 242.0),
    320: VgBand(320.0, 288.0, 352.0),
    460: VgBand(460.0, 414.0, 506.0),
    680: VgBand(680.0, 612.0, 748.0),
    1000: VgBand(1000.0, 900.0, 1100.0),
    1500: VgBand(1500.0, 1350.0, 1650.0),
    2200: VgBand(2200.0, 1980.0, 2420.0),
    3200: VgBand(3200.0, 2880.0, 3520.0),
})


def iso_vg_band(grade) -> tuple[float, float]:
    """(minimum, maximum) KV40 in mm2/s of an ISO VG grade, e.g. 46 -> (41.4, 50.6)."""
    try:
        band = ISO_VG_GRADES[int(grade)]
    except (KeyError, TypeError, ValueError) as error:
        known = ", ".join(str(g) for g in ISO_VG_GRADES)
        raise ValueError(f"unknown ISO VG grade {grade!r}; ISO 3448 grades are {known}") from error
    return band.minimum, band.maximum


def iso_vg_of(kv40) -> np.ndarray:
    """The ISO VG grade whose band holds each KV40 (limits inclusive), NaN between bands.

    The bands do not overlap, so each value has at most one grade.
    """
    u = _as_float_array(kv40, "kv40")
    grades = np.array(list(ISO_VG_GRADES), dtype=float)
    minima = np.array([band.minimum for band in ISO_VG_GRADES.values()])
    maxima = np.array([band.maximum for band in ISO_VG_GRADES.values()])
    index = np.clip(np.searchsorted(minima, u, side="right") - 1, 0, len(grades) - 1)
    inside = (u >= minima[index]) & (u <= maxima[index])
    return np.where(inside, grades[index], np.nan)
