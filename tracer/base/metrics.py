"""The distance rules, in one place: TSPLIB's edge-weight types and plain Euclidean.

TSPLIB's rules (Reinelt 1991, the format description) are followed to the letter:
nint(x) = int(x + 0.5), GEO with PI = 3.141592 and RRR = 6378.388 and truncated degrees,
ATT pseudo-Euclidean, CEIL_2D the ceiling. "euclidean" is ours: float distance, no rounding,
for CSV city lists. Every rule yields a full n×n matrix with a zero diagonal.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np
from numpy.typing import NDArray

FloatArray = NDArray[np.float64]
IntArray = NDArray[np.int64]
#: A distance matrix: int64 for integer metrics, float64 otherwise.
Matrix = NDArray[Any]

#: Metric used for an instance given as an explicit matrix.
EXPLICIT = "EXPLICIT"
#: Our float metric for CSV city lists.
EUCLIDEAN = "euclidean"

_GEO_PI = 3.141592
_GEO_RRR = 6378.388


def _nint(x: FloatArray) -> IntArray:
    return np.floor(x + 0.5).astype(np.int64)


def _deltas(coords: FloatArray) -> tuple[FloatArray, FloatArray]:
    x = coords[:, 0]
    y = coords[:, 1]
    return x[:, None] - x[None, :], y[:, None] - y[None, :]


def _euc_2d(coords: FloatArray) -> IntArray:
    dx, dy = _deltas(coords)
    return _nint(np.sqrt(dx * dx + dy * dy))


def _ceil_2d(coords: FloatArray) -> IntArray:
    dx, dy = _deltas(coords)
    return np.ceil(np.sqrt(dx * dx + dy * dy)).astype(np.int64)


def _man_2d(coords: FloatArray) -> IntArray:
    dx, dy = _deltas(coords)
    return _nint(np.abs(dx) + np.abs(dy))


def _max_2d(coords: FloatArray) -> IntArray:
    dx, dy = _deltas(coords)
    return np.maximum(_nint(np.abs(dx)), _nint(np.abs(dy)))


def _att(coords: FloatArray) -> IntArray:
    dx, dy = _deltas(coords)
    r = np.sqrt((dx * dx + dy * dy) / 10.0)
    t = _nint(r)
    return np.where(t < r, t + 1, t)


def _geo_radians(values: FloatArray) -> FloatArray:
    deg = np.trunc(values)
    minutes = values - deg
    return _GEO_PI * (deg + 5.0 * minutes / 3.0) / 180.0


def _geo(coords: FloatArray) -> IntArray:
    lat = _geo_radians(coords[:, 0])
    lon = _geo_radians(coords[:, 1])
    q1 = np.cos(lon[:, None] - lon[None, :])
    q2 = np.cos(lat[:, None] - lat[None, :])
    q3 = np.cos(lat[:, None] + lat[None, :])
    arg = np.clip(0.5 * ((1.0 + q1) * q2 - (1.0 - q1) * q3), -1.0, 1.0)
    return (_GEO_RRR * np.arccos(arg) + 1.0).astype(np.int64)


def _euclidean(coords: FloatArray) -> FloatArray:
    dx, dy = _deltas(coords)
    return np.sqrt(dx * dx + dy * dy)


_RULES: dict[str, Callable[[FloatArray], Matrix]] = {
    "EUC_2D": _euc_2d,
    "CEIL_2D": _ceil_2d,
    "ATT": _att,
    "GEO": _geo,
    "MAN_2D": _man_2d,
    "MAX_2D": _max_2d,
    EUCLIDEAN: _euclidean,
}

#: Metrics computed from coordinates, by name.
COORD_METRICS: tuple[str, ...] = tuple(_RULES)
#: Metrics whose distances are whole numbers (compared exactly, stored in integer columns).
INTEGER_METRICS: frozenset[str] = frozenset(set(_RULES) - {EUCLIDEAN} | {EXPLICIT})


def is_integer_metric(metric: str) -> bool:
    """Whether distances under `metric` are whole numbers."""
    return metric in INTEGER_METRICS


def distance_matrix(coords: FloatArray, metric: str) -> Matrix:
    """The full distance matrix of `coords` (n×2) under a coordinate metric.

    Args:
        coords: city coordinates, one row per city.
        metric: a name from `COORD_METRICS`.

    Returns:
        An n×n matrix, int64 for TSPLIB's rules and float64 for "euclidean", zero diagonal.
    """
    try:
        rule = _RULES[metric]
    except KeyError:
        raise ValueError(f"unknown metric {metric!r}") from None
    matrix = rule(np.asarray(coords, dtype=np.float64))
    np.fill_diagonal(matrix, 0)
    return matrix
