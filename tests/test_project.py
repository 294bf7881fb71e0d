"""Project-level promises: the core stays headless, and README, CI and files agree."""

from __future__ import annotations

import pkgutil
import re
import subprocess
import sys
from pathlib import Path

import tracer

ROOT = Path(__file__).resolve().parents[1]


def _readme_commands() -> list[str]:
    text = (ROOT / "README.md").read_text()
    quickstart = text.split("## Quickstart", 1)[1].split("\n## ", 1)[0]
    return re.findall(r"```bash\n(.+?)\n```", quickstart)


def test_core_never_imports_the_viewer() -> None:
    """Importing every tracer module loads neither textual nor tui (a fresh interpreter)."""
    modules = [
        m.name
        for m in pkgutil.walk_packages(tracer.__path__, "tracer.")
        if not m.name.endswith("__main__")
    ]
    code = (
        "import importlib, sys\n"
        f"for name in {modules!r}: importlib.import_module(name)\n"
        "bad = sorted(m for m in sys.modules if m.split('.')[0] in ('textual', 'tui'))\n"
        "print(','.join(bad))\n"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert len(modules) > 10
    assert done.stdout.strip() == ""


def test_ci_runs_the_readme_test_command_verbatim() -> None:
    """.ci/run holds the README's test command exactly as a user types it."""
    commands = _readme_commands()
    assert len(commands) == 2, commands
    test_command = commands[1]
    assert "pytest" in test_command
    ci_lines = (ROOT / ".ci" / "run").read_text().splitlines()
    assert test_command in ci_lines


def test_readme_quickstart_names_real_files() -> None:
    """The quickstart's demo instance is a file the repository ships."""
    first = _readme_commands()[0]
    files = re.findall(r"scenarios/\S+", first)
    assert files and all((ROOT / f).is_file() for f in files)


def test_every_scenario_has_its_story() -> None:
    """Each scenario file is described in scenarios/README.md."""
    stories = (ROOT / "scenarios" / "README.md").read_text()
    files = [p.name for p in (ROOT / "scenarios").iterdir() if p.name != "README.md"]
    assert files and all(f"`{name}`" in stories for name in files)


def test_reference_data_names_its_source() -> None:
    """tests/data says where its reference instances come from (TSPLIB)."""
    assert "TSPLIB" in (ROOT / "tests" / "data" / "README.md").read_text()
