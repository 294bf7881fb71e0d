from tracer.formats.load import load_instance, load_tour
from tracer.formats.tsplib import format_instance, format_tour

__all__ = [
    "format_instance",
    "format_tour",
    "load_instance",
    "load_tour",
]
