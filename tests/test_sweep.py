"""`sweep`: rows equal direct searches, every executor agrees, files and Ctrl-C keep rows.

Counts are checked against `run_search` called here directly and against a full recording
of the same search (bound evaluations: nodes with a recorded tree). Instance: TSPLIB's
burma14 (Reinelt 1991, tests/data; published optimum 3323) and seeded random cities.
"""

from __future__ import annotations

import csv
import json
import math
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from tests.reference import TSPLIB_OPTIMUM, instance_path
from tests.sinks import Collect
from tracer.base import TREE, is_absent
from tracer.cli import main
from tracer.formats import load_instance
from tracer.search import SearchSettings, make_start, run_search
from tracer.search import sweep as sweep_module
from tracer.search.sweep import (
    COUNTED,
    ROW_FIELDS,
    RunOutcome,
    SweepRow,
    SweepTable,
    execute,
    fit_model,
    length_warnings,
    parse_cutoffs,
    parse_random,
    plan,
    random_instances,
    recommend,
)

ROOT = Path(__file__).resolve().parents[1]
CUTOFFS = [0, 2, 4]


@pytest.fixture(scope="module")
def cells():
    """burma14 and one random 10-city instance, each with its nn+2opt+oropt start tour."""
    burma = load_instance(instance_path("burma14"))
    small = random_instances(10, 1, 5)[0]
    return [(i.name, i, make_start(i, "nn", "2opt+oropt")) for i in (burma, small)]


def _rows(jobs, **how) -> dict[tuple[str, int], SweepRow]:
    table = SweepTable(jobs)
    for outcome in execute(jobs, **how):
        table.add(outcome)
    return table.rows


def test_rows_equal_direct_searches(cells) -> None:
    """Nodes, leaves and length equal run_search called here; bound evaluations equal the
    nodes with a recorded tree in a full recording of the same search."""
    jobs = plan(cells, CUTOFFS, 2, SearchSettings())
    rows = _rows(jobs, workers=1)
    assert len(rows) == len(cells) * len(CUTOFFS)
    for label, instance, start in cells:
        for cutoff in CUTOFFS:
            row = rows[(label, cutoff)]
            sink = Collect()
            direct = run_search(instance, SearchSettings(cutoff=cutoff), start, sink=sink)
            assert row.nodes == direct.nodes
            assert row.leaves == direct.decisions["tour"] + direct.decisions["tour_better"]
            assert row.length == direct.length
            evaluated = int((~is_absent(sink.columns()[TREE])).sum())
            assert row.bound_evaluations == evaluated
            assert len(row.times) == 2 and row.seconds == pytest.approx(np.median(row.times))
    assert rows[("burma14", 0)].length == TSPLIB_OPTIMUM["burma14"]  # TSPLIB published optimum


def test_plan_interleaves_repeats_in_alternating_rounds(cells) -> None:
    """One counted run and R timed runs per cell; timed rounds alternate direction."""
    jobs = plan(cells, CUTOFFS, 3, SearchSettings())
    cell_count = len(cells) * len(CUTOFFS)
    assert len(jobs) == cell_count * 4
    assert sum(j.repeat == COUNTED for j in jobs) == cell_count
    timed = [j for j in jobs if j.repeat != COUNTED]
    rounds = [timed[r * cell_count : (r + 1) * cell_count] for r in range(3)]
    keys = [[(j.label, j.settings.cutoff) for j in r] for r in rounds]
    assert keys[1] == keys[0][::-1] and keys[2] == keys[0]
    assert all(j.repeat == r for r, jobs_ in enumerate(rounds) for j in jobs_)


@pytest.mark.thorough
def test_process_pool_gives_the_same_counts(cells) -> None:
    """Two worker processes give the same rows (nodes, evaluations, length) as one."""
    jobs = plan(cells[1:], [0, 3], 1, SearchSettings())
    alone, pooled = _rows(jobs, workers=1), _rows(jobs, workers=2)
    assert alone.keys() == pooled.keys()
    for key, row in alone.items():
        other = pooled[key]
        assert (row.nodes, row.bound_evaluations, row.length) == (
            other.nodes,
            other.bound_evaluations,
            other.length,
        )


def test_dask_local_cluster_gives_the_same_counts(cells) -> None:
    """A sweep on a distributed.LocalCluster on loopback gives the rows of a local run."""
    distributed = pytest.importorskip(
        "distributed", reason="the optional 'distributed' package (prunetrail[cluster])"
    )
    jobs = plan(cells[1:], [0, 3], 1, SearchSettings())
    alone = _rows(jobs, workers=1)
    with distributed.LocalCluster(
        n_workers=1,
        threads_per_worker=1,
        processes=False,
        protocol="tcp",
        host="127.0.0.1",
        dashboard_address=None,
    ) as cluster:
        remote = _rows(jobs, dask_address=cluster.scheduler_address)
    assert {k: r.nodes for k, r in remote.items()} == {k: r.nodes for k, r in alone.items()}
    assert {k: r.length for k, r in remote.items()} == {k: r.length for k, r in alone.items()}


def test_unreachable_cluster_is_one_clear_error(cells, capsys, monkeypatch) -> None:
    """--dask at an address where nothing listens exits 2 with the address in the message."""
    pytest.importorskip("distributed", reason="the optional 'distributed' package")
    monkeypatch.setattr(sweep_module, "DASK_CONNECT_SECONDS", 1.0)
    path = str(instance_path("burma14"))
    status = main(["sweep", path, "--cutoffs", "0", "--dask", "tcp://127.0.0.1:9", "--json"])
    assert status == 2
    assert "127.0.0.1:9" in capsys.readouterr().err


def test_out_writes_csv_and_json(tmp_path: Path, capsys) -> None:
    """--out with a pool of 2 workers: a CSV line per cell with every field, nodes as a
    direct search finds them, and JSON with rows and recommendations; --json prints it."""
    prefix = tmp_path / "tune"
    argv = ["sweep", str(instance_path("burma14")), "--random", "9:1:2", "--cutoffs", "0-2"]
    status = main([*argv, "--repeat", "1", "--workers", "2", "--out", str(prefix), "--json"])
    assert status == 0
    printed = json.loads(capsys.readouterr().out)
    with open(f"{prefix}.csv", newline="") as f:
        lines = list(csv.DictReader(f))
    assert tuple(lines[0]) == ROW_FIELDS and len(lines) == 3 * 3
    saved = json.loads(Path(f"{prefix}.json").read_text())
    assert saved["rows"] == printed["rows"] and len(saved["rows"]) == 9
    for key in ("instance", "cutoff", "nodes", "bound_evaluations", "seconds", "length"):
        assert key in saved["rows"][0]
    assert [int(r["nodes"]) for r in lines] == [r["nodes"] for r in saved["rows"]]
    burma = load_instance(instance_path("burma14"))
    start = make_start(burma, "nn", "2opt+oropt")
    for line in lines[:3]:
        direct = run_search(burma, SearchSettings(cutoff=int(line["cutoff"])), start)
        assert (line["instance"], int(line["nodes"])) == ("burma14", direct.nodes)
    per_instance = saved["recommended"]["per_instance"]
    assert set(per_instance) == {"burma14", "uniform9-s2-0", "clustered9-s2-0"}
    assert saved["recommended"]["overall"]["cutoff"] in (0, 1, 2)
    assert saved["interrupted"] is False and saved["warnings"] == []


def test_ctrl_c_keeps_the_finished_rows(tmp_path: Path) -> None:
    """SIGINT during a long cell: exit 130, the finished rows in CSV and JSON."""
    prefix = tmp_path / "cut"
    command = [
        sys.executable,
        "-m",
        "tracer.cli",
        "sweep",
        str(instance_path("burma14")),
        "--cutoffs",
        "0-9",
        "--repeat",
        "1",
        "--workers",
        "1",
        "--out",
        str(prefix),
    ]
    env = {**os.environ, "COLUMNS": "100"}
    proc = subprocess.Popen(command, cwd=ROOT, env=env, stdout=subprocess.PIPE, text=True)
    csv_path = Path(f"{prefix}.csv")
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline:
        if csv_path.exists() and len(csv_path.read_text().splitlines()) >= 3:
            break
        time.sleep(0.05)
    proc.send_signal(signal.SIGINT)
    stdout, _ = proc.communicate(timeout=60)
    assert proc.returncode == 130
    with open(csv_path, newline="") as f:
        kept = list(csv.DictReader(f))
    assert 2 <= len(kept) < 10
    saved = json.loads(Path(f"{prefix}.json").read_text())
    assert saved["interrupted"] is True and len(saved["rows"]) == len(kept)
    assert [r["cutoff"] for r in saved["rows"]] == list(range(len(kept)))
    assert "burma14" in stdout


def _row(label: str, cutoff: int, seconds: float, nodes: int = 100, ops: int = 1000) -> SweepRow:
    per_k = np.zeros(4, dtype=np.int64)
    return SweepRow(
        instance=label,
        n=4,
        cutoff=cutoff,
        nodes=nodes,
        decisions={},
        bound_evaluations=0,
        leaves=0,
        seconds=seconds,
        times=[seconds],
        length=10.0,
        status="complete",
        bound_ops=ops,
        evaluations_per_k=per_k,
        nodes_per_k=per_k,
    )


def test_recommendation_and_flatness() -> None:
    """Lowest median per instance, cutoffs within 10% listed, overall by geometric mean."""
    rows = [
        _row("a", 0, 1.00),
        _row("a", 1, 1.05),
        _row("a", 2, 2.00),
        _row("b", 0, 3.00),
        _row("b", 1, 1.00),
        _row("b", 2, 1.20),
    ]
    got = recommend(rows)
    assert got["per_instance"]["a"] == {
        "cutoff": 0,
        "seconds": 1.0,
        "flat": [0, 1],
        "worst_ratio": 2.0,
    }
    assert got["per_instance"]["b"]["cutoff"] == 1
    means = got["overall"]["geometric_mean"]
    assert means[1] == pytest.approx(math.sqrt(1.05))
    assert got["overall"]["cutoff"] == 1 and got["overall"]["flat"] == [1]


def test_model_fit_recovers_known_costs() -> None:
    """Times made as exactly a·ops + b·nodes give back a and b."""
    a, b = 2e-9, 5e-8
    rows = [
        _row("x", c, a * ops + b * nodes, nodes, ops)
        for c, (ops, nodes) in enumerate([(1000, 50), (800, 400), (300, 2000)])
    ]
    fit = fit_model(rows)["x"]
    assert fit["seconds_per_bound_op"] == pytest.approx(a)
    assert fit["seconds_per_node"] == pytest.approx(b)


def test_different_lengths_are_warned_about(cells) -> None:
    """Two complete runs of one instance with different lengths give a warning naming it."""
    jobs = plan(cells[1:], [0], 1, SearchSettings())
    table = SweepTable(jobs)
    for job, length in zip(jobs, (100.0, 101.0), strict=True):
        table.add(
            RunOutcome(
                job.seq,
                job.label,
                0,
                job.repeat,
                "complete",
                5,
                {},
                0.1,
                length,
                np.zeros((10, 5), dtype=np.int64) if job.repeat == COUNTED else None,
            )
        )
    warnings = length_warnings(list(table.rows.values()), table.outcomes)
    assert len(warnings) == 1 and cells[1][0] in warnings[0]


def test_planted_fault_lengths_differ_loudly(capsys) -> None:
    """A fault that cuts the optimal branch finds other lengths at other cutoffs: a WARNING
    on stderr, in the JSON, and exit 1 (burma14 from no incumbent: 3381 at cutoff 0)."""
    argv = ["sweep", str(instance_path("burma14")), "--fault", "tree-spans-ends"]
    argv += ["--start", "none", "--cutoffs", "0,3", "--repeat", "1", "--workers", "1"]
    assert main([*argv, "--json"]) == 1
    captured = capsys.readouterr()
    got = json.loads(captured.out)
    assert "WARNING: burma14" in captured.err and len(got["warnings"]) == 1
    lengths = {row["cutoff"]: row["length"] for row in got["rows"]}
    assert lengths[3] == TSPLIB_OPTIMUM["burma14"] < lengths[0]


def test_text_report_has_table_chart_and_recommendation(capsys) -> None:
    """The human report: the table, the chart and one recommendation line per instance."""
    argv = ["sweep", "--random", "8:1:4", "--cutoffs", "0-2", "--repeat", "1", "--workers", "1"]
    assert main(argv) == 0
    text = capsys.readouterr().out
    assert "median" in text and "time ÷ each instance's best, by cutoff" in text
    assert "uniform8-s4-0: cutoff" in text and "clustered8-s4-0: cutoff" in text
    assert "overall: cutoff" in text


def test_random_families_and_argument_parsing() -> None:
    """Families are seeded and clustered cities lie closer together; bad lists say why."""
    first, again = random_instances(12, 2, 7), random_instances(12, 2, 7)
    assert [i.name for i in first] == [
        "uniform12-s7-0",
        "uniform12-s7-1",
        "clustered12-s7-0",
        "clustered12-s7-1",
    ]
    assert all(np.array_equal(x.coords, y.coords) for x, y in zip(first, again, strict=True))

    def nearest(instance) -> float:
        m = instance.matrix.astype(float) + np.diag(np.full(instance.n, np.inf))
        return float(m.min(axis=1).mean())

    assert nearest(first[2]) < nearest(first[0])
    assert parse_cutoffs("0-3,6") == [0, 1, 2, 3, 6]
    assert parse_random("12:3:7") == (12, 3, 7)
    for bad in ("3-1", "x", "-2"):
        with pytest.raises(ValueError, match="expected"):
            parse_cutoffs(bad)
    with pytest.raises(ValueError, match="N must be"):
        parse_random("99:1:1")
