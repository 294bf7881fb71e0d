"""The stats screen: where the search spent itself, depth by depth, in two charts and a table.

It shows `tracer.analysis.depth_stats` as it is: nodes per depth split by decision, and
the prune rate beside the bound's tightness (bound ÷ the best tour through the node when
the oracle is known, else ÷ the final incumbent, which the screen names). Charts are
plotext through textual-plotext; the table has one row per depth (at most n rows).
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, ClassVar

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Horizontal
from textual.screen import Screen
from textual.widgets import DataTable, Footer, Static
from textual_plotext import PlotextPlot

from tracer.analysis import DepthStats, depth_stats, format_length
from tracer.base import DECISION_NAMES, Decision

if TYPE_CHECKING:
    from tui.model import ViewerModel

_SHARE_COLUMNS = ("prune rate", "tight mean", "tight worst")


def _share(value: float) -> str:
    return "—" if not math.isfinite(value) else f"{value:.3f}"


def depth_ticks(count: int) -> list[float]:
    """Whole-number ticks for depths 0..count-1, about ten of them."""
    return [float(d) for d in range(0, max(count, 1), max(1, count // 10))]


class StatsScreen(Screen[None]):
    """Per-depth counts, prune rates and bound tightness of the trail."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("escape,t", "close", "Back", id="stats_close"),
    ]

    DEFAULT_CSS = """
    StatsScreen { layout: vertical; }
    StatsScreen #stats-title { height: auto; padding: 0 1; color: $accent; text-style: bold; }
    StatsScreen #stats-charts { height: 1fr; min-height: 10; }
    StatsScreen PlotextPlot { width: 1fr; height: 1fr; }
    StatsScreen DataTable { height: 1fr; min-height: 5; }
    """

    def __init__(self, stats: DepthStats, *, title: str) -> None:
        """Show `stats`; `title` (an instance name, say) is shown literally."""
        super().__init__()
        self.stats = stats
        self.title_text = title

    @classmethod
    def from_model(cls, model: ViewerModel) -> StatsScreen:
        """The screen for the model's trail (tightness from the oracle once it is known)."""
        stats = depth_stats(model.trail, model.completions)
        return cls(stats, title=model.trail.header.instance.name)

    def compose(self) -> ComposeResult:
        yield Static(self._title(), id="stats-title")
        with Horizontal(id="stats-charts"):
            yield PlotextPlot(id="stats-nodes")
            yield PlotextPlot(id="stats-rates")
        yield DataTable(id="stats-table", cursor_type="row", zebra_stripes=True)
        yield Footer()

    def _title(self) -> Text:
        s = self.stats
        ebf = s.effective_branching_factor
        reference = format_length(s.reference_length, s.integral)
        return Text.assemble(
            "stats · ",
            self.title_text,
            f" · {s.total:,} nodes".replace(",", " "),
            f" · depth {s.max_depth}",
            f" · branching {ebf:.2f}" if math.isfinite(ebf) else "",
            f" · tightness against the {s.tightness_source}",
            f" ({reference})" if s.tightness_source != "oracle" else "",
        )

    def on_mount(self) -> None:
        self._draw_nodes()
        self._draw_rates()
        self._fill_table()

    def _depths(self) -> list[int]:
        return list(range(self.stats.max_depth + 1))

    def _draw_nodes(self) -> None:
        plot = self.query_one("#stats-nodes", PlotextPlot)
        plt = plot.plt
        depths = self._depths()
        decisions = self.stats.decisions
        shown = [Decision.EXPAND, Decision.PRUNE, Decision.SKIP]
        series = [[int(decisions[d, code]) for d in depths] for code in shown]
        series.append(
            [int(decisions[d, Decision.TOUR] + decisions[d, Decision.TOUR_BETTER]) for d in depths]
        )
        plt.clear_data()
        plt.clear_figure()
        if depths:
            names = [*(DECISION_NAMES[c] for c in shown), "tour"]
            plt.stacked_bar(depths, series, labels=names)  # type: ignore[call-arg]  # stub says label
        plt.title("nodes per depth")
        plt.xticks(depth_ticks(len(depths)))
        plt.xlabel("depth")
        plot.refresh()

    def _draw_rates(self) -> None:
        plot = self.query_one("#stats-rates", PlotextPlot)
        plt = plot.plt
        depths = self._depths()
        s = self.stats
        plt.clear_data()
        plt.clear_figure()
        for values, label in (
            (s.prune_rate, "prune rate"),
            (s.tightness_mean, "tightness mean"),
            (s.tightness_worst, "tightness worst"),
        ):
            xs = [d for d in depths if math.isfinite(float(values[d]))]
            if xs:
                plt.plot(xs, [float(values[d]) for d in xs], label=label, marker="braille")
        plt.ylim(0, 1.05)
        plt.title("prune rate and tightness")
        plt.xticks(depth_ticks(len(depths)))
        plt.xlabel("depth")
        plot.refresh()

    def _fill_table(self) -> None:
        table = self.query_one("#stats-table", DataTable)
        table.add_columns("depth", "left", "nodes", *DECISION_NAMES, *_SHARE_COLUMNS, "branching")
        s = self.stats
        rate, branching = s.prune_rate, s.branching
        for d in self._depths():
            counts = [f"{int(s.decisions[d, code]):,}" for code in range(len(DECISION_NAMES))]
            table.add_row(
                str(d),
                str(s.n - 1 - d),
                f"{int(s.nodes[d]):,}",
                *counts,
                _share(float(rate[d])),
                _share(float(s.tightness_mean[d])),
                _share(float(s.tightness_worst[d])),
                _share(float(branching[d])),
            )

    def action_close(self) -> None:
        """Back to the trail."""
        self.dismiss(None)
