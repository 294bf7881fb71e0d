"""The streamed import (`stream_jsonl`): for a trace in depth-first pre-order it writes, with
memory bounded by its chunk setting, byte for byte the trail the whole-file import writes;
for anything else it writes nothing and says so, and the whole-file import decides."""

from __future__ import annotations

import json
import tracemalloc
from pathlib import Path
from typing import Any

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tests.foreign_traces import jsonl_lines, solve_to_trail
from tests.test_jsonl_import import search_lines, searches, write_lines
from tracer.base import InputError
from tracer.cli import main
from tracer.formats import load_instance
from tracer.search.driver import SearchSettings
from tracer.trails import jsonl
from tracer.trails.reader import read_trail

ROOT = Path(__file__).resolve().parents[1]
GR17 = ROOT / "tests" / "data" / "gr17.tsp"


@pytest.fixture(scope="module")
def trace_lines(tmp_path_factory: pytest.TempPathFactory) -> list[str]:
    """A 30 000-node search of TSPLIB's gr17 printed as JSON Lines (parent ids, pre-order)."""
    folder = tmp_path_factory.mktemp("stream")
    trail = solve_to_trail(
        load_instance(GR17), folder / "g.trail", SearchSettings(max_nodes=30_000)
    )
    return list(jsonl_lines(trail))


def write(path: Path, lines: list[str], tail: str = "\n") -> Path:
    path.write_text("\n".join(lines) + tail)
    return path


def both(src: Path, tmp_path: Path, chunk: int) -> tuple[bytes, bytes, Any]:
    """The trail bytes of the streamed and the whole-file import, and the stream's summary."""
    summary = jsonl.stream_jsonl(src, tmp_path / "streamed.trail", chunk)
    assert summary is not None, "the trace should stream"
    whole = jsonl.import_jsonl(src, tmp_path / "whole.trail")
    assert summary.count == whole.count and summary.end == whole.end
    assert summary.header.columns == whole.header.columns
    assert summary.notice == whole.notice
    return (
        (tmp_path / "streamed.trail").read_bytes(),
        (tmp_path / "whole.trail").read_bytes(),
        summary,
    )


@pytest.mark.parametrize("chunk", [1 << 16, 1 << 22])
def test_streamed_trail_is_byte_for_byte_the_whole_file_one(
    trace_lines: list[str], tmp_path: Path, monkeypatch: pytest.MonkeyPatch, chunk: int
) -> None:
    """Small chunks and blocks, so rows cross both boundaries many times: the same bytes."""
    monkeypatch.setattr(jsonl, "_BLOCK_ROWS", 4096)
    streamed, whole, summary = both(write(tmp_path / "t.jsonl", trace_lines), tmp_path, chunk)
    assert streamed == whole
    assert summary.count == 30_000 and summary.end is not None
    assert read_trail(tmp_path / "streamed.trail").count == 30_000


def test_streamed_crashed_and_cut_traces(trace_lines: list[str], tmp_path: Path) -> None:
    """No end line, a cut last line, blank lines and unknown keys: still the same bytes."""
    lines = [line for line in trace_lines if '"kind": "end"' not in line]
    lines.insert(5, "")
    lines[9] = lines[9][:-1] + ', "seconds": 0.25}'  # an unknown key
    cut = write(tmp_path / "cut.jsonl", lines, tail='\n{"kind": "node", "id": 9')
    streamed, whole, summary = both(cut, tmp_path, 1 << 16)
    assert streamed == whole
    assert summary.end is None and summary.notice is not None and "stops inside" in summary.notice


def test_other_orders_and_problems_take_the_whole_file_path(
    trace_lines: list[str], tmp_path: Path
) -> None:
    """Not pre-order, ids that do not grow, paths, a repeated sibling: nothing is written,
    None is returned, and the whole-file import reads it (or reports the problem)."""
    header, start = trace_lines[0], trace_lines[1]  # the header, the start tour's best line
    root, a, b = (json.loads(line) for line in trace_lines[2:5])
    assert b["parent"] == a["id"] and a["parent"] == root["id"]
    free = [c for c in range(1, 17) if c not in (a["city"], b["city"])]

    def node(ident: int, parent: int, city: int) -> str:
        return json.dumps(dict(b, id=ident, parent=parent, city=city))

    head = [header, start, *map(json.dumps, (root, a, b))]
    cases = {
        # back under `a` after a sibling of `a`: a best-first order, not pre-order
        "visit order": [*head, node(5000, root["id"], free[0]), node(6000, a["id"], free[1])],
        "ids that fall": [*head, node(10, a["id"], free[0])],
        "repeated sibling": [*head, node(5000, root["id"], a["city"])],
    }
    for name, lines in cases.items():
        src = write(tmp_path / "x.jsonl", lines)
        out = tmp_path / f"{name}.trail"
        assert jsonl.stream_jsonl(src, out, 1 << 16) is None, name
        assert not out.exists(), name
    with pytest.raises(InputError, match="already adds city"):
        jsonl.import_jsonl(tmp_path / "x.jsonl", tmp_path / "whole.trail")


def test_streamed_memory_is_bounded_by_the_chunk(
    trace_lines: list[str], tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    """Peak traced memory: the streamed import holds a chunk and a block, the whole-file one
    every node (a third of it at most here, where a block is small)."""
    monkeypatch.setattr(jsonl, "_BLOCK_ROWS", 2048)
    src = write(tmp_path / "t.jsonl", trace_lines)
    jsonl.stream_jsonl(src, tmp_path / "warm.trail", 1 << 16)  # compiled code loaded
    peaks = []
    for run in (
        lambda: jsonl.stream_jsonl(src, tmp_path / "s.trail", 1 << 16),
        lambda: jsonl.import_jsonl(src, tmp_path / "w.trail"),
    ):
        tracemalloc.start()
        try:
            run()
            peaks.append(tracemalloc.get_traced_memory()[1])
        finally:
            tracemalloc.stop()
    assert peaks[0] * 3 < peaks[1], peaks


def test_import_command_streams_and_reports(trace_lines: list[str], tmp_path: Path) -> None:
    """`prunetrail import --chunk-mb` writes the same trail as the whole-file import."""
    src = write(tmp_path / "t.jsonl", trace_lines)
    out = tmp_path / "cli.trail"
    assert main(["import", str(src), "-o", str(out), "--chunk-mb", "0.1", "--json"]) == 0
    jsonl.import_jsonl(src, tmp_path / "whole.trail")
    assert out.read_bytes() == (tmp_path / "whole.trail").read_bytes()


def test_whole_file_walk_equals_the_level_by_level_tree(
    trace_lines: list[str], tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    """A pre-order trace read whole: the one-walk tree gives the same trail as the level by
    level one (the walk switched off by allowing it no cities)."""
    src = write(tmp_path / "t.jsonl", trace_lines)
    walked = jsonl.read_jsonl(src)
    monkeypatch.setattr(jsonl, "MAX_WALK_CITIES", 0)
    levels = jsonl.read_jsonl(src)
    assert list(walked.columns) == list(levels.columns)
    for name, column in walked.columns.items():
        assert column.tobytes() == levels.columns[name].tobytes(), name
    assert walked.best == levels.best and walked.end == levels.end


@settings(max_examples=60, deadline=None, suppress_health_check=list(HealthCheck))
@given(searches(), st.booleans(), st.booleans())
def test_any_small_search_streams_the_same_or_not_at_all(
    tmp_path_factory: pytest.TempPathFactory,
    search: tuple[int, list[list[int]], list[int]],
    depth_first: bool,
    growing: bool,
) -> None:
    """A random tree in a random parent-first order or in depth-first pre-order, with random
    or growing ids and a best line at each complete tour: the streamed import writes the
    whole-file import's bytes, or nothing; a pre-order trace with growing ids streams."""
    n, paths, ids = search
    if depth_first:
        paths = sorted(paths)  # lexicographic order of paths is a depth-first pre-order
    if growing:
        ids = sorted(ids)
    lines: list[Any] = []
    for line in search_lines(n, paths, ids, "parent"):
        lines.append(line)
        if line.get("decision") == "tour" and len(lines) % 2:
            tour = [*next(p for p, i in zip(paths, ids, strict=True) if i == line["id"])]
            lines.append({"kind": "best", "id": line["id"], "length": n, "tour": tour})
    folder = tmp_path_factory.mktemp("any")
    src = write_lines(folder / "s.jsonl", lines)
    summary = jsonl.stream_jsonl(src, folder / "streamed.trail", 1 << 16)
    jsonl.import_jsonl(src, folder / "whole.trail")
    if summary is None:
        assert not (depth_first and growing)
        return
    assert (folder / "streamed.trail").read_bytes() == (folder / "whole.trail").read_bytes()


def test_interrupted_streamed_import_leaves_the_old_trail(
    trace_lines: list[str], tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    """Ctrl-C while the second pass writes: the earlier trail is untouched, no part file."""
    src = write(tmp_path / "t.jsonl", trace_lines)
    out = tmp_path / "run.trail"
    out.write_bytes(b"previous contents")
    calls = []

    def interrupted(self: Any, nodes: Any) -> None:
        calls.append(nodes.count)
        if len(calls) > 1:
            raise KeyboardInterrupt
        real(self, nodes)

    real = jsonl._StreamWrite.__call__
    monkeypatch.setattr(jsonl._StreamWrite, "__call__", interrupted)
    with pytest.raises(KeyboardInterrupt):
        jsonl.stream_jsonl(src, out, 1 << 16)
    assert out.read_bytes() == b"previous contents"
    assert list(tmp_path.glob("*.part")) == []
