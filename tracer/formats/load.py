"""Open an instance or tour file by its kind: TSPLIB text, or a CSV city list."""

from __future__ import annotations

from pathlib import Path

import numpy as np
from numpy.typing import NDArray

from tracer.base import Instance
from tracer.formats.cities_csv import read_cities_csv
from tracer.formats.tsplib import read_instance, read_tour


def load_instance(path: str | Path) -> Instance:
    """Read an instance: `.csv` as a city list, anything else as TSPLIB text."""
    p = Path(path)
    if p.suffix.lower() == ".csv":
        return read_cities_csv(p)[0]
    return read_instance(p)


def load_tour(path: str | Path, instance: Instance) -> NDArray[np.int64]:
    """Read a TSPLIB tour file that must be a permutation of `instance`'s cities."""
    return read_tour(path, instance.n)
