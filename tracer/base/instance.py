"""The one instance type every layer shares: cities, metric and distance matrix.

The matrix of a coordinate instance is built on first use, so an instance far too large for
the exact search (or for a full matrix) still loads and can be described.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property

import numpy as np

from tracer.base.errors import PrunetrailError
from tracer.base.limits import MATRIX_MAX_CITIES
from tracer.base.metrics import EXPLICIT, FloatArray, Matrix, distance_matrix, is_integer_metric


@dataclass(eq=False)
class Instance:
    """A travelling-salesman instance.

    Attributes:
        name: the instance's name (TSPLIB NAME, or the file stem).
        metric: a TSPLIB edge-weight type, "euclidean", or "EXPLICIT" for a given matrix.
        coords: n×2 coordinates, for drawing and (unless EXPLICIT) for distances; None if absent.
        explicit: the given matrix of an EXPLICIT instance, else None.
        comment: free text from the file.
        source: where it was read from, for messages.
    """

    name: str
    metric: str
    coords: FloatArray | None = None
    explicit: Matrix | None = None
    comment: str = ""
    source: str = ""
    n: int = field(init=False)

    def __post_init__(self) -> None:
        if self.explicit is not None:
            self.n = int(self.explicit.shape[0])
        elif self.coords is not None:
            self.n = int(self.coords.shape[0])
        else:
            raise ValueError("an instance needs coordinates or an explicit matrix")

    @property
    def integral(self) -> bool:
        """Whether every distance is a whole number (exact comparisons apply)."""
        if self.explicit is not None:
            return self.explicit.dtype.kind in "iu"
        return is_integer_metric(self.metric)

    @cached_property
    def matrix(self) -> Matrix:
        """The n×n distance matrix (int64 for integer metrics, float64 otherwise)."""
        if self.explicit is not None:
            return self.explicit
        if self.n > MATRIX_MAX_CITIES:
            raise PrunetrailError(
                f"{self.name}: {self.n} cities is more than the {MATRIX_MAX_CITIES} for which "
                "a full distance matrix is built"
            )
        assert self.coords is not None
        return distance_matrix(self.coords, self.metric)

    @cached_property
    def symmetric(self) -> bool:
        """Whether d(i, j) = d(j, i) for every pair."""
        if self.explicit is None:
            return True
        return bool(np.array_equal(self.explicit, self.explicit.T))


def explicit_instance(
    name: str,
    matrix: Matrix,
    coords: FloatArray | None = None,
    comment: str = "",
    source: str = "",
) -> Instance:
    """An EXPLICIT instance from a square matrix (diagonal forced to zero)."""
    m = np.array(matrix, copy=True)
    np.fill_diagonal(m, 0)
    return Instance(
        name=name, metric=EXPLICIT, coords=coords, explicit=m, comment=comment, source=source
    )
