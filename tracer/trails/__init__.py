from tracer.trails.jsonl import import_jsonl
from tracer.trails.opening import open_trail
from tracer.trails.writer import TrailWriter

__all__ = [
    "TrailWriter",
    "import_jsonl",
    "open_trail",
]
