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
    DECISION_COLUMNS,
    DECISION_NAMES,
    ENGINE_COLUMNS,
    FULL_COLUMNS,
    INTERRUPTED,
    LIMIT,
    NO_BOUND,
    OUR_BOUNDS,
    PENALTIES,
    PENALTY_COLUMNS,
    TREE,
    TREE_LINKS,
    BestUpdate,
    Column,
    Instance,
    PenaltySettings,
    PrunetrailError,
    SolverInfo,
    TrailHeader,
    absent_value,
    column_layout,
)
from tracer.search import engine
from tracer.search.faults import FAULTS, SQUARED_LENGTHS, fault_bound, fault_code
from tracer.search.tours import start_tour, tour_length

#: Default small-remainder cutoff: the lowest geometric-mean time over seven TSPLIB instances
#: in the sweep of tests/bench/bench_cutoff.py (figures in tests/bench/README.md).
DEFAULT_CUTOFF = 1
ORDERS = ("nearest", "index")
#: The bounds the search runs: exactly those the re-check has a rule for.
BOUNDS = OUR_BOUNDS
_BOUND_CODES = {
    NO_BOUND: engine.BOUND_NONE,
    TREE_LINKS: engine.BOUND_TREE_LINKS,
    PENALTIES: engine.BOUND_PENALTIES,
}
#: Step rules of the penalties bound, by name.
STEP_RULES = {"gap": engine.STEP_GAP}
#: Penalties bound defaults: subgradient steps at each node and at the root (which starts
#: from zero penalties), measured in tests/bench/bench_penalties.py.
DEFAULT_PENALTY_STEPS = 30
DEFAULT_ROOT_STEPS = 300
RECORD_MODES = ("all", "decisions", "none")
#: Above this many cities an unlimited exact search will not finish; a limit is required.
EXACT_CITY_LIMIT = 40
#: The same under the penalties bound (tests/bench/README.md, "The penalties bound").
PENALTIES_CITY_LIMIT = 80
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
        penalty_steps: penalties bound: subgradient steps at each node below the root.
        root_steps: penalties bound: steps at the root.
        step_rule: penalties bound: a name from `STEP_RULES`.
    """

    cutoff: int = DEFAULT_CUTOFF
    order: str = "nearest"
    bound: str = TREE_LINKS
    fault: str | None = None
    max_nodes: int | None = None
    time_limit: float | None = None
    record: str = "all"
    record_under: tuple[int, ...] | None = None
    penalty_steps: int = DEFAULT_PENALTY_STEPS
    root_steps: int = DEFAULT_ROOT_STEPS
    step_rule: str = "gap"


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
    limit = PENALTIES_CITY_LIMIT if settings.bound == PENALTIES else EXACT_CITY_LIMIT
    if n > limit and settings.max_nodes is None and settings.time_limit is None:
        raise PrunetrailError(
            f"{instance.name} has {n} cities: an exact search of more than {limit} cities "
            f"with the {settings.bound} bound may not finish in any useful time. "
            "Give --max-nodes or --time-limit to record a bounded part of it"
            + (
                f", or use --bound {PENALTIES} (exact up to {PENALTIES_CITY_LIMIT} cities)."
                if n <= PENALTIES_CITY_LIMIT and settings.bound != PENALTIES
                else "."
            )
        )
    if settings.cutoff < 0:
        raise PrunetrailError("the cutoff must be 0 or more")
    if settings.order not in ORDERS:
        raise PrunetrailError(f"order must be one of {', '.join(ORDERS)}")
    if settings.bound not in BOUNDS:
        raise PrunetrailError(f"bound must be one of {', '.join(BOUNDS)}")
    if settings.fault is not None and settings.fault not in FAULTS:
        raise PrunetrailError(f"unknown fault {settings.fault!r}; known: {', '.join(FAULTS)}")
    if settings.fault is not None and settings.bound != fault_bound(settings.fault):
        raise PrunetrailError(
            f"the planted fault {settings.fault} needs the {fault_bound(settings.fault)} bound"
        )
    if settings.step_rule not in STEP_RULES:
        raise PrunetrailError(f"step rule must be one of {', '.join(STEP_RULES)}")
    if settings.penalty_steps < 0 or settings.root_steps < 0:
        raise PrunetrailError("penalty steps must be 0 or more")
    if settings.record not in RECORD_MODES:
        raise PrunetrailError(f"record must be one of {', '.join(RECORD_MODES)}")
    prefix = settings.record_under
    if prefix is not None:
        if not prefix or prefix[0] != 0:
            raise PrunetrailError("a path prefix starts at city 0, e.g. '0 5 2'")
        if len(set(prefix)) != len(prefix) or not all(0 <= c < n for c in prefix):
            raise PrunetrailError(f"a path prefix holds distinct cities 0..{n - 1}")


def full_layout(instance: Instance, settings: SearchSettings) -> tuple[Column, ...]:
    """Every column the engine fills for this bound, as narrow as the instance allows."""
    penalised = settings.bound == PENALTIES
    names = PENALTY_COLUMNS if penalised else FULL_COLUMNS
    longest = _longest(instance, settings)
    return column_layout(names, instance.n, instance.integral, longest, penalised)


def trail_columns(instance: Instance, settings: SearchSettings) -> tuple[Column, ...]:
    """The columns a trail of this search carries (all, or the shape and decisions only)."""
    layout = full_layout(instance, settings)
    return (
        layout
        if settings.record == "all"
        else tuple(c for c in layout if c.name in DECISION_COLUMNS)
    )


def penalty_quantum(instance: Instance) -> tuple[float, int]:
    """The penalties' quantum (a power of two) and the largest |π| in quanta.

    Penalties are capped at four times the longest edge, and the quantum is as fine as 2⁻¹⁰
    while the cap fits 2³⁰ quanta (the `pi` column is int32) and every bound stays below
    2⁵² quanta, so sums of whole-number lengths and penalties are exact in float64.
    """
    longest = float(np.max(instance.matrix, initial=0)) + 1.0
    cap = 4.0 * longest
    room = min(2.0**30 / cap, 2.0**50 / (cap * instance.n))
    bits = min(10, math.floor(math.log2(room)))
    quantum = 2.0**-bits
    return quantum, min(int(cap / quantum), 2**30)


def penalty_settings(instance: Instance, settings: SearchSettings) -> PenaltySettings | None:
    """The header's record of how the penalties were raised (None for other bounds)."""
    if settings.bound != PENALTIES:
        return None
    quantum, _ = penalty_quantum(instance)
    return PenaltySettings(
        steps=settings.penalty_steps,
        root_steps=settings.root_steps,
        step_rule=settings.step_rule,
        quantum=quantum,
    )


def _longest(instance: Instance, settings: SearchSettings) -> float:
    """An upper bound on any length the search records (a bound is at most ~2n edges)."""
    longest = 2.0 * instance.n * float(np.max(instance.matrix, initial=0)) + 1.0
    return longest * longest if settings.fault == SQUARED_LENGTHS else longest


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
        penalties=penalty_settings(instance, settings),
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


def record_buffer(rows: int, layout: tuple[Column, ...], n: int) -> engine.Record:
    """The kernel's record buffer: one array per engine column in the trail's narrow dtype
    (so handing a block over is a plain copy); columns this bound does not fill get a
    one-row placeholder, which the kernel never writes."""
    dtypes = {c.name: c.dtype for c in layout}
    spare = {c.name: c.dtype for c in column_layout(ENGINE_COLUMNS, n, False, 1.0, True)}
    return engine.Record(
        *(
            np.zeros(rows, dtype=dtypes[name]) if name in dtypes else np.zeros(1, spare[name])
            for name in ENGINE_COLUMNS
        )
    )


def block(buffer: engine.Record, fill: int, columns: tuple[Column, ...]) -> dict[str, NDArray[Any]]:
    """The first `fill` rows of the buffer's trail columns, copied for the sink."""
    arrays = buffer._asdict()
    return {c.name: arrays[c.name][:fill].copy() for c in columns}


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
    buffer = record_buffer(BLOCK_ROWS, layout, n)
    events = engine.new_events(n, _EVENT_ROWS)
    dtypes = {c.name: c.dtype for c in layout}
    quantum, pi_limit = penalty_quantum(instance)
    rule = engine.Rule(
        cutoff=settings.cutoff,
        bound=_BOUND_CODES[settings.bound],
        fault=fault_code(settings.fault),
        record=record,
        no_part=float(absent_value(dtypes[TREE])),
        no_city=int(absent_value(dtypes[CITY])),
        steps=settings.penalty_steps,
        root_steps=settings.root_steps,
        step_rule=STEP_RULES[settings.step_rule],
        quantum=quantum,
        pi_limit=pi_limit,
        integral=bool(instance.integral),
    )
    state = np.zeros(engine.STATE_SLOTS, dtype=np.int64)
    incumbent = np.array([math.inf if start is None else float(start.length)])
    best_tour: list[int] | None = None if start is None else [int(c) for c in start.tour]
    scratch = engine.new_scratch(n)
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
            rule,
            incumbent,
            state,
            scratch,
            prefix,
            buffer,
            events,
            counts,
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
        improved = int(state[engine.S_EVENTS])
        if (
            sink is not None
            and fill
            and (improved or code != engine.STEPS_SPENT or now - last_flush >= _FLUSH_SECONDS)
        ):
            sink.write_nodes(block(buffer, fill, columns))
            state[engine.S_FILL] = 0
            last_flush = now
        for e in range(improved):
            update = BestUpdate(
                at=int(events.at[e]),
                node=int(events.node[e]),
                length=float(events.length[e]),
                tour=tuple(int(c) for c in events.tour[e]),
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
        sink.write_nodes(block(buffer, int(state[engine.S_FILL]), columns))
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
