"""The typed path of the JSON Lines importer: each line decoded by msgspec into a typed
Struct, and a batch of node lines checked with a few C-level passes instead of a check per
field in Python. It reads every line the compiled lane (`_jsonl_scan.py`) leaves, and is
the reference that lane is tested against.

The typed path only ever accepts what the field-by-field checks in `jsonl.py` accept: any
batch it is unsure of (a line that does not decode into its Struct, a value out of range, a
node given by `path`, a second header) goes back to those checks, which then name the line
and the field at fault. So the messages are the same whichever path reads a file.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any, Literal

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

    ident: Sequence[int]
    parent_id: Sequence[int]
    city: Sequence[int]
    decision: Sequence[int]
    lengths: dict[str, NDArray[np.float64]]
    link_city: dict[str, NDArray[np.intc]]

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


_ABSENT_LINK = (None, None)


def _lengths(values: Sequence[float | None]) -> NDArray[np.float64] | None:
    """Values as float64 (None becomes NaN: absent), or None if one is out of range."""
    array = np.array(values, dtype=np.float64)
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
    # one list comprehension per field: faster than transposing tuples of every field
    path = [node.path for node in nodes]
    ident = [node.id for node in nodes]
    parent: Sequence[Any] = [node.parent for node in nodes]
    city: Sequence[Any] = [node.city for node in nodes]
    if path.count(_UNSET) != count or _UNSET in city or _UNSET in parent:
        return None
    if first_visit == 0:
        if parent[0] is not None or city[0] != 0:
            return None
        parent = (0, *parent[1:])
    if None in parent:
        return None
    if min(ident) < MIN_NODE_ID or max(ident) > MAX_NODE_ID:
        return None
    if min(parent) < MIN_NODE_ID or max(parent) > MAX_NODE_ID:
        return None
    if min(city) < 0 or max(city) >= n:
        return None
    lengths: dict[str, NDArray[np.float64]] = {}
    for key, given in (
        (PARTIAL, [node.partial for node in nodes]),
        (TREE, [node.tree for node in nodes]),
        (BOUND, [node.bound for node in nodes]),
        ("length", [node.length for node in nodes]),
    ):
        checked = _lengths(given)
        if checked is None:
            return None
        lengths[key] = checked
    link_city: dict[str, NDArray[np.intc]] = {}
    for key, links in (
        (LINK_IN, [node.link_in for node in nodes]),
        (LINK_OUT, [node.link_out for node in nodes]),
    ):
        cities, link_lengths = zip(*[link or _ABSENT_LINK for link in links], strict=True)
        as_float = np.array(cities, dtype=np.float64)  # an absent city is NaN
        if ((as_float < 0) | (as_float >= n)).any():
            return None
        checked = _lengths(link_lengths)
        if checked is None:
            return None
        lengths[key] = checked
        link_city[key] = np.where(np.isnan(as_float), NO_CITY, as_float).astype(np.intc)
    decision = [_CODES[node.decision] for node in nodes]
    return NodeBatch(ident, parent, city, decision, lengths, link_city)
