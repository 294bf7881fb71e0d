"""The fast path of the JSON Lines importer: each line decoded by msgspec into a typed
Struct, and a batch of node lines checked with a few C-level passes instead of a check per
field in Python.

The fast path only ever accepts what the field-by-field checks in `jsonl.py` accept: any
batch it is unsure of (a line that does not decode into its Struct, a value out of range, a
node given by `path`, a second header) goes back to those checks, which then name the line
and the field at fault. So the messages are the same whichever path reads a file.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any, Literal, cast

import msgspec
import numpy as np
from numpy.typing import NDArray

from tracer.base import (
    BOUND,
    DECISION_BY_NAME,
    LINK_IN,
    LINK_OUT,
    MAX_LENGTH,
    MAX_NODE_ID,
    MAX_TRAIL_NODES,
    MIN_NODE_ID,
    PARTIAL,
    TREE,
)

_UNSET: Any = msgspec.UNSET
_DecisionName = Literal["expand", "prune", "skip", "tour_better", "tour"]
_CODES = {name: int(code) for name, code in DECISION_BY_NAME.items()}
NO_CITY = -1


class NodeLine(msgspec.Struct, tag="node", tag_field="kind", gc=False):
    """A `node` line as the format defines it (unknown keys are ignored)."""

    id: int
    decision: _DecisionName
    partial: float
    parent: int | msgspec.UnsetType | None = _UNSET
    city: int | msgspec.UnsetType = _UNSET
    path: Any = _UNSET
    tree: float | None = None
    bound: float | None = None
    length: float | None = None
    link_in: tuple[int, float] | None = None
    link_out: tuple[int, float] | None = None


class BestLine(msgspec.Struct, tag="best", tag_field="kind", gc=False):
    """A `best` line, its values still to be checked by the importer."""

    id: Any = _UNSET
    length: Any = _UNSET
    tour: Any = _UNSET


class EndLine(msgspec.Struct, tag="end", tag_field="kind", gc=False):
    """An `end` line, its status still to be checked by the importer."""

    status: Any = _UNSET


class HeaderLine(msgspec.Struct, tag="header", tag_field="kind", gc=False):
    """A header line after the first: always an error, reported by the importer."""


Line = NodeLine | BestLine | EndLine | HeaderLine
#: Decodes one line (bytes) into its Struct; raises msgspec.DecodeError / ValidationError.
decode_line = msgspec.json.Decoder(Line).decode


def as_map(line: BestLine | EndLine) -> dict[str, Any]:
    """A best or end line as the plain map the importer's checks take."""
    kind = "best" if isinstance(line, BestLine) else "end"
    out: dict[str, Any] = {"kind": kind}
    for name in line.__struct_fields__:
        value = getattr(line, name)
        if value is not _UNSET:
            out[name] = value
    return out


@dataclass
class NodeBatch:
    """Checked values of consecutive node lines, ready to append to the importer's columns."""

    ident: list[int]
    parent_id: list[int]
    city: list[int]
    decision: list[int]
    lengths: dict[str, NDArray[np.float64]]
    link_city: dict[str, list[int]]

    def rows(self, lo: int, hi: int) -> NodeBatch:
        """Rows lo..hi-1."""
        return NodeBatch(
            self.ident[lo:hi],
            self.parent_id[lo:hi],
            self.city[lo:hi],
            self.decision[lo:hi],
            {k: v[lo:hi] for k, v in self.lengths.items()},
            {k: v[lo:hi] for k, v in self.link_city.items()},
        )


def _optional(values: Sequence[float | None]) -> NDArray[np.float64] | None:
    """Values as float64 (NaN where absent), or None if one is out of range."""
    array = np.array([math.nan if v is None else v for v in values], dtype=np.float64)
    if (np.abs(array) >= MAX_LENGTH).any():  # NaN compares False: absent is fine
        return None
    return array


def node_batch(
    nodes: list[NodeLine], n: int, first_visit: int, max_nodes: int = MAX_TRAIL_NODES
) -> NodeBatch | None:
    """The checked values of node lines given by parent id, or None to use the slow path.

    Args:
        nodes: consecutive node lines, in visit order.
        n: the instance's city count.
        first_visit: the visit position of the first of them.
        max_nodes: the most nodes a trace may hold.
    """
    count = len(nodes)
    if not count or first_visit + count > max_nodes:
        return None
    if any(node.path is not _UNSET for node in nodes):
        return None
    ident = [node.id for node in nodes]
    given_city = [node.city for node in nodes]
    given_parent = [node.parent for node in nodes]
    if _UNSET in given_city or _UNSET in given_parent:
        return None
    if first_visit == 0:
        if given_parent[0] is not None or given_city[0] != 0:
            return None
        given_parent[0] = 0
    if None in given_parent:
        return None
    city, parent = cast(list[int], given_city), cast(list[int], given_parent)
    if min(ident) < MIN_NODE_ID or max(ident) > MAX_NODE_ID:
        return None
    if min(parent) < MIN_NODE_ID or max(parent) > MAX_NODE_ID:
        return None
    if min(city) < 0 or max(city) >= n:
        return None
    lengths: dict[str, NDArray[np.float64]] = {}
    for key, values in (
        (PARTIAL, [node.partial for node in nodes]),
        (TREE, [node.tree for node in nodes]),
        (BOUND, [node.bound for node in nodes]),
        ("length", [node.length for node in nodes]),
    ):
        checked = _optional(values)
        if checked is None:
            return None
        lengths[key] = checked
    link_city: dict[str, list[int]] = {}
    for key, links in (
        (LINK_IN, [node.link_in for node in nodes]),
        (LINK_OUT, [node.link_out for node in nodes]),
    ):
        cities = [NO_CITY if link is None else link[0] for link in links]
        given = [link[0] for link in links if link is not None]
        if given and (min(given) < 0 or max(given) >= n):
            return None
        checked = _optional([None if link is None else link[1] for link in links])
        if checked is None:
            return None
        lengths[key] = checked
        link_city[key] = cities
    decision = [_CODES[node.decision] for node in nodes]
    return NodeBatch(ident, parent, city, decision, lengths, link_city)
