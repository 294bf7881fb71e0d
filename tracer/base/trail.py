"""The `Trail` value: one search's header, node columns, incumbent updates and end, in memory.

Every reader (trail files, JSON Lines) produces one and every analysis consumes one, so it
lives in the base layer, below both.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass, field
from typing import Any, Protocol

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


@dataclass(frozen=True)
class NodeBlock:
    """Consecutive node records: ids `first` .. `first + count - 1`, one array per column."""

    first: int
    columns: dict[str, NDArray[Any]]

    @property
    def count(self) -> int:
        """How many records the block holds."""
        return len(self.columns[DECISION])


class BlockSource(Protocol):
    """A trail read block by block: everything but the node columns is known up front.

    Streaming analyses consume this so their memory is bounded by one block plus what they
    carry, whether the blocks come from memory (`memory_blocks`) or from a file.
    """

    path: str
    header: TrailHeader
    best: list[BestUpdate]
    end: EndInfo | None
    notice: str | None

    @property
    def count(self) -> int:
        """How many node records the trail holds in all."""
        ...

    def blocks(self) -> Iterator[NodeBlock]:
        """The node blocks in id order, each decoded afresh (a caller may keep or drop it)."""
        ...


@dataclass
class _MemoryBlocks:
    """`BlockSource` over a trail already in memory: views of its columns, `size` at a time."""

    trail: Trail
    size: int

    def __post_init__(self) -> None:
        self.path = self.trail.path
        self.header = self.trail.header
        self.best = self.trail.best
        self.end = self.trail.end
        self.notice = self.trail.notice

    @property
    def count(self) -> int:
        return self.trail.count

    def blocks(self) -> Iterator[NodeBlock]:
        for lo in range(0, self.trail.count, self.size):
            hi = min(lo + self.size, self.trail.count)
            yield NodeBlock(lo, {k: v[lo:hi] for k, v in self.trail.columns.items()})


def memory_blocks(trail: Trail, size: int = 1 << 16) -> BlockSource:
    """The trail as a `BlockSource` of `size`-record blocks (tests, small trails)."""
    if size < 1:
        raise ValueError("block size must be at least 1")
    return _MemoryBlocks(trail, size)
