"""Which small-remainder cutoff is cheapest? Run the search over instances × cutoffs.

Every cell (instance, cutoff) gets one counted run, recording only the tree's shape and
decisions into a counter (never to a trail), for the nodes and bound evaluations per depth,
and `repeat` timed runs recording nothing, whose median is the cell's time. Timed runs are
planned in rounds over all cells, each round in the opposite order to the one before, so
slow drift on a shared machine spreads over every cutoff instead of favouring one; the
counted runs go in the first round, each just before its cell's first timed run. They
run in this process, in a local process pool, or on a Dask cluster; each outcome is handed
back as it finishes, so a caller can keep every finished cell when it is interrupted.

The cost model: a bound over k cities costs about k² + 2k operations (Prim over k cities and
both links), and every node visited costs about the same fixed amount; below the cutoff no
bound is computed, and a node reaching k = cutoff may then run through up to k! orderings
(Σ k!/j! nodes). Two per-operation costs are fitted to the measured counts and times of
each instance, and the model's node and time predictions are set beside the measurements.
"""

from __future__ import annotations

import importlib
import math
import multiprocessing
import signal
import statistics
from collections.abc import Callable, Iterator, Sequence
from concurrent.futures import FIRST_COMPLETED, Future, ProcessPoolExecutor, wait
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
from numpy.typing import NDArray

from tracer.base import (
    COMPLETE,
    DECISION,
    DECISION_NAMES,
    DEPTH,
    INTERRUPTED,
    NO_BOUND,
    BestUpdate,
    Decision,
    Instance,
    PrunetrailError,
)
from tracer.search.driver import SearchSettings, StartTour, run_search, validate

#: A counted run's `repeat` number (timed runs are 0..repeat-1).
COUNTED = -1
#: Median times within this factor of the best count as "as good" (how flat the optimum is).
FLAT_WITHIN = 1.10
#: A cell whose time is off the model by more than this factor (either way) disagrees.
DISAGREES_BEYOND = 1.5
#: Bounds of --random: cities and instances per family.
RANDOM_MAX_CITIES = 40
RANDOM_MAX_COUNT = 100
#: How long to wait for a Dask scheduler to answer.
DASK_CONNECT_SECONDS = 10.0
_SIDE = 1000.0
_DECISIONS = len(DECISION_NAMES)


@dataclass(frozen=True)
class SweepJob:
    """One run: which instance (by label), cutoff, and whether counted or timed."""

    seq: int
    label: str
    instance: Instance
    settings: SearchSettings
    start: StartTour | None
    repeat: int

    @property
    def counted(self) -> bool:
        """Whether this is the cell's counted run (else a timed one)."""
        return self.repeat == COUNTED


@dataclass(frozen=True)
class RunOutcome:
    """What one run gave back (counts: nodes[depth, decision] of a counted run)."""

    seq: int
    label: str
    cutoff: int
    repeat: int
    status: str
    nodes: int
    decisions: dict[str, int]
    seconds: float
    length: float | None
    counts: NDArray[np.int64] | None = None


class _DepthCounter:
    """A sink that keeps only nodes per depth × decision (one bincount per block)."""

    def __init__(self, n: int) -> None:
        self.flat = np.zeros(n * _DECISIONS, dtype=np.int64)

    def write_nodes(self, columns: dict[str, NDArray[Any]]) -> None:
        key = columns[DEPTH].astype(np.intp) * _DECISIONS + columns[DECISION]
        self.flat += np.bincount(key, minlength=self.flat.size)[: self.flat.size]

    def write_best(self, update: BestUpdate) -> None:
        """Incumbent updates are not needed for counting."""


def run_job(job: SweepJob, should_stop: Callable[[], bool] | None = None) -> RunOutcome:
    """Run one planned search (in this process, a pool worker or a cluster worker)."""
    stop = should_stop if should_stop is not None else _worker_should_stop
    counter = _DepthCounter(job.instance.n) if job.counted else None
    settings = replace(job.settings, record="decisions" if job.counted else "none")
    result = run_search(job.instance, settings, job.start, sink=counter, should_stop=stop)
    counts = None if counter is None else counter.flat.reshape(job.instance.n, _DECISIONS)
    return RunOutcome(
        seq=job.seq,
        label=job.label,
        cutoff=job.settings.cutoff,
        repeat=job.repeat,
        status=result.status,
        nodes=result.nodes,
        decisions=result.decisions,
        seconds=result.seconds,
        length=result.length,
        counts=counts,
    )


# -- planning -----------------------------------------------------------------------------


def plan(
    instances: Sequence[tuple[str, Instance, StartTour | None]],
    cutoffs: Sequence[int],
    repeat: int,
    settings: SearchSettings,
) -> list[SweepJob]:
    """Every run of a sweep, in the order to start them.

    Args:
        instances: (label, instance, start tour) per instance; labels are unique.
        cutoffs: the cutoffs to try.
        repeat: timed runs per cell (at least 1).
        settings: everything but the cutoff (bound, order, limits).

    Raises:
        PrunetrailError: an instance the search refuses, with the reason.
    """
    if repeat < 1:
        raise PrunetrailError("--repeat must be at least 1")
    cells = [(entry, c) for c in cutoffs for entry in instances]
    for (_, instance, _), cutoff in cells:
        validate(instance, replace(settings, cutoff=cutoff))
    jobs: list[SweepJob] = []
    for round_ in range(repeat):
        ordered = cells if round_ % 2 == 0 else cells[::-1]
        for (label, instance, start), cutoff in ordered:
            runs = (COUNTED, round_) if round_ == 0 else (round_,)
            for run in runs:
                cell = replace(settings, cutoff=cutoff)
                jobs.append(SweepJob(len(jobs), label, instance, cell, start, run))
    return jobs


def parse_cutoffs(text: str) -> list[int]:
    """Cutoffs from '0-10', '0,2,4' or '0-3,6' (sorted, distinct).

    Raises:
        ValueError: with what was expected.
    """
    out: set[int] = set()
    for part in text.replace(" ", "").split(","):
        lo, sep, hi = part.partition("-")
        try:
            first = int(lo)
            last = int(hi) if sep else first
        except ValueError:
            raise ValueError(f"expected cutoffs like 0-10 or 0,2,4, not {text!r}") from None
        if first < 0 or last < first:
            raise ValueError(f"expected 0 <= A <= B in A-B, not {part!r}")
        if last - first > 1000:
            raise ValueError(f"at most 1000 cutoffs in a range, not {part!r}")
        out.update(range(first, last + 1))
    return sorted(out)


# -- random instance families ---------------------------------------------------------------


def parse_random(text: str) -> tuple[int, int, int]:
    """N:COUNT:SEED from --random (cities, instances per family, seed).

    Raises:
        ValueError: with what was expected.
    """
    parts = text.split(":")
    try:
        n, count, seed = (int(p) for p in parts)
    except ValueError:
        raise ValueError(f"expected N:COUNT:SEED such as 12:3:7, not {text!r}") from None
    if not 3 <= n <= RANDOM_MAX_CITIES:
        raise ValueError(f"N must be 3..{RANDOM_MAX_CITIES} cities, not {n}")
    if not 1 <= count <= RANDOM_MAX_COUNT:
        raise ValueError(f"COUNT must be 1..{RANDOM_MAX_COUNT}, not {count}")
    if seed < 0:
        raise ValueError("SEED must be 0 or more")
    return n, count, seed


def random_instances(n: int, count: int, seed: int) -> list[Instance]:
    """`count` uniform and `count` clustered instances of n cities (EUC_2D), seeded.

    Uniform: cities anywhere in a 1000 × 1000 square. Clustered: about √n centres in the
    square, each city drawn round a centre with a spread of 1/25 of the side, which gives
    the tight groups and long hops between them that make some cutoffs pay off.
    """
    rng = np.random.default_rng(seed)
    out: list[Instance] = []
    for i in range(count):
        coords = rng.uniform(0.0, _SIDE, size=(n, 2))
        out.append(Instance(f"uniform{n}-s{seed}-{i}", "EUC_2D", coords, source="--random"))
    for i in range(count):
        centres = rng.uniform(0.0, _SIDE, size=(max(2, round(math.sqrt(n))), 2))
        picks = rng.integers(0, len(centres), size=n)
        coords = centres[picks] + rng.normal(0.0, _SIDE / 25, size=(n, 2))
        coords = np.clip(coords, 0.0, _SIDE)
        out.append(Instance(f"clustered{n}-s{seed}-{i}", "EUC_2D", coords, source="--random"))
    return out


# -- running ------------------------------------------------------------------------------

_stop_event: Any = None


def _worker_init(event: Any) -> None:
    """A pool worker leaves Ctrl-C and SIGTERM to the parent (a terminal or `timeout` sends
    them to the whole process group), and stops when the parent's event is set."""
    global _stop_event
    _stop_event = event
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_IGN)


def _worker_should_stop() -> bool:
    return _stop_event is not None and bool(_stop_event.is_set())


def execute(
    jobs: Sequence[SweepJob],
    *,
    workers: int = 1,
    dask_address: str | None = None,
    should_stop: Callable[[], bool] | None = None,
) -> Iterator[RunOutcome]:
    """Run the jobs, yielding each outcome as it finishes (not in plan order with a pool).

    Stops starting jobs once `should_stop()` is true; runs cut short are not yielded.

    Raises:
        PrunetrailError: --dask without the optional `distributed` package, or no cluster.
    """
    stop = should_stop or (lambda: False)
    if dask_address is not None:
        outcomes = _on_dask(jobs, dask_address, stop)
    elif workers <= 1:
        outcomes = (run_job(job, stop) for job in jobs if not stop())
    else:
        outcomes = _in_pool(jobs, workers, stop)
    for outcome in outcomes:
        if outcome.status != INTERRUPTED:
            yield outcome


def _in_pool(
    jobs: Sequence[SweepJob], workers: int, stop: Callable[[], bool]
) -> Iterator[RunOutcome]:
    context = multiprocessing.get_context("spawn")
    event = context.Event()
    pool = ProcessPoolExecutor(
        max_workers=workers, mp_context=context, initializer=_worker_init, initargs=(event,)
    )
    pending: set[Future[RunOutcome]] = {pool.submit(run_job, job) for job in jobs}
    try:
        while pending:
            done, pending = wait(pending, timeout=0.2, return_when=FIRST_COMPLETED)
            for future in done:
                if not future.cancelled():
                    yield future.result()
            if stop():
                event.set()
                for future in pending:
                    future.cancel()
    finally:
        event.set()
        pool.shutdown(wait=True, cancel_futures=True)


def _on_dask(
    jobs: Sequence[SweepJob], address: str, stop: Callable[[], bool]
) -> Iterator[RunOutcome]:
    try:
        # Imported by name and used untyped: an optional extra, absent from most installs.
        distributed: Any = importlib.import_module("distributed")
    except ImportError:
        raise PrunetrailError(
            "--dask needs the optional 'distributed' package: pip install 'prunetrail[cluster]'"
        ) from None
    try:
        client = distributed.Client(address, timeout=DASK_CONNECT_SECONDS)
    except (OSError, TimeoutError) as exc:
        raise PrunetrailError(f"cannot reach the Dask scheduler at {address}: {exc}") from None
    try:
        futures = [
            client.submit(run_job, job, pure=False, priority=-job.seq, key=f"sweep-{job.seq}")
            for job in jobs
        ]
        results = distributed.as_completed(futures)
        for future in results:
            if stop():
                client.cancel(futures)
                break
            yield future.result()
    finally:
        client.close()


# -- summarising --------------------------------------------------------------------------


@dataclass
class SweepRow:
    """One cell of the sweep: an instance at one cutoff.

    Attributes:
        nodes, decisions: from the counted run (every timed run must agree on nodes).
        bound_evaluations: nodes whose bound was computed.
        leaves: complete tours reached (tour and tour_better).
        seconds: median wall time of the timed runs; `times` holds them all.
        length: the tour length found (every run must find the same).
        status: "complete", or "limit" when a run stopped at --max-nodes.
        bound_ops: Σ over bound evaluations of k² + 2k (the model's bound cost).
        evaluations_per_k, nodes_per_k: bound evaluations and nodes by unvisited count k.
        model_nodes, model_seconds: the cost model's predictions (None until fitted).
    """

    instance: str
    n: int
    cutoff: int
    nodes: int
    decisions: dict[str, int]
    bound_evaluations: int
    leaves: int
    seconds: float
    times: list[float]
    length: float | None
    status: str
    bound_ops: int
    evaluations_per_k: NDArray[np.int64] = field(repr=False)
    nodes_per_k: NDArray[np.int64] = field(repr=False)
    model_nodes: int | None = None
    model_seconds: float | None = None

    @property
    def model_ratio(self) -> float | None:
        """Measured ÷ modelled seconds."""
        if not self.model_seconds:
            return None
        return self.seconds / self.model_seconds

    @property
    def disagrees(self) -> bool:
        """Whether the model misses the measured time by more than `DISAGREES_BEYOND`."""
        r = self.model_ratio
        return r is not None and not 1 / DISAGREES_BEYOND <= r <= DISAGREES_BEYOND

    def to_json(self) -> dict[str, Any]:
        return {
            "instance": self.instance,
            "n": self.n,
            "cutoff": self.cutoff,
            "nodes": self.nodes,
            "bound_evaluations": self.bound_evaluations,
            "leaves": self.leaves,
            "prunes": self.decisions.get("prune", 0),
            "seconds": self.seconds,
            "times": self.times,
            "repeats": len(self.times),
            "length": self.length,
            "status": self.status,
            "bound_ops": self.bound_ops,
            "model_nodes": self.model_nodes,
            "model_seconds": self.model_seconds,
            "model_ratio": self.model_ratio,
            "model_disagrees": self.disagrees,
        }


#: The columns of a row, in CSV order.
ROW_FIELDS = (
    "instance",
    "n",
    "cutoff",
    "nodes",
    "bound_evaluations",
    "leaves",
    "prunes",
    "seconds",
    "repeats",
    "length",
    "status",
    "bound_ops",
    "model_nodes",
    "model_seconds",
    "model_ratio",
    "model_disagrees",
)


def bound_evaluations_per_k(
    counts: NDArray[np.int64], cutoff: int, bound: str
) -> NDArray[np.int64]:
    """evaluations[k]: bounds computed at nodes with k unvisited cities (from counts[d, code])."""
    n = counts.shape[0]
    per_depth = counts[:, Decision.EXPAND] + counts[:, Decision.PRUNE]
    k = n - 1 - np.arange(n)
    evaluated = np.where((k > cutoff) & (bound != NO_BOUND), per_depth, 0)
    return np.asarray(evaluated[::-1], dtype=np.int64)


def _bound_ops(per_k: NDArray[np.int64]) -> int:
    k = np.arange(len(per_k), dtype=np.int64)
    return int((per_k * (k * k + 2 * k)).sum())


class SweepTable:
    """Collects outcomes into rows; a row is ready once its counted and timed runs are in."""

    def __init__(self, jobs: Sequence[SweepJob]) -> None:
        self.jobs = {job.seq: job for job in jobs}
        self.expected: dict[tuple[str, int], int] = {}
        for job in jobs:
            key = (job.label, job.settings.cutoff)
            self.expected[key] = self.expected.get(key, 0) + 1
        self.outcomes: dict[tuple[str, int], list[RunOutcome]] = {}
        self.rows: dict[tuple[str, int], SweepRow] = {}
        self.warnings: list[str] = []

    def add(self, outcome: RunOutcome) -> SweepRow | None:
        """Take one outcome; returns the cell's row when this completed it."""
        key = (outcome.label, outcome.cutoff)
        runs = self.outcomes.setdefault(key, [])
        runs.append(outcome)
        if len(runs) < self.expected[key]:
            return None
        row = self._row(key, runs)
        self.rows[key] = row
        return row

    def partial_rows(self) -> list[SweepRow]:
        """Rows of cells with a counted and at least one timed run but not every repeat."""
        out = []
        for key, runs in self.outcomes.items():
            if key in self.rows:
                continue
            if any(r.repeat == COUNTED for r in runs) and any(r.repeat >= 0 for r in runs):
                out.append(self._row(key, runs))
        return out

    def _row(self, key: tuple[str, int], runs: list[RunOutcome]) -> SweepRow:
        label, cutoff = key
        counted = next(r for r in runs if r.repeat == COUNTED)
        timed = sorted((r for r in runs if r.repeat >= 0), key=lambda r: r.repeat)
        job = self.jobs[counted.seq]
        assert counted.counts is not None
        per_k = bound_evaluations_per_k(counted.counts, cutoff, job.settings.bound)
        odd = sorted({r.nodes for r in timed if r.nodes != counted.nodes})
        if odd:
            self.warnings.append(
                f"{label} cutoff {cutoff}: the timed runs visited {odd} nodes, the counted "
                f"run {counted.nodes}"
            )
        statuses = {r.status for r in runs}
        times = [r.seconds for r in timed]
        return SweepRow(
            instance=label,
            n=job.instance.n,
            cutoff=cutoff,
            nodes=counted.nodes,
            decisions=dict(counted.decisions),
            bound_evaluations=int(per_k.sum()),
            leaves=counted.decisions.get("tour", 0) + counted.decisions.get("tour_better", 0),
            seconds=statistics.median(times) if times else math.nan,
            times=times,
            length=counted.length,
            status=COMPLETE if statuses == {COMPLETE} else sorted(statuses - {COMPLETE})[0],
            bound_ops=_bound_ops(per_k),
            evaluations_per_k=per_k,
            nodes_per_k=np.asarray(counted.counts.sum(axis=1)[::-1], dtype=np.int64),
        )


def length_warnings(
    rows: Sequence[SweepRow], outcomes: dict[tuple[str, int], list[RunOutcome]]
) -> list[str]:
    """One warning per instance whose complete runs did not all find the same length."""
    by_instance: dict[str, set[float | None]] = {}
    for (label, _), runs in outcomes.items():
        for r in runs:
            if r.status == COMPLETE:
                by_instance.setdefault(label, set()).add(
                    None if r.length is None else round(r.length, 6)
                )
    return [
        f"{label}: the runs found different tour lengths {sorted(map(str, found))}; an exact "
        "search must find one optimum — the search or a planted fault is wrong"
        for label, found in by_instance.items()
        if len(found) > 1
    ]


def fit_model(rows: Sequence[SweepRow]) -> dict[str, dict[str, Any]]:
    """Fit the cost model per instance, fill each row's model columns, return the fits.

    seconds ≈ a · bound_ops + b · nodes, a and b ≥ 0 by least squares over the instance's
    complete rows. Modelled nodes at cutoff c, from the counted run at the instance's
    lowest cutoff c0: the nodes with k > c stay, and each node at k = c enumerates its
    whole subtree (Σ_j c!/j! nodes); modelled bound ops are those of the k > c nodes.
    """
    fits: dict[str, dict[str, Any]] = {}
    for label in dict.fromkeys(r.instance for r in rows):
        mine = sorted(
            (r for r in rows if r.instance == label and r.status == COMPLETE),
            key=lambda r: r.cutoff,
        )
        if not mine:
            continue
        a, b = _least_squares(
            np.array([r.bound_ops for r in mine], dtype=np.float64),
            np.array([r.nodes for r in mine], dtype=np.float64),
            np.array([r.seconds for r in mine], dtype=np.float64),
        )
        base = mine[0]
        for r in mine:
            nodes = _modelled_nodes(base.nodes_per_k, r.cutoff, base.cutoff, base.nodes)
            k = np.arange(len(base.evaluations_per_k))
            ops = _bound_ops(np.where(k > r.cutoff, base.evaluations_per_k, 0))
            r.model_nodes = nodes
            r.model_seconds = a * ops + b * nodes
        best = min(mine, key=lambda r: r.model_seconds or math.inf)
        fits[label] = {
            "seconds_per_bound_op": a,
            "seconds_per_node": b,
            "model_cutoff": best.cutoff,
            "lowest_cutoff_counted": base.cutoff,
        }
    return fits


def _modelled_nodes(per_k: NDArray[np.int64], cutoff: int, base_cutoff: int, base: int) -> int:
    if cutoff == base_cutoff:
        return base
    if cutoff >= len(per_k):
        cutoff = len(per_k) - 1
    subtree = sum(math.factorial(cutoff) // math.factorial(j) for j in range(cutoff + 1))
    return int(per_k[cutoff + 1 :].sum()) + int(per_k[cutoff]) * subtree


def _least_squares(
    ops: NDArray[np.float64], nodes: NDArray[np.float64], seconds: NDArray[np.float64]
) -> tuple[float, float]:
    """Non-negative (a, b) minimising Σ (a·ops + b·nodes − seconds)²."""
    candidates: list[tuple[float, float]] = []
    if len(seconds) >= 2:
        solution = np.linalg.lstsq(np.column_stack([ops, nodes]), seconds, rcond=None)[0]
        if (solution >= 0).all():
            candidates.append((float(solution[0]), float(solution[1])))
    for column, place in ((ops, 0), (nodes, 1)):
        norm = float(column @ column)
        if norm > 0:
            coef = max(float(column @ seconds) / norm, 0.0)
            candidates.append((coef, 0.0) if place == 0 else (0.0, coef))
    if not candidates:
        return 0.0, 0.0

    def residual(ab: tuple[float, float]) -> float:
        return float(((ab[0] * ops + ab[1] * nodes - seconds) ** 2).sum())

    return min(candidates, key=residual)


def recommend(rows: Sequence[SweepRow]) -> dict[str, Any]:
    """The cutoff with the lowest median per instance and overall, and how flat the optimum is.

    Overall: the cutoff with the lowest geometric mean of time ÷ the instance's best time,
    over the cutoffs every instance completed.
    """
    per_instance: dict[str, Any] = {}
    relative: dict[str, dict[int, float]] = {}
    for label in dict.fromkeys(r.instance for r in rows):
        mine = [r for r in rows if r.instance == label and r.status == COMPLETE]
        mine = [r for r in mine if math.isfinite(r.seconds)]
        if not mine:
            continue
        best = min(mine, key=lambda r: (r.seconds, r.cutoff))
        floor = max(best.seconds, 1e-9)
        relative[label] = {r.cutoff: r.seconds / floor for r in mine}
        per_instance[label] = {
            "cutoff": best.cutoff,
            "seconds": best.seconds,
            "flat": sorted(c for c, v in relative[label].items() if v <= FLAT_WITHIN),
            "worst_ratio": max(relative[label].values()),
        }
    overall: dict[str, Any] | None = None
    if relative:
        shared = set.intersection(*(set(v) for v in relative.values()))
        means = {
            c: math.exp(statistics.fmean(math.log(max(v[c], 1e-12)) for v in relative.values()))
            for c in sorted(shared)
        }
        if means:
            cutoff = min(means, key=lambda c: (means[c], c))
            low = means[cutoff]
            overall = {
                "cutoff": cutoff,
                "geometric_mean": means,
                "flat": sorted(c for c, m in means.items() if m <= low * FLAT_WITHIN),
            }
    return {"per_instance": per_instance, "overall": overall, "flat_within": FLAT_WITHIN}
