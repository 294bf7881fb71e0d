"""Commands scripts can trust: errors as JSON, the incomplete-trail exit code, `info` on a
trail, and a clear refusal when a command is handed the wrong kind of file."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import msgpack
import pytest

from tests.reference import TSPLIB_OPTIMUM, instance_path
from tracer.base import FileKind, sniff_bytes
from tracer.cli import main
from tracer.cli.check import EXIT_INCOMPLETE

ROOT = Path(__file__).resolve().parents[1]
ORCHARD = ROOT / "scenarios" / "orchard_rounds.tsp"
RELAY = ROOT / "scenarios" / "relay_survey.csv"


def frame_offsets(data: bytes) -> list[int]:
    """Byte offset of every frame of a trail (read with plain msgpack)."""
    unpacker = msgpack.Unpacker(raw=False, max_buffer_size=len(data))
    unpacker.feed(data)
    offsets = []
    while True:
        offsets.append(unpacker.tell())
        try:
            unpacker.unpack()
        except msgpack.OutOfData:
            return offsets[:-1]


def run_json(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, dict[str, Any], str]:
    """Run with --json: exit status, the single JSON object on stdout, and stderr."""
    status = main([*argv, "--json"])
    captured = capsys.readouterr()
    lines = captured.out.strip().splitlines()
    assert len(lines) == 1, captured.out
    return status, json.loads(lines[0]), captured.err


@pytest.fixture(scope="module")
def orchard_trail(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A complete trail of the orchard scenario."""
    path = tmp_path_factory.mktemp("trails") / "orchard.trail"
    assert main(["solve", str(ORCHARD), "-o", str(path), "--json"]) == 0
    return path


def test_bad_line_is_one_json_object_with_file_and_line(capsys, tmp_path: Path) -> None:
    """A malformed instance under --json prints error, file and line as JSON, text on stderr."""
    bad = tmp_path / "bad.tsp"
    bad.write_text(
        "NAME : x\nTYPE : TSP\nDIMENSION : 3\nEDGE_WEIGHT_TYPE : EUC_2D\n"
        "NODE_COORD_SECTION\n1 0 0\n2 one 0\n3 1 1\nEOF\n"
    )
    status, got, err = run_json(capsys, "info", str(bad))
    assert status == 2
    assert got["file"] == str(bad) and got["line"] == 7 and got["offset"] is None
    assert "expected a number" in got["error"] and got["command"] == "info"
    assert f"{bad}:7" in err


def test_corrupt_trail_error_names_the_byte_offset(capsys, tmp_path: Path, orchard_trail) -> None:
    """A trail with a garbage frame after its header reports the frame's offset in JSON."""
    data = orchard_trail.read_bytes()
    header_end = frame_offsets(data)[1]
    broken = tmp_path / "broken.trail"
    broken.write_bytes(data[:header_end] + b"\xc1" + data[header_end + 1 :])
    status, got, _ = run_json(capsys, "check", str(broken))
    assert status == 2
    assert got["file"] == str(broken) and got["offset"] == header_end


def test_request_error_without_file_is_json_too(capsys, orchard_trail) -> None:
    """An impossible request (--tour with a trail) is still one JSON object, file null."""
    status, got, _ = run_json(capsys, "info", str(orchard_trail), "--tour", "x.tour")
    assert status == 2 and got["file"] is None and "--tour" in got["error"]


def test_check_complete_trail_exits_0_and_says_complete(capsys, orchard_trail) -> None:
    """check on a whole trail: exit 0 and `complete` true."""
    status, got, _ = run_json(capsys, "check", str(orchard_trail))
    assert status == 0 and got["complete"] is True and got["wrong"] == 0


def test_check_cut_trail_has_its_own_exit_code(capsys, tmp_path: Path, orchard_trail) -> None:
    """A trail cut before its end frame: every record read checks, exit 4, `complete` false."""
    data = orchard_trail.read_bytes()
    for name, size in (("no-end.trail", frame_offsets(data)[-1]), ("cut.trail", len(data) // 2)):
        cut = tmp_path / name
        cut.write_bytes(data[:size])
        status, got, _ = run_json(capsys, "check", str(cut))
        assert status == EXIT_INCOMPLETE == 4
        assert got["complete"] is False and got["wrong"] == 0
        assert ("no end frame" if name == "no-end.trail" else "stops inside") in got["notice"]


def test_check_wrong_records_still_exit_1_on_a_cut_trail(capsys, tmp_path: Path) -> None:
    """Wrong records win over incompleteness: a cut faulty trail exits 1."""
    faulty = tmp_path / "faulty.trail"
    main(["solve", str(ORCHARD), "-o", str(faulty), "--fault", "tree-positions", "--json"])
    capsys.readouterr()
    data = faulty.read_bytes()
    faulty.write_bytes(data[: frame_offsets(data)[-1]])
    status, got, _ = run_json(capsys, "check", str(faulty))
    assert status == 1 and got["complete"] is False


def test_info_describes_a_trail(capsys, tmp_path: Path) -> None:
    """info on a trail: instance, settings, counts, status, incumbent = TSPLIB optimum."""
    # burma14's optimum 3323 is TSPLIB's published value (Reinelt 1991, tests/reference.py).
    trail = tmp_path / "burma.trail"
    assert main(["solve", str(instance_path("burma14")), "-o", str(trail), "--json"]) == 0
    solved = json.loads(capsys.readouterr().out)
    status, got, _ = run_json(capsys, "info", str(trail))
    assert status == 0
    assert got["instance"] == {"name": "burma14", "n": 14, "metric": "GEO"}
    assert got["solver"]["bound"] == "tree+links" and got["solver"]["engine"]
    assert got["nodes"] == solved["nodes"] == sum(got["decisions"].values())
    assert got["decisions"] == solved["decisions"]
    assert got["status"] == "complete" and got["complete"] is True
    assert got["incumbent"] == TSPLIB_OPTIMUM["burma14"]


def test_info_text_on_a_trail_names_status(capsys, orchard_trail) -> None:
    """info without --json prints the trail's facts, not an instance misreading."""
    assert main(["info", str(orchard_trail)]) == 0
    text = capsys.readouterr().out
    assert "orchard_rounds" in text and "complete" in text and "decisions" in text


@pytest.mark.parametrize(
    ("command", "given", "got_kind", "wanted"),
    [
        ("solve", "trail", "a trail", "an instance"),
        ("tour", "trail", "a trail", "an instance"),
        ("check", "tsp", "a TSPLIB text file", "a trace"),
        ("check", "csv", "a CSV city list", "a trace"),
        ("solve", "jsonl", "a JSON Lines trace", "an instance"),
    ],
)
def test_wrong_kind_of_file_says_got_and_wanted(
    capsys, tmp_path: Path, orchard_trail, command: str, given: str, got_kind: str, wanted: str
) -> None:
    """Every command handed another kind of file names the kind found and the kind wanted."""
    jsonl = tmp_path / "t.jsonl"
    jsonl.write_text('{"kind": "header"}\n')
    path = {"trail": orchard_trail, "tsp": ORCHARD, "csv": RELAY, "jsonl": jsonl}[given]
    argv = [command, str(path)] + (["--no-trail"] if command == "solve" else [])
    status, got, err = run_json(capsys, *argv)
    assert status == 2
    assert got_kind in got["error"] and wanted in got["error"] and got["file"] == str(path)
    assert got_kind in err


def test_info_tour_given_a_trail_as_tour(capsys, orchard_trail) -> None:
    """info --tour with a trail as the tour file says it wanted a tour."""
    status, got, _ = run_json(capsys, "info", str(ORCHARD), "--tour", str(orchard_trail))
    assert status == 2 and "a trail" in got["error"] and "a tour" in got["error"]


@pytest.mark.parametrize(
    ("head", "kind"),
    [
        (b"\x86\xa4kind\xa6header", FileKind.TRAIL),
        (b'\n{"kind": "header"}', FileKind.JSON_LINES),
        (b"NAME : a\nTYPE : TSP\n", FileKind.TSPLIB),
        (b"x,y,label\n1,2,a\n", FileKind.CSV),
        (b"1.5,2\n", FileKind.CSV),
        (b"hello there\n", FileKind.TEXT),
        (b"\x00\x01\x02", FileKind.BINARY),
        (b"  \n\n", FileKind.EMPTY),
        (b"\x1c", FileKind.TEXT),
    ],
)
def test_sniff_tells_kinds_apart(head: bytes, kind: FileKind) -> None:
    """The sniff names each kind of file from its first bytes."""
    assert sniff_bytes(head) == kind


def test_the_script_entry_point_prints_json_errors_too(capsys) -> None:
    """`prunetrail` (tui.cli:main, which adds the viewer's commands) shares the error path."""
    from tui.cli import main as script_main

    assert script_main(["check", str(ORCHARD), "--json"]) == 2
    got = json.loads(capsys.readouterr().out)
    assert got["file"] == str(ORCHARD) and "a TSPLIB text file" in got["error"]
