"""`prunetrail sweep`: which small-remainder cutoff is cheapest, with the evidence.

Rows are written to PREFIX.csv as their cells finish, so Ctrl-C (or a crash) keeps every
finished row; at the end the CSV is rewritten with the cost model's columns and PREFIX.json
gets the whole result.
"""

from __future__ import annotations

import argparse
import csv
import json
import math
import os
from collections.abc import Sequence
from pathlib import Path
from typing import IO, Any

from rich import box
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn
from rich.table import Column, Table
from rich.text import Text

from tracer.base import COMPLETE, TREE_LINKS, Instance, PrunetrailError
from tracer.cli import _plot
from tracer.cli._args import count
from tracer.cli._console import emit_json, err, out
from tracer.cli._signals import stop_requests
from tracer.cli.stats import compact
from tracer.cli.tours import add_start_options
from tracer.formats import load_instance
from tracer.search import (
    BOUNDS,
    DISAGREES_BEYOND,
    FAULTS,
    FLAT_WITHIN,
    ORDERS,
    ROW_FIELDS,
    SearchSettings,
    StartTour,
    SweepRow,
    SweepTable,
    execute,
    fit_model,
    length_warnings,
    make_start,
    parse_cutoffs,
    parse_random,
    plan,
    random_instances,
    recommend,
)

EXIT_LENGTHS_DIFFER = 1
EXIT_INTERRUPTED = 130
#: Lines drawn in the chart; with more instances only the overall mean is drawn.
_CHART_LINES = 8

_EPILOG = f"""\
For each instance and cutoff: one counted run (nodes and bound evaluations per depth,
nothing written to a trail) and --repeat timed runs recording nothing, interleaved in
rounds; the time is their median. Every run of an instance must find the same length.
Recommended: the lowest median per instance; overall, the lowest geometric mean of each
instance's time ÷ its best. "Flat": cutoffs within {FLAT_WITHIN:.2f}× of the best.
Cost model: seconds ≈ a·Σ(k²+2k) over bound evaluations + b·nodes, a and b fitted per
instance; modelled nodes let every node at k = cutoff run through all its orderings
(Σ k!/j!). Cells off the model by more than {DISAGREES_BEYOND:g}× are flagged.

examples:
  prunetrail sweep tests/data/burma14.tsp --cutoffs 0-6
  prunetrail sweep a.tsp b.tsp --cutoffs 0-8 --repeat 5 --workers 2 --out tune
  prunetrail sweep --random 12:4:7 --cutoffs 0,2,4,6 --json
  prunetrail sweep big.tsp --dask tcp://10.0.0.5:8786 --out big

exit status: 0 done; 1 runs of one instance found different lengths; 2 bad input;
130 interrupted (the finished rows are kept)."""


def register(sub: argparse._SubParsersAction[argparse.ArgumentParser]) -> None:
    """Add the `sweep` command."""
    p = sub.add_parser(
        "sweep",
        help="time the search over instances × cutoffs and recommend a cutoff",
        description="Run the exact search (no trail) for every instance and small-remainder "
        "cutoff, repeated and interleaved; print nodes, bound evaluations, leaves and the "
        "median time, a chart of time against cutoff, the recommended cutoff with how flat "
        "the optimum is, and a fitted cost model beside the measurements.",
        epilog=_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("instances", nargs="*", metavar="INSTANCE", help="TSPLIB .tsp or CSV files")
    p.add_argument(
        "--cutoffs",
        type=_cutoffs,
        default=parse_cutoffs("0-6"),
        metavar="LIST",
        help="cutoffs to try: 0-10, 0,2,4 or 0-3,6 (default: 0-6)",
    )
    p.add_argument(
        "--repeat", type=_positive, default=3, metavar="R", help="timed runs per cell (default 3)"
    )
    p.add_argument(
        "--random",
        type=_random,
        action="append",
        default=[],
        metavar="N:COUNT:SEED",
        help="add COUNT uniform and COUNT clustered instances of N cities (seeded); repeatable",
    )
    p.add_argument(
        "--workers",
        type=_positive,
        default=os.cpu_count() or 1,
        metavar="W",
        help="local worker processes (default: one per core; 1 runs in this process)",
    )
    p.add_argument(
        "--dask",
        metavar="ADDRESS",
        help="run on the Dask cluster at ADDRESS instead (needs prunetrail[cluster])",
    )
    p.add_argument("--out", metavar="PREFIX", help="write PREFIX.csv and PREFIX.json")
    p.add_argument("--max-nodes", type=count, metavar="N", help="stop each run after N nodes")
    p.add_argument("--order", choices=ORDERS, default="nearest", help="child order")
    p.add_argument("--bound", choices=BOUNDS, default=TREE_LINKS, help="the bound")
    p.add_argument(
        "--fault",
        choices=list(FAULTS),
        metavar="NAME",
        help="plant a bound mistake (see `prunetrail solve --help`); lengths may then differ",
    )
    add_start_options(p, allow_none=True)
    p.add_argument("--no-chart", action="store_true", help="leave out the chart")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(run=run)


def _cutoffs(text: str) -> list[int]:
    try:
        return parse_cutoffs(text)
    except ValueError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None


def _random(text: str) -> tuple[int, int, int]:
    try:
        return parse_random(text)
    except ValueError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None


def _positive(text: str) -> int:
    value = count(text)
    if value < 1:
        raise argparse.ArgumentTypeError("must be 1 or more")
    return value


def _instances(args: argparse.Namespace) -> list[tuple[str, Instance, StartTour | None]]:
    """Every instance with a unique label and its start tour."""
    found: list[Instance] = [load_instance(path) for path in args.instances]
    for n, many, seed in args.random:
        found += random_instances(n, many, seed)
    if not found:
        raise PrunetrailError("give at least one INSTANCE file or --random N:COUNT:SEED")
    labelled: list[tuple[str, Instance, StartTour | None]] = []
    seen: dict[str, int] = {}
    for instance in found:
        seen[instance.name] = seen.get(instance.name, 0) + 1
        label = (
            instance.name if seen[instance.name] == 1 else f"{instance.name}#{seen[instance.name]}"
        )
        labelled.append((label, instance, make_start(instance, args.start, args.improve)))
    return labelled


class _CsvRows:
    """PREFIX.csv, one line per finished cell, flushed at once."""

    def __init__(self, path: Path) -> None:
        self.path = path
        self.file: IO[str] = _open(path)
        self.writer = csv.DictWriter(self.file, fieldnames=ROW_FIELDS, extrasaction="ignore")
        self.writer.writeheader()
        self.file.flush()

    def add(self, row: SweepRow) -> None:
        self.writer.writerow(_csv_values(row))
        self.file.flush()

    def rewrite(self, rows: Sequence[SweepRow]) -> None:
        """Replace the file with every row, model columns filled (atomically)."""
        self.file.close()
        temporary = self.path.with_name(self.path.name + ".part")
        with _open(temporary) as f:
            writer = csv.DictWriter(f, fieldnames=ROW_FIELDS, extrasaction="ignore")
            writer.writeheader()
            for row in rows:
                writer.writerow(_csv_values(row))
        temporary.replace(self.path)


def _open(path: Path) -> IO[str]:
    try:
        return path.open("w", newline="", encoding="utf-8")
    except OSError as exc:
        raise PrunetrailError(f"cannot write {path}: {exc.strerror or exc}") from None


def _csv_values(row: SweepRow) -> dict[str, Any]:
    return {k: ("" if v is None else v) for k, v in row.to_json().items()}


def run(args: argparse.Namespace) -> int:
    """Plan, run and report the sweep."""
    instances = _instances(args)
    settings = SearchSettings(
        order=args.order, bound=args.bound, fault=args.fault, max_nodes=args.max_nodes
    )
    jobs = plan(instances, args.cutoffs, args.repeat, settings)
    table = SweepTable(jobs)
    csv_rows = None if args.out is None else _CsvRows(Path(f"{args.out}.csv"))
    progress = Progress(
        TextColumn("sweeping"),
        BarColumn(),
        MofNCompleteColumn(),
        TextColumn("runs · {task.fields[cells]} cells done"),
        TimeElapsedColumn(),
        console=err,
        transient=True,
        disable=not err.is_terminal,
    )
    interrupted = False
    try:
        with stop_requests() as stop, progress:
            task = progress.add_task("sweep", total=len(jobs), cells=0)
            workers = 1 if args.dask else args.workers
            for outcome in execute(jobs, workers=workers, dask_address=args.dask, should_stop=stop):
                row = table.add(outcome)
                progress.update(task, advance=1, cells=len(table.rows))
                if row is not None and csv_rows is not None:
                    csv_rows.add(row)
            interrupted = stop()
    except KeyboardInterrupt:  # a second Ctrl-C: stop waiting, keep what finished
        interrupted = True
    rows = sorted(
        [*table.rows.values(), *(table.partial_rows() if interrupted else [])],
        key=lambda r: ([i[0] for i in instances].index(r.instance), r.cutoff),
    )
    fits = fit_model(rows)
    recommended = recommend(rows)
    warnings = length_warnings(rows, table.outcomes) + table.warnings
    report = {
        "rows": [r.to_json() for r in rows],
        "recommended": recommended,
        "model": fits,
        "warnings": warnings,
        "interrupted": interrupted,
        "settings": {
            "cutoffs": args.cutoffs,
            "repeat": args.repeat,
            "order": args.order,
            "bound": args.bound,
            "fault": args.fault,
            "start": args.start,
            "improve": args.improve,
            "max_nodes": args.max_nodes,
            "workers": None if args.dask else args.workers,
            "dask": args.dask,
        },
    }
    if csv_rows is not None:
        csv_rows.rewrite(rows)
        json_path = Path(f"{args.out}.json")
        try:
            json_path.write_text(json.dumps(report, indent=1) + "\n", encoding="utf-8")
        except OSError as exc:
            raise PrunetrailError(f"cannot write {json_path}: {exc.strerror or exc}") from None
    for warning in warnings:
        err.print(Text(f"WARNING: {warning}", style="bold red"))
    if interrupted:
        err.print(Text(f"interrupted: kept the {len(rows)} finished rows", style="yellow"))
    if args.json:
        emit_json(report)
    else:
        _print_report(rows, recommended, fits, args.no_chart)
    if interrupted:
        return EXIT_INTERRUPTED
    return EXIT_LENGTHS_DIFFER if length_warnings(rows, table.outcomes) else 0


def _duration(value: float | None) -> str:
    """Seconds in a unit that keeps three figures: 41µs, 20.8ms, 3.21s."""
    if value is None or not math.isfinite(value):
        return "—"
    if value < 1e-3:
        return f"{value * 1e6:.0f}µs"
    if value < 1:
        return f"{value * 1e3:.1f}ms"
    return f"{value:.2f}s"


def _print_report(
    rows: Sequence[SweepRow],
    recommended: dict[str, Any],
    fits: dict[str, dict[str, Any]],
    no_chart: bool,
) -> None:
    if not rows:
        out.print(Text("no cell finished"))
        return
    best = {label: rec["cutoff"] for label, rec in recommended["per_instance"].items()}
    flat = {label: set(rec["flat"]) for label, rec in recommended["per_instance"].items()}
    table = Table(
        "instance",
        *(Column(h, justify="right") for h in ("cutoff", "nodes", "bounds", "leaves")),
        *(Column(h, justify="right") for h in ("median", "model", "÷model")),
        "",
        title=f"sweep; best: lowest median time, ≈: within {FLAT_WITHIN:.2f}× of it, "
        f"!: model off by over {DISAGREES_BEYOND:g}×",
        title_justify="left",
        box=box.SIMPLE_HEAD,
        padding=(0, 0),
        show_edge=False,
    )
    previous = None
    for r in rows:
        ratio = r.model_ratio
        marks = []
        if best.get(r.instance) == r.cutoff:
            marks.append("best")
        elif r.cutoff in flat.get(r.instance, set()):
            marks.append("≈")
        if r.disagrees:
            marks.append("!")
        if r.status != COMPLETE or len(r.times) == 0:
            marks.append(r.status)
        table.add_row(
            r.instance if r.instance != previous else "",
            str(r.cutoff),
            compact(r.nodes),
            compact(r.bound_evaluations),
            compact(r.leaves),
            _duration(r.seconds),
            _duration(r.model_seconds),
            "—" if ratio is None else f"{ratio:.2f}",
            " ".join(marks),
        )
        previous = r.instance
    out.print(table)
    if not no_chart:
        out.print(_chart(rows, recommended))
    for label, rec in recommended["per_instance"].items():
        fit = fits.get(label, {})
        out.print(
            Text(
                f"{label}: cutoff {rec['cutoff']} ({_duration(rec['seconds'])}); within "
                f"{FLAT_WITHIN:.2f}×: {_list(rec['flat'])}; the slowest cutoff tried takes "
                f"{rec['worst_ratio']:.2f}× as long. Model: {_ns(fit.get('seconds_per_bound_op'))}"
                f" per bound operation, {_ns(fit.get('seconds_per_node'))} per node; its "
                f"cheapest cutoff is {fit.get('model_cutoff', '—')}."
            )
        )
    overall = recommended["overall"]
    if overall is not None and len(recommended["per_instance"]) > 1:
        mean = overall["geometric_mean"][overall["cutoff"]]
        out.print(
            Text(
                f"overall: cutoff {overall['cutoff']} (geometric mean {mean:.2f}× each "
                f"instance's best); within {FLAT_WITHIN:.2f}×: {_list(overall['flat'])}",
                style="bold",
            )
        )
    off = [r for r in rows if r.disagrees]
    if off:
        listed = ", ".join(f"{r.instance} cutoff {r.cutoff} ({r.model_ratio:.2f}×)" for r in off)
        out.print(Text(f"model and measurement disagree at: {listed}"))


def _list(cutoffs: Sequence[int]) -> str:
    return ", ".join(str(c) for c in cutoffs) or "—"


def _ns(value: float | None) -> str:
    return "—" if value is None else f"{value * 1e9:.1f} ns"


def _chart(rows: Sequence[SweepRow], recommended: dict[str, Any]) -> Text:
    cutoffs = sorted({r.cutoff for r in rows})
    series: dict[str, list[float]] = {}
    labels = list(dict.fromkeys(r.instance for r in rows))
    if len(labels) <= _CHART_LINES:
        for label in labels:
            mine = {r.cutoff: r.seconds for r in rows if r.instance == label}
            low = min(v for v in mine.values() if math.isfinite(v)) if mine else 1.0
            series[label] = [mine.get(c, math.nan) / max(low, 1e-12) for c in cutoffs]
    overall = recommended["overall"]
    if overall is not None and len(labels) > 1:
        means = overall["geometric_mean"]
        series["geometric mean"] = [means.get(c, math.nan) for c in cutoffs]
    return _plot.lines(
        cutoffs,
        series,
        title="time ÷ each instance's best, by cutoff",
        xlabel="cutoff",
        ylabel="× best",
        width=out.width,
    )
