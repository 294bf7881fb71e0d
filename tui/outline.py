"""The branch outline: the search tree as an expandable outline, loaded a page at a time.

A search tree of millions of nodes cannot become millions of tree rows, so rows are made
only when their parent is expanded (`TreeIndex.children`), at most `PAGE` at a time; a
"more…" row loads the next page. Each row says the city the node adds, its decision and
its bound, with a mark where the re-check found the record wrong. Choosing a row posts
`BranchOutline.Picked`; `show` reveals the cursor node by loading just the pages on its
path, without posting anything; once `MAX_ROWS` rows have been made it folds back to the
cursor's path, so stepping through millions of nodes keeps the outline small.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass
from typing import TYPE_CHECKING, ClassVar

import numpy as np
from numpy.typing import NDArray
from rich.style import Style
from rich.text import Text
from textual import on
from textual.message import Message
from textual.widgets import Tree
from textual.widgets.tree import TreeNode

from tracer.analysis import TreeIndex, format_length
from tracer.base import CITY, DECISION, DECISION_NAMES, Trail, recorded_bound

if TYPE_CHECKING:
    from tui.model import ViewerModel

#: Children shown per page before a "more…" row.
PAGE = 200
#: Rows kept before the outline folds back to just the cursor's path (bounds its memory).
MAX_ROWS = 5000


@dataclass(frozen=True)
class Row:
    """What a row stands for: a node, or the "more…" row of a parent's next page.

    Attributes:
        node: the node's id (for a "more…" row, the parent's).
        more_from: for a "more…" row, the position of the first child not yet shown.
    """

    node: int
    more_from: int | None = None


class BranchOutline(Tree[Row]):
    """The search tree as an outline whose rows appear when their parent is expanded."""

    class Picked(Message):
        """A row was chosen: move the cursor to `node`."""

        def __init__(self, node: int) -> None:
            super().__init__()
            self.node = node

    COMPONENT_CLASSES: ClassVar[set[str]] = {
        "branch-outline--city",
        "branch-outline--expand",
        "branch-outline--prune",
        "branch-outline--skip",
        "branch-outline--tour",
        "branch-outline--bound",
        "branch-outline--more",
        "branch-outline--wrong",
    }

    DEFAULT_CSS = """
    BranchOutline > .branch-outline--city { text-style: bold; }
    BranchOutline > .branch-outline--expand { color: $primary; }
    BranchOutline > .branch-outline--prune { color: $warning; }
    BranchOutline > .branch-outline--skip { color: $text-muted; }
    BranchOutline > .branch-outline--tour { color: $success; }
    BranchOutline > .branch-outline--bound { color: $text-muted; }
    BranchOutline > .branch-outline--more { color: $accent; text-style: italic; }
    BranchOutline > .branch-outline--wrong { color: $error; text-style: bold; }
    """

    def __init__(
        self,
        *,
        page: int = PAGE,
        max_rows: int = MAX_ROWS,
        name: str | None = None,
        id: str | None = None,
        classes: str | None = None,
    ) -> None:
        super().__init__("no trail", name=name, id=id, classes=classes)
        self.page = page
        self.max_rows = max_rows
        self._trail: Trail | None = None
        self._index: TreeIndex | None = None
        self._rows: dict[int, TreeNode[Row]] = {}
        self._loaded: dict[int, int] = {}
        self._wrong: NDArray[np.int64] = np.zeros(0, dtype=np.int64)

    def show(self, model: ViewerModel, node: int) -> None:
        """Reveal `node` of the model's trail and put the outline's cursor on it.

        Rows of records the re-check found wrong carry a mark; when more have been found
        since the last call, the rows already made are marked again.
        """
        self.show_trail(model.trail, model.index, node)
        if len(model.wrong_ids) != len(self._wrong):
            self._wrong = model.wrong_ids
            for number, row in self._rows.items():
                row.set_label(self._label(number))

    def show_trail(self, trail: Trail, index: TreeIndex, node: int) -> None:
        """Reveal `node` of `trail`.

        Another trail resets the outline; a grown snapshot of the same live trail (same
        header, new index) keeps the rows made so far and adds the children that arrived.
        """
        if self._trail is not None and trail.header is self._trail.header:
            if index is not self._index:
                self._grow_to(trail, index)
        elif trail is not self._trail:
            self._reset_to(trail, index)
        if not 0 <= node < trail.count:
            return
        if len(self._rows) > self.max_rows:
            # Stepping through a big trail opens row after row: start again from the path.
            self._reset_to(trail, index)
        target = self._reveal(node)
        if target is not None:
            # Row numbers exist once the tree has laid out its new rows.
            self.call_after_refresh(self.move_cursor, target)

    # -- loading --------------------------------------------------------------------------

    def _reset_to(self, trail: Trail, index: TreeIndex) -> None:
        self._trail, self._index = trail, index
        self._rows.clear()
        self._loaded.clear()
        self.clear()
        if trail.count == 0:
            self.root.set_label(Text("empty trail"))
            return
        self.root.set_label(self._label(0))
        self.root.data = Row(0)
        self.root.allow_expand = self._has_children(0)
        self._rows[0] = self.root

    def _grow_to(self, trail: Trail, index: TreeIndex) -> None:
        """A live trail grew: rows already made stay, new children join loaded parents."""
        self._trail, self._index = trail, index
        for node, row in list(self._rows.items()):
            row.allow_expand = self._has_children(node)
            if node not in self._loaded:
                continue
            more = self._more_row(row)
            if more is None:
                self._load_page(row, node)
            else:
                more.set_label(self._more_label(node))

    def _has_children(self, node: int) -> bool:
        assert self._index is not None
        return int(self._index.end[node]) > node + 1

    def _label(self, node: int) -> Text:
        assert self._trail is not None
        trail = self._trail
        code = int(trail.columns[DECISION][node])
        decision = DECISION_NAMES[code] if 0 <= code < len(DECISION_NAMES) else str(code)
        kind = "tour" if decision.startswith("tour") else decision
        bound = recorded_bound(trail, node)
        integral = trail.header.instance.integral
        at = int(np.searchsorted(self._wrong, node))
        wrong = at < len(self._wrong) and int(self._wrong[at]) == node
        return Text.assemble(
            ("✗ " if wrong else "", self._style("wrong")),
            (f"{int(trail.columns[CITY][node])}", self._style("city")),
            "  ",
            (decision, self._style(kind)),
            ("" if bound is None else f"  {format_length(bound, integral)}", self._style("bound")),
        )

    def _style(self, name: str) -> Style:
        return self.get_component_rich_style(f"branch-outline--{name}", partial=True)

    def _load_page(self, parent: TreeNode[Row], node: int) -> None:
        """Add the next page of `node`'s children under `parent` (and a "more…" row)."""
        assert self._index is not None
        children = self._index.children(node)
        start = self._loaded.get(node, 0)
        stop = min(len(children), start + self.page)
        for child in children[start:stop]:
            row = parent.add(self._label(child), Row(child), allow_expand=self._has_children(child))
            self._rows[child] = row
        self._loaded[node] = stop
        if stop < len(children):
            parent.add_leaf(self._more_label(node), Row(node, stop))

    def _more_label(self, node: int) -> Text:
        assert self._index is not None
        left = len(self._index.children(node)) - self._loaded.get(node, 0)
        return Text(f"more… ({left} left)", self._style("more"))

    def _ensure_loaded(self, node: int, upto: int | None = None) -> None:
        """Load pages of `node`'s children until child `upto` (or the first page) is shown."""
        parent = self._rows[node]
        if node not in self._loaded:
            self._load_page(parent, node)
        while upto is not None and upto not in self._rows and self._more_row(parent) is not None:
            self._take_more(parent)

    def _more_row(self, parent: TreeNode[Row]) -> TreeNode[Row] | None:
        last = parent.children[-1] if parent.children else None
        if last is not None and last.data is not None and last.data.more_from is not None:
            return last
        return None

    def _take_more(self, parent: TreeNode[Row]) -> None:
        more = self._more_row(parent)
        if more is not None and parent.data is not None:
            more.remove()
            self._load_page(parent, parent.data.node)

    def _reveal(self, node: int) -> TreeNode[Row] | None:
        assert self._index is not None
        chain = self._index.ancestors(node)
        if not chain or chain[0] != 0:
            return None
        for parent, child in itertools.pairwise(chain):
            self._ensure_loaded(parent, child)
            self._rows[parent].expand()
        return self._rows.get(node)

    # -- events ---------------------------------------------------------------------------

    @on(Tree.NodeExpanded)
    def _expanded(self, event: Tree.NodeExpanded[Row]) -> None:
        data = event.node.data
        # Only a row of the current outline (not one dropped by a fold or a new trail).
        if data is not None and data.more_from is None and self._rows.get(data.node) is event.node:
            self._ensure_loaded(data.node)

    @on(Tree.NodeSelected)
    def _selected(self, event: Tree.NodeSelected[Row]) -> None:
        data = event.node.data
        if data is None:
            return
        if data.more_from is not None:
            parent = event.node.parent
            if parent is not None and self._rows.get(data.node) is parent:
                self._take_more(parent)
            return
        self.post_message(self.Picked(data.node))
