"""Benchmark: the penalties bound on TSPLIB instances of 22-76 cities, against the
prototype's node counts quoted in issue 12, and the cost of recording it.

Run: python tests/bench/bench_penalties.py [--steps N] [--root-steps N] [--cutoff K] [names]
Every run starts from the nn+2opt+oropt tour (start tour time not included), nearest-first
children. "recorded" writes every node (π rows included) to a trail, "decisions" writes
the tree's shape only; bytes/node are the trail's.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))  # for tests.reference

from tests.reference import TSPLIB_OPTIMUM, instance_path
from tracer.base.frames import EndInfo
from tracer.base.instance import Instance
from tracer.formats.load import load_instance
from tracer.search.driver import (
    SearchSettings,
    StartTour,
    make_start,
    run_search,
    trail_header,
)
from tracer.trails.writer import TrailWriter

#: Node counts of the prototype quoted in issue 12 (written apart from the project).
PROTOTYPE_NODES = {
    "ulysses22": 819,
    "bays29": 641,
    "dantzig42": 6749,
    "att48": 11955,
    "eil51": 24148,
    "berlin52": 21301,
    "gr48": 204618,
}
NAMES = ("ulysses22", "bays29", "dantzig42", "att48", "gr48", "eil51", "berlin52", "st70", "eil76")
#: Instances small enough for tree+links, for the side-by-side choice of a default bound.
BOTH = ("burma14", "ulysses16", "gr17", "gr21", "gr24", "fri26", "bayg29")


def recorded(
    instance: Instance, settings: SearchSettings, start: StartTour, path: Path
) -> tuple[float, int, int]:
    """Seconds, nodes and trail bytes of one recorded run."""
    writer = TrailWriter(path, trail_header(instance, settings, start, "bench"))
    began = time.perf_counter()
    r = run_search(instance, settings, start, sink=writer)
    size = writer.close(
        EndInfo(r.status, r.nodes, r.recorded, r.decisions, r.seconds, r.length, r.tour)
    )
    return time.perf_counter() - began, r.nodes, size


def main(argv: list[str] | None = None) -> list[dict[str, str]]:
    """Print the table; return summary rows for tests/bench/run_all.py."""
    parser = argparse.ArgumentParser()
    parser.add_argument("names", nargs="*", default=list(NAMES))
    parser.add_argument("--steps", type=int, default=SearchSettings().penalty_steps)
    parser.add_argument("--root-steps", type=int, default=SearchSettings().root_steps)
    parser.add_argument("--cutoff", type=int, default=SearchSettings().cutoff)
    parser.add_argument("--no-record", action="store_true", help="skip the recorded runs")
    parser.add_argument("--no-both", action="store_true", help="skip the two-bound table")
    args = parser.parse_args(argv or [])
    settings = SearchSettings(
        bound="penalties",
        cutoff=args.cutoff,
        penalty_steps=args.steps,
        root_steps=args.root_steps,
    )
    tmp = Path(tempfile.mkdtemp())
    warm = load_instance(instance_path("burma14"))
    run_search(warm, settings, make_start(warm, "nn", "none"))  # compile / load the cache
    print(
        f"## penalties bound: cutoff {args.cutoff}, {args.steps} steps a node, "
        f"{args.root_steps} at the root, start nn+2opt+oropt\n"
    )
    print(
        "| instance | optimum | found | nodes | prototype nodes | ratio | search s "
        "| recorded s | ratio | B/node | decisions s | B/node |"
    )
    print("|---|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|")
    total = 0.0
    proto_nodes = ours_nodes = 0
    reached = True
    for name in args.names:
        instance = load_instance(instance_path(name))
        start = make_start(instance, "nn", "2opt+oropt")
        assert start is not None
        began = time.perf_counter()
        r = run_search(instance, settings, start)
        plain = time.perf_counter() - began
        total += plain
        proto = PROTOTYPE_NODES.get(name)
        ratio = f"{r.nodes / proto:.2f}" if proto else "-"
        ok = r.length == TSPLIB_OPTIMUM[name] and r.status == "complete"
        reached &= ok
        found = "yes" if ok else "NO"
        if proto:
            proto_nodes += proto
            ours_nodes += r.nodes
        cells = [
            name,
            f"{TSPLIB_OPTIMUM[name]}",
            f"{found}",
            f"{r.nodes:,}",
            f"{proto:,}" if proto else "-",
            ratio,
            f"{plain:.2f}",
        ]
        if args.no_record:
            cells += ["-"] * 5
        else:
            rec, nodes, size = recorded(instance, settings, start, tmp / "p.trail")
            slim = SearchSettings(**{**settings.__dict__, "record": "decisions"})
            dec, _, dsize = recorded(instance, slim, start, tmp / "d.trail")
            cells += [
                f"{rec:.2f}",
                f"{rec / plain:.2f}",
                f"{size / nodes:.1f}",
                f"{dec:.2f}",
                f"{dsize / nodes:.1f}",
            ]
        print("| " + " | ".join(cells) + " |", flush=True)
    print(f"\ntotal search seconds (not recorded): {total:.2f}")
    if not args.no_both:
        both(settings)
    return [
        {"measure": "penalties: every published optimum reached", "value": str(reached)},
        {"measure": "penalties: total search seconds", "value": f"{total:.2f}"},
        {
            "measure": "penalties: nodes / prototype nodes (where quoted)",
            "value": f"{ours_nodes / max(proto_nodes, 1):.2f}",
            "target": "<= 1",
        },
    ]


def both(penalties: SearchSettings) -> None:
    """Both bounds at their defaults on instances tree+links can finish, taken in turn."""
    print("\n## tree+links and penalties side by side (defaults, not recorded)\n")
    print("| instance | tree+links nodes | s | penalties nodes | s | nodes ratio | time ratio |")
    print("|---|---:|---:|---:|---:|---:|---:|")
    warm = load_instance(instance_path("burma14"))
    run_search(warm, SearchSettings(), None)  # load tree+links' compiled loop outside the clock
    for name in BOTH:
        instance = load_instance(instance_path(name))
        start = make_start(instance, "nn", "2opt+oropt")
        cells = []
        for settings in (SearchSettings(), penalties):
            began = time.perf_counter()
            r = run_search(instance, settings, start)
            assert r.length == TSPLIB_OPTIMUM[name]
            cells.append((r.nodes, time.perf_counter() - began))
        (a, ta), (b, tb) = cells
        print(
            f"| {name} | {a:,} | {ta:.3f} | {b:,} | {tb:.3f} | {a / b:,.0f} | {ta / tb:,.1f} |",
            flush=True,
        )


if __name__ == "__main__":
    main(sys.argv[1:])
