"""The viewer's filter language and stop conditions against plain per-node reference loops.

The references below walk the trail one node at a time in Python, reading paths from the
parent column and bounds as the plain sum of the recorded parts; the vectorised answers
must agree.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from tests.reference import instance_path
from tracer.analysis import TreeIndex, recheck
from tracer.analysis.predicates import (
    FilterError,
    StopCondition,
    kept_ids,
    next_match,
    parse_filter,
    parse_stops,
)
from tracer.base import DECISION, DEPTH, Decision, bound_values, is_absent
from tracer.cli import main as cli_main
from tracer.trails import open_trail


@pytest.fixture(scope="module")
def faulty(tmp_path_factory):
    """A burma14 trail with a planted fault (wrong trees), its index and its wrong ids."""
    out = tmp_path_factory.mktemp("pred") / "b14.trail"
    status = cli_main(
        [
            "solve",
            str(instance_path("burma14")),
            "--fault",
            "stale-keys",
            "--cutoff",
            "3",
            "--start",
            "none",
            "--max-nodes",
            "4000",
            "-o",
            str(out),
        ]
    )
    assert status in (0, 3)
    trail = open_trail(out)
    index = TreeIndex(trail.columns, trail.best)
    wrong = recheck(trail, index).wrong_ids
    assert len(wrong) > 0
    return trail, index, wrong


@pytest.fixture(scope="module")
def facts(faulty):
    """Per node, read one at a time: path, depth, decision, bound, incumbent, wrong."""
    trail, index, wrong = faulty
    wrong_set = set(wrong.tolist())
    rows = []
    for node in range(index.count):
        rows.append(
            {
                "path": tuple(index.path(node)),
                "depth": int(trail.columns[DEPTH][node]),
                "decision": int(trail.columns[DECISION][node]),
                "bound": _plain_bound(trail, node),
                "incumbent": float(index.incumbent_at(np.array([node]))[0]),
                "wrong": node in wrong_set,
            }
        )
    return rows


def _reference_keep(row, text):
    """One node against one filter, clause by clause, the slow way."""
    depth, decision, bound, incumbent = (
        row["depth"],
        row["decision"],
        row["bound"],
        row["incumbent"],
    )
    ratio = (bound / incumbent) if bound is not None and math.isfinite(incumbent) else None
    checks = {
        "under 0 7": row["path"][:2] == (0, 7),
        "0 7 10": row["path"][:3] == (0, 7, 10),
        "depth 3": depth == 3,
        "depth 2..4": 2 <= depth <= 4,
        "depth ..2": depth <= 2,
        "depth 5..": depth >= 5,
        "depth > 4": depth > 4,
        "depth < 3": depth < 3,
        "decision prune": decision == int(Decision.PRUNE),
        "is prune,tour": decision in (int(Decision.PRUNE), int(Decision.TOUR)),
        "wrong": row["wrong"],
        "ratio 0.9..1.1": ratio is not None and 0.9 <= ratio <= 1.1,
        "ratio >= 1": ratio is not None and ratio >= 1,
    }
    clauses = [c.strip() for c in text.split(" and ")]
    return all(checks[c] for c in clauses)


FILTERS = [
    "under 0 7",
    "0 7 10",
    "depth 3",
    "depth 2..4",
    "depth ..2",
    "depth 5..",
    "depth > 4",
    "depth < 3",
    "decision prune",
    "is prune,tour",
    "wrong",
    "ratio 0.9..1.1",
    "ratio >= 1",
    "under 0 7 and depth 2..4 and decision prune",
    "wrong and under 0 7 and is prune,tour",
    "ratio 0.9..1.1 and depth 3",
]


@pytest.mark.parametrize("text", FILTERS)
def test_kept_ids_match_reference(faulty, facts, text):
    """Every filter form keeps exactly the nodes the per-node reference keeps."""
    trail, index, wrong = faulty
    expected = [i for i, row in enumerate(facts) if _reference_keep(row, text)]
    got = kept_ids(parse_filter(text), trail, index, wrong)
    assert got.dtype == np.int64
    assert got.tolist() == expected


def test_empty_filter_keeps_everything(faulty):
    """An empty filter keeps every node, and a prefix nobody recorded keeps none."""
    trail, index, wrong = faulty
    assert len(kept_ids(parse_filter(""), trail, index, wrong)) == index.count
    assert len(kept_ids(parse_filter("0 0 0"), trail, index, wrong)) == 0


def _plain_bound(trail, node):
    """partial + tree + link in + link out at one node in plain Python (None without a tree)."""
    parts = [trail.columns[name][node] for name in ("partial", "tree", "link_in", "link_out")]
    if any(is_absent(np.array([value]))[0] for value in parts):
        return None
    return float(sum(int(value) for value in parts))


def test_bound_values_are_the_sum_of_the_parts(faulty):
    """The vectorised bound equals the plain per-node sum of the recorded parts (NaN for None)."""
    trail, index, _ = faulty
    got = bound_values(trail, slice(0, index.count))
    for node in range(0, index.count, 7):
        ref = _plain_bound(trail, node)
        if ref is None:
            assert math.isnan(got[node])
        else:
            assert got[node] == ref


def test_describe_reads_back(faulty):
    """A filter's canonical text parses to the same filter."""
    for text in FILTERS:
        parsed = parse_filter(text)
        again = parse_filter(parsed.describe())
        assert again.describe() == parsed.describe()


@pytest.mark.parametrize(
    ("text", "column", "needle"),
    [
        ("depth", 6, "a depth"),
        ("decision maybe", 10, "unknown decision"),
        ("0 5 and", 8, "after 'and'"),
        ("under x", 7, "cities"),
        ("depth 5..2", 7, "empty"),
        ("wrong or depth 2", 7, "'and'"),
        ("depth 2 $", 9, "unexpected character"),
        ("colour red", 1, "expected under"),
        ("depth 2.5", 7, "whole number"),
    ],
)
def test_filter_errors_name_the_column(text, column, needle):
    """A bad filter raises FilterError naming what was expected and the column."""
    with pytest.raises(FilterError) as info:
        parse_filter(text)
    assert needle in str(info.value)
    assert info.value.position + 1 == column


def test_overlong_filter_is_refused():
    """A filter text beyond the size limit is refused before parsing."""
    with pytest.raises(FilterError):
        parse_filter("depth 1 and " * 200)


def _reference_stop(facts, node, cond):
    row = facts[node]
    inc = row["incumbent"]
    hits = []
    if cond.prune:
        hits.append(row["decision"] == int(Decision.PRUNE))
    if cond.incumbent_change:
        hits.append(node > 0 and inc != facts[node - 1]["incumbent"])
    if cond.wrong:
        hits.append(row["wrong"])
    if cond.prefix is not None:
        hits.append(row["path"][: len(cond.prefix)] == cond.prefix)
    if cond.depth is not None:
        hits.append(row["depth"] == cond.depth)
    if cond.within_pct is not None:
        b = row["bound"]
        hits.append(
            b is not None and math.isfinite(inc) and abs(b - inc) <= cond.within_pct / 100 * inc
        )
    return any(hits)


STOPS = [
    "prune",
    "incumbent",
    "wrong",
    "under 0 7 10",
    "depth 6",
    "near 1%",
    "incumbent, depth 9",
    "wrong or under 0 3",
    "prune, incumbent, wrong, under 0 13, depth 2, near 0.5%",
]


@pytest.mark.parametrize("text", STOPS)
def test_next_match_forward_and_backward(faulty, facts, text):
    """Forward and backward searches from several cursors find the reference's next match."""
    trail, index, wrong = faulty
    cond = parse_stops(text)
    hits = [i for i in range(index.count) if _reference_stop(facts, i, cond)]
    for start in (0, 17, 900, 3001, index.count - 1):
        after = next((h for h in hits if h > start), None)
        before = next((h for h in reversed(hits) if h < start), None)
        assert next_match(cond, trail, index, start, 1, wrong_ids=wrong) == after
        assert next_match(cond, trail, index, start, -1, wrong_ids=wrong) == before


@pytest.mark.parametrize("text", ["prune", "wrong", "under 0 7 10", "incumbent, depth 4"])
def test_next_match_within_a_filter(faulty, facts, text):
    """With a filter's kept ids the search only lands on kept nodes, in order."""
    trail, index, wrong = faulty
    cond = parse_stops(text)
    kept = kept_ids(parse_filter("depth 3..6"), trail, index, wrong)
    hits = [int(i) for i in kept if _reference_stop(facts, int(i), cond)]
    for start in (0, int(kept[len(kept) // 2]), int(kept[len(kept) // 2]) + 1):
        after = next((h for h in hits if h > start), None)
        before = next((h for h in reversed(hits) if h < start), None)
        assert next_match(cond, trail, index, start, 1, wrong_ids=wrong, kept=kept) == after
        assert next_match(cond, trail, index, start, -1, wrong_ids=wrong, kept=kept) == before


def test_stop_language_round_trip_and_errors():
    """Stop lists read back from their description; bad ones name the column."""
    cond = parse_stops("prune, incumbent or wrong, under 0 5, depth 4, near 2%")
    assert cond == StopCondition(True, True, True, (0, 5), 4, 2.0)
    assert parse_stops(cond.describe()) == cond
    with pytest.raises(FilterError) as info:
        parse_stops("prune; wrong")
    assert info.value.position == 5
    with pytest.raises(FilterError):
        parse_stops("")
    assert next_match(StopCondition(), None, None, 0) is None  # type: ignore[arg-type]
