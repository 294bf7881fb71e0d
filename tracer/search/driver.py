"""Driving the compiled search: settings, limits, record buffers, and the hand-off to a trail.

The kernel (`tracer.search.engine`) owns no Python objects; this module allocates its state, calls
it in short slices, turns each full buffer into a block of narrow columns for the writer,
and between slices checks the clock, the node limit and the stop flag (Ctrl-C / SIGTERM).
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any, Protocol

import numpy as np
from numpy.typing import NDArray

from tracer.base import (
    CITY,
    COMPLETE,
    DECISION,
    DECISION_COLUMNS,
    DECISION_NAMES,
    DEPTH,
    FULL_COLUMNS,
    INTERRUPTED,
    LIMIT,
    LINK_IN,
    LINK_IN_CITY,
    LINK_OUT,
    LINK_OUT_CITY,
    NO_BOUND,
    PARTIAL,
    TREE,
    TREE_LINKS,
    BestUpdate,
    Column,
    Instance,
    PrunetrailError,
    SolverInfo,
    TrailHeader,
    absent_value,
    column_layout,
)
from tracer.search import engine
from tracer.search.faults import FAULTS, fault_code
from tracer.search.tours import start_tour, tour_length

#: Default small-remainder cutoff: the lowest geometric-mean time over seven TSPLIB instances
#: in the sweep of tests/bench/bench_cutoff.py (figures in tests/bench/README.md).
DEFAULT_CUTOFF = 1
ORDERS = ("nearest", "index")
BOUNDS = (TREE_LINKS, NO_BOUND)
RECORD_MODES = ("all", "decisions", "none")
#: Above this many cities an unlimited exact search will not finish; a limit is required.
EXACT_CITY_LIMIT = 40
#: The largest instance the engine accepts at all (with a node or time limit).
SEARCH_CITY_LIMIT = 1000

#: The `--start` value for an infinite start incumbent.
NO_START = "none"

BLOCK_ROWS = 1 << 16
_EVENT_ROWS = 64
_STEPS_PER_SLICE = 1 << 17
_FLUSH_SECONDS = 0.5


@dataclass(frozen=True)
class SearchSettings:
    """What to search and what to record.

    Attributes:
        cutoff: nodes with k <= cutoff unvisited cities get no bound (decision `skip`).
        order: child order, "nearest" (nearest first) or "index".
        bound: "tree+links" or "none" (full enumeration).
        fault: a planted fault's name from `tracer.search.faults.FAULTS`, or None.
        max_nodes: stop (status `limit`) after this many nodes.
        time_limit: stop (status `limit`) after this many seconds.
        record: "all", "decisions" (tree shape and decisions only) or "none".
        record_under: record only the subtree under this path prefix, plus the path to it.
    """

    cutoff: int = DEFAULT_CUTOFF
    order: str = "nearest"
    bound: str = TREE_LINKS
    fault: str | None = None
    max_nodes: int | None = None
    time_limit: float | None = None
    record: str = "all"
    record_under: tuple[int, ...] | None = None


@dataclass(frozen=True)
class StartTour:
    """The incumbent the search starts from, and how it was made."""

    method: str
    tour: NDArray[np.int64]
    length: float


def make_start(instance: Instance, start: str, improve: str) -> StartTour | None:
    """The start incumbent: a construction (`tracer.search.tours.CONSTRUCTIONS`) and an improvement
    (`tracer.search.improve.IMPROVEMENTS`), or None for `start == "none"` (infinite incumbent)."""
    if start == NO_START:
        return None
    tour = start_tour(instance.matrix, start, improve)
    method = start if improve == "none" else f"{start}+{improve}"
    return StartTour(method, tour, float(tour_length(instance.matrix, tour)))


@dataclass(frozen=True)
class Progress:
    """A snapshot for progress displays."""

    nodes: int
    recorded: int
    incumbent: float
    seconds: float


@dataclass
class SearchResult:
    """What the search found and what it cost."""

    length: float | None
    tour: list[int] | None
    status: str
    nodes: int
    recorded: int
    decisions: dict[str, int]
    seconds: float
    improvements: list[BestUpdate] = field(default_factory=list)


class NodeSink(Protocol):
    """Where recorded blocks and incumbent updates go (a `TrailWriter`, or a test's list)."""

    def write_nodes(self, columns: dict[str, NDArray[Any]]) -> None: ...

    def write_best(self, update: BestUpdate) -> None: ...


def validate(instance: Instance, settings: SearchSettings) -> None:
    """Refuse a search that cannot run or cannot finish, saying why.

    Raises:
        PrunetrailError: with the reason and what to do instead.
    """
    n = instance.n
    if not instance.symmetric:
        raise PrunetrailError(
            f"{instance.name} is asymmetric; the search handles symmetric instances only"
        )
    if n > SEARCH_CITY_LIMIT:
        raise PrunetrailError(
            f"{instance.name} has {n} cities; the exact search takes at most {SEARCH_CITY_LIMIT}"
        )
    if n > EXACT_CITY_LIMIT and settings.max_nodes is None and settings.time_limit is None:
        raise PrunetrailError(
            f"{instance.name} has {n} cities: an exact search of more than {EXACT_CITY_LIMIT} "
            "cities will not finish in any useful time (the tree grows as (n-1)!). "
            "Give --max-nodes or --time-limit to record a bounded part of it."
        )
    if settings.cutoff < 0:
        raise PrunetrailError("the cutoff must be 0 or more")
    if settings.order not in ORDERS:
        raise PrunetrailError(f"order must be one of {', '.join(ORDERS)}")
    if settings.bound not in BOUNDS:
        raise PrunetrailError(f"bound must be one of {', '.join(BOUNDS)}")
    if settings.fault is not None and settings.fault not in FAULTS:
        raise PrunetrailError(f"unknown fault {settings.fault!r}; known: {', '.join(FAULTS)}")
    if settings.fault is not None and settings.bound != TREE_LINKS:
        raise PrunetrailError("a planted fault needs the tree+links bound")
    if settings.record not in RECORD_MODES:
        raise PrunetrailError(f"record must be one of {', '.join(RECORD_MODES)}")
    prefix = settings.record_under
    if prefix is not None:
        if not prefix or prefix[0] != 0:
            raise PrunetrailError("a path prefix starts at city 0, e.g. '0 5 2'")
        if len(set(prefix)) != len(prefix) or not all(0 <= c < n for c in prefix):
            raise PrunetrailError(f"a path prefix holds distinct cities 0..{n - 1}")


def full_layout(instance: Instance, settings: SearchSettings) -> tuple[Column, ...]:
    """Every column the engine fills, as narrow as the instance allows."""
    return column_layout(FULL_COLUMNS, instance.n, instance.integral, _longest(instance, settings))


def trail_columns(instance: Instance, settings: SearchSettings) -> tuple[Column, ...]:
    """The columns a trail of this search carries (all, or the shape and decisions only)."""
    names = FULL_COLUMNS if settings.record == "all" else DECISION_COLUMNS
    return tuple(c for c in full_layout(instance, settings) if c.name in names)


def _longest(instance: Instance, settings: SearchSettings) -> float:
    """An upper bound on any length the search records (a bound is at most ~2n edges)."""
    longest = 2.0 * instance.n * float(np.max(instance.matrix, initial=0)) + 1.0
    return longest * longest if settings.fault == "squared-lengths" else longest


def trail_header(
    instance: Instance, settings: SearchSettings, start: StartTour | None, engine_name: str
) -> TrailHeader:
    """The header for a trail of this search."""
    solver = SolverInfo(
        bound=settings.bound,
        cutoff=settings.cutoff,
        engine=engine_name,
        order=settings.order,
        start=NO_START if start is None else start.method,
        fault=settings.fault,
        record=settings.record,
        record_under=settings.record_under,
    )
    return TrailHeader(instance=instance, solver=solver, columns=trail_columns(instance, settings))


def child_order(matrix: NDArray[np.float64], order: str) -> NDArray[np.int32]:
    """For each city, the other cities in the order the search tries them."""
    n = matrix.shape[0]
    out = np.empty((n, max(n - 1, 0)), dtype=np.int32)
    for city in range(n):
        ranked = np.argsort(matrix[city], kind="stable") if order == "nearest" else np.arange(n)
        out[city] = ranked[ranked != city]
    return out


class _Buffers:
    """The kernel's record buffer (structure of arrays, already in the trail's narrow
    dtypes, so handing a block over is a plain copy) and its event table."""

    def __init__(self, n: int, rows: int, layout: tuple[Column, ...]) -> None:
        dtype = {c.name: c.dtype for c in layout}
        self.city = np.zeros(rows, dtype=dtype[CITY])
        self.depth = np.zeros(rows, dtype=dtype[DEPTH])
        self.partial = np.zeros(rows, dtype=dtype[PARTIAL])
        self.tree = np.zeros(rows, dtype=dtype[TREE])
        self.link_in = np.zeros(rows, dtype=dtype[LINK_IN])
        self.link_in_city = np.zeros(rows, dtype=dtype[LINK_IN_CITY])
        self.link_out = np.zeros(rows, dtype=dtype[LINK_OUT])
        self.link_out_city = np.zeros(rows, dtype=dtype[LINK_OUT_CITY])
        self.decision = np.zeros(rows, dtype=dtype[DECISION])
        self.ev_at = np.zeros(_EVENT_ROWS, dtype=np.int64)
        self.ev_node = np.zeros(_EVENT_ROWS, dtype=np.int64)
        self.ev_length = np.zeros(_EVENT_ROWS, dtype=np.float64)
        self.ev_tour = np.zeros((_EVENT_ROWS, n), dtype=np.int32)

    def block(self, fill: int, columns: tuple[Column, ...]) -> dict[str, NDArray[Any]]:
        return {c.name: getattr(self, c.name)[:fill].copy() for c in columns}


def run_search(
    instance: Instance,
    settings: SearchSettings,
    start: StartTour | None = None,
    sink: NodeSink | None = None,
    on_progress: Callable[[Progress], None] | None = None,
    should_stop: Callable[[], bool] | None = None,
) -> SearchResult:
    """Run the exact search, handing recorded blocks and incumbent updates to `sink`.

    Args:
        instance: a symmetric instance (see `validate`).
        settings: bound, cutoff, order, limits, recording.
        start: the start incumbent, or None for an infinite one.
        sink: receives node blocks and `best` updates; None records nothing.
        on_progress: called after every slice of the search.
        should_stop: polled after every slice; True stops with status `interrupted`.
    """
    validate(instance, settings)
    n = instance.n
    dist = np.ascontiguousarray(instance.matrix, dtype=np.float64)
    layout = full_layout(instance, settings)
    columns = trail_columns(instance, settings)
    record = sink is not None and settings.record != "none"
    prefix = np.array(settings.record_under or (0,), dtype=np.int32)
    buffers = _Buffers(n, BLOCK_ROWS, layout)
    no_length = float(absent_value(buffers.partial.dtype))
    no_city = int(absent_value(buffers.city.dtype))
    state = np.zeros(engine.STATE_SLOTS, dtype=np.int64)
    incumbent = np.array([math.inf if start is None else float(start.length)])
    best_tour: list[int] | None = None if start is None else [int(c) for c in start.tour]
    scratch = {
        "path": np.zeros(n, dtype=np.int32),
        "visited": np.zeros(n, dtype=np.bool_),
        "partial_at": np.zeros(n, dtype=np.float64),
        "child_pos": np.zeros(n, dtype=np.int32),
        "match_at": np.zeros(n, dtype=np.int32),
        "key": np.full(n, np.inf),
        "rest": np.zeros(n + 2, dtype=np.int32),
        "members": np.zeros(n + 2, dtype=np.int32),
    }
    counts = np.zeros(len(DECISION_NAMES), dtype=np.int64)
    children = child_order(dist, settings.order)
    max_nodes = -1 if settings.max_nodes is None else settings.max_nodes
    improvements: list[BestUpdate] = []
    if sink is not None and start is not None:
        first = BestUpdate(at=0, node=-1, length=float(start.length), tour=tuple(best_tour or ()))
        sink.write_best(first)

    def advance(steps: int) -> int:
        """One slice of the compiled search (resumable: all its state is in these arrays)."""
        code: int = engine.run_kernel(
            dist,
            children,
            settings.cutoff,
            settings.bound == TREE_LINKS,
            fault_code(settings.fault),
            incumbent,
            state,
            scratch["path"],
            scratch["visited"],
            scratch["partial_at"],
            scratch["child_pos"],
            scratch["match_at"],
            prefix,
            record,
            no_length,
            no_city,
            buffers.city,
            buffers.depth,
            buffers.partial,
            buffers.tree,
            buffers.link_in,
            buffers.link_in_city,
            buffers.link_out,
            buffers.link_out_city,
            buffers.decision,
            buffers.ev_at,
            buffers.ev_node,
            buffers.ev_length,
            buffers.ev_tour,
            counts,
            scratch["key"],
            scratch["rest"],
            scratch["members"],
            steps,
            max_nodes,
        )
        return code

    # A first slice of no steps sets the search up and loads the compiled loop (from numba's
    # cache, or compiling it), so the time reported is the search's own.
    advance(0)
    began = time.perf_counter()
    last_flush = began
    status = COMPLETE
    while True:
        code = advance(_STEPS_PER_SLICE)
        now = time.perf_counter()
        fill = int(state[engine.S_FILL])
        events = int(state[engine.S_EVENTS])
        if (
            sink is not None
            and fill
            and (events or code != engine.STEPS_SPENT or now - last_flush >= _FLUSH_SECONDS)
        ):
            sink.write_nodes(buffers.block(fill, columns))
            state[engine.S_FILL] = 0
            last_flush = now
        for e in range(events):
            update = BestUpdate(
                at=int(buffers.ev_at[e]),
                node=int(buffers.ev_node[e]),
                length=float(buffers.ev_length[e]),
                tour=tuple(int(c) for c in buffers.ev_tour[e]),
            )
            improvements.append(update)
            best_tour = list(update.tour)
            if sink is not None:
                sink.write_best(update)
        state[engine.S_EVENTS] = 0
        if on_progress is not None:
            on_progress(
                Progress(
                    int(state[engine.S_NODES]),
                    int(state[engine.S_RECORDED]),
                    float(incumbent[0]),
                    now - began,
                )
            )
        if code == engine.DONE:
            break
        if code == engine.NODE_LIMIT or (
            settings.time_limit is not None and now - began >= settings.time_limit
        ):
            status = LIMIT
            break
        if should_stop is not None and should_stop():
            status = INTERRUPTED
            break
    if sink is not None and state[engine.S_FILL]:
        sink.write_nodes(buffers.block(int(state[engine.S_FILL]), columns))
    length = None if math.isinf(incumbent[0]) else float(incumbent[0])
    return SearchResult(
        length=length,
        tour=best_tour,
        status=status,
        nodes=int(state[engine.S_NODES]),
        recorded=int(state[engine.S_RECORDED]) if record else 0,
        decisions={name: int(counts[i]) for i, name in enumerate(DECISION_NAMES)},
        seconds=time.perf_counter() - began,
        improvements=improvements,
    )
