"""Where to draw the cities: their own coordinates, or a layout made from the distances.

A matrix-only instance has no places, only distances. Classical multidimensional scaling
(Torgerson, 1952) finds the 2-D points whose Euclidean distances best match them: double-
centre the squared distances and keep the two largest eigenvectors. It reproduces a
Euclidean instance exactly (up to rotation and reflection) and distorts anything else,
which is why a map drawn from it says it is approximate.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from tracer.base import Instance

#: Largest instance laid out by scaling (the eigendecomposition is O(n³)).
LAYOUT_MAX_CITIES = 2000


@dataclass(frozen=True)
class CityLayout:
    """Positions to draw the cities at.

    Attributes:
        xy: n×2 positions.
        approximate: True when they come from scaling the distances, not from the instance.
    """

    xy: NDArray[np.float64]
    approximate: bool


def scaled_layout(matrix: NDArray[Any]) -> NDArray[np.float64]:
    """Classical multidimensional scaling of a distance matrix into the plane.

    Args:
        matrix: n×n symmetric distances.

    Returns:
        n×2 points; their pairwise distances equal the matrix's when it is Euclidean.
    """
    d = np.asarray(matrix, dtype=np.float64)
    n = d.shape[0]
    if n == 0:
        return np.zeros((0, 2), dtype=np.float64)
    sym = (d + d.T) / 2.0
    squared = sym * sym
    centring = np.eye(n) - np.full((n, n), 1.0 / n)
    gram = -0.5 * centring @ squared @ centring
    values, vectors = np.linalg.eigh(gram)
    top = np.argsort(values)[::-1][:2]
    scale = np.sqrt(np.clip(values[top], 0.0, None))
    xy = np.zeros((n, 2), dtype=np.float64)
    xy[:, : len(top)] = vectors[:, top] * scale
    return xy


def city_layout(instance: Instance) -> CityLayout:
    """The instance's coordinates when it has them, else a scaled layout of its matrix.

    Raises:
        ValueError: a matrix-only instance too large to lay out.
    """
    if instance.coords is not None:
        return CityLayout(np.asarray(instance.coords, dtype=np.float64), approximate=False)
    if instance.n > LAYOUT_MAX_CITIES:
        raise ValueError(
            f"{instance.n} cities without coordinates is more than the {LAYOUT_MAX_CITIES} "
            "laid out from distances"
        )
    return CityLayout(scaled_layout(instance.matrix), approximate=True)
