from tracer.trails.jsonl import import_jsonl
from tracer.trails.opening import open_trail
from tracer.trails.reader import CorruptTrailError, TrailFollower
from tracer.trails.writer import TrailWriter

__all__ = [
    "CorruptTrailError",
    "TrailFollower",
    "TrailWriter",
    "import_jsonl",
    "open_trail",
]
