"""Nothing lost: signals during import, a full disk while writing, and a reader polling a
trail that another process is still appending to."""

from __future__ import annotations

import errno
import json
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from tests.foreign_traces import jsonl_lines, solve_to_trail
from tests.reference import instance_path
from tracer.base import PrunetrailError, Trail
from tracer.base.errors import InputError
from tracer.cli import main
from tracer.formats.load import load_instance
from tracer.search.driver import SearchSettings
from tracer.trails import follow_trail
from tracer.trails import writer as writer_module
from tracer.trails.jsonl import read_jsonl
from tracer.trails.reader import CorruptTrailError, TrailFollower, read_trail

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def gr17(tmp_path_factory: pytest.TempPathFactory) -> Trail:
    """The first 200 000 nodes of a gr17 search (TSPLIB instance), as a trail."""
    path = tmp_path_factory.mktemp("lost") / "gr17.trail"
    instance = load_instance(instance_path("gr17"))
    return solve_to_trail(instance, path, SearchSettings(cutoff=0, max_nodes=200_000))


class FullDisk:
    """A binary file that accepts `room` bytes, then fails as a full disk does."""

    def __init__(self, path: Path, room: int) -> None:
        self._file = open(path, "wb")  # noqa: SIM115 (closed in close())
        self.room = room

    def write(self, data: bytes) -> int:
        if len(data) > self.room:
            self._file.write(data[: self.room])
            self.room = 0
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        self.room -= len(data)
        return self._file.write(data)

    def flush(self) -> None:
        self._file.flush()

    def close(self) -> None:
        self._file.close()


def _fill_disk_after(monkeypatch: pytest.MonkeyPatch, room: int) -> None:
    """Make every trail the writer opens a `FullDisk` with `room` bytes."""

    def fake_open(path: Any, mode: str = "r", *args: Any, **kwargs: Any) -> Any:
        assert mode == "wb"
        return FullDisk(Path(path), room)

    monkeypatch.setattr(writer_module, "open", fake_open, raising=False)


@pytest.mark.parametrize(
    "room",
    [
        10,
        60_000,
        pytest.param(2_000, marks=pytest.mark.thorough),
        pytest.param(300_000, marks=pytest.mark.thorough),
    ],
)
def test_full_disk_gives_a_clear_error_and_a_readable_trail(
    capsys, tmp_path: Path, monkeypatch: pytest.MonkeyPatch, room: int
) -> None:
    """solve onto a full disk: one clear line, exit 2, the trail readable to its last frame."""
    _fill_disk_after(monkeypatch, room)
    trail_path = tmp_path / "full.trail"
    settings = ["--cutoff", "0", "--max-nodes", "400000"]
    status = main(["solve", str(instance_path("gr17")), "-o", str(trail_path), *settings])
    err = capsys.readouterr().err
    assert status == 2
    assert "No space left on device" in err and str(trail_path) in err
    assert "Traceback" not in err and len(err.strip().splitlines()) == 1
    assert trail_path.stat().st_size == room
    monkeypatch.undo()
    try:
        trail = read_trail(trail_path)
    except InputError as exc:  # cut inside the header: nothing to read, and it says so
        assert room < 2_000 and "header" in str(exc)
        return
    assert trail.end is None and trail.notice is not None
    complete = tmp_path / "complete.trail"
    assert main(["solve", str(instance_path("gr17")), "-o", str(complete), *settings]) == 3
    whole = read_trail(complete)
    for name, column in trail.columns.items():
        assert np.array_equal(column, whole.columns[name][: trail.count]), name


def _ctrl_c_as_from_a_terminal() -> None:
    """In the child: SIGINT back to its default, as a command started from a terminal has it.

    A test run started in the background (`pytest &` in a script) ignores SIGINT, and its
    children inherit that; Python then installs no Ctrl-C handler, and this test would hang.
    """
    signal.signal(signal.SIGINT, signal.SIG_DFL)


@pytest.mark.parametrize(
    "sig", [signal.SIGINT, pytest.param(signal.SIGTERM, marks=pytest.mark.thorough)]
)
def test_import_interrupted_keeps_the_previous_trail(tmp_path: Path, sig: int) -> None:
    """SIGINT or SIGTERM while import reads (from a pipe): exit 130, the old trail untouched."""
    target = tmp_path / "run.trail"
    target.write_bytes(b"previous contents")
    fifo = tmp_path / "feed.jsonl"
    os.mkfifo(fifo)
    proc = subprocess.Popen(
        [sys.executable, "-m", "tracer.cli", "import", str(fifo), "-o", str(target)],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        cwd=ROOT,
        preexec_fn=_ctrl_c_as_from_a_terminal,
    )
    deadline = time.monotonic() + 60
    while True:  # a non-blocking open fails (ENXIO) until the importer opens its end
        try:
            fd = os.open(fifo, os.O_WRONLY | os.O_NONBLOCK)
            break
        except OSError:
            assert proc.poll() is None, proc.communicate()[1].decode()
            assert time.monotonic() < deadline, "the importer never opened the pipe"
            time.sleep(0.05)
    os.set_blocking(fd, True)
    with os.fdopen(fd, "w") as feed:
        feed.write(
            '{"kind": "header", "instance": {"coords": [[0, 0], [1, 0], [1, 1]], '
            '"metric": "EUC_2D"}, "solver": {"bound": "tree+links"}}\n'
        )
        feed.flush()
        time.sleep(0.2)  # the importer is now blocked reading the pipe
        proc.send_signal(sig)
        _, err = proc.communicate(timeout=60)
    assert proc.returncode == 130, err.decode()
    assert b"interrupted" in err and b"Traceback" not in err
    assert target.read_bytes() == b"previous contents"


_CHUNKED_WRITER = textwrap.dedent(
    """
    import random, sys, time
    data = open(sys.argv[1], "rb").read()
    out = open(sys.argv[2], "wb")
    rng = random.Random(int(sys.argv[3]))
    pos = 0
    while pos < len(data):
        step = rng.choice((1, 7, 100, 4096, 50_000))
        out.write(data[pos : pos + step])
        out.flush()
        pos += step
        if rng.random() < 0.3:
            time.sleep(0.001)
    out.close()
    """
)


@pytest.mark.parametrize("seed", [1, pytest.param(2, marks=pytest.mark.thorough)])
def test_follower_never_reports_a_partial_frame_as_corrupt(
    gr17: Trail, tmp_path: Path, seed: int
) -> None:
    """A writer process appends a trail in odd-sized pieces; polls and reads never fail."""
    live = tmp_path / "live.trail"
    live.touch()
    proc = subprocess.Popen(
        [sys.executable, "-c", _CHUNKED_WRITER, gr17.path, str(live), str(seed)]
    )
    follower = TrailFollower(live)
    counts = []
    try:
        while True:
            finished = proc.poll() is not None
            follower.poll()  # raises CorruptTrailError on a partial frame taken as corrupt
            try:
                counts.append(read_trail(live).count)
            except CorruptTrailError:
                raise
            except InputError as exc:  # the header itself is not complete yet
                assert "header" in str(exc) and not counts
            if finished:
                break
            time.sleep(0.002)
        follower.poll()
    finally:
        proc.wait(timeout=60)
        follower.close()
    assert proc.returncode == 0
    final = follower.trail
    assert final is not None and final.end is not None and final.count == gr17.count
    for name, column in gr17.columns.items():
        assert np.array_equal(final.columns[name], column), name
    assert counts == sorted(counts) and len(set(counts)) > 1


def test_jsonl_follower_reads_a_trace_being_written(gr17: Trail, tmp_path: Path) -> None:
    """A JSON Lines trace appended in odd-sized pieces is followed without an error; the
    nodes arrive in order and the end equals reading the finished file."""
    source = tmp_path / "whole.jsonl"
    source.write_text("".join(line + "\n" for line in jsonl_lines(_head(gr17, 30_000))))
    live = tmp_path / "live.jsonl"
    live.touch()
    proc = subprocess.Popen([sys.executable, "-c", _CHUNKED_WRITER, str(source), str(live), "3"])
    follower = follow_trail(live)
    seen = 0
    try:
        while True:
            finished = proc.poll() is not None
            first, added, _ = follower.poll()  # raises on a partial line taken as malformed
            assert first == seen
            seen += added
            if finished:
                break
            time.sleep(0.005)
        first, added, _ = follower.poll()
        seen += added
    finally:
        proc.wait(timeout=60)
        follower.close()
    final = follower.trail
    assert final is not None and final.end is not None and seen == final.count == 30_000
    whole = read_jsonl(source)
    for name, column in whole.columns.items():
        assert np.array_equal(final.columns[name], column), name


def _head(trail: Trail, count: int) -> Trail:
    """The first `count` nodes of a depth-first trail, with the updates among them."""
    columns = {name: column[:count] for name, column in trail.columns.items()}
    best = [b for b in trail.best if b.at < count]
    return Trail(trail.path, trail.header, columns, best, None)


@pytest.mark.thorough
def test_follower_keeps_up_with_a_real_solve(tmp_path: Path) -> None:
    """The follower polls a trail `prunetrail solve` is writing; no error, same nodes at end."""
    live = tmp_path / "solve.trail"
    args = [sys.executable, "-m", "tracer.cli", "solve", str(instance_path("gr17"))]
    args += ["-o", str(live), "--cutoff", "0", "--max-nodes", "1500000", "--json"]
    proc = subprocess.Popen(args, stdout=subprocess.PIPE, stderr=subprocess.PIPE, cwd=ROOT)
    deadline = time.monotonic() + 120
    while not live.exists() and time.monotonic() < deadline and proc.poll() is None:
        time.sleep(0.01)
    follower = TrailFollower(live)
    seen = 0
    try:
        while True:
            finished = proc.poll() is not None
            seen += follower.poll()[1]
            if finished:
                break
            time.sleep(0.01)
        seen += follower.poll()[1]
    finally:
        proc.communicate(timeout=120)
        follower.close()
    assert proc.returncode == 3  # stopped at the node limit, end frame written
    whole = read_trail(live)
    assert seen == whole.count == 1_500_000
    assert follower.trail is not None and follower.trail.end is not None


def test_cut_trail_read_is_never_corrupt_at_any_frame_boundary(gr17: Trail, tmp_path: Path) -> None:
    """A trail cut anywhere in its last frames reads (with a notice), never as corrupt."""
    data = Path(gr17.path).read_bytes()
    cut = tmp_path / "cut.trail"
    rng = np.random.default_rng(5)
    for size in sorted(rng.integers(200, len(data), 40).tolist()):
        cut.write_bytes(data[:size])
        try:
            trail = read_trail(cut)
        except CorruptTrailError as exc:  # pragma: no cover - the failure being tested
            raise AssertionError(f"cut at {size} read as corrupt: {exc}") from None
        except InputError as exc:  # only before the header is complete
            assert "header" in str(exc)
            continue
        assert trail.notice is not None and trail.end is None


def test_writer_error_is_our_error_type(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """The writer turns a failed write into a PrunetrailError naming the file and the cause."""
    _fill_disk_after(monkeypatch, 100)
    from tracer.base.frames import EndInfo
    from tracer.base.header import SolverInfo, TrailHeader
    from tracer.base.instance import Instance
    from tracer.base.schema import FULL_COLUMNS, column_layout

    instance = Instance("t", "EUC_2D", coords=np.array([[0.0, 0.0], [1.0, 0.0], [0.0, 1.0]]))
    header = TrailHeader(instance, SolverInfo(), column_layout(FULL_COLUMNS, 3, True, 10.0))
    path = tmp_path / "t.trail"
    with pytest.raises(PrunetrailError, match="No space left on device") as caught:
        writer = writer_module.TrailWriter(path, header)
        writer.close(EndInfo("complete", 0, 0, {}, 0.0, None))
    assert str(path) in str(caught.value)


@pytest.mark.thorough
@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM])
def test_sweep_signal_to_the_process_group_keeps_the_rows(tmp_path: Path, sig: int) -> None:
    """Ctrl-C or SIGTERM to a sweep's whole process group (as a terminal or `timeout` sends
    it): exit 130, no traceback, the CSV holds every finished row and reads."""
    import csv

    prefix = tmp_path / "rows"
    args = [sys.executable, "-m", "tracer.cli", "sweep", str(instance_path("burma14"))]
    args += [str(instance_path("gr17")), "--cutoffs", "0-8", "--repeat", "3"]
    args += ["--workers", "2", "--out", str(prefix), "--json"]
    proc = subprocess.Popen(
        args, stdout=subprocess.PIPE, stderr=subprocess.PIPE, cwd=ROOT, start_new_session=True
    )
    rows_file = Path(f"{prefix}.csv")
    deadline = time.monotonic() + 300
    while time.monotonic() < deadline and proc.poll() is None:
        if rows_file.exists() and len(rows_file.read_text().splitlines()) >= 2:
            break
        time.sleep(0.2)
    assert proc.poll() is None, "the sweep finished before it could be interrupted"
    os.killpg(proc.pid, sig)
    out, err = proc.communicate(timeout=120)
    assert proc.returncode == 130, err.decode()[-2000:]
    assert b"Traceback" not in err
    with open(rows_file, newline="") as handle:
        rows = list(csv.DictReader(handle))
    assert rows and all(row["instance"] for row in rows)
    assert json.loads(out)["interrupted"] is True
