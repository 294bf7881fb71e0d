"""`prunetrail demo`: a shipped scenario solved once into a cache, re-checked, and shown.

The demo runs the same commands a user would (`solve` or `import`, `check`, `why`) through
the one CLI, printing each command line before its output, so the demo also teaches them.
The trail is solved once into a cache folder and reused (re-checked every time); without a
terminal (CI, a pipe) or with `--headless`, the demo stops after the summaries instead of
opening the viewer, so scripts never wait on a screen nobody sees.
"""

from __future__ import annotations

import argparse
import hashlib
import os
import shlex
import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from rich.console import Console
from rich.table import Table
from rich.text import Text

import tracer
from tracer.analysis import TreeIndex, completion_table, explain
from tracer.base import DECISION, DECISION_BY_NAME, PrunetrailError, Trail
from tracer.cli import EXIT_INTERRUPTED
from tracer.cli import main as tracer_cli
from tracer.trails import open_trail

#: Environment variable naming the cache folder (default: the platform's user cache).
CACHE_ENV = "PRUNETRAIL_CACHE"
#: Where to look for the scenarios when not in the source tree (a plain `pip install .`).
SHARED_SCENARIOS = Path(sys.prefix) / "share" / "prunetrail" / "scenarios"
_SOURCE_SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"

#: Which node the viewer opens at: where `why` finds the optimal branch cut, the first
#: tour that improved the incumbent, or the root.
WHY_CUT, FIRST_BETTER, ROOT = "why-cut", "first-better", "root"


@dataclass(frozen=True)
class Scenario:
    """One demo: a file in scenarios/, how to make its trail, and where to look first."""

    name: str
    source: str
    title: str
    solve: tuple[str, ...] = ()
    focus: str = ROOT

    @property
    def imported(self) -> bool:
        """Whether the trail comes from another solver's JSON Lines (not from `solve`)."""
        return self.source.endswith(".jsonl")


#: The demos, the default first. Their stories are in scenarios/README.md.
SCENARIOS: tuple[Scenario, ...] = (
    Scenario(
        "boiler",
        "boiler_round_broken.jsonl",
        "a homemade solver with a bug claims 1564 for a boiler-service round whose optimum "
        "is 1495: where was the optimal branch cut, and why?",
        focus=WHY_CUT,
    ),
    Scenario(
        "meter",
        "meter_lane.tsp",
        "nine stops: the whole search (143 nodes) on a few screens, for teaching",
        ("--improve", "none"),
    ),
    Scenario(
        "visits",
        "home_visits.tsp",
        "seventeen home visits: 253,432 nodes, and a cutoff that changes the cost",
    ),
    Scenario(
        "van",
        "library_van.tsp",
        "clustered villages searched by city number without a start tour (33,631 nodes; "
        "nearest first needs 5,467)",
        ("--start", "none", "--order", "index"),
        FIRST_BETTER,
    ),
    Scenario(
        "orchard",
        "orchard_rounds.tsp",
        "the engine's planted fault tree-spans-ends cuts the optimal branch (2126, not 1860)",
        ("--fault", "tree-spans-ends", "--start", "nn", "--improve", "none"),
        WHY_CUT,
    ),
    Scenario("ferry", "lantern_ferry.tsp", "a sailing-time matrix that is not the drawing"),
    Scenario("relay", "relay_survey.csv", "float distances: the re-check's relative tolerance"),
)
BY_NAME = {s.name: s for s in SCENARIOS}

_EPILOG = """\
examples:
  prunetrail demo              the broken-solver scenario in the viewer
  prunetrail demo --list       every scenario, one line each
  prunetrail demo meter        the small teaching scenario
  prunetrail demo orchard --headless

Each scenario is solved once into the cache folder ($PRUNETRAIL_CACHE, else
$XDG_CACHE_HOME/prunetrail, else ~/.cache/prunetrail) and re-checked every time.
Without a terminal (stdin or stdout not a TTY) the demo prints its summaries and exits,
as with --headless.

exit status: 0 shown; 2 unknown scenario or unreadable files."""


def register(sub: argparse._SubParsersAction[argparse.ArgumentParser]) -> None:
    """Add the `demo` command."""
    p = sub.add_parser(
        "demo",
        help="solve a shipped scenario, re-check it and open the viewer on it",
        description="Solve an invented scenario (or import a homemade solver's trace), "
        "re-check it, say where its optimal branch was cut, and open the viewer there.",
        epilog=_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument(
        "name",
        nargs="?",
        default=SCENARIOS[0].name,
        metavar="NAME",
        help=f"a scenario (default: {SCENARIOS[0].name}; --list shows them all)",
    )
    p.add_argument("--list", action="store_true", help="list the scenarios and exit")
    p.add_argument(
        "--headless",
        action="store_true",
        help="print the solve, check and why summaries instead of opening the viewer",
    )
    p.set_defaults(run=run)


def cache_dir() -> Path:
    """The demo's cache folder: $PRUNETRAIL_CACHE, else the user cache (XDG), + demo/."""
    if os.environ.get(CACHE_ENV):
        return Path(os.environ[CACHE_ENV]) / "demo"
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base) / "prunetrail" / "demo"


def scenario_dir() -> Path:
    """The scenarios folder: the source tree's, else the one a plain install shares."""
    for folder in (_SOURCE_SCENARIOS, SHARED_SCENARIOS, Path.cwd() / "scenarios"):
        if (folder / SCENARIOS[0].source).is_file():
            return folder
    raise PrunetrailError(
        f"the scenario files are in none of {_SOURCE_SCENARIOS}, {SHARED_SCENARIOS} or ./scenarios"
    )


def cached_trail(scenario: Scenario, source: Path) -> Path:
    """The cache file for this scenario, named for its content, settings and version."""
    digest = hashlib.sha256(source.read_bytes())
    digest.update(repr((scenario.solve, tracer.__version__)).encode())
    return cache_dir() / f"{scenario.name}-{digest.hexdigest()[:12]}.trail"


def focus_node(scenario: Scenario, trail: Trail, index: TreeIndex) -> int:
    """The node the viewer opens at (see `Scenario.focus`)."""
    if scenario.focus == WHY_CUT:
        table = completion_table(trail.header.instance)
        report = explain(trail, index, tour=None, table=table)
        if report.cut_node is not None:
            return int(report.cut_node)
    if scenario.focus == FIRST_BETTER:
        better = np.flatnonzero(trail.columns[DECISION] == DECISION_BY_NAME["tour_better"])
        if len(better):
            return int(better[0])
    return 0


def run(args: argparse.Namespace) -> int:
    """Show the list, or make (once), check and explain one scenario's trail, then view it."""
    console = Console(highlight=False, markup=False, soft_wrap=True)
    if args.list:
        console.print(scenario_table())
        return 0
    scenario = BY_NAME.get(args.name)
    if scenario is None:
        raise PrunetrailError(
            f"no scenario {args.name!r}; choose one of {', '.join(BY_NAME)} (see --list)"
        )
    headless = args.headless or not (sys.stdin.isatty() and sys.stdout.isatty())
    trail_path = prepare(scenario, console)
    trail = open_trail(trail_path)
    node = focus_node(scenario, trail, TreeIndex(trail.columns, trail.best))
    if headless:
        console.print()
        console.print(f"to look at it: prunetrail view {shlex.quote(str(trail_path))} --at {node}")
        return 0
    from tui.app import PrunetrailApp  # the viewer loads only when it is shown

    PrunetrailApp(trail_path, at=node).run()
    return 0


def prepare(scenario: Scenario, console: Console) -> Path:
    """Make the scenario's trail unless cached, then run `check` and `why` on it."""
    source = scenario_dir() / scenario.source
    target = cached_trail(scenario, source)
    console.print(Text(f"demo {scenario.name}: {scenario.title}", style="bold"))
    if target.is_file():
        console.print(f"cached trail: {target}")
    else:
        target.parent.mkdir(parents=True, exist_ok=True)
        partial = target.with_suffix(".partial")
        verb = ["import"] if scenario.imported else ["solve", *scenario.solve]
        _step(console, [*verb, str(source), "-o", str(partial)], ok=(0,))
        partial.replace(target)
        console.print(f"trail cached at {target}")
    _step(console, ["check", str(target), "--first", "3"], ok=(0, 1))
    _step(console, ["why", str(target)], ok=(0, 1))
    return target


def _step(console: Console, argv: list[str], ok: tuple[int, ...]) -> None:
    """Run one `prunetrail` command as a user would, showing its command line first."""
    console.print()
    console.print(Text("$ prunetrail " + shlex.join(argv), style="cyan"))
    status = tracer_cli(argv)
    if status == EXIT_INTERRUPTED:
        raise KeyboardInterrupt
    if status not in ok:
        raise PrunetrailError(f"`prunetrail {shlex.join(argv)}` ended with status {status}")


def scenario_table() -> Table:
    """Every scenario: its name, file and what it shows."""
    table = Table(title="prunetrail demo NAME", title_justify="left")
    table.add_column("name")
    table.add_column("file", no_wrap=True)
    table.add_column("what it shows")
    for s in SCENARIOS:
        table.add_row(s.name, f"scenarios/{s.source}", s.title)
    return table
