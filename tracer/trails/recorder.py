"""Recording a Python solver's own search, a few lines added to the solver.

The recorder appends each call as one JSON line to `<path>.jsonl` (line-buffered, so a
crash loses at most the line being written and `prunetrail import` can recover the rest).
`close` turns that file into the trail at `path` through the JSON Lines importer and removes
it. Going through the interchange format keeps one set of checks for every foreign solver;
a node is a short formatted line, cheap next to the bound a solver computes for it.

    rec = Recorder("run.trail", matrix, cutoff=3)                # before the search
    me = rec.node(parent_id, city, partial, tree, (c_in, d_in),  # at each node; its children
                  (c_out, d_out), decision="expand")             # pass `me` as their parent
    # (a solver with a bound of its own: Recorder(..., bound="mine"), rec.node(..., bound=b))
    rec.best(length, tour, node=me)                              # at a better tour
    rec.close()                                                  # after the search
"""

from __future__ import annotations

import json
import math
import operator
from collections.abc import Iterable
from pathlib import Path
from types import TracebackType
from typing import Any, SupportsFloat, SupportsIndex

import numpy as np
from numpy.typing import ArrayLike

from tracer.base import (
    COMPLETE,
    COORD_METRICS,
    DECISION_BY_NAME,
    DECISION_NAMES,
    INTERRUPTED,
    STATUSES,
    TREE_LINKS,
    Decision,
    Instance,
    Trail,
    explicit_instance,
)
from tracer.trails.jsonl import check_header, import_jsonl

#: A link as the solver gives it: (city, length).
Link = tuple[SupportsIndex, SupportsFloat]


def _number(value: SupportsFloat) -> str:
    """A length as JSON: whole numbers stay whole, floats round-trip exactly."""
    if isinstance(value, int | np.integer) and not isinstance(value, bool):
        return str(int(value))
    number = float(value)
    if not math.isfinite(number):
        raise ValueError(f"lengths must be finite, got {number} (pass None if not computed)")
    return repr(number)


def _optional(value: SupportsFloat | None) -> str:
    return "null" if value is None else _number(value)


def _link(link: Link | None) -> str:
    if link is None:
        return "null"
    city, length = link
    return f"[{operator.index(city)},{_number(length)}]"


def _as_instance(instance_or_matrix: Instance | ArrayLike, name: str) -> Instance:
    if isinstance(instance_or_matrix, Instance):
        return instance_or_matrix
    matrix = np.asarray(instance_or_matrix)
    if matrix.ndim != 2 or matrix.shape[0] != matrix.shape[1] or matrix.dtype.kind not in "iuf":
        raise ValueError("expected an Instance or a square matrix of numbers")
    return explicit_instance(name, matrix.astype(np.int64 if matrix.dtype.kind in "iu" else float))


def _header_line(instance: Instance, bound: str, cutoff: int, start: str | None) -> str:
    described: dict[str, Any] = {"name": instance.name}
    if instance.metric in COORD_METRICS and instance.coords is not None:
        described["coords"] = instance.coords.tolist()
        described["metric"] = instance.metric
    else:
        described["matrix"] = instance.matrix.tolist()
        if instance.coords is not None:
            described["coords"] = instance.coords.tolist()
    solver = {"bound": bound, "cutoff": cutoff, "start": start}
    return json.dumps({"kind": "header", "instance": described, "solver": solver})


class Recorder:
    """Records every node of a search, then writes the trail.

    Node ids are handed out in call order, so call `node` in the order the search visits
    its nodes (depth-first or not; the trail keeps the visit order).

    Args:
        path: the trail file written by `close`; `<path>.jsonl` holds the lines until then.
        instance_or_matrix: an `Instance`, or a square symmetric distance matrix.
        bound: "tree+links" when the recorded tree and links follow prunetrail's definition
            (the re-check then verifies them); any other name for a bound of your own.
        cutoff: the small-remainder cutoff the search uses (nodes with that many unvisited
            cities or fewer get no bound).
        start: how the start tour was made, if the search starts from one.

    Raises:
        InputError: the instance or the settings cannot go into a trail.
    """

    def __init__(
        self,
        path: str | Path,
        instance_or_matrix: Instance | ArrayLike,
        *,
        bound: str = TREE_LINKS,
        cutoff: int = 0,
        start: str | None = None,
    ) -> None:
        self.path = Path(path)
        self.jsonl_path = self.path.with_name(self.path.name + ".jsonl")
        instance = _as_instance(instance_or_matrix, self.path.stem)
        header = _header_line(instance, bound, cutoff, start)
        check_header(header, self.jsonl_path)  # the import's own checks, before any node
        self._count = 0
        self._trail: Trail | None = None
        self._file = open(self.jsonl_path, "w", encoding="utf-8", buffering=1)  # noqa: SIM115
        self._file.write(header + "\n")

    @property
    def nodes(self) -> int:
        """How many nodes have been recorded."""
        return self._count

    def node(
        self,
        parent: int | None,
        city: SupportsIndex,
        partial: SupportsFloat,
        tree: SupportsFloat | None = None,
        link_in: Link | None = None,
        link_out: Link | None = None,
        *,
        decision: str | Decision,
        length: SupportsFloat | None = None,
        bound: SupportsFloat | None = None,
    ) -> int:
        """Record one node, in visit order.

        Args:
            parent: the id `node` returned for the parent; None for the root (city 0).
            city: the city this node adds to its parent's path.
            partial: length of the open path.
            tree: minimum-spanning-tree weight over the unvisited cities, if computed.
            link_in: (city, length) of the cheapest edge from the path's last city into the
                unvisited cities, if computed.
            link_out: (city, length) of the cheapest edge from the unvisited cities back to
                city 0, if computed.
            decision: one of expand, prune, skip, tour_better, tour.
            length: the closed tour's length, at a path holding every city (only there;
                left out, it is the path plus its closing edge).
            bound: the solver's own bound for the node, if it computes one (kept as the
                trail's `bound` column; with a bound name of your own, decisions are judged
                against it).

        Returns:
            The node's id.
        """
        name = decision.name.lower() if isinstance(decision, Decision) else decision
        if name not in DECISION_BY_NAME:
            raise ValueError(f"unknown decision {name!r}; expected one of {DECISION_NAMES}")
        ident = self._count
        up = "null" if parent is None else operator.index(parent)
        closing = "" if length is None else f',"length":{_number(length)}'
        if bound is not None:
            closing += f',"bound":{_number(bound)}'
        self._file.write(
            f'{{"kind":"node","id":{ident},"parent":{up},"city":{operator.index(city)},'
            f'"partial":{_number(partial)},"tree":{_optional(tree)},"link_in":{_link(link_in)},'
            f'"link_out":{_link(link_out)},"decision":"{name}"{closing}}}\n'
        )
        self._count += 1
        return ident

    def best(
        self, length: SupportsFloat, tour: Iterable[SupportsIndex], node: int | None = None
    ) -> None:
        """Record a new incumbent.

        Args:
            length: the tour's length.
            tour: every city once, starting at city 0.
            node: the id of the node whose tour it is; None for a tour found outside the
                search (a start tour), in force from the next node recorded.
        """
        cities = ",".join(str(operator.index(c)) for c in tour)
        ident = "null" if node is None else operator.index(node)
        self._file.write(
            f'{{"kind":"best","id":{ident},"length":{_number(length)},"tour":[{cities}]}}\n'
        )

    def close(self, status: str = COMPLETE) -> Trail:
        """Finish the recording: write the trail at `path` and remove the JSON Lines file.

        Args:
            status: "complete", "interrupted" or "limit".

        Returns:
            The trail as written.

        Raises:
            InputError: a recorded line is malformed (the JSON Lines file is kept, and the
                message names its line and field).
        """
        if status not in STATUSES:
            raise ValueError(f"status must be one of {STATUSES}")
        if self._trail is None:
            if not self._file.closed:
                self._file.write(json.dumps({"kind": "end", "status": status}) + "\n")
                self._file.close()
            self._trail = import_jsonl(self.jsonl_path, self.path)
            self.jsonl_path.unlink()
        return self._trail

    def __enter__(self) -> Recorder:
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self.close(COMPLETE if exc_type is None else INTERRUPTED)
