"""`check`, `stats` and `why` of a JSON Lines trace too large for the memory setting: the
trace goes through the streamed import into a temporary trail read block by block, and the
commands print exactly what they print reading it whole (errors too), leaving no temporary
folder behind, whether they finish, fail or are interrupted."""

from __future__ import annotations

import json
import tempfile
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pytest

from tests.foreign_traces import jsonl_lines, solve_to_trail
from tests.test_streaming import _best_first_trace
from tracer.cli import check, main
from tracer.cli import stats as stats_cli
from tracer.cli import why as why_cli
from tracer.formats import load_instance
from tracer.search.driver import SearchSettings
from tracer.trails import ImportSummary, stream_jsonl

ROOT = Path(__file__).resolve().parents[1]
ULYSSES16 = ROOT / "tests" / "data" / "ulysses16.tsp"
COMMANDS = ["check", "stats", "why"]
#: --memory-mb for each way: whole (the default), and too small for any trace here.
WHOLE, STREAMED = "2048", "0"


@pytest.fixture(scope="module")
def faulty_lines(tmp_path_factory: pytest.TempPathFactory) -> list[str]:
    """A 20 000-node ulysses16 search with a planted fault, printed as JSON Lines."""
    folder = tmp_path_factory.mktemp("jsonl-streaming")
    settings = SearchSettings(cutoff=2, fault="tree-spans-ends", max_nodes=20_000)
    trail = solve_to_trail(load_instance(ULYSSES16), folder / "u.trail", settings)
    return list(jsonl_lines(trail))


@pytest.fixture
def scratch(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    """The folder temporary folders are made in, for this test alone (beside the trace is
    where they go by default, `test_the_temporary_trail_goes_beside_the_trace`)."""
    folder = tmp_path / "scratch"
    folder.mkdir()
    monkeypatch.setattr(tempfile, "tempdir", str(folder))
    monkeypatch.setattr(check, "_scratch_dir", lambda path: str(folder))
    return folder


@dataclass
class Import:
    """A streamed import a command started: its target, and its summary once it returned."""

    target: Path
    summary: ImportSummary | None = None
    returned: bool = False


@pytest.fixture
def imports(monkeypatch: pytest.MonkeyPatch) -> list[Import]:
    """Every streamed import the commands start."""
    made: list[Import] = []
    real = stream_jsonl

    def spy(src: Any, dst: Any, *args: Any) -> ImportSummary | None:
        made.append(Import(Path(dst)))
        made[-1].summary = real(src, dst, *args)
        made[-1].returned = True
        return made[-1].summary

    monkeypatch.setattr(check, "stream_jsonl", spy)
    return made


def write(path: Path, lines: list[str], tail: str = "\n") -> Path:
    """The lines as a file (`tail` after the last one)."""
    path.write_text("\n".join(lines) + tail)
    return path


def both_ways(
    capsys: pytest.CaptureFixture[str], argv: list[str]
) -> tuple[tuple[int, str, str], tuple[int, str, str]]:
    """(status, stdout, stderr) of the command read whole, then streamed."""
    runs = []
    for memory in (WHOLE, STREAMED):
        status = main([*argv, "--memory-mb", memory])
        printed = capsys.readouterr()
        runs.append((status, printed.out, printed.err))
    return runs[0], runs[1]


def _assert_streamed(imports: list[Import], scratch: Path) -> None:
    """One streamed import ran and wrote its trail, whose folder is gone, as is every other."""
    assert len(imports) == 1 and imports[0].summary is not None
    assert imports[0].target.parent.parent == scratch
    assert not imports[0].target.parent.exists()
    assert list(scratch.iterdir()) == []


def test_the_temporary_trail_goes_beside_the_trace(tmp_path: Path) -> None:
    """Not into the system's temp folder, which is often held in memory."""
    trace = tmp_path / "deep" / "run.jsonl"
    trace.parent.mkdir()
    assert check._scratch_dir(str(trace)) == str(trace.parent.resolve())


@pytest.mark.parametrize("command", COMMANDS)
def test_streamed_jsonl_prints_what_the_whole_file_prints(
    faulty_lines: list[str],
    tmp_path: Path,
    scratch: Path,
    imports: list[Import],
    capsys: pytest.CaptureFixture[str],
    command: str,
) -> None:
    """A planted-fault trace (findings with the solver's ids and lines): the same text and
    the same JSON, read whole or through a temporary trail, which is removed afterwards."""
    src = write(tmp_path / "faulty.jsonl", faulty_lines)
    for extra in ([], ["--json"]):
        imports.clear()
        whole, streamed = both_ways(capsys, [command, str(src), *extra])
        assert streamed == whole
        assert whole[1]
        _assert_streamed(imports, scratch)
    report = json.loads(whole[1])
    assert report["trail"] == str(src)
    if command == "check":
        assert whole[0] == check.EXIT_WRONG and report["first"][0]["source_line"] > 1


@pytest.mark.parametrize("command", COMMANDS)
def test_a_crashed_and_cut_trace_keeps_its_notice(
    faulty_lines: list[str],
    tmp_path: Path,
    scratch: Path,
    imports: list[Import],
    capsys: pytest.CaptureFixture[str],
    command: str,
) -> None:
    """No end line and a cut last line: the trace's own notice (its line, not the temporary
    trail's missing end frame) and the same exit status both ways."""
    lines = [line for line in faulty_lines if '"kind": "end"' not in line]
    src = write(tmp_path / "cut.jsonl", lines, tail='\n{"kind": "node", "id": 9')
    notice = f"file stops inside line {len(lines) + 1}; read 20000 nodes"
    whole, streamed = both_ways(capsys, [command, str(src)])
    assert streamed == whole and f"note: {notice}" in whole[2]
    imports.clear()
    whole, streamed = both_ways(capsys, [command, str(src), "--json"])
    assert streamed == whole
    report = json.loads(whole[1])
    if command != "why":  # why's JSON has no notice
        assert report["notice"] == notice
    if command == "check":
        assert report["complete"] is False
    _assert_streamed(imports, scratch)


@pytest.mark.parametrize("command", COMMANDS)
def test_a_visit_order_trace_is_read_whole(
    tmp_path: Path,
    scratch: Path,
    imports: list[Import],
    capsys: pytest.CaptureFixture[str],
    command: str,
) -> None:
    """A best-first trace is not pre-order: the streamed import declines, the trace is read
    whole, the output is the same and no folder is left."""
    src = _best_first_trace(tmp_path).path
    whole, streamed = both_ways(capsys, [command, src, "--json"])
    assert streamed == whole and whole[1]
    assert len(imports) == 1 and imports[0].returned and imports[0].summary is None
    assert list(scratch.iterdir()) == []


def _damaged(lines: list[str], at: int, how: str) -> list[str]:
    """The lines with line `at` (1-based) spoilt: wrong in itself, or naming no parent."""
    node = json.loads(lines[at - 1])
    assert node["kind"] == "node"
    spoilt = dict(node, decision="sideways") if how == "in itself" else dict(node, parent=7)
    return [*lines[: at - 1], json.dumps(spoilt), *lines[at:]]


@pytest.mark.parametrize("how", ["in itself", "no parent"])
@pytest.mark.parametrize("command", COMMANDS)
def test_a_damaged_trace_gives_the_same_error(
    faulty_lines: list[str],
    tmp_path: Path,
    scratch: Path,
    imports: list[Import],
    capsys: pytest.CaptureFixture[str],
    command: str,
    how: str,
) -> None:
    """A bad line far into the file: the same message naming the .jsonl and its line (the
    streamed import's own, or the whole-file reading's after it declines), status 2, and
    no temporary folder left."""
    at = len(faulty_lines) - 100
    src = write(tmp_path / "damaged.jsonl", _damaged(faulty_lines, at, how))
    for extra in ([], ["--json"]):
        imports.clear()
        whole, streamed = both_ways(capsys, [command, str(src), *extra])
        assert streamed == whole
        assert whole[0] == 2 and f"{src}:{at}: " in whole[2]
        assert len(imports) == 1 and imports[0].summary is None
        assert imports[0].returned == (how == "no parent")  # else the import raised
        assert list(scratch.iterdir()) == []
    error = json.loads(whole[1])
    assert (error["file"], error["line"]) == (str(src), at)


@pytest.mark.parametrize("command", COMMANDS)
def test_interrupted_streaming_removes_the_folder(
    faulty_lines: list[str],
    tmp_path: Path,
    scratch: Path,
    imports: list[Import],
    monkeypatch: pytest.MonkeyPatch,
    command: str,
) -> None:
    """Ctrl-C during the streaming analysis: status 130 and the temporary trail's folder
    gone (it existed while the analysis ran)."""
    seen: list[bool] = []

    def interrupt(source: Any, *args: Any, **kwargs: Any) -> None:
        seen.append(Path(source.path).exists())
        raise KeyboardInterrupt

    module = {"check": check, "stats": stats_cli, "why": why_cli}[command]
    name = {"check": "stream_recheck", "stats": "stream_stats", "why": "stream_explain"}
    monkeypatch.setattr(module, name[command], interrupt)
    src = write(tmp_path / "t.jsonl", faulty_lines)
    assert main([command, str(src), "--json", "--memory-mb", STREAMED]) == 130
    assert seen == [True]
    _assert_streamed(imports, scratch)


def test_only_a_trace_too_large_for_the_setting_streams(
    faulty_lines: list[str], tmp_path: Path
) -> None:
    """The choice follows the file's size times the documented factor."""
    src = write(tmp_path / "t.jsonl", faulty_lines)
    size = src.stat().st_size
    mb = size * check.JSONL_MEMORY_FACTOR / (1 << 20)
    assert check._jsonl_too_large(str(src), int(mb))
    assert not check._jsonl_too_large(str(src), int(mb) + 1)
    trail = tmp_path / "t.trail"
    assert main(["import", str(src), "-o", str(trail)]) == 0
    assert not check._jsonl_too_large(str(trail), 0)  # a .trail goes by its own estimate
