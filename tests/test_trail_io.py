"""Writing and reading trails: round trips, cut files, corrupt frames, hostile sizes,
following a live run, and Ctrl-C / SIGTERM on a real `prunetrail solve`."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
import warnings
from pathlib import Path
from typing import Any

import msgpack
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.typing import NDArray

from tests.reference import instance_path
from tests.sinks import Collect
from tracer.base.errors import InputError
from tracer.base.frames import BestUpdate, EndInfo
from tracer.base.header import TrailHeader, to_wire
from tracer.base.instance import Instance
from tracer.base.schema import FULL_COLUMNS, MAX_BLOCK_NODES, NODES
from tracer.search.driver import SearchSettings, make_start, run_search, trail_header
from tracer.trails.reader import CorruptTrailError, TrailFollower, read_trail
from tracer.trails.writer import TrailWriter


class Tee(Collect):
    """Collects and also writes to a real trail."""

    def __init__(self, writer: TrailWriter) -> None:
        super().__init__()
        self.writer = writer

    def write_nodes(self, columns: dict[str, NDArray[Any]]) -> None:
        super().write_nodes(columns)
        self.writer.write_nodes(columns)

    def write_best(self, update: BestUpdate) -> None:
        super().write_best(update)
        self.writer.write_best(update)


def record(
    instance: Instance,
    path: Path,
    settings: SearchSettings,
    threaded: bool = True,
    codec: str = "zstd",
) -> Collect:
    """Run a search into a trail at `path`; returns what the engine handed over."""
    start = make_start(instance, "nn", "none")
    writer = TrailWriter(
        path, trail_header(instance, settings, start, "test"), codec=codec, threaded=threaded
    )
    tee = Tee(writer)
    result = run_search(instance, settings, start, sink=tee)
    writer.close(
        EndInfo(
            result.status,
            result.nodes,
            result.recorded,
            result.decisions,
            result.seconds,
            result.length,
            result.tour,
        )
    )
    return tee


@pytest.fixture(scope="module")
def burma_trail(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Collect]:
    """A complete burma14 trail (TSPLIB instance) and the blocks that went into it."""
    from tracer.formats.load import load_instance

    path = tmp_path_factory.mktemp("trails") / "burma14.trail"
    sink = record(load_instance(instance_path("burma14")), path, SearchSettings(cutoff=2))
    return path, sink


@pytest.mark.parametrize(("threaded", "codec"), [(True, "zstd"), (False, "zstd"), (True, "none")])
def test_round_trip_is_exact(load_reference, tmp_path: Path, threaded: bool, codec: str) -> None:
    """Every column, update and the end frame read back exactly as written."""
    path = tmp_path / "gr17.trail"
    sink = record(
        load_reference("gr17"),
        path,
        SearchSettings(cutoff=3, max_nodes=200_000),
        threaded=threaded,
        codec=codec,
    )
    trail = read_trail(path)
    written = sink.columns()
    assert trail.count == 200_000 and trail.notice is None
    for name in FULL_COLUMNS:
        assert trail.columns[name].dtype == written[name].dtype
        assert np.array_equal(trail.columns[name], written[name]), name
    assert trail.best == sink.best
    assert trail.end is not None and trail.end.status == "limit"
    assert trail.end.nodes == 200_000
    assert np.array_equal(trail.header.instance.matrix, load_reference("gr17").matrix)


def test_compact_on_disk(load_reference, tmp_path: Path) -> None:
    """A full gr17 recording takes at most 6 bytes a node on disk (issue target)."""
    path = tmp_path / "gr17.trail"
    record(load_reference("gr17"), path, SearchSettings(cutoff=0))
    assert path.stat().st_size / read_trail(path).count <= 6.0


def test_cut_at_every_byte_reads_complete_frames(
    burma_trail: tuple[Path, Collect], tmp_path: Path
) -> None:
    """A file cut at any byte yields its complete frames and says where it stops."""
    path, sink = burma_trail
    data = path.read_bytes()
    header_end = len(msgpack.packb(to_wire(read_trail(path).header), use_bin_type=True))
    written = sink.columns()
    cut_file = tmp_path / "cut.trail"
    cuts = sorted(
        {
            *range(0, len(data), max(1, len(data) // 400)),
            *range(header_end - 3, header_end + 3),
            len(data) - 1,
        }
    )
    for cut in cuts:
        cut_file.write_bytes(data[:cut])
        if cut < header_end:
            with pytest.raises(InputError):
                read_trail(cut_file)
            continue
        trail = read_trail(cut_file)
        assert trail.notice is not None, cut
        n = trail.count
        for name in FULL_COLUMNS:
            assert np.array_equal(trail.columns[name], written[name][:n])
        assert trail.end is None


@settings(max_examples=40, deadline=None)
@given(st.data())
def test_flipped_byte_never_crashes(
    burma_trail: tuple[Path, Collect], tmp_path_factory, data: st.DataObject
) -> None:
    """A corrupted byte anywhere gives a trail or our error, never another exception."""
    path, _ = burma_trail
    raw = bytearray(path.read_bytes())
    at = data.draw(st.integers(0, len(raw) - 1))
    raw[at] ^= data.draw(st.integers(1, 255))
    bad = tmp_path_factory.mktemp("flip") / "bad.trail"
    bad.write_bytes(bytes(raw))
    try:
        trail = read_trail(bad)
    except InputError:
        return
    assert trail.count <= read_trail(path).count


def _header_bytes(trail_path: Path) -> bytes:
    return msgpack.packb(to_wire(read_trail(trail_path).header), use_bin_type=True)


def test_corrupt_frame_names_offset_and_keeps_what_came_before(
    burma_trail: tuple[Path, Collect], tmp_path: Path
) -> None:
    """Garbage after valid frames is an error at its byte offset; earlier frames survive."""
    path, _ = burma_trail
    header = _header_bytes(path)
    bad = tmp_path / "bad.trail"
    bad.write_bytes(header + msgpack.packb({"kind": "mystery"}))
    with pytest.raises(CorruptTrailError) as caught:
        read_trail(bad)
    assert caught.value.offset == len(header)
    assert caught.value.partial is not None and caught.value.partial.count == 0
    assert f"at byte {len(header)}" in str(caught.value)
    # a block whose first id skips ahead
    frame = {"kind": NODES, "first": 5, "count": 1, "codec": "none", "columns": {}}
    bad.write_bytes(header + msgpack.packb(frame, use_bin_type=True))
    with pytest.raises(CorruptTrailError, match="expected 0"):
        read_trail(bad)


@pytest.mark.parametrize(
    ("frame", "message"),
    [
        (
            {
                "kind": NODES,
                "first": 0,
                "count": MAX_BLOCK_NODES + 1,
                "codec": "none",
                "columns": {},
            },
            "count must be",
        ),
        ({"kind": NODES, "first": 0, "count": 10, "codec": "brotli", "columns": {}}, "codec"),
        ({"kind": "best", "at": 0, "node": -1, "length": 5, "tour": list(range(99))}, "tour"),
        ({"kind": "end", "status": "exploded"}, "status"),
        ({"kind": "node", "city": 200, "depth": 0, "decision": "expand"}, "city"),
        ({"kind": "node", "city": 0, "depth": 0, "decision": "wander"}, "unknown decision"),
    ],
)
def test_hostile_frames_are_refused(
    burma_trail: tuple[Path, Collect], tmp_path: Path, frame: dict[str, Any], message: str
) -> None:
    """Frames claiming impossible sizes or values are refused before anything is allocated."""
    path, _ = burma_trail
    bad = tmp_path / "hostile.trail"
    bad.write_bytes(_header_bytes(path) + msgpack.packb(frame, use_bin_type=True))
    with pytest.raises(CorruptTrailError, match=message):
        read_trail(bad)


def test_oversized_header_claims_are_refused(tmp_path: Path) -> None:
    """A header claiming a huge instance or a huge string is refused, not allocated."""
    bad = tmp_path / "big.trail"
    header = {
        "kind": "header",
        "format": "prunetrail",
        "version": 1,
        "instance": {"n": 10**9, "metric": "EUC_2D"},
        "columns": [],
    }
    bad.write_bytes(msgpack.packb(header))
    with pytest.raises(InputError, match=r"instance\.n"):
        read_trail(bad)
    bad.write_bytes(b"\xdb" + (2**31).to_bytes(4, "big") + b"x" * 100)  # str32 of 2 GiB
    with pytest.raises(InputError):
        read_trail(bad)


def test_single_record_frames_read_like_blocks(tmp_path: Path) -> None:
    """Hand-written `node` frames (no column blocks) read into the same columns."""
    coords = [[0, 0], [3, 0], [3, 4]]
    header = {
        "kind": "header",
        "format": "prunetrail",
        "version": 1,
        "instance": {"name": "tri", "n": 3, "metric": "EUC_2D", "coords": coords},
        "solver": {"bound": "tree+links", "cutoff": 0},
        "columns": [["city", "|u1"], ["depth", "|u1"], ["partial", "<i4"], ["decision", "|u1"]],
    }
    nodes = [
        {"kind": "node", "city": 0, "depth": 0, "partial": 0, "decision": "expand"},
        {"kind": "node", "city": 1, "depth": 1, "partial": 3, "decision": "expand"},
        {"kind": "node", "id": 2, "city": 2, "depth": 2, "partial": 7, "decision": "tour_better"},
    ]
    path = tmp_path / "hand.trail"
    path.write_bytes(b"".join(msgpack.packb(f) for f in [header, *nodes]))
    trail = read_trail(path)
    assert trail.count == 3
    assert trail.columns["partial"].tolist() == [0, 3, 7]
    assert trail.columns["decision"].tolist() == [0, 0, 3]
    assert trail.header.instance.matrix[1, 2] == 4  # EUC_2D from the given coordinates


def test_follower_sees_blocks_as_they_are_written(load_reference, tmp_path: Path) -> None:
    """poll() returns exactly the nodes appended since the last call."""
    instance = load_reference("burma14")
    settings = SearchSettings()
    path = tmp_path / "live.trail"
    writer = TrailWriter(path, trail_header(instance, settings, None, "test"), threaded=False)
    follower = TrailFollower(path)
    blocks = Collect()
    run_search(instance, settings, None, sink=blocks)
    seen = 0
    for i, block in enumerate(blocks.blocks):
        half = len(block["city"]) // 2
        for part in (
            {k: v[:half] for k, v in block.items()},
            {k: v[half:] for k, v in block.items()},
        ):
            writer.write_nodes(part)
            first, count, _ = follower.poll()
            assert (first, count) == (seen, len(part["city"])), i
            seen += count
    writer.write_best(blocks.best[-1])
    assert follower.poll()[2] == [blocks.best[-1]]
    writer.close(EndInfo("complete", seen, seen, {}, 0.0, None))
    follower.poll()
    snapshot = follower.trail
    assert snapshot is not None and snapshot.end is not None and snapshot.count == seen
    assert np.array_equal(snapshot.columns["city"], blocks.columns()["city"])
    follower.close()


def _solve_until_trail_grows(tmp_path: Path, name: str) -> tuple[subprocess.Popen[bytes], Path]:
    path = tmp_path / f"{name}.trail"
    args = [
        sys.executable,
        "-m",
        "tracer.cli",
        "solve",
        str(instance_path("ulysses22")),
        "-o",
        str(path),
        "--cutoff",
        "6",
        "--json",
    ]
    proc = subprocess.Popen(args, stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline:
        if path.exists() and path.stat().st_size > 200_000:
            return proc, path
        if proc.poll() is not None:
            break
        time.sleep(0.1)
    proc.kill()
    raise AssertionError("the search did not start writing")


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM])
def test_signal_mid_run_leaves_interrupted_trail(tmp_path: Path, sig: signal.Signals) -> None:
    """Ctrl-C or SIGTERM mid-run ends the trail with status interrupted, fully readable."""
    proc, path = _solve_until_trail_grows(tmp_path, sig.name)
    os.kill(proc.pid, sig)
    out, errors = proc.communicate(timeout=60)
    assert proc.returncode == 130, errors.decode()
    trail = read_trail(path)
    assert trail.end is not None and trail.end.status == "interrupted"
    assert trail.notice is None and trail.count > 0
    assert trail.end.recorded == trail.count
    assert b'"status": "interrupted"' in out


def test_header_round_trip_keeps_settings(load_reference) -> None:
    """The header's solver settings and columns survive to_wire/from_wire."""
    from tracer.base.header import from_wire

    instance = load_reference("ulysses16")
    settings = SearchSettings(cutoff=5, record_under=(0, 3), fault="stale-keys")
    header: TrailHeader = trail_header(instance, settings, None, "test")
    back = from_wire(msgpack.unpackb(msgpack.packb(to_wire(header), use_bin_type=True)))
    assert back.solver == header.solver
    assert back.columns == header.columns
    assert np.array_equal(back.instance.coords, instance.coords)


def _triangle_header(depth_dtype: str) -> dict[str, Any]:
    """A three-city header whose depth column has the dtype text `depth_dtype`."""
    return {
        "kind": "header",
        "format": "prunetrail",
        "version": 1,
        "instance": {"name": "tri", "n": 3, "metric": "EUC_2D", "coords": [[0, 0], [3, 0], [3, 4]]},
        "columns": [["city", "|u1"], ["depth", depth_dtype], ["decision", "|u1"]],
    }


@pytest.mark.parametrize("text", ["a", "a1", "S1", ">u2", "uint8", "O", "<c8", "u16"])
def test_column_dtype_outside_the_list_is_refused_without_a_warning(
    tmp_path: Path, text: str
) -> None:
    """A column dtype text not on our list is our error, and numpy never sees it (no warning)."""
    path = tmp_path / "dtype.trail"
    path.write_bytes(msgpack.packb(_triangle_header(text)))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        with pytest.raises(CorruptTrailError, match=f"column depth's dtype '{text}'"):
            read_trail(path)


@pytest.mark.parametrize("text", ["|u1", "<u1", "=u1", "u1", "<u2"])
def test_column_dtype_on_the_list_reads_little_endian(tmp_path: Path, text: str) -> None:
    """Each spelling on the list reads, as the little-endian unsigned dtype it names."""
    path = tmp_path / "dtype.trail"
    node = {"kind": "node", "city": 0, "depth": 0, "decision": "expand"}
    path.write_bytes(msgpack.packb(_triangle_header(text)) + msgpack.packb(node))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        trail = read_trail(path)
    assert trail.columns["depth"].dtype == np.dtype(f"<{text[-2:]}")
    assert trail.columns["depth"].tolist() == [0]


def test_column_decoding_is_exact_after_a_failure_and_across_threads(
    burma_trail: tuple[Path, Collect],
) -> None:
    """Each thread's reused decompressor decodes exactly, after a bad payload and in parallel."""
    from concurrent.futures import ThreadPoolExecutor

    import zstandard

    from tracer.trails.reader import decode_column

    header = read_trail(burma_trail[0]).header
    col = header.column("partial")
    assert col is not None
    rng = np.random.default_rng(3)
    arrays = [rng.integers(0, 5000, 4000 + 37 * i).astype(col.dtype) for i in range(16)]
    packer = zstandard.ZstdCompressor(write_checksum=True)
    payloads = [packer.compress(a.tobytes()) for a in arrays]

    def decode(i: int) -> Any:
        cut = decode_column(
            header, col, "zstd", payloads[i][: len(payloads[i]) // 2], len(arrays[i])
        )
        assert isinstance(cut, str) and "does not decompress" in cut
        return decode_column(header, col, "zstd", payloads[i], len(arrays[i]))

    for i, values in enumerate(map(decode, range(len(arrays)))):
        assert np.array_equal(values, arrays[i])
    with ThreadPoolExecutor(4) as pool:
        for _ in range(3):
            for i, values in enumerate(pool.map(decode, range(len(arrays)))):
                assert np.array_equal(values, arrays[i])
