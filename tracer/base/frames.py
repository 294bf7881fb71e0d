"""The small frames of a trail, as values: incumbent updates and the closing summary."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any


def length_value(value: float, integral: bool) -> int | float:
    """A length as it goes into a frame: an int for integer metrics."""
    return round(value) if integral else float(value)


@dataclass(frozen=True)
class BestUpdate:
    """An incumbent improvement.

    Attributes:
        at: the first node id that sees this incumbent (visit order in imported trails).
        node: id of the node whose tour it is, or -1 (a start tour, or a node not recorded).
        length: the tour's length.
        tour: the tour, 0-based, starting at city 0.
    """

    at: int
    node: int
    length: float
    tour: tuple[int, ...]


@dataclass(frozen=True)
class EndInfo:
    """What the `end` frame reports."""

    status: str
    nodes: int
    recorded: int
    decisions: Mapping[str, int]
    seconds: float
    length: float | None
    tour: Sequence[int] | None = None
    extra: dict[str, Any] = field(default_factory=dict)
