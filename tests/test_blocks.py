"""The block index and lazy columns: every answer equals the in-memory reader's and index's."""

from __future__ import annotations

import threading
import time
import tracemalloc
from pathlib import Path

import msgpack
import numpy as np
import pytest
import zstandard

from tests.reference import instance_path
from tracer.analysis.tree_index import TreeIndex
from tracer.base.frames import EndInfo
from tracer.base.header import to_wire
from tracer.base.schema import DECISION, DECISION_NAMES, DEPTH, MAX_BLOCK_NODES, NODES
from tracer.base.trail import Trail
from tracer.formats.load import load_instance
from tracer.search.driver import SearchSettings, make_start, run_search, trail_header
from tracer.trails import BlockFile, open_blocks, scan_blocks
from tracer.trails.reader import CorruptTrailError, read_trail
from tracer.trails.writer import TrailWriter


def solve(path: Path, name: str, **settings: object) -> Path:
    """Search a TSPLIB instance into a trail at `path` (the writer leaves its index)."""
    instance = load_instance(instance_path(name))
    chosen = SearchSettings(**settings)  # type: ignore[arg-type]
    start = make_start(instance, "nn", "none")
    writer = TrailWriter(path, trail_header(instance, chosen, start, "test"))
    r = run_search(instance, chosen, start, sink=writer)
    writer.close(EndInfo(r.status, r.nodes, r.recorded, r.decisions, r.seconds, r.length, r.tour))
    return path


def rewrite(trail: Trail, path: Path, size: int, codec: str = "zstd") -> Path:
    """Write `trail` again in blocks of `size` records, each update before its `at` block."""
    writer = TrailWriter(path, trail.header, codec=codec, threaded=False)
    updates = sorted(trail.best, key=lambda b: b.at)
    for lo in range(0, trail.count, size):
        while updates and updates[0].at <= lo:
            writer.write_best(updates.pop(0))
        writer.write_nodes({k: v[lo : lo + size] for k, v in trail.columns.items()})
    for update in updates:
        writer.write_best(update)
    if trail.end is not None:
        writer.close(trail.end)
    else:
        writer.__exit__(None, None, None)
    return path


@pytest.fixture(scope="module")
def trails(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """Trails of the kinds the normal run holds, several in tiny blocks so queries cross many."""
    root = tmp_path_factory.mktemp("blocks")
    burma = solve(root / "burma14.trail", "burma14", cutoff=2)
    faulty = solve(root / "fault.trail", "burma14", cutoff=2, fault="tree-positions")
    under = solve(root / "under.trail", "gr17", cutoff=4, record_under=(0, 3))
    limited = solve(root / "limited.trail", "gr17", cutoff=5, max_nodes=200_000)
    full = read_trail(burma)
    out = {
        "burma14": burma,
        "fault": faulty,
        "under": under,
        "limited": limited,
        "tiny-zstd": rewrite(full, root / "tiny.trail", 61),
        "tiny-none": rewrite(read_trail(faulty), root / "tiny-none.trail", 53, codec="none"),
        "orphans": _orphans(root / "orphans.trail", full),
    }
    cut = root / "cut.trail"
    data = out["tiny-zstd"].read_bytes()
    cut.write_bytes(data[: len(data) * 2 // 3])
    out["cut"] = cut
    return out


def _orphans(path: Path, like: Trail) -> Path:
    """A trail whose depths jump levels at random (orphans), in blocks of 11 records."""
    rng = np.random.default_rng(13)
    count, n = 3000, like.n
    depth = np.minimum(np.abs(np.cumsum(rng.integers(-2, 3, count))), n - 1).astype(np.uint8)
    columns = {k: np.resize(v, count) for k, v in like.columns.items()}
    columns[DEPTH] = depth
    trail = Trail(str(path), like.header, columns, [], None)
    return rewrite(trail, path, 11)


def _read(path: Path) -> Trail:
    """The in-memory reading, or what it kept before a corrupt frame."""
    try:
        return read_trail(path)
    except CorruptTrailError as exc:
        assert exc.partial is not None
        return exc.partial


#: Trail kinds; the repeats of a behaviour (another instance, another codec) are thorough.
KINDS = [
    "burma14",
    "fault",
    pytest.param("under", marks=pytest.mark.thorough),
    pytest.param("limited", marks=pytest.mark.thorough),
    "tiny-zstd",
    pytest.param("tiny-none", marks=pytest.mark.thorough),
    "orphans",
    "cut",
]


@pytest.mark.parametrize("kind", KINDS)
def test_lazy_answers_equal_the_in_memory_index(trails: dict[str, Path], kind: str) -> None:
    """Parent, subtree end, path, ancestors and decision counts equal TreeIndex's, node by
    node (the rest of the tree index's questions: tests/test_lazy_view.py)."""
    trail = _read(trails[kind])
    index = TreeIndex(trail.columns, trail.best)
    rng = np.random.default_rng(7)
    with open_blocks(trails[kind], cache_bytes=1 << 16) as lazy:
        tree = lazy.tree
        assert lazy.count == trail.count
        assert lazy.best == trail.best
        nodes = np.unique(np.concatenate(([0, trail.count - 1], rng.integers(0, trail.count, 60))))
        for node in nodes.tolist():
            assert tree.parent(node) == int(index.parent[node]), node
            assert tree.subtree_end(node) == int(index.end[node]), node
            assert tree.path(node) == index.path(node), node
            assert tree.ancestors(node) == index.ancestors(node), node
        for lo, hi in [(0, trail.count), *rng.integers(0, trail.count, (30, 2)).tolist()]:
            assert tree.decision_counts(lo, hi) == index.decision_counts(lo, hi), (lo, hi)
        for name, values in trail.columns.items():
            lo, hi = sorted(rng.integers(0, trail.count, 2).tolist())
            assert np.array_equal(lazy.column(name, lo, hi), values[lo:hi], equal_nan=True)
        assert lazy.cache_peak <= lazy.cache_limit


@pytest.mark.parametrize("kind", KINDS)
def test_blocks_are_the_trail_and_scan_equals_written_index(
    trails: dict[str, Path], kind: str
) -> None:
    """blocks() yields every record in order; the written index equals a fresh scan's."""
    trail = _read(trails[kind])
    with open_blocks(trails[kind]) as lazy:
        blocks = list(lazy.blocks())
        assert sum(b.count for b in blocks) == trail.count
        assert [b.first for b in blocks] == np.cumsum([0] + [b.count for b in blocks])[:-1].tolist()
        for name, values in trail.columns.items():
            joined = np.concatenate([b.columns[name] for b in blocks])
            assert np.array_equal(joined, values, equal_nan=True)
        assert lazy.end == trail.end
    written, scanned = scan_blocks(trails[kind]), scan_blocks(trails[kind], use_index=False)
    assert written.from_index == (kind not in ("cut", "orphans"))
    assert not scanned.from_index
    assert np.array_equal(written.table, scanned.table)
    assert (written.best, written.end, written.total) == (scanned.best, scanned.end, trail.count)
    assert scanned.notice == trail.notice


def test_cache_never_exceeds_its_limit(trails: dict[str, Path]) -> None:
    """Random column reads through a cache of a few blocks never hold more than the limit."""
    limit = 4000  # bytes: a few 61-record blocks of each column
    rng = np.random.default_rng(3)
    trail = read_trail(trails["tiny-zstd"])
    with open_blocks(trails["tiny-zstd"], cache_bytes=limit) as lazy:
        for _ in range(300):
            lo = int(rng.integers(0, trail.count - 30))
            name = str(rng.choice(list(trail.columns)))
            got = lazy.column(name, lo, lo + int(rng.integers(1, 30)))
            assert np.array_equal(got, trail.columns[name][lo : lo + len(got)], equal_nan=True)
            lazy.tree.subtree_end(lo)
            assert lazy.cache_used <= limit
        assert 0 < lazy.cache_peak <= limit


def test_cut_inside_the_index_reads_by_scanning(trails: dict[str, Path], tmp_path: Path) -> None:
    """A trail cut inside its end frame (which holds the index) is scanned and says where."""
    data = trails["limited"].read_bytes()
    whole = scan_blocks(trails["limited"])
    end_at = int(whole.values("stop")[-1])
    cut = tmp_path / "cut-index.trail"
    cut.write_bytes(data[: (end_at + len(data)) // 2])
    index = scan_blocks(cut)
    assert not index.from_index and index.end is None
    assert index.notice is not None and f"stops inside a frame at byte {end_at}" in index.notice
    assert index.total == read_trail(cut).count == whole.total
    assert read_trail(cut).notice == index.notice


def test_corrupt_index_reads_by_scanning(trails: dict[str, Path], tmp_path: Path) -> None:
    """A damaged index row is refused: the trail is scanned, and the notice says so."""
    data = bytearray(trails["limited"].read_bytes())
    whole = scan_blocks(trails["limited"])
    first_count = int(whole.values("count")[0]).to_bytes(8, "little")
    at = data.index(first_count, int(whole.values("stop")[-1]))  # the first row's count
    data[at] ^= 0x01
    bad = tmp_path / "bad-index.trail"
    bad.write_bytes(bytes(data))
    with open_blocks(bad) as lazy:
        assert not lazy.index.from_index
        assert lazy.notice is not None and "index" in lazy.notice and "scanning" in lazy.notice
        assert np.array_equal(lazy.index.table, whole.table)
        assert lazy.end == whole.end
    trail = read_trail(bad)  # the reader ignores the index: the trail reads as before
    assert trail.notice is None and trail.count == whole.total


def test_old_trails_without_index_read_as_before(trails: dict[str, Path], tmp_path: Path) -> None:
    """An end frame without the index keys (an older writer) reads and indexes the same."""
    data = trails["burma14"].read_bytes()
    whole = scan_blocks(trails["burma14"])
    unpacker = msgpack.Unpacker(raw=False)
    unpacker.feed(data)
    starts = [0]
    for _ in unpacker:
        starts.append(unpacker.tell())
    end_at = starts[-2]  # where the last frame, the end frame, starts
    frame = msgpack.unpackb(data[end_at:])
    frame.pop("index"), frame.pop("index_at")
    old = tmp_path / "old.trail"
    old.write_bytes(data[:end_at] + msgpack.packb(frame))
    new_trail, old_trail = read_trail(trails["burma14"]), read_trail(old)
    assert old_trail.end == new_trail.end and old_trail.notice is None
    for name, values in new_trail.columns.items():
        assert np.array_equal(old_trail.columns[name], values, equal_nan=True)
    index = scan_blocks(old)
    assert not index.from_index and index.notice is None
    assert np.array_equal(index.table, whole.table)


def _bomb(path: Path, blocks: int) -> None:
    """A header, then `blocks` nodes frames of 2^20 zero records sharing one tiny zstd payload."""
    instance = load_instance(instance_path("burma14"))
    header = trail_header(instance, SearchSettings(), make_start(instance, "nn", "none"), "bomb")
    payloads = {}
    for col in header.columns:
        raw = np.zeros(MAX_BLOCK_NODES, dtype=col.dtype).tobytes()
        payloads[col.name] = zstandard.ZstdCompressor(level=19).compress(raw)
    with open(path, "wb") as out:
        out.write(msgpack.packb(to_wire(header), use_bin_type=True))
        for b in range(blocks):
            frame = {
                "kind": NODES,
                "first": b * MAX_BLOCK_NODES,
                "count": MAX_BLOCK_NODES,
                "codec": "zstd",
                "columns": payloads,
            }
            out.write(msgpack.packb(frame, use_bin_type=True))


def test_decompression_bomb_is_refused_in_small_memory(tmp_path: Path) -> None:
    """Tiny frames claiming 2^20 records each are refused before their columns are allocated."""
    path = tmp_path / "bomb.trail"
    _bomb(path, 64)  # 64 × 2^20 records × 21 bytes = 1.4 GB claimed by a file of some kB
    assert path.stat().st_size < 200_000
    tracemalloc.start()
    with pytest.raises(CorruptTrailError, match="decompression bomb") as caught:
        read_trail(path)
    index = scan_blocks(path)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    assert peak < 120_000_000, peak  # at most the allowance's few blocks, never 1.4 GB
    partial = caught.value.partial
    assert partial is not None and partial.count == index.total < 64 * MAX_BLOCK_NODES
    assert index.corrupt is not None and "decompression bomb" in (index.notice or "")


def test_live_trail_is_followed_while_written(tmp_path: Path) -> None:
    """A writer thread appends blocks; the lazy file follows and ends equal to read_trail."""
    source = read_trail(solve(tmp_path / "src.trail", "burma14", cutoff=2))
    path = tmp_path / "live.trail"
    writer = TrailWriter(path, source.header, threaded=True)
    size = 50
    started = threading.Event()

    def write() -> None:
        for lo in range(0, source.count, size):
            for update in source.best:
                if lo <= update.at < lo + size or (lo == 0 and update.at == 0):
                    writer.write_best(update)
            writer.write_nodes({k: v[lo : lo + size] for k, v in source.columns.items()})
            started.set()
            time.sleep(0.002)
        assert source.end is not None
        writer.close(source.end)

    thread = threading.Thread(target=write)
    thread.start()
    started.wait()
    time.sleep(0.01)
    seen = []
    with open_blocks(path) as lazy:
        while thread.is_alive() or lazy.end is None:
            lazy.refresh()
            seen.append(lazy.count)
            if lazy.count:
                node = lazy.count - 1
                assert lazy.tree.path(node) == TreeIndex(
                    {k: v[: lazy.count] for k, v in source.columns.items()}, []
                ).path(node)
            if not thread.is_alive() and lazy.end is None:
                lazy.refresh()
                break
        thread.join()
        assert lazy.count == source.count and lazy.end == source.end and lazy.notice is None
        assert len(set(seen)) > 2, "the index never saw the file grow"
        assert seen == sorted(seen)
        joined = np.concatenate([b.columns[DEPTH] for b in lazy.blocks()])
        assert np.array_equal(joined, source.columns[DEPTH])


def test_a_block_that_disagrees_with_the_index_is_reported(
    trails: dict[str, Path], tmp_path: Path
) -> None:
    """A lie in an index row's depth summary is caught when that block is decoded."""
    data = bytearray(trails["tiny-zstd"].read_bytes())
    whole = scan_blocks(trails["tiny-zstd"])
    row = whole.table[3].astype("<i8").tobytes()
    at = data.index(row, int(whole.values("stop")[-1]))
    max_depth_at = at + 8 * 6
    data[max_depth_at] ^= 0x01  # still a valid row (max depth stays at or above min depth)
    liar = tmp_path / "liar.trail"
    liar.write_bytes(bytes(data))
    lazy: BlockFile
    with open_blocks(liar) as lazy:
        assert lazy.index.from_index
        with pytest.raises(CorruptTrailError, match="disagree with the index"):
            lazy.column(DEPTH, int(whole.values("first")[3]), int(whole.values("first")[3]) + 1)


def test_scanning_in_steps_reports_progress_and_ends_equal(trails: dict[str, Path]) -> None:
    """A scan 4 kB at a time reports growing progress and ends with the one-pass index."""
    from tracer.trails import BlockScanner

    whole = scan_blocks(trails["tiny-zstd"], use_index=False)
    scanner = BlockScanner(trails["tiny-zstd"])
    seen: list[tuple[int, int, int]] = []
    try:
        while True:
            index = scanner.step(4096)
            if index is not None:
                seen.append(index.progress)
                if index.done == index.size:
                    break
    finally:
        scanner.close()
    assert len(seen) > 10 and seen == sorted(seen)
    assert len({p[0] for p in seen}) > 10, "the blocks indexed did not grow step by step"
    assert index is not None and np.array_equal(index.table, whole.table)
    assert (index.best, index.end, index.notice) == (whole.best, whole.end, whole.notice)


@pytest.mark.parametrize("indexed", [False, True], ids=["scanned", "indexed"])
def test_flipped_bytes_give_answers_or_clear_errors(
    trails: dict[str, Path], tmp_path: Path, indexed: bool
) -> None:
    """A byte flipped anywhere (frames or index) is refused as corrupt, or read exactly.

    Read means: every column through the `BlockFile` (by range and by `blocks()`) equals what
    `read_trail` reads from the same damaged bytes, over the same records; and, since every
    zstd payload carries a checksum, it equals the undamaged trail's first records too.
    """
    from tracer.base.errors import InputError

    full = read_trail(trails["burma14"])
    columns = {k: v[:3000] for k, v in full.columns.items()}
    end = None
    if indexed:  # an end frame that agrees with the records: the writer leaves its index
        counts = np.bincount(columns[DECISION], minlength=len(DECISION_NAMES))
        decisions = {name: int(c) for name, c in zip(DECISION_NAMES, counts, strict=True)}
        end = EndInfo("limit", 3000, 3000, decisions, 0.0, None, None)
    small = Trail("", full.header, columns, [], end)
    clean = rewrite(small, tmp_path / "small.trail", 61)
    data = clean.read_bytes()
    with open_blocks(clean) as lazy:
        assert lazy.index.from_index == indexed
    nodes_end = int(scan_blocks(clean).values("stop")[-1])  # where the node frames stop
    rng = np.random.default_rng(5)
    spots = [
        *rng.integers(0, len(data), 25).tolist(),
        *range(nodes_end, len(data), max(1, (len(data) - nodes_end) // 24)),
        *range(len(data) - 40, len(data), 3),
    ]
    outcomes = {"refused": 0, "read": 0}
    for spot in spots:
        damaged = bytearray(data)
        damaged[spot] ^= 0x5A
        path = tmp_path / "flipped.trail"
        path.write_bytes(bytes(damaged))
        try:
            lazy = open_blocks(path)
        except InputError:
            with pytest.raises(InputError):  # only a header that does not read: nor here
                read_trail(path)
            outcomes["refused"] += 1
            continue
        with lazy:
            try:
                got = {name: lazy.column(name) for name in columns}
                for node in range(0, lazy.count, max(1, lazy.count // 7)):
                    lazy.tree.path(node)
                    lazy.tree.subtree_end(node)
                lazy.tree.decision_counts(3, lazy.count - 3)
                blocks = list(lazy.blocks())
            except InputError:  # refused, naming where: CorruptTrailError is one
                outcomes["refused"] += 1
                continue
            count = lazy.count
        outcomes["read"] += 1
        want = _read(path)
        assert count == want.count, spot
        assert sum(b.count for b in blocks) == count, spot
        for name, values in got.items():
            assert np.array_equal(values, want.columns[name], equal_nan=True), (spot, name)
            assert np.array_equal(values, columns[name][:count], equal_nan=True), (spot, name)
            for b in blocks:
                part = values[b.first : b.first + b.count]
                assert np.array_equal(b.columns[name], part, equal_nan=True), (spot, name)
    assert outcomes["refused"] and outcomes["read"], outcomes


@pytest.mark.parametrize("kind", ["fault", "tiny-zstd"])
def test_streaming_recheck_over_the_file_equals_in_memory(
    trails: dict[str, Path], kind: str
) -> None:
    """The streaming re-check reads a `BlockFile` as it reads the trail in memory."""
    import json

    from tracer.analysis.streaming import stream_recheck
    from tracer.base.trail import memory_blocks

    trail = read_trail(trails[kind])
    with open_blocks(trails[kind], cache_bytes=1 << 12) as lazy:
        streamed = stream_recheck(lazy)
        assert lazy.cache_used == 0  # blocks() decodes afresh, past the cache
    whole = stream_recheck(memory_blocks(trail))
    assert json.dumps(streamed.to_json()) == json.dumps(whole.to_json())
    assert np.array_equal(streamed.wrong_ids, whole.wrong_ids)
    assert streamed.wrong > 0 or kind != "fault"  # the planted fault is found both ways
