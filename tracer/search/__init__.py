from tracer.search.driver import (
    BOUNDS,
    DEFAULT_CUTOFF,
    ORDERS,
    RECORD_MODES,
    Progress,
    SearchResult,
    SearchSettings,
    make_start,
    run_search,
    trail_header,
    validate,
)
from tracer.search.faults import FAULTS
from tracer.search.improve import IMPROVEMENTS
from tracer.search.tours import CONSTRUCTIONS, start_tour, tour_length

__all__ = [
    "BOUNDS",
    "CONSTRUCTIONS",
    "DEFAULT_CUTOFF",
    "FAULTS",
    "IMPROVEMENTS",
    "ORDERS",
    "RECORD_MODES",
    "Progress",
    "SearchResult",
    "SearchSettings",
    "make_start",
    "run_search",
    "start_tour",
    "tour_length",
    "trail_header",
    "validate",
]
