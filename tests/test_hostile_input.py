"""Hostile sizes and degenerate instances: each refused with a message naming where, while
memory stays small, or solved and re-checked against an independent optimum."""

from __future__ import annotations

import itertools
import json
import subprocess
import sys
import tracemalloc
from collections.abc import Callable
from pathlib import Path
from typing import Any

import msgpack
import numpy as np
import pytest

from tests.oracles import brute_force
from tracer.analysis import TreeIndex, recheck
from tracer.base import InputError, PrunetrailError
from tracer.cli import main
from tracer.formats.cities_csv import parse_cities_csv
from tracer.formats.tsplib import parse_instance, parse_tour
from tracer.trails.jsonl import read_jsonl
from tracer.trails.reader import read_trail

ROOT = Path(__file__).resolve().parents[1]
ORCHARD = ROOT / "scenarios" / "orchard_rounds.tsp"
#: Peak traced memory allowed while refusing a hostile input (the inputs claim gigabytes).
SMALL = 96 * 2**20


def refused(action: Callable[[], Any], *fragments: str) -> InputError | PrunetrailError:
    """Run `action`, expecting our error with every fragment in its message; memory small."""
    tracemalloc.start()
    try:
        with pytest.raises(PrunetrailError) as caught:
            action()
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    message = str(caught.value)
    for fragment in fragments:
        assert fragment in message, message
    assert peak < SMALL, f"peak {peak / 2**20:.0f} MiB while refusing: {message}"
    return caught.value


@pytest.fixture(scope="module")
def small_trail(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A complete trail of the orchard scenario (uncompressed blocks, so bytes are columns)."""
    path = tmp_path_factory.mktemp("hostile") / "orchard.trail"
    assert main(["solve", str(ORCHARD), "-o", str(path), "--json"]) == 0
    return path


def header_bytes(path: Path) -> bytes:
    """The header frame of a trail, as written."""
    unpacker = msgpack.Unpacker(raw=False, max_buffer_size=path.stat().st_size)
    data = path.read_bytes()
    unpacker.feed(data)
    unpacker.unpack()
    return data[: unpacker.tell()]


def header_map(path: Path) -> dict[str, Any]:
    """The header frame of a trail, decoded."""
    frame: dict[str, Any] = msgpack.unpackb(header_bytes(path), raw=False)
    return frame


# -- trails --------------------------------------------------------------------------------


def test_frame_claiming_2_to_40_bytes(small_trail: Path, tmp_path: Path) -> None:
    """A frame whose size fields claim 2^40 bytes (or 4 GiB raw) is refused at its offset."""
    head = header_bytes(small_trail)
    bad = tmp_path / "huge.trail"
    frame = {"kind": "nodes", "first": 0, "count": 2**40, "codec": "zstd", "columns": {}}
    bad.write_bytes(head + msgpack.packb(frame))
    error = refused(lambda: read_trail(bad), "count must be", f"at byte {len(head)}")
    assert getattr(error, "offset", None) == len(head)
    # an array32 claiming 2^32 - 1 items
    bad.write_bytes(head + b"\xdd\xff\xff\xff\xff" + b"\x00" * 64)
    refused(lambda: read_trail(bad), f"at byte {len(head)}")


def test_frame_claiming_more_bytes_than_the_file_holds(small_trail: Path, tmp_path: Path) -> None:
    """A last frame claiming 4 GiB reads as a cut file: a notice at that frame, memory small."""
    head = header_bytes(small_trail)
    bad = tmp_path / "claim.trail"
    bad.write_bytes(head + b"\xc6\xff\xff\xff\xff" + b"\0" * 64)
    tracemalloc.start()
    try:
        trail = read_trail(bad)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert trail.count == 0 and trail.notice is not None
    assert f"inside a frame at byte {len(head)} " in trail.notice
    assert peak < SMALL


def test_block_whose_columns_disagree_in_length(small_trail: Path, tmp_path: Path) -> None:
    """A block with one column shorter than its count is refused, naming the frame's offset."""
    head = header_bytes(small_trail)
    columns = header_map(small_trail)["columns"]
    count = 4
    payload = {name: b"\0" * count * np.dtype(dtype).itemsize for name, dtype in columns}
    payload["partial"] = payload["partial"][:-1]
    frame = {"kind": "nodes", "first": 0, "count": count, "codec": "none", "columns": payload}
    bad = tmp_path / "ragged.trail"
    bad.write_bytes(head + msgpack.packb(frame, use_bin_type=True))
    refused(lambda: read_trail(bad), "column partial", f"at byte {len(head)}")


def test_zstd_block_that_inflates_to_the_wrong_length(small_trail: Path, tmp_path: Path) -> None:
    """A compressed column that inflates to more than its count is refused at its frame."""
    import zstandard

    head = header_bytes(small_trail)
    columns = header_map(small_trail)["columns"]
    zc = zstandard.ZstdCompressor()
    payload = {name: zc.compress(b"\0" * 4 * np.dtype(d).itemsize) for name, d in columns}
    payload["city"] = zc.compress(b"\0" * 10**6)
    frame = {"kind": "nodes", "first": 0, "count": 4, "codec": "zstd", "columns": payload}
    bad = tmp_path / "inflate.trail"
    bad.write_bytes(head + msgpack.packb(frame, use_bin_type=True))
    refused(lambda: read_trail(bad), "column city", f"at byte {len(head)}")


@pytest.mark.parametrize(
    ("column", "value", "fragment"), [("city", 15, "city"), ("depth", 15, "depth")]
)
def test_city_or_depth_out_of_range_in_a_block(
    small_trail: Path, tmp_path: Path, column: str, value: int, fragment: str
) -> None:
    """A city ≥ n or a path longer than n cities (depth ≥ n) in a block is refused."""
    head = header_bytes(small_trail)
    columns = header_map(small_trail)["columns"]
    payload = {name: b"\0" * np.dtype(d).itemsize for name, d in columns}
    payload[column] = bytes([value])
    frame = {"kind": "nodes", "first": 0, "count": 1, "codec": "none", "columns": payload}
    bad = tmp_path / "range.trail"
    bad.write_bytes(head + msgpack.packb(frame, use_bin_type=True))
    refused(lambda: read_trail(bad), fragment, "outside 0..14", f"at byte {len(head)}")


def test_ten_million_cities_in_a_trail_header(small_trail: Path, tmp_path: Path) -> None:
    """A header claiming n = 10^7 is refused before any matrix is allocated."""
    header = header_map(small_trail)
    header["instance"]["n"] = 10**7
    bad = tmp_path / "wide.trail"
    bad.write_bytes(msgpack.packb(header, use_bin_type=True))
    refused(lambda: read_trail(bad), "instance.n")


# -- bit flips ------------------------------------------------------------------------------


def _answer(trail: Any) -> tuple[Any, ...]:
    """Everything a reader of the trail relies on: not the informational seconds or names,
    nor the end frame's decision counts (the reader compares those it is given with the
    nodes, so a damaged count is a notice; a damaged key only leaves them out), nor when
    an update from outside the
    tree (node -1, a start tour) took effect, which matters only through the decisions it
    judges, and those the re-check checks (an update at a node must take effect right
    after it: the reader refuses any other `at`)."""
    end = trail.end
    solver = trail.header.solver
    # an end frame without its length or tour: a reader falls back on the last update
    last_length = trail.best[-1].length if trail.best else None
    last_tour = list(trail.best[-1].tour) if trail.best else []
    return (
        {name: column.tobytes() for name, column in trail.columns.items()},
        [(b.node, b.length, b.tour) for b in trail.best],
        None
        if end is None
        else (
            end.status,
            end.length if end.length is not None else last_length,
            list(end.tour) if end.tour is not None else last_tour,
        ),
        trail.header.instance.matrix.tobytes(),
        # the bound's name decides which rule the re-check holds the trail to: a name one
        # bit from ours is refused, so a damaged name never narrows the check silently
        (solver.bound, solver.cutoff, solver.visit_order, solver.record_under),
    )


def _frame_offsets(data: bytes) -> list[int]:
    unpacker = msgpack.Unpacker(raw=False, max_buffer_size=len(data))
    unpacker.feed(data)
    offsets = []
    while True:
        offsets.append(unpacker.tell())
        try:
            unpacker.unpack()
        except msgpack.OutOfData:
            return offsets


def _flip_every_frame(path: Path, tmp_path: Path, per_frame: int, bits: tuple[int, ...]) -> int:
    """Flip bits in every frame of `path`; each flip is refused at an offset, or reads the
    same answer, or reads with a notice, or has a record the re-check marks wrong."""
    data = path.read_bytes()
    original = _answer(read_trail(path))
    offsets = _frame_offsets(data)
    assert len(offsets) > 4  # header, node block(s), best frames, end
    rng = np.random.default_rng(11)
    flipped = tmp_path / "flipped.trail"
    tried = 0
    for lo, hi in itertools.pairwise(offsets):
        positions = {lo, hi - 1, *rng.integers(lo, hi, per_frame).tolist()}
        for pos in sorted(positions):
            for bit in bits:
                damaged = bytearray(data)
                damaged[pos] ^= 1 << bit
                flipped.write_bytes(bytes(damaged))
                tried += 1
                try:
                    trail = read_trail(flipped)
                except InputError as exc:
                    assert exc.offset is not None and exc.offset >= 0, (pos, str(exc))
                    continue
                if _answer(trail) == original or trail.notice is not None:
                    continue
                report = recheck(trail, TreeIndex(trail.columns, trail.best), first=1)
                assert report.wrong > 0, f"flip at byte {pos} bit {bit}: a silent new answer"
    return tried


def test_bit_flips_in_every_frame_are_never_silent(tmp_path: Path) -> None:
    """Bit flips across every frame of a small trail: refused at a byte offset, or the same
    answer, or a notice, or a record marked wrong — never a silently different answer."""
    trail = tmp_path / "small.trail"
    assert main(["solve", str(ORCHARD), "-o", str(trail), "--cutoff", "3", "--json"]) == 0
    assert _flip_every_frame(trail, tmp_path, per_frame=14, bits=(0, 7)) > 100


def test_every_bit_of_the_bound_name_refused_or_foreign(small_trail: Path, tmp_path: Path) -> None:
    """Each single-bit flip in the header's bound name is refused, naming the field and the
    header's offset; it never reads as a foreign bound, which would silently check less. A
    foreign name that is not one bit from ours still reads, and the re-check says it checks
    less (only structure and decisions: its `kinds_checked` leave out the bound's parts)."""
    data = small_trail.read_bytes()
    head = header_bytes(small_trail)
    name = b"tree+links"
    assert header_map(small_trail)["solver"]["bound"] == name.decode()
    start = head.index(msgpack.packb(name.decode()))
    flipped = tmp_path / "flipped.trail"
    for pos in range(start + 1, start + 1 + len(name)):
        for bit in range(8):
            damaged = bytearray(data)
            damaged[pos] ^= 1 << bit
            flipped.write_bytes(bytes(damaged))
            # bit 7 makes the name invalid UTF-8: the frame itself is refused
            fragments = ("solver.bound", "one bit away") if bit < 7 else ("not a valid frame",)
            exc = refused(lambda: read_trail(flipped), *fragments)
            assert isinstance(exc, InputError) and exc.offset == 0, str(exc)
    ours = read_trail(small_trail)
    header = header_map(small_trail)
    header["solver"]["bound"] = "held-karp"  # a foreign solver's own bound
    foreign = tmp_path / "foreign.trail"
    foreign.write_bytes(msgpack.packb(header, use_bin_type=True) + data[len(head) :])
    trail = read_trail(foreign)
    assert trail.header.solver.bound == "held-karp"
    full = recheck(ours, TreeIndex(ours.columns, ours.best))
    narrow = recheck(trail, TreeIndex(trail.columns, trail.best))
    assert set(narrow.kinds_checked) < set(full.kinds_checked)


def test_jsonl_bound_name_one_bit_from_ours_is_refused(tmp_path: Path) -> None:
    """A JSON Lines header whose bound is one bit from ours is refused at line 1 (an import
    would write a trail the reader refuses); a foreign name reads."""
    path = tmp_path / "near.jsonl"
    for bound, ok in (("tree+linkc", False), ("None", False), ("my-own-bound", True)):
        header = {
            "kind": "header",
            "instance": {"coords": [[0, 0], [1, 0], [1, 1]], "metric": "EUC_2D"},
            "solver": {"bound": bound},
        }
        path.write_text(json.dumps(header) + "\n")
        if ok:
            assert read_jsonl(path).header.solver.bound == bound
            continue
        exc = refused(lambda: read_jsonl(path), "'solver.bound'", "one bit away")
        assert isinstance(exc, InputError) and exc.line == 1


@pytest.mark.thorough
@pytest.mark.parametrize("codec", ["zstd", "none"])
def test_bit_flips_many_per_frame(tmp_path: Path, codec: str) -> None:
    """The same with many flips a frame, for compressed and raw node columns."""
    from tracer.base.frames import EndInfo
    from tracer.search.driver import SearchSettings, make_start, run_search, trail_header
    from tracer.trails.writer import TrailWriter

    instance = parse_instance(ORCHARD.read_text(), str(ORCHARD))
    settings = SearchSettings(cutoff=3)
    start = make_start(instance, "nn", "none")
    path = tmp_path / f"{codec}.trail"
    writer = TrailWriter(path, trail_header(instance, settings, start, "t"), codec=codec)
    r = run_search(instance, settings, start, sink=writer)
    writer.close(EndInfo(r.status, r.nodes, r.recorded, r.decisions, r.seconds, r.length, r.tour))
    assert _flip_every_frame(path, tmp_path, per_frame=60, bits=(0, 3, 7)) > 1000


# -- instance and tour text ------------------------------------------------------------------


def test_ten_million_cities_in_a_tsplib_header() -> None:
    """DIMENSION : 10000000 is refused with its line, nothing allocated for it."""
    text = "NAME : big\nTYPE : TSP\nDIMENSION : 10000000\nEDGE_WEIGHT_TYPE : EUC_2D\n"
    text += "NODE_COORD_SECTION\n1 0 0\nEOF\n"
    refused(lambda: parse_instance(text, "big.tsp"), "big.tsp:3", "DIMENSION")


def test_tour_longer_than_n_and_city_out_of_range() -> None:
    """A tour listing more cities than n, or a city outside 1..n, names the line."""
    tour = "NAME : t\nTYPE : TOUR\nTOUR_SECTION\n1\n2\n3\n4\n-1\nEOF\n"
    refused(lambda: parse_tour(tour, "t.tour", 3), "t.tour:", "outside 1..3")
    refused(lambda: parse_tour(tour.replace("4\n", "9\n"), "t.tour", 4), "outside 1..4")


# -- JSON Lines ------------------------------------------------------------------------------

_HEADER = {
    "kind": "header",
    "instance": {"coords": [[0, 0], [3, 0], [3, 4]], "metric": "EUC_2D"},
    "solver": {"bound": "tree+links"},
}


def _jsonl(path: Path, *lines: dict[str, Any]) -> Path:
    path.write_text("".join(json.dumps(line) + "\n" for line in (_HEADER, *lines)))
    return path


def test_jsonl_city_out_of_range_and_path_longer_than_n(tmp_path: Path) -> None:
    """A node adding city n, or a path of n + 1 cities, names the line and the field."""
    root = {"kind": "node", "id": 1, "parent": None, "city": 0, "partial": 0, "decision": "expand"}
    child = {"kind": "node", "id": 2, "parent": 1, "city": 3, "partial": 3, "decision": "expand"}
    bad = _jsonl(tmp_path / "city.jsonl", root, child)
    refused(lambda: read_jsonl(bad), "city.jsonl:3", "'city'")
    long_path = {"kind": "node", "id": 2, "path": [0, 1, 2, 1], "partial": 3, "decision": "tour"}
    bad = _jsonl(tmp_path / "path.jsonl", {**root, "path": [0]} | {"parent": None}, long_path)
    refused(lambda: read_jsonl(bad), "path.jsonl:", "'path'")


def test_jsonl_line_of_a_gigabyte_without_newline(tmp_path: Path) -> None:
    """A 1 GiB line (a sparse file: nothing written to disk) is refused, memory bounded."""
    big = tmp_path / "huge.jsonl"
    with open(big, "wb") as handle:
        handle.write((json.dumps(_HEADER) + "\n").encode())
        handle.write(b'{"kind": "node", "pad": "')
        handle.truncate(2**30)  # the rest reads as zero bytes, and takes no disk space
    assert big.stat().st_size == 2**30 and big.stat().st_blocks * 512 < 2**20
    refused(lambda: read_jsonl(big), "huge.jsonl:2", "longer than")


@pytest.mark.thorough
def test_gigabyte_line_peak_rss_in_a_subprocess(tmp_path: Path) -> None:
    """The same 1 GiB line, read by `check` in its own process: peak RSS grows < 160 MiB."""
    big = tmp_path / "huge.jsonl"
    with open(big, "wb") as handle:
        handle.write((json.dumps(_HEADER) + "\n").encode() + b'{"kind": "node", "pad": "')
        handle.truncate(2**30)
    probe = (
        "import resource, sys\n"
        "from tracer.cli import main\n"
        "before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss\n"
        "status = main(['check', sys.argv[1], '--json'])\n"
        "after = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss\n"
        "print('GROWTH', status, (after - before) * 1024)\n"
    )
    done = subprocess.run(
        [sys.executable, "-c", probe, str(big)], capture_output=True, text=True, cwd=ROOT
    )
    growth_line = done.stdout.strip().splitlines()[-1].split()
    assert growth_line[:2] == ["GROWTH", "2"], done.stdout + done.stderr
    assert int(growth_line[2]) < 160 * 2**20
    error = json.loads(done.stdout.strip().splitlines()[0])
    assert error["line"] == 2 and error["file"] == str(big)


def test_jsonl_matrix_claiming_more_cities_than_allowed(tmp_path: Path) -> None:
    """A header matrix of 10^7 rows is refused by its size (the rows are never built)."""
    bad = tmp_path / "rows.jsonl"
    rows = "[" + ",".join(["[0]"] * 10**5) + "]"
    bad.write_text('{"kind": "header", "instance": {"matrix": ' + rows + '}, "solver": {}}\n')
    refused(lambda: read_jsonl(bad), "rows.jsonl:1", "instance.matrix")


# -- degenerate instances --------------------------------------------------------------------


def _tsp(path: Path, coords: list[tuple[float, float]], metric: str = "EUC_2D") -> Path:
    lines = [f"NAME : {path.stem}", "TYPE : TSP", f"DIMENSION : {len(coords)}"]
    lines += [f"EDGE_WEIGHT_TYPE : {metric}", "NODE_COORD_SECTION"]
    lines += [f"{i + 1} {x} {y}" for i, (x, y) in enumerate(coords)]
    path.write_text("\n".join([*lines, "EOF", ""]))
    return path


def _matrix_tsp(path: Path, matrix: list[list[int]]) -> Path:
    lines = [f"NAME : {path.stem}", "TYPE : TSP", f"DIMENSION : {len(matrix)}"]
    lines += ["EDGE_WEIGHT_TYPE : EXPLICIT", "EDGE_WEIGHT_FORMAT : FULL_MATRIX"]
    lines += ["EDGE_WEIGHT_SECTION", *(" ".join(map(str, row)) for row in matrix), "EOF", ""]
    path.write_text("\n".join(lines))
    return path


def _solve_and_check(capsys, instance: Path, tmp_path: Path) -> dict[str, Any]:
    """solve then check: both succeed; returns solve's JSON."""
    trail = tmp_path / (instance.stem + ".trail")
    assert main(["solve", str(instance), "-o", str(trail), "--json"]) == 0, capsys.readouterr()
    solved: dict[str, Any] = json.loads(capsys.readouterr().out)
    assert main(["check", str(trail), "--json"]) == 0
    checked = json.loads(capsys.readouterr().out)
    assert checked["wrong"] == 0 and checked["complete"] is True
    return solved


DEGENERATE = {
    "one_city": [(5, 5)],
    "two_cities": [(0, 0), (3, 4)],
    "three_cities": [(0, 0), (3, 0), (3, 4)],
    "one_point": [(7, 7)] * 6,
    "duplicates": [(0, 0), (0, 0), (4, 0), (4, 0), (4, 3), (0, 3)],
    "collinear": [(x, 2 * x) for x in (0, 9, 3, 1, 7, 4, 8)],
}


@pytest.mark.parametrize("name", list(DEGENERATE))
def test_degenerate_instances_solve_to_the_brute_force_optimum(
    capsys, tmp_path: Path, name: str
) -> None:
    """n = 1, 2, 3, one point, duplicates, collinear: optimal per brute force, trail checks."""
    path = _tsp(tmp_path / f"{name}.tsp", DEGENERATE[name])
    instance = parse_instance(path.read_text(), str(path))
    solved = _solve_and_check(capsys, path, tmp_path)
    assert solved["status"] == "complete"
    assert solved["length"] == brute_force(instance.matrix)  # independent oracle
    assert sorted(solved["tour"]) == list(range(instance.n))


def test_zeros_off_the_diagonal(capsys, tmp_path: Path) -> None:
    """An explicit matrix with zero-length edges solves to the brute-force optimum."""
    matrix = [[0, 0, 5, 2], [0, 0, 0, 7], [5, 0, 0, 0], [2, 7, 0, 0]]
    solved = _solve_and_check(capsys, _matrix_tsp(tmp_path / "zeros.tsp", matrix), tmp_path)
    assert solved["length"] == brute_force(np.array(matrix)) == 2  # the 0-1-2-3 tour


def test_asymmetric_matrix_is_refused_by_the_symmetric_search(capsys, tmp_path: Path) -> None:
    """An asymmetric FULL_MATRIX is refused in one line naming the cells that differ."""
    matrix = [[0, 1, 5], [2, 0, 4], [5, 4, 0]]
    path = _matrix_tsp(tmp_path / "skew.tsp", matrix)
    status = main(["solve", str(path), "--no-trail", "--json"])
    captured = capsys.readouterr()
    assert status == 2
    error = json.loads(captured.out)
    assert "symmetric" in error["error"] and error["file"] == str(path)
    assert "Traceback" not in captured.err


def test_csv_of_one_point_and_duplicates() -> None:
    """CSV city lists with one row, or only duplicate rows, read as instances."""
    one, _ = parse_cities_csv("1,2\n", "one.csv")
    assert one.n == 1
    same, _ = parse_cities_csv("1,2\n1,2\n1,2\n", "same.csv")
    assert same.n == 3 and float(same.matrix.max()) == 0.0
