"""Terminal charts (plotext) for `stats` and `sweep`, built as text and printed through Rich.

plotext keeps one global figure, so each chart clears it first; the text it builds carries
ANSI colours, which `Text.from_ansi` turns into styles (dropped when stdout is not a
terminal).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import plotext as plt
from rich.text import Text

#: Chart size in characters; the width follows the console, within these limits.
_MIN_WIDTH, _MAX_WIDTH, _HEIGHT = 40, 110, 18


def _start(width: int, title: str) -> None:
    plt.clear_figure()
    plt.theme("clear")
    plt.plotsize(max(_MIN_WIDTH, min(width, _MAX_WIDTH)), _HEIGHT)
    plt.title(title)


def stacked_bars(
    x: Sequence[int], series: Mapping[str, Sequence[int]], *, title: str, xlabel: str, width: int
) -> Text:
    """Bars over `x`, each stacked from the named series (series with no count left out)."""
    kept = {name: list(values) for name, values in series.items() if any(values)}
    _start(width, title)
    if kept:
        plt.stacked_bar(list(x), list(kept.values()), labels=list(kept))
    plt.xlabel(xlabel)
    return Text.from_ansi(plt.build())


def lines(
    x: Sequence[int],
    series: Mapping[str, Sequence[float]],
    *,
    title: str,
    xlabel: str,
    ylabel: str,
    width: int,
) -> Text:
    """One line with markers per named series over `x`."""
    _start(width, title)
    for name, values in series.items():
        plt.plot(list(x), list(values), label=name, marker="dot")
    plt.xticks(list(x))
    plt.xlabel(xlabel)
    plt.ylabel(ylabel)
    return Text.from_ansi(plt.build())
