"""The why screen: where the branch of a good tour was cut, which part was wrong, and how.

It shows a `tracer.analysis.WhyReport` as it is: the explanation, the facts of the cut node,
its bound's parts, a chart of the recorded bound down the branch against the incumbent in
force and the tour's own length (so the depth where the bound crossed over stands out),
and the list of harmful prunes. `c` closes the screen handing back the cut node, so the
viewer can put its cursor there; escape closes it with nothing.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any, ClassVar

import numpy as np
from rich.table import Table
from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Horizontal, VerticalScroll
from textual.screen import Screen
from textual.widgets import DataTable, Footer, Static
from textual_plotext import PlotextPlot

from tracer.analysis import TERM_LABELS, TreeIndex, WhyReport, format_length
from tracer.base import Trail, recorded_bound
from tui.stats_screen import depth_ticks

#: Harmful prunes listed at most (the report may hold more).
MAX_PRUNE_ROWS = 500


def _cell(value: Any, integral: bool) -> Text:
    """A value as literal text: lengths grouped, sequences joined, None as a dash."""
    if value is None:
        return Text("—")
    if isinstance(value, bool):
        return Text("yes" if value else "no")
    if isinstance(value, float | int | np.integer | np.floating):
        number = float(value)
        if number.is_integer() and not math.isinf(number):
            return Text(format_length(number, True))
        return Text(format_length(number, integral))
    if isinstance(value, list | tuple):
        return Text(" ".join(str(v) for v in value))
    return Text(str(value))


class WhyScreen(Screen[int | None]):
    """Where and why a tour's branch was cut, for the trail on screen."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("escape,w", "close", "Back", id="why_close"),
        Binding("c", "go_to_cut", "Go to the cut", id="why_go_to_cut"),
    ]

    DEFAULT_CSS = """
    WhyScreen { layout: vertical; }
    WhyScreen #why-title { height: auto; padding: 0 1; color: $accent; text-style: bold; }
    WhyScreen #why-explanation { height: auto; padding: 0 1 1 1; }
    WhyScreen #why-body { height: 1fr; }
    WhyScreen #why-facts { width: 56; height: auto; padding: 0 1; }
    WhyScreen #why-parts { margin-top: 1; }
    WhyScreen #why-prunes-title { height: 1; padding: 0 1; text-style: bold; }
    WhyScreen PlotextPlot { width: 1fr; height: 1fr; min-height: 10; }
    WhyScreen DataTable { height: 1fr; min-height: 4; }
    """

    def __init__(self, report: WhyReport, trail: Trail, index: TreeIndex, *, title: str) -> None:
        """Show `report` about `trail`; `title` (an instance name, say) is shown literally."""
        super().__init__()
        self.report = report
        self.trail = trail
        self.index = index
        self.title_text = title
        self.integral = trail.header.instance.integral

    def compose(self) -> ComposeResult:
        yield Static(Text.assemble("why · ", self.title_text), id="why-title")
        yield Static(Text(self.report.explanation), id="why-explanation")
        with Horizontal(id="why-body"):
            with VerticalScroll(id="why-facts"):
                yield Static(self._facts())
                if self.report.parts:
                    yield Static(self._parts(), id="why-parts")
            yield PlotextPlot(id="why-branch")
        yield Static(self._prunes_title(), id="why-prunes-title")
        yield DataTable(id="why-prunes", cursor_type="row", zebra_stripes=True)
        yield Footer()

    def on_mount(self) -> None:
        self._draw_branch()
        self._fill_prunes()

    def _facts(self) -> Table:
        r = self.report
        table = Table.grid(padding=(0, 2))
        table.add_column(style="bold")
        table.add_column()
        rows: list[tuple[str, Any]] = [
            ("cut at node", r.cut_node),
            ("reference tour", r.tour_length),
            ("path", r.path),
            ("decision", r.decision),
            ("bound", r.bound),
            ("incumbent", r.incumbent),
            ("best through", r.completion),
            ("wrong part", r.culprit),
            ("tour found at", r.found_at),
            ("first inadmissible", r.first_inadmissible),
            ("harmful prunes", r.harmful_count),
        ]
        for label, value in rows:
            table.add_row(label, _cell(value, self.integral))
        return table

    def _parts(self) -> Table:
        """The cut node's bound parts: what was recorded, recomputed, and true."""
        parts: Mapping[str, Any] = self.report.parts or {}
        columns: list[str] = []
        for value in parts.values():
            if isinstance(value, Mapping):
                columns.extend(str(k) for k in value if str(k) not in columns)
        table = Table(box=None, padding=(0, 1), show_edge=False, header_style="bold")
        table.add_column("part")
        for column in columns:
            table.add_column(column, justify="right")
        for name, value in parts.items():
            label = Text(TERM_LABELS.get(str(name), str(name).replace("_", " ")))
            if isinstance(value, Mapping):
                cells = [_cell(value.get(c), self.integral) for c in columns]
            else:
                cells = [_cell(value, self.integral)] + [Text("")] * (len(columns) - 1)
            table.add_row(label, *cells)
        return table

    def _draw_branch(self) -> None:
        """Recorded bound and incumbent in force down the branch, and the tour's length."""
        plot = self.query_one("#why-branch", PlotextPlot)
        plt = plot.plt
        plt.clear_data()
        plt.clear_figure()
        node = self.report.node
        if 0 <= node < self.trail.count:
            chain = self.index.ancestors(node)
            incumbents = self.index.incumbent_at(np.asarray(chain, dtype=np.int64))
            lines: dict[str, list[float | None]] = {
                "bound": [recorded_bound(self.trail, a) for a in chain],
                "incumbent": [float(v) for v in incumbents],
                "reference tour": [float(self.report.tour_length)] * len(chain),
            }
            for label, values in lines.items():
                shown = [(d, v) for d, v in enumerate(values) if v is not None and math.isfinite(v)]
                if shown:
                    xs, ys = zip(*shown, strict=True)
                    plt.plot(list(xs), list(ys), label=label, marker="braille")
            plt.xticks(depth_ticks(len(chain)))
            plt.xlabel("depth on the branch")
        plt.title("the reference tour's branch: bound against incumbent")
        plot.refresh()

    def _prunes_title(self) -> Text:
        shown = min(len(self.report.harmful_prunes), MAX_PRUNE_ROWS)
        count = self.report.harmful_count
        if count is None:
            return Text(f"harmful prunes found: {shown} (without the oracle only these)")
        return Text(f"harmful prunes: {shown} listed of {count:,}".replace(",", " "))

    def _fill_prunes(self) -> None:
        table = self.query_one("#why-prunes", DataTable)
        prunes = list(self.report.harmful_prunes)[:MAX_PRUNE_ROWS]
        if not prunes:
            table.add_column("harmful prunes")
            table.add_row(Text("none: every prune was safe"))
            return
        keys = list(prunes[0].keys())
        table.add_columns(*(str(k).replace("_", " ") for k in keys))
        for row in prunes:
            table.add_row(*(_cell(row.get(k), self.integral) for k in keys))

    def action_close(self) -> None:
        """Back to the trail."""
        self.dismiss(None)

    def action_go_to_cut(self) -> None:
        """Back to the trail, with the cursor to go to the cut node."""
        self.dismiss(self.report.cut_node)
