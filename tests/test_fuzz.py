"""Fuzzing every reader of untrusted input with hypothesis: the trail reader, the JSON Lines
importer, the TSPLIB and CSV parsers and the tour parser.

Any bytes give a valid result or our own error (`PrunetrailError`, with a message), never
another exception; each input finishes within a deadline and under a memory ceiling. A
trail that reads is also indexed and re-checked, so the analyses never crash on it either.
The default run uses a modest number of examples per reader; the `thorough` variants
(PRUNETRAIL_THOROUGH=1) run many more.
"""

from __future__ import annotations

import datetime
import json
import re
import tracemalloc
from collections.abc import Callable
from pathlib import Path
from typing import Any

import msgpack
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tracer.analysis import TreeIndex, recheck
from tracer.base import PrunetrailError
from tracer.cli import main
from tracer.formats.cities_csv import read_cities_csv
from tracer.formats.tsplib import read_instance, read_tour
from tracer.trails.jsonl import read_jsonl
from tracer.trails.reader import read_trail
from tracer.trails.writer import TrailWriter

ROOT = Path(__file__).resolve().parents[1]
SPEC = ROOT / "tracer" / "TRAIL_FORMAT.md"
ORCHARD = ROOT / "scenarios" / "orchard_rounds.tsp"
RELAY = ROOT / "scenarios" / "relay_survey.csv"
#: Longest any one input may take (a hang shows as a deadline failure, not a stuck run).
DEADLINE = datetime.timedelta(seconds=5)
#: Most traced memory any one small input may use.
CEILING = 64 * 2**20
#: Examples per reader: a modest count by default, many more when thorough.
EXAMPLES = [20, pytest.param(1500, marks=pytest.mark.thorough, id="thorough")]


def fuzz(strategy: st.SearchStrategy[Any], check: Callable[[Any], None], examples: int) -> None:
    """Run `check` on `examples` values drawn from `strategy`, each bounded in time and memory."""

    @settings(
        max_examples=examples,
        deadline=DEADLINE,
        database=None,
        suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large],
    )
    @given(strategy)
    def run(value: Any) -> None:
        tracemalloc.start()
        try:
            check(value)
            _, peak = tracemalloc.get_traced_memory()
        finally:
            tracemalloc.stop()
        assert peak < CEILING, f"peak {peak / 2**20:.0f} MiB"

    run()


def ours_or_valid(read: Callable[[], Any], path: Path) -> Any:
    """The reader's result, or None after our own error (which must name the file)."""
    try:
        return read()
    except PrunetrailError as exc:
        assert str(exc).strip() and str(path) in str(exc)
        return None


# -- mutations of valid files ----------------------------------------------------------------


def mutated(seeds: list[bytes]) -> st.SearchStrategy[bytes]:
    """Bytes made from a valid seed by a few flips, cuts, insertions, deletions or splices."""

    @st.composite
    def build(draw: st.DrawFn) -> bytes:
        data = bytearray(draw(st.sampled_from(seeds)))
        for _ in range(draw(st.integers(1, 4))):
            if not data:
                data.extend(draw(st.binary(min_size=1, max_size=16)))
                continue
            at = draw(st.integers(0, len(data) - 1))
            op = draw(st.sampled_from(("flip", "cut", "insert", "delete", "copy", "byte")))
            if op == "flip":
                data[at] ^= 1 << draw(st.integers(0, 7))
            elif op == "byte":
                data[at] = draw(st.integers(0, 255))
            elif op == "cut":
                del data[at:]
            elif op == "insert":
                data[at:at] = draw(st.binary(min_size=1, max_size=16))
            elif op == "delete":
                del data[at : at + draw(st.integers(1, 64))]
            else:
                start = draw(st.integers(0, len(data) - 1))
                data[at:at] = data[start : start + draw(st.integers(1, 256))]
        return bytes(data)

    return build()


def any_bytes(seeds: list[bytes]) -> st.SearchStrategy[bytes]:
    """Mutated seeds mostly, and plain random bytes sometimes."""
    return mutated(seeds) | st.binary(max_size=512)


# -- trail reader ----------------------------------------------------------------------------


@pytest.fixture(scope="module")
def trail_seeds(tmp_path_factory: pytest.TempPathFactory) -> list[bytes]:
    """Small valid trails: compressed blocks, raw blocks, and hand-written node frames."""
    folder = tmp_path_factory.mktemp("seeds")
    path = folder / "orchard.trail"
    assert main(["solve", str(ORCHARD), "-o", str(path), "--max-nodes", "400", "--json"]) == 3
    trail = read_trail(path)
    raw = folder / "raw.trail"
    with TrailWriter(raw, trail.header, codec="none") as writer:
        writer.write_nodes({k: v[:40] for k, v in trail.columns.items()})
        for update in trail.best:
            writer.write_best(update)
    out = [path.read_bytes(), raw.read_bytes()]
    header = {
        "kind": "header",
        "format": "prunetrail",
        "version": 1,
        "instance": {"name": "tri", "n": 3, "metric": "EUC_2D", "coords": [[0, 0], [3, 0], [3, 4]]},
        "solver": {"bound": "tree+links", "cutoff": 0},
        "columns": [["city", "|u1"], ["depth", "|u1"], ["partial", "<i4"], ["decision", "|u1"]],
    }
    frames = [
        header,
        {"kind": "node", "city": 0, "depth": 0, "partial": 0, "decision": "expand"},
        {"kind": "node", "city": 1, "depth": 1, "partial": 3, "decision": "expand"},
        {"kind": "node", "city": 2, "depth": 2, "partial": 7, "decision": "tour_better"},
        {"kind": "best", "at": 3, "node": 2, "length": 12, "tour": [0, 1, 2]},
        {"kind": "end", "status": "complete"},
    ]
    out.append(b"".join(msgpack.packb(f) for f in frames))
    return out


def _check_trail(path: Path) -> Callable[[bytes], None]:
    def check(data: bytes) -> None:
        path.write_bytes(data)
        trail = ours_or_valid(lambda: read_trail(path), path)
        if trail is None:
            return
        sizes = {len(column) for column in trail.columns.values()}
        assert sizes == {trail.count}
        index = TreeIndex(trail.columns, trail.best)
        report = recheck(trail, index, first=3)
        assert 0 <= report.wrong <= report.nodes_checked == trail.count

    return check


@pytest.mark.parametrize("examples", EXAMPLES)
def test_trail_reader_fuzz(trail_seeds: list[bytes], tmp_path: Path, examples: int) -> None:
    """Damaged trails read (and re-check) or raise our error; never another exception."""
    fuzz(any_bytes(trail_seeds), _check_trail(tmp_path / "fuzz.trail"), examples)


_scalars = (
    st.none()
    | st.booleans()
    | st.integers(-(2**63), 2**64 - 1)
    | st.floats(allow_nan=True)
    | st.text(max_size=8)
    | st.binary(max_size=8)
)
_values = st.recursive(
    _scalars,
    lambda inner: (
        st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=6), inner, max_size=4)
    ),
    max_leaves=8,
)


@st.composite
def _frames(draw: st.DrawFn, seeds: list[bytes]) -> bytes:
    """A valid trail's header, then frames whose fields hold arbitrary values."""
    unpacker = msgpack.Unpacker(raw=False, max_buffer_size=len(seeds[0]))
    unpacker.feed(seeds[0])
    frames = list(unpacker)
    header, rest = frames[0], frames[1:]
    out = [msgpack.packb(header, use_bin_type=True)]
    for _ in range(draw(st.integers(1, 4))):
        frame = dict(draw(st.sampled_from(rest)))
        for key in draw(st.lists(st.sampled_from(sorted(frame)), max_size=3)):
            frame[key] = draw(_values)
        out.append(msgpack.packb(frame, use_bin_type=True))
    return b"".join(out)


@pytest.mark.parametrize("examples", EXAMPLES)
def test_trail_frames_with_arbitrary_values(
    trail_seeds: list[bytes], tmp_path: Path, examples: int
) -> None:
    """Frames of the right kind holding values of any type are read or refused, never crash."""
    fuzz(_frames(trail_seeds), _check_trail(tmp_path / "frames.trail"), examples)


# -- JSON Lines ------------------------------------------------------------------------------


def _spec_jsonl() -> list[bytes]:
    text = SPEC.read_text(encoding="utf-8")
    blocks = re.findall(r"<!-- example: jsonl -->\n```json\n(.*?)```", text, flags=re.DOTALL)
    assert blocks, "the spec's JSON Lines examples"
    return [block.encode() for block in blocks]


@st.composite
def _jsonl_edits(draw: st.DrawFn) -> bytes:
    """A spec example with some lines' values replaced by arbitrary JSON, or lines moved."""
    lines = [json.loads(line) for line in draw(st.sampled_from(_spec_jsonl())).splitlines()]
    for _ in range(draw(st.integers(1, 3))):
        i = draw(st.integers(0, len(lines) - 1))
        op = draw(st.sampled_from(("value", "drop", "move", "key")))
        if op == "value" and isinstance(lines[i], dict) and lines[i]:
            key = draw(st.sampled_from(sorted(lines[i])))
            lines[i][key] = draw(_json_values)
        elif op == "key" and isinstance(lines[i], dict):
            lines[i][draw(st.sampled_from(("id", "parent", "path", "bound", "length", "zz")))] = (
                draw(_json_values)
            )
        elif op == "drop":
            del lines[i]
            if not lines:
                break
        else:
            lines.insert(draw(st.integers(0, len(lines))), lines.pop(i))
    return "".join(json.dumps(line) + "\n" for line in lines).encode()


_json_values = st.recursive(
    st.none()
    | st.booleans()
    | st.integers(-(2**70), 2**70)
    | st.floats(allow_nan=False, allow_infinity=False)
    | st.text(max_size=6),
    lambda inner: (
        st.lists(inner, max_size=5) | st.dictionaries(st.text(max_size=4), inner, max_size=4)
    ),
    max_leaves=10,
)


@pytest.mark.parametrize("examples", EXAMPLES)
def test_jsonl_importer_fuzz(tmp_path: Path, examples: int) -> None:
    """Damaged JSON Lines traces import or raise our error naming the file; never crash."""
    path = tmp_path / "fuzz.jsonl"

    def check(data: bytes) -> None:
        path.write_bytes(data)
        trail = ours_or_valid(lambda: read_jsonl(path), path)
        if trail is not None:
            assert {len(c) for c in trail.columns.values()} == {trail.count}
            recheck(trail, TreeIndex(trail.columns, trail.best), first=3)

    fuzz(any_bytes(_spec_jsonl()) | _jsonl_edits(), check, examples)


# -- TSPLIB, CSV and tours -------------------------------------------------------------------

_KEYWORDS = (
    "NAME",
    "TYPE",
    "COMMENT",
    "DIMENSION",
    "EDGE_WEIGHT_TYPE",
    "EDGE_WEIGHT_FORMAT",
    "NODE_COORD_TYPE",
    "DISPLAY_DATA_TYPE",
)
_WORDS = (
    "TSP",
    "ATSP",
    "TOUR",
    "EUC_2D",
    "CEIL_2D",
    "ATT",
    "GEO",
    "MAN_2D",
    "MAX_2D",
    "EXPLICIT",
    "FULL_MATRIX",
    "UPPER_ROW",
    "LOWER_DIAG_ROW",
    "UPPER_DIAG_COL",
    "FUNCTION",
    "NODE_COORD_SECTION",
    "EDGE_WEIGHT_SECTION",
    "TOUR_SECTION",
    "DISPLAY_DATA_SECTION",
    "EOF",
    "-1",
)
_tokens = (
    st.sampled_from(_WORDS)
    | st.integers(-5, 40).map(str)
    | st.floats(allow_nan=True, allow_infinity=True).map(repr)
    | st.text(alphabet="0123456789.-+eE:xX", max_size=8)
)


@st.composite
def _tsplib_text(draw: st.DrawFn) -> bytes:
    """Lines of TSPLIB keywords, values and sections in any order."""
    lines = []
    for _ in range(draw(st.integers(0, 14))):
        if draw(st.booleans()):
            sep = draw(st.sampled_from((" : ", ":", " ")))
            lines.append(draw(st.sampled_from(_KEYWORDS)) + sep + draw(_tokens))
        else:
            lines.append(" ".join(draw(st.lists(_tokens, max_size=5))))
    return "\n".join(lines).encode()


def _seed_files(*paths: Path) -> list[bytes]:
    return [p.read_bytes() for p in paths]


@pytest.mark.parametrize("examples", EXAMPLES)
def test_tsplib_instance_parser_fuzz(tmp_path: Path, examples: int) -> None:
    """TSPLIB-like text of any shape gives an instance with a matrix, or our error."""
    path = tmp_path / "fuzz.tsp"
    seeds = _seed_files(
        ORCHARD, ROOT / "tests" / "data" / "gr17.tsp", ROOT / "tests" / "data" / "br17.atsp"
    )

    def check(data: bytes) -> None:
        path.write_bytes(data)
        instance = ours_or_valid(lambda: read_instance(path), path)
        if instance is not None and instance.n <= 64:
            assert instance.n >= 1 and instance.matrix.shape == (instance.n, instance.n)
            assert np.isfinite(instance.matrix.astype(np.float64)).all()

    fuzz(any_bytes(seeds) | _tsplib_text(), check, examples)


@pytest.mark.parametrize("examples", EXAMPLES)
def test_tour_parser_fuzz(tmp_path: Path, examples: int) -> None:
    """Tour files of any shape give a permutation of n cities, or our error."""
    path = tmp_path / "fuzz.tour"
    seeds = _seed_files(
        ROOT / "tests" / "data" / "gr24.opt.tour", ROOT / "tests" / "data" / "st70.opt.tour"
    )

    def check(value: tuple[bytes, int | None]) -> None:
        data, n = value
        path.write_bytes(data)
        tour = ours_or_valid(lambda: read_tour(path, n), path)
        if tour is not None:
            assert sorted(tour.tolist()) == list(range(len(tour)))
            assert n is None or len(tour) == n

    fuzz(
        st.tuples(any_bytes(seeds) | _tsplib_text(), st.none() | st.integers(1, 80)),
        check,
        examples,
    )


_csv_cells = (
    st.sampled_from(("x", "y", "label", "name", "", " ", '"', "nan", "inf", "1e309"))
    | (st.floats(allow_nan=False).map(repr))
    | st.text(max_size=5)
)


@st.composite
def _csv_text(draw: st.DrawFn) -> bytes:
    rows = draw(st.lists(st.lists(_csv_cells, max_size=4), max_size=8))
    sep = draw(st.sampled_from((",", ";", "\t", ", ")))
    return "\n".join(sep.join(row) for row in rows).encode("utf-8", errors="replace")


@pytest.mark.parametrize("examples", EXAMPLES)
def test_csv_parser_fuzz(tmp_path: Path, examples: int) -> None:
    """CSV city lists of any shape give an instance with finite coordinates, or our error."""
    path = tmp_path / "fuzz.csv"

    def check(data: bytes) -> None:
        path.write_bytes(data)
        result = ours_or_valid(lambda: read_cities_csv(path), path)
        if result is not None:
            instance, labels = result
            assert instance.n >= 1 and len(labels) == instance.n
            assert instance.coords is not None and np.isfinite(instance.coords).all()

    fuzz(any_bytes(_seed_files(RELAY)) | _csv_text(), check, examples)
