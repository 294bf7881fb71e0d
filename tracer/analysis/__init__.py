from tracer.analysis.compare import Comparison, Difference, InstanceMismatchError, compare_trails
from tracer.analysis.layout import LAYOUT_MAX_CITIES, CityLayout, city_layout, scaled_layout
from tracer.analysis.narrate import (
    TERM_LABELS,
    Step,
    format_length,
    narrate,
    node_step,
    reaches,
    recorded_value,
)
from tracer.analysis.oracle import (
    ORACLE_MAX_CITIES,
    CompletionTable,
    OracleSizeError,
    best_completions,
    completion_table,
)
from tracer.analysis.predicates import (
    FilterError,
    NodeFilter,
    StopCondition,
    kept_ids,
    kept_range,
    next_match,
    parse_filter,
    parse_stops,
)
from tracer.analysis.rechecking import (
    KINDS,
    REL_TOL,
    Finding,
    RecheckReport,
    recheck,
    recompute_node,
)
from tracer.analysis.spanning import Remainder, SpanningTree, remainder, spanning_tree
from tracer.analysis.stats import FINAL_INCUMBENT, DepthStats, depth_stats
from tracer.analysis.tree_index import TreeIndex
from tracer.analysis.why import CULPRITS, WhyReport, explain, remainder_instance

__all__ = [
    "CULPRITS",
    "FINAL_INCUMBENT",
    "KINDS",
    "LAYOUT_MAX_CITIES",
    "ORACLE_MAX_CITIES",
    "REL_TOL",
    "TERM_LABELS",
    "CityLayout",
    "Comparison",
    "CompletionTable",
    "DepthStats",
    "Difference",
    "FilterError",
    "Finding",
    "InstanceMismatchError",
    "NodeFilter",
    "OracleSizeError",
    "RecheckReport",
    "Remainder",
    "SpanningTree",
    "Step",
    "StopCondition",
    "TreeIndex",
    "WhyReport",
    "best_completions",
    "city_layout",
    "compare_trails",
    "completion_table",
    "depth_stats",
    "explain",
    "format_length",
    "kept_ids",
    "kept_range",
    "narrate",
    "next_match",
    "node_step",
    "parse_filter",
    "parse_stops",
    "reaches",
    "recheck",
    "recompute_node",
    "recorded_value",
    "remainder",
    "remainder_instance",
    "scaled_layout",
    "spanning_tree",
]
