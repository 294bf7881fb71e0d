"""The layers' promises, checked at run time: public names, import hygiene, exported-only imports.

`lint-imports` (contracts in pyproject.toml) checks the import graph statically; these tests
check what actually happens when a module is imported, one fresh process per module so a
leak names the module that causes it, and pin each subpackage's public names so a rename or
a removal is a deliberate change here too.
"""

from __future__ import annotations

import ast
import importlib
import json
import subprocess
import sys
from functools import cache
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
TRACER = ROOT / "tracer"

#: What each subpackage's `__init__` exports (`__all__`): the only names other layers use.
#: Adding a public name on purpose? Add it here too, in the same change.
PUBLIC: dict[str, set[str]] = {
    "tracer.base": {
        "OUR_BOUNDS",
        "DECODED_ALLOWANCE",
        "DEFAULT_MEMORY_MB",
        "MAX_DECODED_RATIO",
        "BlockSource",
        "NodeBlock",
        "memory_blocks",
        "SUBTRACTED_TERMS",
        "bound_name",
        "bound_terms",
        "bound_values",
        "recorded_bound",
        "BEST",
        "BOUND",
        "BOUND_PARTS",
        "CITY",
        "CITY_COLUMNS",
        "CODECS",
        "COMPLETE",
        "COORD_METRICS",
        "DECISION",
        "DECISION_BY_NAME",
        "DECISION_COLUMNS",
        "DECISION_NAMES",
        "DEPTH",
        "DESCENDING",
        "END",
        "ENGINE_COLUMNS",
        "EUCLIDEAN",
        "EXPLICIT",
        "FULL_COLUMNS",
        "HEADER",
        "INTERRUPTED",
        "KIND_NAMES",
        "LIMIT",
        "LINK_IN",
        "LINK_IN_CITY",
        "LINK_OUT",
        "LINK_OUT_CITY",
        "MATRIX_MAX_CITIES",
        "MAX_BLOCK_NODES",
        "MAX_COLUMNS",
        "MAX_COORDINATE",
        "MAX_EDGE",
        "MAX_EXPLICIT_CITIES",
        "MAX_FILE_BYTES",
        "MAX_FILE_CITIES",
        "MAX_FRAME_BYTES",
        "MAX_HEADER_ITEMS",
        "MAX_LENGTH",
        "MAX_LINE_BYTES",
        "MAX_LIST_ITEMS",
        "MAX_MAP_ITEMS",
        "MAX_NODE_ID",
        "MAX_STRING_BYTES",
        "MAX_TEXT",
        "MAX_TRAIL_CITIES",
        "MAX_TRAIL_NODES",
        "MAX_WORD",
        "MIN_NODE_ID",
        "NODE",
        "NODES",
        "NO_BOUND",
        "ORPHAN",
        "PARTIAL",
        "PENALTIES",
        "PENALTY",
        "PENALTY_COLUMNS",
        "PI",
        "ROOT",
        "ROW_COLUMNS",
        "SOURCE_COLUMNS",
        "SOURCE_ID",
        "SOURCE_LINE",
        "STATUSES",
        "TREE",
        "TREE_LINKS",
        "VISIT",
        "BestUpdate",
        "Column",
        "Decision",
        "EndInfo",
        "FieldError",
        "FileKind",
        "FloatArray",
        "HeaderError",
        "InputError",
        "Instance",
        "IntArray",
        "Matrix",
        "PenaltySettings",
        "PrunetrailError",
        "SolverInfo",
        "Trail",
        "TrailHeader",
        "absent_value",
        "best_tour",
        "city_value",
        "column_layout",
        "decision_code",
        "expect_kind",
        "explicit_instance",
        "from_wire",
        "is_absent",
        "is_int",
        "is_number",
        "length_value",
        "link_value",
        "recorded_length",
        "show_value",
        "sniff",
        "sniff_bytes",
        "text_value",
        "to_wire",
        "tree_shape",
    },
    "tracer.formats": {
        "format_instance",
        "format_tour",
        "load_instance",
        "load_tour",
    },
    "tracer.trails": {
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
    },
    "tracer.search": {
        "BOUNDS",
        "CONSTRUCTIONS",
        "DEFAULT_CUTOFF",
        "DEFAULT_PENALTY_STEPS",
        "DEFAULT_ROOT_STEPS",
        "DISAGREES_BEYOND",
        "FAULTS",
        "FLAT_WITHIN",
        "IMPROVEMENTS",
        "ORDERS",
        "RECORD_MODES",
        "ROW_FIELDS",
        "STEP_RULES",
        "Progress",
        "SearchResult",
        "SearchSettings",
        "StartTour",
        "SweepRow",
        "SweepTable",
        "execute",
        "fit_model",
        "length_warnings",
        "make_start",
        "parse_cutoffs",
        "parse_random",
        "plan",
        "random_instances",
        "recommend",
        "run_search",
        "start_tour",
        "tour_length",
        "trail_header",
        "validate",
    },
    "tracer.analysis": {
        "DecisionRanks",
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
        "LazyDecisionRanks",
        "LazyTreeIndex",
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
        "lazy_view",
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
        "stream_recheck",
        "stream_stats",
        "values_at",
        "windows",
        "Window",
        "in_memory_bytes",
        "stream_explain",
        "path_remainder",
    },
}
#: Subpackages below the command line, lowest first (the order of the layers contract).
LAYERS = ("base", "formats", "trails", "search", "analysis", "cli")


def _tracer_modules() -> list[str]:
    """Every module under tracer/ by dotted name (found on disk, so nothing is imported)."""
    names = []
    for path in sorted(TRACER.rglob("*.py")):
        parts = path.relative_to(ROOT).with_suffix("").parts
        if parts[-1] == "__main__":
            continue  # importing it runs the command
        if parts[-1] == "__init__":
            parts = parts[:-1]
        names.append(".".join(parts))
    return names


MODULES = _tracer_modules()

#: Imports every module it is given in its own forked child of one parent that holds only
#: third-party libraries, and reports what each child found in sys.modules. The parent
#: first learns (in one child importing everything) which third-party packages tracer uses
#: and imports them itself, checking none of them loads textual; each child then starts
#: with no tracer module loaded, so whatever it finds its own module brought in. A fork
#: costs milliseconds where a fresh interpreter costs a second of numpy and numba imports;
#: a few children run at a time.
_PROBE = r"""
import importlib, json, os, sys

OURS = ("tracer", "tui", "textual")


def child(names, write):
    try:
        for name in names:
            importlib.import_module(name)
        loaded = sorted(sys.modules)
        found = {
            "ui": [m for m in loaded if m.split(".")[0] in ("textual", "tui")],
            "search": [m for m in loaded if m.startswith("tracer.search")],
            "third": sorted({m.split(".")[0] for m in loaded} - set(OURS)),
            "error": None,
        }
    except BaseException as exc:
        found = {"ui": [], "search": [], "third": [], "error": repr(exc)}
    os.write(write, json.dumps(found).encode())
    os._exit(0)


def start(names):
    read, write = os.pipe()
    pid = os.fork()
    if pid == 0:
        os.close(read)
        child(names, write)
    os.close(write)
    return pid, read


def finish(pid, read):
    data = b""
    while chunk := os.read(read, 1 << 16):
        data += chunk
    os.close(read)
    os.waitpid(pid, 0)
    return json.loads(data)


modules = json.loads(sys.argv[1])
everything = finish(*start(modules))
for package in everything["third"]:
    if not package.startswith("_") and package != "__main__":
        try:
            importlib.import_module(package)
        except ImportError:
            pass
assert not [m for m in sys.modules if m.split(".")[0] in OURS], "a library loads our code"
results, running, pending = {}, {}, list(modules)
while pending or running:
    while pending and len(running) < 3:
        name = pending.pop(0)
        running[name] = start([name])
    name = next(iter(running))
    results[name] = finish(*running.pop(name))
print(json.dumps(results))
"""


@cache
def _imports() -> dict[str, dict[str, object]]:
    done = subprocess.run(
        [sys.executable, "-c", _PROBE, json.dumps(MODULES)],
        capture_output=True,
        text=True,
        check=True,
        cwd=ROOT,
        timeout=120,
    )
    results: dict[str, dict[str, object]] = json.loads(done.stdout)
    return results


def test_every_layer_is_found() -> None:
    """The module list covers every subpackage (a test over nothing would pass silently)."""
    assert {m.split(".")[1] for m in MODULES if m.count(".")} == set(LAYERS)
    assert len(MODULES) > 30


@pytest.mark.parametrize("module", MODULES)
def test_module_never_loads_the_viewer(module: str) -> None:
    """Importing this tracer module alone loads neither textual nor tui (a fresh process)."""
    found = _imports()[module]
    assert found["error"] is None, found["error"]
    assert found["ui"] == []


@pytest.mark.parametrize("module", [m for m in MODULES if m.startswith("tracer.analysis")])
def test_analysis_module_never_loads_the_search(module: str) -> None:
    """Importing this analysis module alone loads no tracer.search module (the re-check and
    the analyses are a second implementation, independent of the engine)."""
    found = _imports()[module]
    assert found["error"] is None, found["error"]
    assert found["search"] == []


@pytest.mark.parametrize("package", sorted(PUBLIC))
def test_public_names_are_pinned(package: str) -> None:
    """The package's `__all__` is exactly the pinned names, each once, each resolving."""
    module = importlib.import_module(package)
    exported = list(module.__all__)
    assert len(exported) == len(set(exported)), "a name is listed twice in __all__"
    assert set(exported) == PUBLIC[package], (
        f"{package}.__all__ changed: update PUBLIC in tests/test_layers.py if on purpose"
    )
    missing = [name for name in exported if not hasattr(module, name)]
    assert missing == []


def _cross_layer_imports() -> list[tuple[str, str, str, int]]:
    """(file, imported module, name, line) of every import from another tracer subpackage."""
    found = []
    for path in sorted(TRACER.rglob("*.py")):
        parts = path.relative_to(ROOT).parts
        own = parts[1] if len(parts) > 2 else None
        for node in ast.walk(ast.parse(path.read_text(), str(path))):
            if isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
                target = node.module.split(".")
                if target[0] == "tracer" and len(target) > 1 and target[1] != own:
                    for alias in node.names:
                        found.append((str(path), node.module, alias.name, node.lineno))
            elif isinstance(node, ast.Import):
                for alias in node.names:
                    target = alias.name.split(".")
                    if target[0] == "tracer" and len(target) > 1 and target[1] != own:
                        found.append((str(path), alias.name, "", node.lineno))
    return found


def test_other_layers_are_used_only_through_their_exports() -> None:
    """A module imports another subpackage only as `from tracer.<pkg> import <exported name>`."""
    imports = _cross_layer_imports()
    assert imports, "found no cross-layer imports at all"
    exported = {package: set(importlib.import_module(package).__all__) for package in PUBLIC}
    wrong = [
        f"{file}:{line}: {module} {name}".strip()
        for file, module, name, line in imports
        if module not in exported or name not in exported[module]
    ]
    assert wrong == []
