"""Planted faults: classic bound mistakes the engine can commit on purpose, by name.

Each records the numbers the faulty code really computed, so demos show what such a bug
looks like in a trail and tests prove the independent re-check finds it.
"""

from __future__ import annotations

from tracer.base import PENALTIES, TREE_LINKS
from tracer.search import engine

#: The fault whose lengths are squared (the search widens its length columns for it).
SQUARED_LENGTHS = "squared-lengths"

#: Fault name -> (engine code, one line of help).
FAULTS: dict[str, tuple[int, str]] = {
    "tree-positions": (
        engine.FAULT_POSITIONS,
        "tree spans the path positions m+1..n-1 taken as cities, not the cities still unvisited",
    ),
    "stale-keys": (
        engine.FAULT_STALE_KEYS,
        "the tree routine's key table is not reset between nodes (trees come out too light)",
    ),
    SQUARED_LENGTHS: (
        engine.FAULT_SQUARED,
        "tree and links are summed over squared edge lengths, so the bound is on another scale",
    ),
    "tree-spans-ends": (
        engine.FAULT_SPANS_ENDS,
        "tree also spans the path's two end cities while both links are still added "
        "(overestimates, cuts the optimal branch)",
    ),
    "penalty-once": (
        engine.FAULT_PENALTY_ONCE,
        "penalties bound: the penalty term takes each city's penalty once, not twice "
        "(the bound is off by the sum of the penalties)",
    ),
}
#: Faults of a bound other than tree+links, by name.
_FAULT_BOUNDS = {"penalty-once": PENALTIES}


def fault_bound(name: str) -> str:
    """The bound a planted fault belongs to."""
    return _FAULT_BOUNDS.get(name, TREE_LINKS)


def fault_code(name: str | None) -> int:
    """The engine's code for a fault name (None means no fault)."""
    if name is None:
        return engine.FAULT_NONE
    return FAULTS[name][0]
