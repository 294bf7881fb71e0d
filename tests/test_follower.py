"""Two reader bugs found by reading: a follower before any node, and a bad block's offset."""

from __future__ import annotations

from pathlib import Path

import msgpack
import numpy as np
import pytest

from tracer.base import CITY, DECISION, DEPTH, NODES, Instance, SolverInfo, TrailHeader, to_wire
from tracer.base.schema import column_layout
from tracer.trails.reader import CorruptTrailError, TrailFollower, read_trail

COORDS = [[0.0, 0.0], [3.0, 0.0], [3.0, 4.0]]


def _header() -> TrailHeader:
    instance = Instance(name="tri", metric="EUC_2D", coords=np.array(COORDS))
    columns = column_layout((CITY, DEPTH, DECISION), 3, True, 100.0)
    return TrailHeader(instance=instance, solver=SolverInfo(engine="test"), columns=columns)


def _bad_block(first: int = 0) -> bytes:
    """A zstd node block whose columns are not zstd data: it frames well, then fails to decode."""
    junk = b"not zstd at all"
    frame = {
        "kind": NODES,
        "first": first,
        "count": 2,
        "codec": "zstd",
        "columns": {CITY: junk, DEPTH: junk, DECISION: junk},
    }
    return msgpack.packb(frame, use_bin_type=True)


def test_follower_trail_before_the_first_block_is_empty(tmp_path: Path) -> None:
    """`trail` after the header but before any node block is an empty trail, not a KeyError."""
    path = tmp_path / "early.trail"
    path.write_bytes(msgpack.packb(to_wire(_header()), use_bin_type=True))
    follower = TrailFollower(path)
    try:
        assert follower.poll() == (0, 0, [])
        trail = follower.trail
        assert trail is not None
        assert trail.count == 0
        assert set(trail.columns) == {CITY, DEPTH, DECISION}
    finally:
        follower.close()


def test_follower_names_the_byte_offset_of_a_block_that_fails_to_decode(tmp_path: Path) -> None:
    """A block that frames well but does not decompress is reported at its own byte offset."""
    header = msgpack.packb(to_wire(_header()), use_bin_type=True)
    path = tmp_path / "bad.trail"
    path.write_bytes(header + _bad_block())
    follower = TrailFollower(path)
    try:
        with pytest.raises(CorruptTrailError, match="decompress") as caught:
            follower.poll()
    finally:
        follower.close()
    assert caught.value.offset == len(header)
    assert f"at byte {len(header)}" in str(caught.value)


def test_reader_names_the_byte_offset_of_a_block_that_fails_to_decode(tmp_path: Path) -> None:
    """read_trail reports a block that fails to decode at its byte offset, not at byte -1."""
    header = msgpack.packb(to_wire(_header()), use_bin_type=True)
    path = tmp_path / "bad.trail"
    path.write_bytes(header + _bad_block())
    with pytest.raises(CorruptTrailError, match="decompress") as caught:
        read_trail(path)
    assert caught.value.offset == len(header)
    assert caught.value.partial is not None and caught.value.partial.count == 0
