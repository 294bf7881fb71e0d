"""Test sinks for the search: keep what the engine hands over, to compare with a trail."""

from __future__ import annotations

from typing import Any

import numpy as np
from numpy.typing import NDArray

from tracer.base.frames import BestUpdate
from tracer.base.schema import FULL_COLUMNS


class Collect:
    """A sink that keeps every block and incumbent update in memory."""

    def __init__(self) -> None:
        self.blocks: list[dict[str, NDArray[Any]]] = []
        self.best: list[BestUpdate] = []

    def write_nodes(self, columns: dict[str, NDArray[Any]]) -> None:
        self.blocks.append(columns)

    def write_best(self, update: BestUpdate) -> None:
        self.best.append(update)

    def columns(self) -> dict[str, NDArray[Any]]:
        """All blocks joined into one array per column."""
        names = self.blocks[0].keys() if self.blocks else FULL_COLUMNS
        return {k: np.concatenate([b[k] for b in self.blocks]) for k in names}
