from tracer.formats.load import load_instance, load_tour
from tracer.formats.tsplib import format_tour

__all__ = [
    "format_tour",
    "load_instance",
    "load_tour",
]
