from tracer.trails.blocks import BlockIndex, BlockScanner, scan_blocks
from tracer.trails.jsonl import (
    STREAM_CHUNK_BYTES,
    ImportSummary,
    JsonlFollower,
    import_jsonl,
    stream_jsonl,
)
from tracer.trails.lazy import BlockFile, LazyColumn, open_blocks
from tracer.trails.opening import Follower, follow_trail, open_trail
from tracer.trails.reader import CorruptTrailError, TrailFollower
from tracer.trails.writer import TrailWriter

__all__ = [
    "STREAM_CHUNK_BYTES",
    "BlockFile",
    "BlockIndex",
    "BlockScanner",
    "CorruptTrailError",
    "Follower",
    "ImportSummary",
    "JsonlFollower",
    "LazyColumn",
    "TrailFollower",
    "TrailWriter",
    "follow_trail",
    "import_jsonl",
    "open_blocks",
    "open_trail",
    "scan_blocks",
    "stream_jsonl",
]
