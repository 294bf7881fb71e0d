"""The bound panel: the cursor node's arithmetic as a sum, checked part by part.

The panel is a small Line API widget over a `BoundView`, a plain value built by
`bound_view` from the trail, the independent re-check of that one node
(`tracer.analysis.recompute_node`) and, when known, the oracle's best completion. Which
parts are summed comes from the trail's header (`tracer.analysis.bound_terms`), so a
second bound kind shows its own parts. Colours are component classes; every text from a
file reaches the screen as a `Text`, never as markup.
"""

from __future__ import annotations

import dataclasses
import math
import re
import textwrap
from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, ClassVar

from rich.style import Style
from rich.text import Text
from textual.cache import LRUCache
from textual.geometry import Size
from textual.strip import Strip
from textual.widget import Widget

from tracer.analysis import (
    REL_TOL,
    TERM_LABELS,
    TreeIndex,
    format_length,
    narrate,
    node_step,
    reaches,
    recompute_node,
    recorded_value,
)
from tracer.base import (
    BOUND,
    BOUND_PARTS,
    DECISION_NAMES,
    DEPTH,
    LINK_OUT,
    PARTIAL,
    SUBTRACTED_TERMS,
    Trail,
    bound_terms,
    recorded_bound,
)

if TYPE_CHECKING:
    from tui.model import ViewerModel

#: A space between digit groups of one number (as `format_length` writes them).
_DIGIT_GROUP = re.compile(r"(?<=\d) (?=\d{3}\b)")
#: Width of a value column.
_W = 11
#: Cities of the path shown before it is shortened from the left.
_PATH_CITIES = 14
#: Views of recently shown nodes kept (stepping back, or filtering to the same node again,
#: then costs no second re-check of the node).
RECENT_VIEWS = 64


@dataclass(frozen=True)
class PartLine:
    """One row of the sum: a part's name, what the trail says and what the re-check says.

    Attributes:
        name: the column's name (or "bound", "length").
        recorded: the trail's value, None where it records none.
        recomputed: the independent value, None where the rule expects none.
        checked: False when no independent value was computed at all.
        kept: False when the trail records no such column (a `--record decisions` trail),
            so an empty recorded value is expected, not missing.
    """

    name: str
    recorded: float | None
    recomputed: float | None
    checked: bool = True
    kept: bool = True


@dataclass(frozen=True)
class BoundView:
    """Everything the panel shows about one node, as plain values.

    Attributes:
        node: the node's id.
        depth: its depth.
        path: the cities from the start city.
        kind: the bound kind named in the header.
        parts: the summed parts, in order.
        total: the bound (or, at a complete path, the tour's length).
        incumbent: the incumbent in force (inf before any tour).
        decision: the recorded decision's name.
        expected: the decision the rule calls for, or None if not recomputed.
        completion: the best length of a tour through this node, or None.
        sentence: the step in words.
        integral: whole-number lengths.
        wrong: the re-check marked this record wrong.
    """

    node: int
    depth: int
    path: tuple[int, ...]
    kind: str
    parts: tuple[PartLine, ...]
    total: PartLine
    incumbent: float
    decision: str
    expected: str | None
    completion: float | None
    sentence: str
    integral: bool
    wrong: bool = False


def _plain(value: Any) -> float | None:
    return None if value is None else float(value)


def bound_view(
    trail: Trail,
    index: TreeIndex,
    node: int,
    *,
    completion: float | None = None,
    wrong: bool = False,
    recheck: bool = True,
) -> BoundView:
    """The panel's values for one node.

    Args:
        trail: the trail.
        index: its tree index.
        node: the node's id.
        completion: the oracle's best completion of this node, if known.
        wrong: whether the re-check marked the record wrong.
        recheck: recompute the node independently (off: the re-check column stays empty).
    """
    header = trail.header
    step = node_step(trail, index, node, completion)
    again = recompute_node(trail, index, node) if recheck else {}
    complete = step.unvisited == 0
    terms = bound_terms(header)
    names = (PARTIAL, LINK_OUT) if complete else terms or BOUND_PARTS
    parts = tuple(
        PartLine(
            name,
            recorded_value(trail, name, node),
            _plain(again.get(name)),
            recheck,
            header.column(name) is not None,
        )
        for name in names
    )
    if complete:
        kept = all(p.kept for p in parts)
        total = PartLine("length", step.length, _plain(again.get("length")), recheck, kept)
    else:
        kept = bool(terms) or header.column(BOUND) is not None
        bound = recorded_bound(trail, node)
        total = PartLine("bound", bound, _plain(again.get("bound")), recheck, kept)
    if not total.kept:
        # Nothing recorded to narrate: the sentence reads the re-check's numbers instead.
        step = dataclasses.replace(
            step,
            bound=total.recomputed,
            partial=_plain(again.get(PARTIAL)),
            length=_plain(again.get("length")),
        )
    code = again.get("decision")
    expected = DECISION_NAMES[int(code)] if code is not None else None
    return BoundView(
        node=node,
        depth=int(trail.columns[DEPTH][node]),
        path=tuple(index.path(node)),
        kind=trail.header.solver.bound,
        parts=parts,
        total=total,
        incumbent=step.incumbent,
        decision=DECISION_NAMES[step.decision]
        if 0 <= step.decision < len(DECISION_NAMES)
        else str(step.decision),
        expected=expected,
        completion=completion,
        sentence=narrate(step),
        integral=step.integral,
        wrong=wrong,
    )


def agrees(a: float | None, b: float | None, integral: bool) -> bool:
    """Whether a recorded and a recomputed value are the same (both absent counts)."""
    if a is None or b is None:
        return a is None and b is None
    if integral and float(a).is_integer() and float(b).is_integer():
        return a == b
    return abs(a - b) <= REL_TOL * max(abs(a), abs(b), 1.0)


def difference(part: PartLine, integral: bool) -> str:
    """What the check column says: "✓", the signed difference, or what is missing."""
    if not part.checked or (part.recorded is None and (part.recomputed is None or not part.kept)):
        return ""
    if agrees(part.recorded, part.recomputed, integral):
        return "✓"
    if part.recorded is None:
        return "✗ missing"
    if part.recomputed is None:
        return "✗ not expected"
    delta = part.recorded - part.recomputed
    sign = "+" if delta > 0 else "−"
    return f"{sign}{format_length(abs(delta), integral)}"


def verdict(view: BoundView) -> str | None:
    """What the re-check says about the record in words, or None when it agrees throughout.

    Example: "Re-check: the tree is 18 too low, so the bound is 18 too low."
    """
    parts = [w for w in map(_wrong_words, view.parts, [view.integral] * len(view.parts)) if w]
    total = _wrong_words(view.total, view.integral)
    said = ", ".join(parts)
    if total:
        said = f"{said}, so {total}" if said else total
    rule = ""
    if view.expected is not None and view.expected != view.decision:
        rule = f"the rule calls for {view.expected}, not {view.decision}"
    if not said and not rule:
        return None
    return "Re-check: " + "; ".join(x for x in (said, rule) if x) + "."


def _wrong_words(part: PartLine, integral: bool) -> str:
    """ "the tree is 18 too low", or "" where the part agrees."""
    if difference(part, integral) in ("", "✓"):
        return ""
    label = _label(part.name)
    if part.recorded is None:
        return f"the {label} is missing"
    if part.recomputed is None:
        return f"the {label} should not be recorded"
    gap = part.recorded - part.recomputed
    return f"the {label} is {format_length(abs(gap), integral)} too {'high' if gap > 0 else 'low'}"


def _shortened(path: Sequence[int]) -> str:
    if len(path) <= _PATH_CITIES:
        return " ".join(map(str, path))
    return "… " + " ".join(map(str, path[-_PATH_CITIES:]))


class BoundPanel(Widget):
    """The cursor node's bound as a checked sum, against the incumbent and the decision."""

    COMPONENT_CLASSES: ClassVar[set[str]] = {
        "bound-panel--heading",
        "bound-panel--label",
        "bound-panel--muted",
        "bound-panel--agree",
        "bound-panel--differ",
        "bound-panel--safe",
        "bound-panel--harmful",
        "bound-panel--sentence",
    }

    DEFAULT_CSS = """
    BoundPanel {
        height: auto;
        min-height: 4;
        padding: 0 1;
    }
    BoundPanel > .bound-panel--heading { color: $accent; text-style: bold; }
    BoundPanel > .bound-panel--label { color: $text; }
    BoundPanel > .bound-panel--muted { color: $text-muted; }
    BoundPanel > .bound-panel--agree { color: $success; }
    BoundPanel > .bound-panel--differ { color: $error; text-style: bold; }
    BoundPanel > .bound-panel--safe { color: $success; text-style: italic; }
    BoundPanel > .bound-panel--harmful { color: $error; text-style: bold italic; }
    BoundPanel > .bound-panel--sentence { color: $text; text-style: italic; }
    """

    def __init__(
        self, *, name: str | None = None, id: str | None = None, classes: str | None = None
    ) -> None:
        super().__init__(name=name, id=id, classes=classes)
        self._view: BoundView | None = None
        self._strips: list[Strip] = []
        self._strips_width = -1
        self._lines_cache: tuple[int, list[Text]] | None = None
        self._reserved: dict[int, int] = {}
        self._styles: dict[str, Style] = {}
        self._recent: LRUCache[
            tuple[int, float | None, bool], tuple[Trail, TreeIndex, BoundView]
        ] = LRUCache(RECENT_VIEWS)

    @property
    def view(self) -> BoundView | None:
        """What the panel shows now (None before the first node)."""
        return self._view

    def show(self, model: ViewerModel, node: int) -> None:
        """Show `node` of the model's trail, with the oracle's completion once it is known."""
        completions = model.completions
        completion = None
        if completions is not None:
            value = float(completions[node])
            completion = None if math.isnan(value) else value
        wrong = model.is_wrong(node)
        # A view holds for the same trail snapshot and index (a live trail brings new ones).
        key = (node, completion, wrong)
        recent = self._recent.get(key)
        if recent is not None and recent[0] is model.trail and recent[1] is model.index:
            view = recent[2]
        else:
            view = bound_view(model.trail, model.index, node, completion=completion, wrong=wrong)
            self._recent.set(key, (model.trail, model.index, view))
        if view is not self._view:  # the same view again (a filter kept the node): no repaint
            self.show_values(view)

    def show_values(self, view: BoundView) -> None:
        """Show a view built elsewhere (tests, exports).

        The panel keeps the tallest height it has needed at its width, so stepping from
        node to node repaints only the panel; the screen is laid out again only when a
        node needs more lines than any before it.
        """
        self._view = view
        self._forget()
        width = self.size.width
        if width > 0 and len(self._lines(width)) <= self._reserved.get(width, 0):
            self.refresh()
        else:
            self.refresh(layout=True)

    def _forget(self) -> None:
        self._strips_width = -1
        self._lines_cache = None

    def notify_style_update(self) -> None:
        """Styles changed: the cached strips hold old colours."""
        super().notify_style_update()
        self._styles = {}
        self._forget()

    def get_content_height(self, container: Size, viewport: Size, width: int) -> int:
        """As many lines as the tallest view shown at this width has taken."""
        height = max(len(self._lines(width)), self._reserved.get(width, 0))
        self._reserved = {width: height}
        return height

    def render_line(self, y: int) -> Strip:
        """One line of the panel."""
        width = self.size.width
        strips = self._render_strips(width)
        if y >= len(strips):
            return Strip.blank(width, self.rich_style)
        return strips[y]

    # -- building the lines ---------------------------------------------------------------

    def _style(self, name: str) -> Style:
        """A component class's style (cached until the styles change)."""
        style = self._styles.get(name)
        if style is None:
            style = self.get_component_rich_style(f"bound-panel--{name}")
            self._styles[name] = style
        return style

    def _render_strips(self, width: int) -> list[Strip]:
        if width != self._strips_width:
            console = self.app.console
            base = self.rich_style
            self._strips = [
                Strip(list(line.render(console, end="")))
                .apply_style(base)
                .crop_extend(0, width, base)
                for line in self._lines(width)
            ]
            self._strips_width = width
        return self._strips

    def _lines(self, width: int) -> list[Text]:
        cached = self._lines_cache
        if cached is not None and cached[0] == width:
            return cached[1]
        lines = self._build_lines(width)
        self._lines_cache = (width, lines)
        return lines

    def _build_lines(self, width: int) -> list[Text]:
        view = self._view
        if view is None:
            return [Text("no node yet", style=self._style("muted"))]
        fmt = _Formatter(view.integral)
        heading = self._style("heading")
        muted = self._style("muted")
        lines = [
            Text.assemble(
                (f"node {view.node}", heading),
                (f" · depth {view.depth} · ", muted),
                (view.kind, muted),
                (" · marked wrong" if view.wrong else "", self._style("differ")),
                ("" if view.total.kept else " · not recorded, from the re-check", muted),
            ),
            Text.assemble(("path ", muted), _shortened(view.path)),
        ]
        lines.append(Text(f"{'':15}{'recorded':>{_W}}  {'re-check':>{_W}}", style=muted))
        for i, part in enumerate(view.parts):
            op = "−" if part.name in SUBTRACTED_TERMS else " " if i == 0 else "+"
            closing = view.total.name == "length" and part.name == LINK_OUT
            label = "closing edge" if closing else _label(part.name)
            lines.append(self._sum_row(op, label, part, fmt))
        lines.append(self._sum_row("=", _label(view.total.name), view.total, fmt))
        lines.append(
            Text.assemble(
                (f"  {'incumbent':<12}", self._style("label")),
                (f"{fmt(view.incumbent):>{_W}}", self._style("label")),
                ("  in force" if not math.isinf(view.incumbent) else "  none yet", muted),
            )
        )
        lines.append(self._decision_row(view))
        if view.completion is not None:
            lines.append(self._completion_row(view, fmt))
        lines.append(Text(""))
        wrap = max(width - 2, 20)
        lines.extend(_wrapped(view.sentence, wrap, self._style("sentence")))
        found = verdict(view)
        if found is not None:
            lines.extend(_wrapped(found, wrap, self._style("differ")))
        return lines

    def _sum_row(self, op: str, label: str, part: PartLine, fmt: _Formatter) -> Text:
        check = difference(part, fmt.integral)
        good = check in ("✓", "")
        recomputed = fmt(part.recomputed) if part.checked else ""
        return Text.assemble(
            (f"{op} {label:<12}", self._style("label")),
            (f"{fmt(part.recorded):>{_W}}", self._style("label")),
            (f"  {recomputed:>{_W}}", self._style("muted")),
            (f"  {check}", self._style("agree" if good else "differ")),
        )

    def _decision_row(self, view: BoundView) -> Text:
        label = self._style("label")
        row = Text.assemble((f"  {'decision':<12}", label), (f"{view.decision:>{_W}}", label))
        if view.expected is not None:
            same = view.expected == view.decision
            row.append(f"  {view.expected:>{_W}}", self._style("muted"))
            mark = "  ✓" if same else "  ✗ rule differs"
            row.append(mark, self._style("agree" if same else "differ"))
        return row

    def _completion_row(self, view: BoundView, fmt: _Formatter) -> Text:
        label = self._style("label")
        completion = view.completion
        assert completion is not None
        row = Text.assemble((f"  {'best through':<12}", label), (f"{fmt(completion):>{_W}}", label))
        if view.decision == "prune" and not math.isinf(view.incumbent):
            harmful = not reaches(completion, view.incumbent, view.integral)
            row.append(
                "  harmful prune" if harmful else "  safe prune",
                self._style("harmful" if harmful else "safe"),
            )
        return row


class _Formatter:
    def __init__(self, integral: bool) -> None:
        self.integral = integral

    def __call__(self, value: float | None) -> str:
        return format_length(value, self.integral)


def _wrapped(sentence: str, width: int, style: Style) -> list[Text]:
    """The sentence in lines of at most `width`, never breaking a number ("2 426").

    The spaces inside numbers become no-break spaces, which `textwrap` (unlike a `\\s`
    split) does not break at.
    """
    unbroken = _DIGIT_GROUP.sub("\u00a0", sentence)
    return [Text(line, style=style) for line in textwrap.wrap(unbroken, width)]


def _label(name: str) -> str:
    return TERM_LABELS.get(name, name.replace("_", " "))
