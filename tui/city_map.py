"""The map: cities, the current path, the spanning tree over the rest, the links, the best tour.

Drawn in braille cells (2×4 dots a cell) with our own rasteriser: every layer's edges are
sampled into a dot grid with numpy, the dots packed into braille code points, and each
cell takes the colour of the highest layer that touches it (cities over path over links
over tree over the incumbent tour, which is drawn faintly). The tree is recomputed for the
cursor node (`tracer.analysis.remainder`; a trail stores only its weight). Instances
without coordinates are laid out by scaling their distances and the map says so.
"""

from __future__ import annotations

import bisect
import itertools
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, ClassVar

import numpy as np
from numpy.typing import NDArray
from rich.segment import Segment
from rich.style import Style
from textual.binding import Binding, BindingType
from textual.reactive import reactive
from textual.strip import Strip
from textual.widget import Widget

from tracer.analysis import (
    CityLayout,
    TreeIndex,
    city_layout,
    format_length,
    recorded_value,
    remainder,
)
from tracer.base import LINK_IN_CITY, LINK_OUT_CITY, PI, Trail, TrailHeader

if TYPE_CHECKING:
    from tui.model import ViewerModel

#: Drawing layers, lowest first; a cell takes the colour of the highest one touching it.
LAYERS = ("incumbent", "tree", "link", "path")
#: A cell's style number indexes this (0: the widget's own style); names are component classes.
CELL_STYLES = ("", *LAYERS, "city", "visited", "start", "label", "low", "high")
#: What the unvisited cities can be coloured by, in the order the key cycles through them.
COLOURINGS = ("plain", "degree", "penalty")
_CELL = {name: number for number, name in enumerate(CELL_STYLES)}
#: Braille dot bits by (row, column) inside a cell (Unicode's dot numbering).
_DOT_BITS = np.array([[0x01, 0x08], [0x02, 0x10], [0x04, 0x20], [0x40, 0x80]], dtype=np.uint8)
_BRAILLE = 0x2800
#: A cell's character by its braille bits (no dots: a space).
_GLYPHS = np.array([chr(_BRAILLE + b) if b else " " for b in range(256)], dtype="<U1")
_START_GLYPH = "◆"
_VISITED_GLYPH = "●"
_CITY_GLYPH = "○"


@dataclass(frozen=True)
class MapView:
    """What the map draws for one node, as plain values.

    Attributes:
        layout: the city positions (and whether they are approximate).
        path: the cities visited, from the start city.
        tree: the spanning tree's edges over the unvisited cities (k-1 × 2).
        links: the link edges (into the unvisited cities, and back to the start).
        incumbent: the tour in force, or an empty tuple before any.
        penalties: every city's penalty at the node (the penalties bound), else None.
        tree_weight: the recomputed tree's (penalised) weight, for the title.
        integral: whether lengths are whole numbers (for formatting).
    """

    layout: CityLayout
    path: tuple[int, ...]
    tree: NDArray[np.int64]
    links: tuple[tuple[int, int], ...]
    incumbent: tuple[int, ...]
    penalties: NDArray[np.float64] | None = None
    tree_weight: float = 0.0
    integral: bool = True


def _city_at(trail: Trail, name: str, node: int) -> int | None:
    value = recorded_value(trail, name, node)
    return None if value is None else int(value)


def incumbent_tour(trail: Trail, index: TreeIndex, node: int) -> tuple[int, ...]:
    """The tour of the incumbent in force at `node` (empty before any tour)."""
    if not trail.best:
        return ()
    ordered = sorted(trail.best, key=lambda b: b.at)
    position = int(index.visit[node]) if index.visit is not None else node
    at = bisect.bisect_right([b.at for b in ordered], position) - 1
    if at < 0:
        return ()
    tour = tuple(int(c) for c in ordered[at].tour)
    # A frame from another solver could name cities the instance lacks: draw no tour then.
    return tour if all(0 <= c < trail.n for c in tour) else ()


def node_penalties(trail: Trail, node: int) -> NDArray[np.float64] | None:
    """Every city's penalty at `node` (the penalties bound's pi row), or None without one."""
    settings = trail.header.solver.penalties
    row = trail.columns.get(PI)
    if row is None or settings is None or row.ndim != 2:
        return None
    return np.asarray(row[node], dtype=np.float64) * settings.quantum


def degrees(view: MapView, n: int) -> NDArray[np.int64]:
    """Each city's degree in the drawn bound structure (tree plus links; 0 off it).

    A tour gives every unvisited city degree 2; where the relaxed structure is not a tour,
    cities of degree 1 or 3 and more show where the bound falls short of one.
    """
    edges = np.concatenate(
        [view.tree.reshape(-1, 2), np.asarray(view.links, dtype=np.int64).reshape(-1, 2)]
    )
    return np.bincount(edges.ravel(), minlength=n).astype(np.int64)


def map_view(trail: Trail, index: TreeIndex, node: int, layout: CityLayout) -> MapView:
    """The map's values for one node: the recorded link cities, the recomputed tree.

    Args:
        trail: the trail.
        index: its tree index.
        node: the node's id.
        layout: the city positions (from `city_layout`, computed once per trail).
    """
    path = tuple(index.path(node))
    penalties = node_penalties(trail, node)
    rest = remainder(trail.header.instance.matrix, path, penalties)
    links: list[tuple[int, int]] = []
    if len(rest.unvisited) == 0:
        if len(path) > 1:
            links.append((path[-1], path[0]))
    else:
        into = _city_at(trail, LINK_IN_CITY, node)
        back = _city_at(trail, LINK_OUT_CITY, node)
        if into is None and rest.link_in is not None:
            into = rest.link_in[1]
        if back is None and rest.link_out is not None:
            back = rest.link_out[0]
        if into is not None and 0 <= into < trail.n:
            links.append((path[-1], into))
        if back is not None and 0 <= back < trail.n:
            links.append((back, path[0]))
    return MapView(
        layout,
        path,
        rest.tree.edges,
        tuple(links),
        incumbent_tour(trail, index, node),
        penalties=penalties,
        tree_weight=rest.tree.weight,
        integral=trail.header.instance.integral,
    )


def _path_edges(cities: tuple[int, ...], closed: bool) -> NDArray[np.int64]:
    c = np.asarray(cities, dtype=np.int64)
    if len(c) < 2:
        return np.zeros((0, 2), dtype=np.int64)
    ends = np.roll(c, -1) if closed else c[1:]
    starts = c if closed else c[:-1]
    return np.stack([starts, ends], axis=1)


def to_dots(xy: NDArray[np.float64], rows: int, cols: int) -> NDArray[np.float64]:
    """Positions scaled into a rows×cols dot grid (square dots, y up, centred)."""
    if len(xy) == 0:
        return np.zeros((0, 2), dtype=np.float64)
    dot_rows, dot_cols = rows * 4, cols * 2
    low, high = xy.min(axis=0), xy.max(axis=0)
    span = np.where(high - low > 0, high - low, 1.0)
    scale = min((dot_cols - 1) / span[0], (dot_rows - 1) / span[1])
    used = span * scale
    offset = np.array([(dot_cols - 1 - used[0]) / 2, (dot_rows - 1 - used[1]) / 2])
    x = (xy[:, 0] - low[0]) * scale + offset[0]
    y = (dot_rows - 1) - ((xy[:, 1] - low[1]) * scale + offset[1])
    return np.stack([y, x], axis=1)


def raster(
    dots: NDArray[np.float64], edges: NDArray[Any], rows: int, cols: int
) -> NDArray[np.uint8]:
    """The edges drawn as straight dot lines, packed into braille bits per cell.

    Args:
        dots: (y, x) dot positions of the cities (from `to_dots`).
        edges: m×2 city pairs.
        rows: cell rows.
        cols: cell columns.

    Returns:
        rows×cols braille bit masks.
    """
    bits = np.zeros(rows * cols, dtype=np.uint8)
    e = np.asarray(edges, dtype=np.int64).reshape(-1, 2)
    if len(e):
        a, b = dots[e[:, 0]], dots[e[:, 1]]
        steps = np.ceil(np.abs(b - a).max(axis=1)).astype(np.int64) + 1
        which = np.repeat(np.arange(len(e)), steps)
        first = np.cumsum(steps) - steps
        t = (np.arange(int(steps.sum())) - first[which]) / np.maximum(steps[which] - 1, 1)
        points = a[which] + (b[which] - a[which]) * t[:, None]
        yy = np.clip(np.rint(points[:, 0]).astype(np.int64), 0, rows * 4 - 1)
        xx = np.clip(np.rint(points[:, 1]).astype(np.int64), 0, cols * 2 - 1)
        # Each dot sets its bit in its cell (a dot drawn twice sets the same bit).
        np.bitwise_or.at(bits, (yy >> 2) * cols + (xx >> 1), _DOT_BITS[yy & 3, xx & 1])
    return bits.reshape(rows, cols)


class CityMap(Widget, can_focus=True):
    """The cities and the cursor node's path, tree and links, in braille cells."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("n", "toggle_labels", "City numbers", id="map_labels"),
        Binding("d", "cycle_colouring", "Colour cities", id="map_colouring"),
    ]

    COMPONENT_CLASSES: ClassVar[set[str]] = {
        "city-map--title",
        "city-map--legend",
        "city-map--incumbent",
        "city-map--tree",
        "city-map--link",
        "city-map--path",
        "city-map--city",
        "city-map--visited",
        "city-map--start",
        "city-map--label",
        "city-map--low",
        "city-map--high",
    }

    DEFAULT_CSS = """
    CityMap { height: 1fr; min-height: 6; }
    CityMap > .city-map--title { color: $text-muted; text-style: bold; }
    CityMap > .city-map--legend { color: $text-muted; }
    CityMap > .city-map--incumbent { color: $text-muted; text-style: dim; }
    CityMap > .city-map--tree { color: $success; }
    CityMap > .city-map--link { color: $secondary; }
    CityMap > .city-map--path { color: $warning; text-style: bold; }
    CityMap > .city-map--city { color: $text; }
    CityMap > .city-map--visited { color: $warning; text-style: bold; }
    CityMap > .city-map--start { color: $error; text-style: bold; }
    CityMap > .city-map--label { color: $accent; }
    CityMap > .city-map--low { color: $primary; text-style: bold; }
    CityMap > .city-map--high { color: $error; text-style: bold; }
    """

    labels: reactive[bool] = reactive(False)
    """Whether city numbers are written beside the cities."""

    colouring: reactive[str] = reactive("plain")
    """What colours the unvisited cities: nothing, their degree in the tree and links, or
    their penalty (the penalties bound only)."""

    def __init__(
        self, *, name: str | None = None, id: str | None = None, classes: str | None = None
    ) -> None:
        super().__init__(name=name, id=id, classes=classes)
        self._view: MapView | None = None
        self._message: str | None = None
        self._layout: tuple[TrailHeader, CityLayout] | None = None
        self._shown: tuple[Trail, TreeIndex, int] | None = None
        self._strips: list[Strip] = []
        self._strips_size: tuple[int, int] = (-1, -1)
        self._styles: dict[str, Style] = {}

    @property
    def view(self) -> MapView | None:
        """What the map shows now (None before the first node)."""
        return self._view

    def show(self, model: ViewerModel, node: int) -> None:
        """Draw `node` of the model's trail (the layout is made once per trail header)."""
        trail = model.trail
        shown = self._shown
        if (
            shown is not None
            and shown[0] is trail
            and shown[1] is model.index
            and shown[2] == node
            and self._view is not None
        ):
            return  # the same node of the same trail (a filter kept it): nothing to redraw
        known = self._layout
        if known is not None and known[0] is trail.header:
            layout = known[1]
        else:
            try:
                layout = city_layout(trail.header.instance)
            except ValueError as exc:
                self.show_message(f"no map: {exc}")
                return
            self._layout = (trail.header, layout)
        self.show_values(map_view(trail, model.index, node, layout))
        self._shown = (trail, model.index, node)

    def show_message(self, message: str) -> None:
        """Show one line instead of a drawing (an instance that cannot be laid out)."""
        self._view = None
        self._message = message
        self._invalidate()

    def show_values(self, view: MapView) -> None:
        """Draw a view built elsewhere (tests)."""
        self._view = view
        self._message = None
        self._shown = None
        self._invalidate()

    def action_toggle_labels(self) -> None:
        """Show or hide the city numbers."""
        self.labels = not self.labels

    def action_cycle_colouring(self) -> None:
        """Colour the cities plainly, by degree, or by penalty (where the trail has them)."""
        kinds = [c for c in COLOURINGS if c != "penalty" or self._has_penalties()]
        at = kinds.index(self.colouring) if self.colouring in kinds else 0
        self.colouring = kinds[(at + 1) % len(kinds)]

    def _has_penalties(self) -> bool:
        return self._view is not None and self._view.penalties is not None

    def watch_labels(self) -> None:
        self._invalidate()

    def watch_colouring(self) -> None:
        self._invalidate()

    def notify_style_update(self) -> None:
        """Styles changed: the cached strips and styles hold old colours."""
        super().notify_style_update()
        self._styles = {}
        self._strips_size = (-1, -1)

    def render_line(self, y: int) -> Strip:
        """One line of the map."""
        size = (self.size.width, self.size.height)
        if size != self._strips_size:
            self._strips = self._draw(*size)
            self._strips_size = size
        if y >= len(self._strips):
            return Strip.blank(size[0], self.rich_style)
        return self._strips[y]

    def _invalidate(self) -> None:
        self._strips_size = (-1, -1)
        self.refresh()

    def _style(self, name: str) -> Style:
        """A component class's style over the widget's (cached until the styles change)."""
        style = self._styles.get(name)
        if style is None:
            style = self.rich_style + self.get_component_rich_style(f"city-map--{name}")
            self._styles[name] = style
        return style

    def _text_strip(self, parts: list[tuple[str, str]], width: int) -> Strip:
        segments = [Segment(text, self._style(style)) for text, style in parts]
        return Strip(segments).crop_extend(0, width, self.rich_style)

    def _draw(self, width: int, height: int) -> list[Strip]:
        view = self._view
        if self._message is not None:
            return [self._text_strip([(self._message, "title")], width)]
        if view is None or width < 4 or height < 3:
            return []
        left = view.layout.xy.shape[0] - len(set(view.path))
        title = f"map · {left} left · tree {format_length(view.tree_weight, view.integral)}"
        if view.layout.approximate:
            title += " · approximate layout from distances"
        rows, cols = height - 2, width
        chars, styles = self._cells(view, rows, cols)
        lines = [self._text_strip([(title, "title")], width)]
        cell_styles = [self.rich_style, *(self._style(name) for name in CELL_STYLES[1:])]
        # One string per row (a row of one-character cells read as one string), and the
        # columns where the style changes, found for all rows at once.
        texts = np.ascontiguousarray(chars).view(f"<U{cols}").ravel().tolist()
        rows_at, cols_at = np.nonzero(styles[:, 1:] != styles[:, :-1])
        ends = np.searchsorted(rows_at, np.arange(rows + 1)).tolist()
        changes = (cols_at + 1).tolist()
        row_styles = styles.tolist()
        for y, text in enumerate(texts):
            cuts = [0, *changes[ends[y] : ends[y + 1]], cols]
            row = row_styles[y]
            segments = [
                Segment(text[a:b], cell_styles[row[a]]) for a, b in itertools.pairwise(cuts)
            ]
            lines.append(Strip(segments, cols))
        with_pi = " (π)" if view.penalties is not None else ""
        legend = [
            ("⣿ ", "path"),
            ("path  ", "legend"),
            ("⣿ ", "tree"),
            (f"tree{with_pi}  ", "legend"),
            ("⣿ ", "link"),
            (f"links{with_pi}  ", "legend"),
            ("⣿ ", "incumbent"),
            ("best tour  ", "legend"),
        ]
        if self.colouring == "degree":
            legend += [("○ ", "low"), ("degree 1  ", "legend"), ("○ ", "high")]
            legend.append(("degree 3+  ", "legend"))
        elif self.colouring == "penalty" and view.penalties is not None:
            legend += [("○ ", "low"), ("π < 0  ", "legend"), ("○ ", "high"), ("π > 0  ", "legend")]
        lines.append(self._text_strip(legend, width))
        return lines

    def _cells(self, view: MapView, rows: int, cols: int) -> tuple[NDArray[Any], NDArray[np.int64]]:
        """Each cell's character and style number (an index into `CELL_STYLES`)."""
        dots = to_dots(view.layout.xy, rows, cols)
        layers = {
            "incumbent": _path_edges(view.incumbent, closed=True),
            "tree": view.tree,
            "link": np.asarray(view.links, dtype=np.int64).reshape(-1, 2),
            "path": _path_edges(view.path, closed=False),
        }
        bits = np.zeros((rows, cols), dtype=np.uint8)
        styles = np.zeros((rows, cols), dtype=np.int64)
        for name in LAYERS:
            layer = raster(dots, layers[name], rows, cols)
            bits |= layer
            styles[layer > 0] = _CELL[name]
        chars = _GLYPHS[bits]
        cell_r = np.clip((dots[:, 0] // 4).astype(np.int64), 0, rows - 1)
        cell_c = np.clip((dots[:, 1] // 2).astype(np.int64), 0, cols - 1)
        on_path = np.zeros(len(dots), dtype=np.bool_)
        on_path[list(view.path)] = True
        city = np.full(len(dots), _CELL["city"])
        if self.colouring == "degree":
            degree = degrees(view, len(dots))
            city[degree == 1] = _CELL["low"]
            city[degree >= 3] = _CELL["high"]
        elif self.colouring == "penalty" and view.penalties is not None:
            city[view.penalties < 0] = _CELL["low"]
            city[view.penalties > 0] = _CELL["high"]
        chars[cell_r, cell_c] = np.where(on_path, _VISITED_GLYPH, _CITY_GLYPH)
        styles[cell_r, cell_c] = np.where(on_path, _CELL["visited"], city)
        if view.path:
            start = view.path[0]
            chars[cell_r[start], cell_c[start]] = _START_GLYPH
            styles[cell_r[start], cell_c[start]] = _CELL["start"]
        if self.labels:
            for number in range(len(dots)):
                r, c = int(cell_r[number]), int(cell_c[number]) + 1
                for offset, ch in enumerate(str(number)):
                    if c + offset < cols:
                        chars[r, c + offset] = ch
                        styles[r, c + offset] = _CELL["label"]
        return chars, styles
