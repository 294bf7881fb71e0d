"""The `prunetrail` command as scripts and CI jobs use it: JSON keys, exit codes, errors."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import pytest

from tests.reference import TSPLIB_OPTIMUM, instance_path, opt_tour_path
from tracer.cli import main
from tracer.search.faults import FAULTS
from tracer.trails.reader import read_trail

ROOT = Path(__file__).resolve().parents[1]
ORCHARD = ROOT / "scenarios" / "orchard_rounds.tsp"


def run_json(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, dict[str, Any]]:
    """Run a command with --json; returns its exit status and the parsed object."""
    status = main([*argv, "--json"])
    return status, json.loads(capsys.readouterr().out)


def test_solve_json_reports_what_scripts_need(capsys, tmp_path: Path) -> None:
    """solve --json has the documented keys; the tour is optimal per TSPLIB (Reinelt 1991)."""
    trail = tmp_path / "b.trail"
    status, got = run_json(capsys, "solve", str(instance_path("burma14")), "-o", str(trail))
    assert status == 0
    for key in (
        "length",
        "tour",
        "status",
        "nodes",
        "decisions",
        "seconds",
        "trail",
        "trail_bytes",
    ):
        assert key in got
    assert got["length"] == TSPLIB_OPTIMUM["burma14"]  # TSPLIB published optimum
    assert got["status"] == "complete" and got["tour"][0] == 0
    assert sorted(got["tour"]) == list(range(14))
    assert sum(got["decisions"].values()) == got["nodes"]
    assert got["trail"] == str(trail) and got["trail_bytes"] == trail.stat().st_size
    assert read_trail(trail).count == got["nodes"]


def test_solve_limit_exit_code_and_no_trail(capsys) -> None:
    """A node limit exits 3 with status limit; --no-trail reports trail null."""
    status, got = run_json(
        capsys,
        "solve",
        str(instance_path("gr24")),
        "--max-nodes",
        "500",
        "--no-trail",
        "--start",
        "none",
    )
    assert status == 3
    assert got["status"] == "limit" and got["nodes"] == 500
    assert got["trail"] is None and got["trail_bytes"] is None


def test_solve_refusals_exit_2_with_reason(capsys) -> None:
    """An asymmetric or oversized instance is refused in one line, exit 2, no traceback."""
    assert main(["solve", str(instance_path("br17")), "--no-trail"]) == 2
    assert "asymmetric" in capsys.readouterr().err
    assert main(["solve", str(instance_path("att48")), "--no-trail"]) == 2
    assert "--time-limit" in capsys.readouterr().err


def test_bad_instance_names_file_and_line(capsys, tmp_path: Path) -> None:
    """A malformed instance gives file:line and what was expected, exit 2."""
    bad = tmp_path / "bad.tsp"
    bad.write_text(
        "NAME : x\nTYPE : TSP\nDIMENSION : 3\nEDGE_WEIGHT_TYPE : EUC_2D\n"
        "NODE_COORD_SECTION\n1 0 0\n2 one 0\n3 1 1\nEOF\n"
    )
    assert main(["info", str(bad)]) == 2
    err = capsys.readouterr().err
    assert f"{bad}:7" in err and "expected a number" in err


def test_check_exit_codes(capsys, tmp_path: Path) -> None:
    """check exits 0 on a clean trail, 1 on a planted fault, 2 on an unreadable file."""
    clean, faulty = tmp_path / "clean.trail", tmp_path / "faulty.trail"
    assert main(["solve", str(ORCHARD), "-o", str(clean), "--json"]) == 0
    assert (
        main(["solve", str(ORCHARD), "-o", str(faulty), "--fault", "tree-positions", "--json"]) == 0
    )
    capsys.readouterr()
    status, got = run_json(capsys, "check", str(clean))
    assert status == 0 and got["wrong"] == 0 and got["nodes_checked"] > 0
    status, got = run_json(capsys, "check", str(faulty), "--first", "2")
    assert status == 1 and got["wrong"] > 0
    assert got["by_kind"]["tree"] > 0 and len(got["first"]) == 2
    finding = got["first"][0]
    assert set(finding) >= {"id", "kind", "recorded", "recomputed", "path"}
    assert finding["path"][0] == 0
    junk = tmp_path / "junk.trail"
    junk.write_bytes(b"\x00not a trail")
    assert main(["check", str(junk)]) == 2
    assert "junk.trail" in capsys.readouterr().err


def test_check_range(capsys, tmp_path: Path) -> None:
    """--range A:B checks only those ids."""
    trail = tmp_path / "r.trail"
    main(["solve", str(ORCHARD), "-o", str(trail), "--json"])
    capsys.readouterr()
    status, got = run_json(capsys, "check", str(trail), "--range", "100:250")
    assert status == 0 and got["nodes_checked"] == 150 and got["range"] == [100, 250]


def test_import_then_check(capsys, tmp_path: Path) -> None:
    """A JSON Lines trace imports into a trail that checks, and check reads .jsonl directly."""
    source = tmp_path / "tiny.jsonl"
    lines = [
        {
            "kind": "header",
            "instance": {"coords": [[0, 0], [0, 3], [4, 3]], "metric": "EUC_2D"},
            "solver": {"bound": "tree+links", "cutoff": 0, "start": "none"},
        },
        {
            "kind": "node",
            "id": 10,
            "parent": None,
            "city": 0,
            "partial": 0,
            "tree": 4,
            "link_in": [1, 3],
            "link_out": [1, 3],
            "decision": "expand",
        },
        {
            "kind": "node",
            "id": 11,
            "parent": 10,
            "city": 1,
            "partial": 3,
            "tree": 0,
            "link_in": [2, 4],
            "link_out": [2, 5],
            "decision": "expand",
        },
        {
            "kind": "node",
            "id": 12,
            "parent": 11,
            "city": 2,
            "partial": 7,
            "tree": None,
            "link_in": None,
            "link_out": None,
            "decision": "tour_better",
            "length": 12,
        },
        {"kind": "best", "id": 12, "length": 12, "tour": [0, 1, 2]},
        {
            "kind": "node",
            "id": 13,
            "parent": 10,
            "city": 2,
            "partial": 5,
            "tree": 0,
            "link_in": [1, 4],
            "link_out": [1, 3],
            "decision": "prune",
        },
        {"kind": "end", "status": "complete"},
    ]
    source.write_text("".join(json.dumps(line) + "\n" for line in lines))
    target = tmp_path / "tiny.trail"
    status, got = run_json(capsys, "import", str(source), "-o", str(target))
    assert status == 0 and got["nodes"] == 4 and target.exists()
    for path in (target, source):
        status, report = run_json(capsys, "check", str(path))
        assert status == 0, report["first"]


def test_import_error_names_line_and_field(capsys, tmp_path: Path) -> None:
    """A broken JSON Lines trace is refused naming the line and the field."""
    source = tmp_path / "broken.jsonl"
    source.write_text(
        json.dumps(
            {
                "kind": "header",
                "instance": {"matrix": [[0, 1], [1, 0]]},
                "solver": {"bound": "tree+links", "cutoff": 0},
            }
        )
        + "\n"
        + json.dumps({"kind": "node", "id": 1, "parent": None, "partial": 0, "decision": "expand"})
        + "\n"
    )
    assert main(["import", str(source), "-o", str(tmp_path / "x.trail")]) == 2
    err = capsys.readouterr().err
    assert "broken.jsonl:2" in err and "city" in err


def test_tour_and_info_json(capsys, tmp_path: Path) -> None:
    """tour writes a TSPLIB tour whose length info reproduces; info has the documented keys."""
    out = tmp_path / "k.tour"
    status, tour = run_json(
        capsys,
        "tour",
        str(instance_path("kroA100")),
        "--start",
        "greedy",
        "--improve",
        "2opt",
        "-o",
        str(out),
    )
    assert status == 0 and out.exists()
    assert sorted(tour["tour"]) == list(range(100))
    status, info = run_json(capsys, "info", str(instance_path("kroA100")), "--tour", str(out))
    assert status == 0
    assert info["name"] == "kroA100" and info["n"] == 100 and info["metric"] == "EUC_2D"
    assert info["symmetric"] is True and info["tour_length"] == tour["length"]
    status, info = run_json(
        capsys, "info", str(instance_path("bayg29")), "--tour", str(opt_tour_path("bayg29"))
    )
    assert info["tour_length"] == TSPLIB_OPTIMUM["bayg29"]  # TSPLIB published optimum


def test_help_teaches_faults_and_exit_codes(capsys) -> None:
    """solve --help lists every planted fault with its line, and the exit codes."""
    with pytest.raises(SystemExit):
        main(["solve", "--help"])
    text = capsys.readouterr().out
    for name, (_, line) in FAULTS.items():
        assert name in text and line.split()[0] in text
    assert "exit status" in text and "130" in text


def test_file_text_never_reaches_markup(capsys, tmp_path: Path) -> None:
    """A name full of Rich markup is printed literally, not interpreted."""
    bad = tmp_path / "markup.tsp"
    bad.write_text(
        "NAME : [bold red]boom[/]\nTYPE : TSP\nDIMENSION : 3\n"
        "EDGE_WEIGHT_TYPE : EUC_2D\nNODE_COORD_SECTION\n1 0 0\n2 3 0\n3 0 4\nEOF\n"
    )
    assert main(["info", str(bad)]) == 0
    assert "[bold red]boom[/]" in capsys.readouterr().out
