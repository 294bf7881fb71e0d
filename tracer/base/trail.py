"""The `Trail` value: one search's header, node columns, incumbent updates and end, in memory.

Every reader (trail files, JSON Lines) produces one and every analysis consumes one, so it
lives in the base layer, below both.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from numpy.typing import NDArray

from tracer.base.frames import BestUpdate, EndInfo
from tracer.base.header import TrailHeader
from tracer.base.schema import DECISION


@dataclass
class Trail:
    """A trail read into memory.

    Attributes:
        path: the file it came from.
        header: instance, solver settings, column layout.
        columns: one array per header column, all `count` long, in node-id order.
        best: incumbent updates in the order they took effect.
        end: the closing frame, or None for a live or crashed run.
        notice: where and why reading stopped early, if it did.
    """

    path: str
    header: TrailHeader
    columns: dict[str, NDArray[Any]]
    best: list[BestUpdate] = field(default_factory=list)
    end: EndInfo | None = None
    notice: str | None = None

    @property
    def count(self) -> int:
        """How many node records the trail holds."""
        return len(self.columns[DECISION])

    @property
    def n(self) -> int:
        """The instance's city count."""
        return self.header.instance.n
