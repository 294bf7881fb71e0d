from tracer.analysis.rechecking import KINDS, REL_TOL, Finding, RecheckReport, recheck
from tracer.analysis.tree_index import TreeIndex

__all__ = [
    "KINDS",
    "REL_TOL",
    "Finding",
    "RecheckReport",
    "TreeIndex",
    "recheck",
]
