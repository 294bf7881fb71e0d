"""The trail's record schema: frame kinds, column names and dtypes, decision codes, limits.

Every writer and reader imports these names from here and nowhere else. Columns are chosen
per trail as narrow as the instance allows (a city fits uint8 below 255 cities), so a node
costs about 21 bytes before compression. A column's "absent" value (a tree never computed,
a link city not chosen) is the dtype's sentinel: NaN for floats, the smallest integer for
signed lengths, the largest for unsigned cities.
"""

from __future__ import annotations

from dataclasses import dataclass
from enum import IntEnum

import numpy as np
from numpy.typing import NDArray

# Limits every reader enforces, so a hostile file cannot exhaust memory: one table, with the
# reason beside each value, in `tracer.base.limits` (re-exported here for old imports).
from tracer.base.limits import (  # noqa: F401
    MATRIX_MAX_CITIES,
    MAX_BLOCK_NODES,
    MAX_COLUMNS,
    MAX_COORDINATE,
    MAX_EDGE,
    MAX_EXPLICIT_CITIES,
    MAX_FILE_BYTES,
    MAX_FILE_CITIES,
    MAX_FRAME_BYTES,
    MAX_HEADER_ITEMS,
    MAX_LENGTH,
    MAX_LIST_ITEMS,
    MAX_MAP_ITEMS,
    MAX_NODE_ID,
    MAX_STRING_BYTES,
    MAX_TEXT,
    MAX_TRAIL_CITIES,
    MAX_TRAIL_NODES,
    MAX_WORD,
    MIN_NODE_ID,
)

FORMAT_NAME = "prunetrail"
FORMAT_VERSION = 1


class Decision(IntEnum):
    """What the search did at a node (the names are the trail's words for them)."""

    EXPAND = 0  # bound below the incumbent: children follow
    PRUNE = 1  # bound (or, below the cutoff, the partial length) reached the incumbent
    SKIP = 2  # at or below the small-remainder cutoff: no bound evaluated, children follow
    TOUR_BETTER = 3  # a complete tour that improved the incumbent
    TOUR = 4  # a complete tour that did not


DECISION_NAMES: tuple[str, ...] = tuple(d.name.lower() for d in Decision)
DECISION_BY_NAME: dict[str, Decision] = {d.name.lower(): d for d in Decision}
#: Decisions after which the search descends into the node's children.
DESCENDING: frozenset[Decision] = frozenset({Decision.EXPAND, Decision.SKIP})

# Frame kinds.
HEADER = "header"
NODES = "nodes"
NODE = "node"
BEST = "best"
END = "end"
FRAME_KINDS = (HEADER, NODES, NODE, BEST, END)

# End statuses.
COMPLETE = "complete"
INTERRUPTED = "interrupted"
LIMIT = "limit"
STATUSES = (COMPLETE, INTERRUPTED, LIMIT)

# Column names.
CITY = "city"  # the city this node adds to its parent's path (0 at the root)
DEPTH = "depth"  # path length minus one; the parent is the last earlier node one level up
PARTIAL = "partial"  # length of the open path
TREE = "tree"  # minimum-spanning-tree weight over the unvisited cities
LINK_IN = "link_in"  # cheapest edge from the path's last city into the unvisited cities
LINK_IN_CITY = "link_in_city"
LINK_OUT = "link_out"  # cheapest edge from the unvisited cities back to the start city
LINK_OUT_CITY = "link_out_city"  # (at a complete path: the closing edge, to city 0)
DECISION = "decision"
BOUND = "bound"  # optional: a bound recorded by a foreign solver (ours derives it)
VISIT = "visit"  # optional: visit order, when it differs from pre-order (imported trails)
SOURCE_ID = "source_id"  # optional: the id a foreign solver gave the node (imported trails)
SOURCE_LINE = "source_line"  # optional: the line of the trace the node came from
#: Where an imported node came from, so findings name it in the solver's own words.
SOURCE_COLUMNS = (SOURCE_ID, SOURCE_LINE)
# Columns of the penalties bound (there tree, link_in and link_out hold penalised lengths).
PENALTY = "penalty"  # 2 * sum of the unvisited cities' penalties, subtracted from the sum
PI = "pi"  # every city's penalty in quanta of the header's penalty_quantum (a row of n)

REQUIRED_COLUMNS = (CITY, DEPTH, DECISION)
LENGTH_COLUMNS = (PARTIAL, TREE, LINK_IN, LINK_OUT, BOUND, PENALTY)
CITY_COLUMNS = (CITY, LINK_IN_CITY, LINK_OUT_CITY)
#: The bound's components, summed to derive it.
BOUND_PARTS = (PARTIAL, TREE, LINK_IN, LINK_OUT)
#: Columns of a full recording by our engine, in frame order.
FULL_COLUMNS = (
    CITY,
    DEPTH,
    PARTIAL,
    TREE,
    LINK_IN,
    LINK_IN_CITY,
    LINK_OUT,
    LINK_OUT_CITY,
    DECISION,
)
#: Columns of a full recording under the penalties bound, in frame order.
PENALTY_COLUMNS = (*FULL_COLUMNS[:-1], PENALTY, PI, DECISION)
#: Every column the engine can fill (its record buffer holds one array for each, in order).
ENGINE_COLUMNS = PENALTY_COLUMNS
#: Columns holding a row of n values per node (one per city) instead of one value.
ROW_COLUMNS = (PI,)
#: Columns of a `--record decisions` trail: the tree's shape and what was decided.
DECISION_COLUMNS = (CITY, DEPTH, DECISION)
KNOWN_COLUMNS = frozenset((*PENALTY_COLUMNS, BOUND, VISIT, *SOURCE_COLUMNS))


#: Block compression: zstandard (our writer) or none (hand-written writers).
CODECS = ("zstd", "none")


def city_dtype(n: int) -> np.dtype[np.unsignedinteger]:
    """Narrowest unsigned dtype holding every city of an n-city instance plus the sentinel."""
    if n < 255:
        return np.dtype("<u1")
    if n < 65535:
        return np.dtype("<u2")
    raise ValueError(f"{n} cities is more than a trail holds")


def length_dtype(integral: bool, longest: float) -> np.dtype[np.number]:
    """Dtype of a length column: int32 or int64 for integer metrics, float64 otherwise.

    Args:
        integral: whether every distance is a whole number.
        longest: an upper bound on any length recorded (n times the longest edge, say).
    """
    if not integral:
        return np.dtype("<f8")
    if longest < np.iinfo(np.int32).max:
        return np.dtype("<i4")
    return np.dtype("<i8")


def absent_value(dtype: np.dtype[np.generic]) -> float | int:
    """The value a column of `dtype` holds where nothing was recorded (a row column's cell)."""
    dtype = dtype.base
    if dtype.kind == "f":
        return float("nan")
    info = np.iinfo(dtype.str)
    return int(info.max) if dtype.kind == "u" else int(info.min)


def is_absent(values: NDArray[np.generic]) -> NDArray[np.bool_]:
    """Mask of the entries holding the absent value of their dtype."""
    if values.dtype.kind == "f":
        return np.asarray(np.isnan(values), dtype=np.bool_)
    return np.asarray(values == absent_value(values.dtype), dtype=np.bool_)


@dataclass(frozen=True)
class Column:
    """One per-node column: its name and little-endian dtype."""

    name: str
    dtype: np.dtype[np.generic]

    @property
    def width(self) -> int:
        """Values per node: 1, or n for a row column (its dtype is then a subarray)."""
        return int(self.dtype.shape[0]) if self.dtype.shape else 1

    def to_wire(self) -> list[str | int]:
        """[name, dtype], or [name, dtype of one value, width] for a row column."""
        if self.dtype.shape:
            return [self.name, self.dtype.base.str, self.width]
        return [self.name, self.dtype.str]


def column_layout(
    names: tuple[str, ...], n: int, integral: bool, longest: float, penalised: bool = False
) -> tuple[Column, ...]:
    """The columns of a trail over an n-city instance, narrowest dtypes first.

    Args:
        names: which columns to keep, in order.
        n: the instance's city count.
        integral: whether distances are whole numbers.
        longest: an upper bound on any recorded length.
        penalised: the penalties bound: its tree, links and penalty are fractional lengths,
            and `pi` is a row of n int32 quanta.
    """
    cities = city_dtype(n)
    lengths = length_dtype(integral, longest)
    fractional = length_dtype(not penalised and integral, longest)
    dtypes: dict[str, np.dtype[np.generic]] = {
        CITY: cities,
        DEPTH: cities,
        LINK_IN_CITY: cities,
        LINK_OUT_CITY: cities,
        DECISION: np.dtype("<u1"),
        VISIT: np.dtype("<u8"),
        SOURCE_ID: np.dtype("<i8"),
        SOURCE_LINE: np.dtype("<u8"),
        TREE: fractional,
        LINK_IN: fractional,
        LINK_OUT: fractional,
        PENALTY: fractional,
        PI: np.dtype(("<i4", (n,))),
    }
    return tuple(Column(name, dtypes.get(name, lengths)) for name in names)
