"""`prunetrail tour` and `prunetrail info`: start tours, and a quick look at an instance or a
trail (`info` sniffs which one it was given, so a trail is never misread as an instance)."""

from __future__ import annotations

import argparse
import time
from pathlib import Path
from typing import Any

import numpy as np
from rich.table import Table
from rich.text import Text

from tracer.base import (
    DECISION,
    DECISION_NAMES,
    MATRIX_MAX_CITIES,
    FileKind,
    Instance,
    PrunetrailError,
    Trail,
    sniff,
)
from tracer.cli._console import emit_json, out
from tracer.formats import format_tour, load_instance, load_tour
from tracer.search import CONSTRUCTIONS, IMPROVEMENTS, start_tour, tour_length
from tracer.trails import open_trail


def add_start_options(parser: argparse.ArgumentParser, *, allow_none: bool) -> None:
    """--start and --improve, shared by `tour` and `solve`."""
    starts = [*CONSTRUCTIONS, "none"] if allow_none else list(CONSTRUCTIONS)
    parser.add_argument(
        "--start",
        choices=starts,
        default="nn",
        help="construction: nearest neighbour, greedy edge, farthest or cheapest insertion"
        + (", or none for an infinite start incumbent" if allow_none else "")
        + " (default: nn)",
    )
    parser.add_argument(
        "--improve",
        choices=list(IMPROVEMENTS),
        default="2opt+oropt",
        help="local search run to a local optimum after the construction (default: 2opt+oropt)",
    )


def register(sub: argparse._SubParsersAction[argparse.ArgumentParser]) -> None:
    """Add the `tour` and `info` commands."""
    tour = sub.add_parser(
        "tour",
        help="build a start tour and print its length",
        description="Build a tour with a construction heuristic and a local search, print its "
        "length, and optionally write it as a TSPLIB tour file.",
    )
    tour.epilog = (
        "examples:\n"
        "  prunetrail tour scenarios/orchard_rounds.tsp\n"
        "  prunetrail tour big.tsp --start greedy --improve 2opt -o big.tour --json\n\n"
        "exit status: 0 done, 2 bad input."
    )
    tour.formatter_class = argparse.RawDescriptionHelpFormatter
    tour.add_argument("instance", help="TSPLIB .tsp/.atsp file or CSV city list")
    add_start_options(tour, allow_none=False)
    tour.add_argument("-o", "--output", metavar="FILE.tour", help="write the tour (TSPLIB)")
    tour.add_argument("--json", action="store_true", help="print one JSON object")
    tour.set_defaults(run=run_tour)

    info = sub.add_parser(
        "info",
        help="describe an instance (and a tour's length), or a trail",
        description="Show an instance's size, metric, symmetry, shortest and longest edge, "
        "and a nearest-neighbour tour's length; with --tour, that tour's length too. Given "
        "a trail (or a JSON Lines trace), show its instance, solver settings, node count, "
        "decisions, status and incumbent instead.",
    )
    info.epilog = (
        "examples:\n"
        "  prunetrail info scenarios/lantern_ferry.tsp\n"
        "  prunetrail info run.tsp --tour best.tour --json\n"
        "  prunetrail info run.trail\n\n"
        "exit status: 0 done, 2 bad input."
    )
    info.formatter_class = argparse.RawDescriptionHelpFormatter
    info.add_argument(
        "instance", help="TSPLIB .tsp/.atsp file or CSV city list; or a .trail / .jsonl trace"
    )
    info.add_argument("--tour", metavar="FILE.tour", help="a TSPLIB tour file to measure")
    info.add_argument("--json", action="store_true", help="print one JSON object")
    info.set_defaults(run=run_info)


def _number(value: float | int) -> int | float:
    return int(value) if float(value).is_integer() else float(value)


def run_tour(args: argparse.Namespace) -> int:
    """Build, print and optionally write a start tour."""
    instance = load_instance(args.instance)
    began = time.perf_counter()
    tour = start_tour(instance.matrix, args.start, args.improve)
    seconds = time.perf_counter() - began
    length = tour_length(instance.matrix, tour)
    if args.output:
        comment = f"{args.start}+{args.improve} tour, length {length}"
        try:
            Path(args.output).write_text(format_tour(instance.name, tour, comment))
        except OSError as exc:
            raise PrunetrailError(f"cannot write {args.output}: {exc.strerror or exc}") from None
    if args.json:
        emit_json(
            {
                "instance": instance.name,
                "n": instance.n,
                "start": args.start,
                "improve": args.improve,
                "length": _number(length),
                "tour": [int(c) for c in tour],
                "seconds": round(seconds, 6),
                "output": args.output,
            }
        )
    else:
        out.print(f"{args.start} + {args.improve}: length {length}  ({seconds:.3f} s)")
        if args.output:
            out.print(f"wrote {args.output}")
    return 0


def describe(instance: Instance, tour_path: str | None) -> dict[str, Any]:
    """The facts `info` shows, as a JSON-ready map."""
    facts: dict[str, Any] = {
        "name": instance.name,
        "n": instance.n,
        "metric": instance.metric,
        "symmetric": None,
        "integral": instance.integral,
        "coordinates": instance.coords is not None,
        "min_edge": None,
        "max_edge": None,
        "start_tour": None,
        "comment": instance.comment,
        "source": instance.source,
    }
    if instance.n > MATRIX_MAX_CITIES:
        facts["note"] = f"more than {MATRIX_MAX_CITIES} cities: no distance matrix is built"
        return facts
    matrix = instance.matrix
    facts["symmetric"] = instance.symmetric
    if instance.n > 1:
        off = matrix[~np.eye(instance.n, dtype=bool)]
        facts["min_edge"], facts["max_edge"] = _number(off.min()), _number(off.max())
        nn = start_tour(matrix, "nn", "none")
        facts["start_tour"] = {"method": "nn", "length": _number(tour_length(matrix, nn))}
    if tour_path is not None:
        facts["tour_length"] = _number(tour_length(matrix, load_tour(tour_path, instance)))
    return facts


def describe_trail(trail: Trail) -> dict[str, Any]:
    """The facts `info` shows for a trail, as a JSON-ready map."""
    inst, solver = trail.header.instance, trail.header.solver
    counts = np.bincount(trail.columns[DECISION], minlength=len(DECISION_NAMES))
    last = trail.best[-1] if trail.best else None
    end = trail.end
    incumbent = end.length if end is not None and end.length is not None else None
    if incumbent is None and last is not None:
        incumbent = last.length
    return {
        "trail": trail.path,
        "instance": {"name": inst.name, "n": inst.n, "metric": inst.metric},
        "solver": {
            "engine": solver.engine,
            "bound": solver.bound,
            "cutoff": solver.cutoff,
            "order": solver.order,
            "start": solver.start,
            "fault": solver.fault,
            "record": solver.record,
            "record_under": None if solver.record_under is None else list(solver.record_under),
            "visit_order": solver.visit_order,
        },
        "columns": [c.name for c in trail.header.columns],
        "nodes": trail.count,
        "decisions": {name: int(counts[i]) for i, name in enumerate(DECISION_NAMES)},
        "status": None if end is None else end.status,
        "complete": end is not None and trail.notice is None,
        "seconds": None if end is None else end.seconds,
        "incumbent": None if incumbent is None else _number(incumbent),
        "incumbent_updates": len(trail.best),
        "notice": trail.notice,
    }


def _print_trail_facts(facts: dict[str, Any]) -> None:
    table = Table(show_header=False, box=None)
    inst, solver = facts["instance"], facts["solver"]
    table.add_row("trail", Text(facts["trail"]))
    table.add_row("instance", Text(f"{inst['name']} ({inst['n']} cities, {inst['metric']})"))
    settings = ", ".join(
        f"{key} {value}"
        for key, value in solver.items()
        if value not in (None, "", False) and key != "visit_order"
    )
    table.add_row(
        "solver", Text(settings + (", visit order kept" if solver["visit_order"] else ""))
    )
    table.add_row("nodes", Text(f"{facts['nodes']:,}"))
    table.add_row(
        "decisions",
        Text(", ".join(f"{name} {count:,}" for name, count in facts["decisions"].items())),
    )
    status = facts["status"] or "no end frame (a live or crashed run)"
    table.add_row("status", Text(status))
    incumbent = facts["incumbent"]
    table.add_row(
        "incumbent",
        Text(
            "none" if incumbent is None else f"{incumbent} (updates: {facts['incumbent_updates']})"
        ),
    )
    if facts["notice"]:
        table.add_row("note", Text(facts["notice"]))
    out.print(table)


def run_info(args: argparse.Namespace) -> int:
    """Print what an instance (or a trail) is."""
    if sniff(args.instance) in (FileKind.TRAIL, FileKind.JSON_LINES):
        if args.tour:
            raise PrunetrailError("--tour measures a tour against an instance, not a trail")
        trail_facts = describe_trail(open_trail(args.instance))
        if args.json:
            emit_json(trail_facts)
        else:
            _print_trail_facts(trail_facts)
        return 0
    facts = describe(load_instance(args.instance), args.tour)
    if args.json:
        emit_json(facts)
        return 0
    table = Table(show_header=False, box=None)
    labels = {
        "name": "name",
        "n": "cities",
        "metric": "metric",
        "symmetric": "symmetric",
        "integral": "whole-number distances",
        "min_edge": "shortest edge",
        "max_edge": "longest edge",
        "tour_length": "tour length (--tour)",
        "comment": "comment",
        "note": "note",
    }
    for key, label in labels.items():
        if key in facts and facts[key] not in (None, ""):
            table.add_row(label, Text(str(facts[key])))
    if facts["start_tour"]:
        table.add_row("nearest-neighbour tour", Text(str(facts["start_tour"]["length"])))
    out.print(table)
    return 0
