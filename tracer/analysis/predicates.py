"""Which nodes to show and where to stop: the viewer's filter language and stop conditions.

Both are answered from the trail's columns and the tree index without a Python object per
node. A filter is a conjunction of clauses; a path-prefix clause becomes the subtree's id
range from the `TreeIndex` (pre-order ids make every subtree contiguous), so it costs no
scan at all, and the other clauses are evaluated in vectorised chunks over that range only.
A stop condition is a set of events (any of them stops the run), searched forward or
backward from the cursor in chunks that grow, so a near match is found quickly and a far
one without a per-node loop.

The filter language (`parse_filter`), clauses joined by `and`:

    under 0 5 2      the subtree whose path starts 0 5 2 (the words `under` may be left out)
    depth 4          depth exactly 4; also `depth 2..6`, `depth ..3`, `depth 5..`, `depth >= 5`
    decision prune   decision in a set: `decision prune,tour_better` (also written `is ...`)
    wrong            only records the re-check found wrong
    ratio 0.98..1    bound / incumbent in force within a range (either end may be left out)

Errors name the column where the text stops making sense (`FilterError.position`).
"""

from __future__ import annotations

import re
from collections.abc import Iterator
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from tracer.analysis.tree_index import TreeIndex
from tracer.base import (
    DECISION,
    DECISION_BY_NAME,
    DECISION_NAMES,
    DEPTH,
    Decision,
    Trail,
    bound_values,
)

#: Longest filter or stop text accepted (it comes from a keyboard or a command line).
MAX_TEXT = 1000
#: Most cities in one path prefix.
MAX_PREFIX = 4096
#: Nodes per vectorised chunk at most (bounds the temporaries of one step).
CHUNK = 1 << 20
_FIRST_CHUNK = 1 << 12


class FilterError(ValueError):
    """A filter or stop text that does not parse, or cannot be applied; `position` is the
    0-based column where it stops making sense (None: the text as a whole)."""

    def __init__(self, message: str, position: int | None) -> None:
        super().__init__(message if position is None else f"{message} (at column {position + 1})")
        self.message = message
        self.position = position


# -- the bound, vectorised ---------------------------------------------------------------


# -- the filter language -----------------------------------------------------------------

_TOKEN = re.compile(
    r"\s*(?:(?P<num>\d+(?:\.\d+)?)|(?P<dots>\.\.)|(?P<op><=|>=|<|>|=)|(?P<comma>,)"
    r"|(?P<pct>%)|(?P<word>[A-Za-z_][A-Za-z_0-9]*))"
)


@dataclass(frozen=True)
class _Token:
    kind: str
    text: str
    pos: int


def _tokens(text: str) -> list[_Token]:
    if len(text) > MAX_TEXT:
        raise FilterError(f"longer than {MAX_TEXT} characters", MAX_TEXT)
    out: list[_Token] = []
    pos = 0
    while pos < len(text):
        if text[pos:].strip() == "":
            break
        match = _TOKEN.match(text, pos)
        if match is None or match.lastgroup is None:
            at = pos + len(text[pos:]) - len(text[pos:].lstrip())
            raise FilterError(f"unexpected character {text[at]!r}", at)
        kind = match.lastgroup
        out.append(_Token(kind, match.group(kind), match.start(kind)))
        pos = match.end()
    return out


@dataclass(frozen=True)
class Span:
    """A closed or half-open numeric range; None means unbounded on that side."""

    lo: float | None = None
    hi: float | None = None
    lo_open: bool = False
    hi_open: bool = False

    def mask(self, values: NDArray[Any]) -> NDArray[np.bool_]:
        """Which values lie in the range (NaN never does)."""
        keep = np.ones(len(values), dtype=np.bool_)
        if self.lo is not None:
            keep &= values > self.lo if self.lo_open else values >= self.lo
        if self.hi is not None:
            keep &= values < self.hi if self.hi_open else values <= self.hi
        if values.dtype.kind == "f":
            keep &= ~np.isnan(values)
        return keep

    def describe(self) -> str:
        lo, hi = _num(self.lo), _num(self.hi)
        if self.lo is not None and self.lo == self.hi:
            return lo
        if self.hi is None:
            return f"> {lo}" if self.lo_open else f">= {lo}"
        if self.lo is None:
            return f"< {hi}" if self.hi_open else f"<= {hi}"
        return f"{lo}..{hi}"


def _num(value: float | None) -> str:
    if value is None:
        return ""
    return str(int(value)) if float(value).is_integer() else f"{value:g}"


@dataclass(frozen=True)
class NodeFilter:
    """A parsed filter: every clause must hold (an empty filter keeps every node).

    Attributes:
        prefixes: path prefixes (each keeps one subtree).
        depths: depth ranges.
        decisions: decision-code sets.
        wrong: whether only wrong records are kept.
        ratios: ranges of bound / incumbent in force.
        text: the text it was parsed from.
    """

    prefixes: tuple[tuple[int, ...], ...] = ()
    depths: tuple[Span, ...] = ()
    decisions: tuple[frozenset[int], ...] = ()
    wrong: bool = False
    ratios: tuple[Span, ...] = ()
    text: str = ""

    @property
    def empty(self) -> bool:
        """Whether the filter keeps every node."""
        return not (self.prefixes or self.depths or self.decisions or self.wrong or self.ratios)

    @property
    def range_only(self) -> bool:
        """Whether the filter is path prefixes alone (its kept nodes are one id range)."""
        return not (self.depths or self.decisions or self.wrong or self.ratios)

    def describe(self) -> str:
        """The filter in its canonical written form."""
        parts = ["under " + " ".join(map(str, p)) for p in self.prefixes]
        parts += [f"depth {s.describe()}" for s in self.depths]
        parts += [
            "decision " + ",".join(DECISION_NAMES[c] for c in sorted(d)) for d in self.decisions
        ]
        parts += ["wrong"] if self.wrong else []
        parts += [f"ratio {s.describe()}" for s in self.ratios]
        return " and ".join(parts)


class _Parser:
    def __init__(self, text: str) -> None:
        self.text = text
        self.toks = _tokens(text)
        self.i = 0

    def peek(self) -> _Token | None:
        return self.toks[self.i] if self.i < len(self.toks) else None

    def take(self) -> _Token:
        tok = self.peek()
        if tok is None:
            raise FilterError("the text ends too soon", len(self.text))
        self.i += 1
        return tok

    def at_word(self, *words: str) -> bool:
        tok = self.peek()
        return tok is not None and tok.kind == "word" and tok.text.lower() in words

    def integer(self, what: str) -> int:
        tok = self.take()
        if tok.kind != "num" or "." in tok.text:
            raise FilterError(f"expected {what}, a whole number, not {tok.text!r}", tok.pos)
        if len(tok.text) > 12:
            raise FilterError(f"{what} {tok.text} is too large", tok.pos)
        return int(tok.text)

    def number(self, what: str) -> float:
        tok = self.take()
        if tok.kind != "num":
            raise FilterError(f"expected {what}, a number, not {tok.text!r}", tok.pos)
        if len(tok.text) > 24:
            raise FilterError(f"{what} {tok.text} is too long", tok.pos)
        return float(tok.text)

    def cities(self) -> tuple[int, ...]:
        out: list[int] = []
        tok = self.peek()
        if tok is None or tok.kind != "num":
            raise FilterError("expected the path's cities, such as 0 5 2", self._pos())
        while (tok := self.peek()) is not None and tok.kind == "num":
            out.append(self.integer("a city"))
            if len(out) > MAX_PREFIX:
                raise FilterError(f"a path of more than {MAX_PREFIX} cities", tok.pos)
        return tuple(out)

    def span(self, what: str, whole: bool) -> Span:
        def read() -> float:
            return float(self.integer(what)) if whole else self.number(what)

        tok = self.peek()
        if tok is None:
            raise FilterError(f"expected {what} or a range such as 2..5", len(self.text))
        if tok.kind == "op":
            self.take()
            value = read()
            if tok.text == "=":
                return Span(value, value)
            if tok.text in ("<", "<="):
                return Span(None, value, hi_open=tok.text == "<")
            return Span(value, None, lo_open=tok.text == ">")
        if tok.kind == "dots":
            self.take()
            return Span(None, read())
        lo = read()
        if (nxt := self.peek()) is not None and nxt.kind == "dots":
            self.take()
            after = self.peek()
            if after is None or after.kind != "num":
                return Span(lo, None)
            hi = read()
            if hi < lo:
                raise FilterError(f"the range {_num(lo)}..{_num(hi)} is empty", tok.pos)
            return Span(lo, hi)
        return Span(lo, lo)

    def decision_set(self) -> frozenset[int]:
        codes: set[int] = set()
        while True:
            tok = self.take()
            name = tok.text.lower()
            if tok.kind != "word" or name not in DECISION_BY_NAME:
                known = ", ".join(DECISION_NAMES)
                raise FilterError(
                    f"unknown decision {tok.text!r}; expected one of {known}", tok.pos
                )
            codes.add(int(DECISION_BY_NAME[name]))
            if (nxt := self.peek()) is not None and nxt.kind == "comma":
                self.take()
                continue
            return frozenset(codes)

    def _pos(self) -> int:
        tok = self.peek()
        return tok.pos if tok is not None else len(self.text)


_CLAUSES = "under, depth, decision, wrong, ratio or a path such as 0 5 2"


def parse_filter(text: str) -> NodeFilter:
    """Parse the filter language (see the module docstring); empty text keeps everything.

    Raises:
        FilterError: naming what was expected and the column where the text went wrong.
    """
    p = _Parser(text)
    prefixes: list[tuple[int, ...]] = []
    depths: list[Span] = []
    decisions: list[frozenset[int]] = []
    ratios: list[Span] = []
    wrong = False
    if p.peek() is None:
        return NodeFilter(text=text)
    while True:
        tok = p.peek()
        assert tok is not None
        word = tok.text.lower() if tok.kind == "word" else ""
        if tok.kind == "num":
            prefixes.append(p.cities())
        elif word == "under":
            p.take()
            prefixes.append(p.cities())
        elif word == "depth":
            p.take()
            depths.append(p.span("a depth", whole=True))
        elif word in ("decision", "is"):
            p.take()
            decisions.append(p.decision_set())
        elif word == "wrong":
            p.take()
            wrong = True
        elif word == "ratio":
            p.take()
            ratios.append(p.span("a ratio", whole=False))
        else:
            raise FilterError(f"expected {_CLAUSES}, not {tok.text!r}", tok.pos)
        nxt = p.peek()
        if nxt is None:
            break
        if not p.at_word("and"):
            raise FilterError(f"expected 'and' between clauses, not {nxt.text!r}", nxt.pos)
        p.take()
        if p.peek() is None:
            raise FilterError("expected a clause after 'and'", len(text))
    return NodeFilter(
        tuple(prefixes), tuple(depths), tuple(decisions), wrong, tuple(ratios), text=text
    )


def kept_range(node_filter: NodeFilter, index: TreeIndex) -> tuple[int, int]:
    """The id range the filter's path prefixes allow (the whole trail without any).

    Subtrees are nested or disjoint, so several prefixes intersect to one range or none.
    """
    lo, hi = 0, index.count
    for prefix in node_filter.prefixes:
        node = index.node_for_prefix(list(prefix))
        if node is None:
            return 0, 0
        start, stop = index.subtree(node)
        lo, hi = max(lo, start), min(hi, stop)
    return (lo, hi) if lo < hi else (0, 0)


def kept_ids(
    node_filter: NodeFilter,
    trail: Trail,
    index: TreeIndex,
    wrong_ids: NDArray[np.int64] | None = None,
) -> NDArray[np.int64]:
    """Ids of the nodes the filter keeps, ascending.

    Args:
        node_filter: from `parse_filter`.
        trail: the trail.
        index: its tree index (prefix clauses take the subtree range from it, no scan).
        wrong_ids: sorted ids of wrong records known so far (for `wrong`; none if None).
    """
    lo, hi = kept_range(node_filter, index)
    if node_filter.wrong:
        wrong = np.zeros(0, np.int64) if wrong_ids is None else np.asarray(wrong_ids, np.int64)
        a, b = np.searchsorted(wrong, [lo, hi])
        ids = wrong[a:b]
        return ids[_clause_mask(node_filter, trail, index, ids)]
    if node_filter.range_only:
        return np.arange(lo, hi, dtype=np.int64)
    parts: list[NDArray[np.int64]] = []
    for start in range(lo, hi, CHUNK):
        stop = min(hi, start + CHUNK)
        keep = _clause_mask(node_filter, trail, index, slice(start, stop))
        kept = np.flatnonzero(keep).astype(np.int64, copy=False)
        kept += start  # in place: the array is ours
        parts.append(kept)
    if len(parts) == 1:
        return parts[0]
    return np.concatenate(parts) if parts else np.zeros(0, dtype=np.int64)


def _clause_mask(
    node_filter: NodeFilter, trail: Trail, index: TreeIndex, ids: NDArray[Any] | slice
) -> NDArray[np.bool_]:
    """Mask of `ids` satisfying every non-prefix, non-wrong clause."""
    depth = trail.columns[DEPTH][ids]
    keep = np.ones(len(depth), dtype=np.bool_)
    for span in node_filter.depths:
        keep &= span.mask(depth)
    if node_filter.decisions:
        decision = trail.columns[DECISION][ids]
        for codes in node_filter.decisions:
            chosen = np.zeros(len(decision), dtype=np.bool_)
            for code in codes:
                chosen |= decision == code
            keep &= chosen
    if node_filter.ratios:
        as_ids = _as_ids(ids)
        with np.errstate(invalid="ignore", divide="ignore"):
            ratio = bound_values(trail, ids) / index.incumbent_at(as_ids)
        for span in node_filter.ratios:
            keep &= span.mask(ratio)
    return keep


def _as_ids(ids: NDArray[Any] | slice) -> NDArray[np.int64]:
    if isinstance(ids, slice):
        return np.arange(ids.start, ids.stop, dtype=np.int64)
    return np.asarray(ids, dtype=np.int64)


# -- stop conditions ---------------------------------------------------------------------


@dataclass(frozen=True)
class StopCondition:
    """Where a run stops: at the first node where any of the chosen events holds.

    Attributes:
        prune: a pruned node.
        incumbent_change: the first node under a new incumbent.
        wrong: a record the re-check found wrong.
        prefix: a node under this path prefix.
        depth: a node at this depth.
        within_pct: a node whose bound is within this many percent of the incumbent.
    """

    prune: bool = False
    incumbent_change: bool = False
    wrong: bool = False
    prefix: tuple[int, ...] | None = None
    depth: int | None = None
    within_pct: float | None = None

    @property
    def empty(self) -> bool:
        """Whether no event is chosen (a run would never stop)."""
        return not (
            self.prune
            or self.incumbent_change
            or self.wrong
            or self.prefix is not None
            or self.depth is not None
            or self.within_pct is not None
        )

    def describe(self) -> str:
        """The condition in the stop language (`parse_stops` reads it back)."""
        parts = ["prune"] if self.prune else []
        parts += ["incumbent"] if self.incumbent_change else []
        parts += ["wrong"] if self.wrong else []
        if self.prefix is not None:
            parts.append("under " + " ".join(map(str, self.prefix)))
        if self.depth is not None:
            parts.append(f"depth {self.depth}")
        if self.within_pct is not None:
            parts.append(f"near {_num(self.within_pct)}%")
        return ", ".join(parts)


def parse_stops(text: str) -> StopCondition:
    """Parse a stop list: `prune, incumbent, wrong, under 0 5 2, depth 4, near 2%`.

    Items are separated by commas or `or`; any item that holds stops the run.

    Raises:
        FilterError: naming what was expected and where.
    """
    p = _Parser(text)
    found: dict[str, Any] = {}
    if p.peek() is None:
        raise FilterError(
            "expected at least one stop: prune, incumbent, wrong, under, depth, near", 0
        )
    while True:
        tok = p.take()
        word = tok.text.lower() if tok.kind == "word" else ""
        if word in ("prune", "incumbent", "wrong"):
            found[{"incumbent": "incumbent_change"}.get(word, word)] = True
        elif word == "under":
            found["prefix"] = p.cities()
        elif word == "depth":
            found["depth"] = p.integer("a depth")
        elif word in ("near", "within"):
            found["within_pct"] = p.number("a percentage")
            if (pct := p.peek()) is not None and pct.kind == "pct":
                p.take()
        else:
            raise FilterError(
                f"expected prune, incumbent, wrong, under, depth or near, not {tok.text!r}",
                tok.pos,
            )
        nxt = p.peek()
        if nxt is None:
            break
        if nxt.kind != "comma" and not p.at_word("or"):
            raise FilterError(f"expected ',' or 'or' between stops, not {nxt.text!r}", nxt.pos)
        p.take()
    return StopCondition(**found)


def next_match(
    condition: StopCondition,
    trail: Trail,
    index: TreeIndex,
    start: int,
    direction: int = 1,
    *,
    wrong_ids: NDArray[np.int64] | None = None,
    kept: NDArray[np.int64] | None = None,
) -> int | None:
    """The first node after (direction 1) or before (-1) node `start` where the condition holds.

    Args:
        condition: the events to stop at.
        trail: the trail.
        index: its tree index.
        start: the node to search from (itself excluded).
        direction: 1 forward in visit order, -1 backward.
        wrong_ids: sorted ids of wrong records known so far.
        kept: when given, only these ids (sorted; a filter's result) are candidates.

    Returns:
        The node id, or None when no node in that direction matches.
    """
    if condition.empty:
        return None
    forward = direction >= 0
    wrong = np.zeros(0, np.int64) if wrong_ids is None else np.asarray(wrong_ids, np.int64)
    subtree: tuple[int, int] | None = None
    if condition.prefix is not None:
        node = index.node_for_prefix(list(condition.prefix))
        subtree = index.subtree(node) if node is not None else (0, 0)
    horizon: int | None = None
    if kept is None:
        horizon = _direct_candidate(condition, subtree, wrong, start, forward, index.count)
    total = index.count if kept is None else len(kept)
    pos = start if kept is None else int(np.searchsorted(kept, start, side="left"))
    for lo, hi in _chunks(pos, total, forward, kept is None or _holds(kept, start)):
        ids = np.arange(lo, hi, dtype=np.int64) if kept is None else kept[lo:hi]
        if horizon is not None and ((forward and lo > horizon) or (not forward and hi <= horizon)):
            break
        mask = _stop_mask(condition, trail, index, ids, wrong, subtree)
        hits = np.flatnonzero(mask)
        if len(hits):
            found = int(ids[hits[0] if forward else hits[-1]])
            if horizon is None:
                return found
            return min(found, horizon) if forward else max(found, horizon)
    return horizon


def _holds(kept: NDArray[np.int64], node: int) -> bool:
    i = int(np.searchsorted(kept, node))
    return i < len(kept) and int(kept[i]) == node


def _chunks(pos: int, total: int, forward: bool, at_pos: bool) -> Iterator[tuple[int, int]]:
    """Growing position ranges leaving `pos` (excluded when `at_pos`) in one direction."""
    size = _FIRST_CHUNK
    if forward:
        lo = pos + 1 if at_pos else pos
        while lo < total:
            hi = min(total, lo + size)
            yield lo, hi
            lo, size = hi, min(size * 4, CHUNK)
    else:
        hi = pos
        while hi > 0:
            lo = max(0, hi - size)
            yield lo, hi
            hi, size = lo, min(size * 4, CHUNK)


def _direct_candidate(
    condition: StopCondition,
    subtree: tuple[int, int] | None,
    wrong: NDArray[np.int64],
    start: int,
    forward: bool,
    count: int,
) -> int | None:
    """The nearest match of the events answered without a scan (prefix, wrong), or None."""
    best: int | None = None

    def consider(candidate: int) -> None:
        nonlocal best
        closer = best is None or (candidate < best if forward else candidate > best)
        if 0 <= candidate < count and candidate != start and closer:
            best = candidate

    if subtree is not None and subtree[0] < subtree[1]:
        lo, hi = subtree
        if forward and start + 1 < hi:
            consider(max(start + 1, lo))
        elif not forward and start - 1 >= lo:
            consider(min(start - 1, hi - 1))
    if condition.wrong and len(wrong):
        if forward:
            i = int(np.searchsorted(wrong, start, side="right"))
            if i < len(wrong):
                consider(int(wrong[i]))
        else:
            i = int(np.searchsorted(wrong, start, side="left")) - 1
            if i >= 0:
                consider(int(wrong[i]))
    return best


def _stop_mask(
    condition: StopCondition,
    trail: Trail,
    index: TreeIndex,
    ids: NDArray[np.int64],
    wrong: NDArray[np.int64],
    subtree: tuple[int, int] | None,
) -> NDArray[np.bool_]:
    mask = np.zeros(len(ids), dtype=np.bool_)
    if condition.prune:
        mask |= trail.columns[DECISION][ids] == int(Decision.PRUNE)
    if condition.depth is not None:
        mask |= trail.columns[DEPTH][ids] == condition.depth
    if subtree is not None:
        mask |= (ids >= subtree[0]) & (ids < subtree[1])
    if condition.wrong and len(wrong):
        i = np.minimum(np.searchsorted(wrong, ids), len(wrong) - 1)
        mask |= wrong[i] == ids
    if condition.incumbent_change or condition.within_pct is not None:
        incumbent = index.incumbent_at(ids)
        if condition.incumbent_change:
            before = index.incumbent_at(np.maximum(ids - 1, 0))
            mask |= (ids > 0) & (incumbent != before)
        if condition.within_pct is not None:
            bound = bound_values(trail, ids)
            with np.errstate(invalid="ignore"):
                near = np.abs(bound - incumbent) <= condition.within_pct / 100.0 * incumbent
            mask |= near & np.isfinite(incumbent)
    return mask
