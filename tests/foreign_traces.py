"""JSON Lines traces as a foreign solver would print them, made from a search we ran, so
tests and benchmarks have large valid traces without a second solver."""

from __future__ import annotations

import json
from collections.abc import Iterator
from pathlib import Path

from tracer.analysis import TreeIndex
from tracer.base import BOUND_PARTS, Instance, Trail, is_absent
from tracer.base.frames import EndInfo
from tracer.search.driver import SearchSettings, make_start, run_search, trail_header
from tracer.trails.reader import read_trail
from tracer.trails.writer import TrailWriter

#: Each foreign id is this plus the pre-order id, so ids are not simply 0..count-1.
ID_BASE = 1000


def solve_to_trail(instance: Instance, path: Path, settings: SearchSettings) -> Trail:
    """Run our search into a trail file and read it back."""
    start = make_start(instance, "nn", "2opt")
    writer = TrailWriter(path, trail_header(instance, settings, start, "test"))
    r = run_search(instance, settings, start, sink=writer)
    writer.close(EndInfo(r.status, r.nodes, r.recorded, r.decisions, r.seconds, r.length, r.tour))
    return read_trail(path)


def _number(value: float) -> int | float:
    return int(value) if float(value).is_integer() else float(value)


def jsonl_lines(trail: Trail) -> Iterator[str]:
    """The trail as JSON Lines: a header, one node line per record, best lines, an end."""
    inst = trail.header.instance
    header_instance = (
        {"name": inst.name, "coords": inst.coords.tolist(), "metric": inst.metric}
        if inst.coords is not None and inst.metric != "EXPLICIT"
        else {"name": inst.name, "matrix": inst.matrix.tolist()}
    )
    solver = {"bound": trail.header.solver.bound, "cutoff": trail.header.solver.cutoff}
    solver["start"] = trail.header.solver.start
    yield json.dumps({"kind": "header", "instance": header_instance, "solver": solver})
    for b in trail.best:
        if b.node < 0:
            yield json.dumps(
                {"kind": "best", "id": None, "length": _number(b.length), "tour": list(b.tour)}
            )
    cols = trail.columns
    index = TreeIndex(cols, trail.best)
    absent = {k: is_absent(cols[k]) for k in BOUND_PARTS}
    lists = {k: cols[k].tolist() for k in (*BOUND_PARTS, "city", "depth", "decision")}
    link_city = {k: cols[k].tolist() for k in ("link_in_city", "link_out_city")}
    names = ("expand", "prune", "skip", "tour_better", "tour")
    best_at = {b.node: b for b in trail.best if b.node >= 0}
    parent = index.parent.tolist()
    n = inst.n
    for i in range(trail.count):
        line: dict[str, object] = {
            "kind": "node",
            "id": ID_BASE + i,
            "parent": None if i == 0 else ID_BASE + parent[i],
            "city": lists["city"][i],
            "partial": _number(lists["partial"][i]),
            "decision": names[lists["decision"][i]],
        }
        if lists["depth"][i] == n - 1:
            line["length"] = _number(lists["partial"][i] + lists["link_out"][i])
        else:
            if not absent["tree"][i]:
                line["tree"] = _number(lists["tree"][i])
            for key in ("link_in", "link_out"):
                if not absent[key][i]:
                    line[key] = [link_city[f"{key}_city"][i], _number(lists[key][i])]
        yield json.dumps(line)
        if i in best_at:
            b = best_at[i]
            yield json.dumps(
                {
                    "kind": "best",
                    "id": ID_BASE + i,
                    "length": _number(b.length),
                    "tour": list(b.tour),
                }
            )
    status = "complete" if trail.end is None else trail.end.status
    yield json.dumps({"kind": "end", "status": status})


def write_jsonl(trail: Trail, path: Path) -> int:
    """Write the trail as a JSON Lines trace; returns the number of lines."""
    count = 0
    with open(path, "w") as handle:
        for line in jsonl_lines(trail):
            handle.write(line + "\n")
            count += 1
    return count
