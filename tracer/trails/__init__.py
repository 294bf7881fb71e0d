from tracer.trails.jsonl import JsonlFollower, import_jsonl
from tracer.trails.opening import Follower, follow_trail, open_trail
from tracer.trails.reader import CorruptTrailError, TrailFollower
from tracer.trails.writer import TrailWriter

__all__ = [
    "CorruptTrailError",
    "Follower",
    "JsonlFollower",
    "TrailFollower",
    "TrailWriter",
    "follow_trail",
    "import_jsonl",
    "open_trail",
]
