"""Project-level promises: the core stays headless, and README, CI and files agree."""

from __future__ import annotations

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def _readme_commands() -> list[str]:
    text = (ROOT / "README.md").read_text()
    quickstart = text.split("## Quickstart", 1)[1].split("\n## ", 1)[0]
    return re.findall(r"```bash\n(.+?)\n```", quickstart)


def test_ci_runs_the_readme_test_command_verbatim() -> None:
    """.ci/run holds the README's test command exactly as a user types it."""
    commands = _readme_commands()
    assert len(commands) == 2, commands
    test_command = commands[1]
    assert "pytest" in test_command
    ci_lines = (ROOT / ".ci" / "run").read_text().splitlines()
    assert test_command in ci_lines


def test_ci_runs_the_thorough_tests_after_the_readme_command() -> None:
    """.ci/run runs the opt-in `thorough` tests after the README's command, before lint."""
    lines = (ROOT / ".ci" / "run").read_text().splitlines()
    readme = lines.index(_readme_commands()[1])
    thorough = lines.index("PRUNETRAIL_THOROUGH=1 python -m pytest -m thorough -q")
    lint = next(i for i, line in enumerate(lines) if line.startswith("ruff check"))
    assert readme < thorough < lint


def test_readme_quickstart_names_real_files() -> None:
    """The quickstart ends in `prunetrail demo`, whose default scenario the repository ships."""
    from tui.demo import SCENARIOS

    first = _readme_commands()[0]
    files = re.findall(r"scenarios/\S+", first)
    assert first.endswith("prunetrail demo") or files
    assert all((ROOT / f).is_file() for f in files)
    assert (ROOT / "scenarios" / SCENARIOS[0].source).is_file()


def test_every_scenario_has_its_story() -> None:
    """Each scenario file is described in scenarios/README.md."""
    stories = (ROOT / "scenarios" / "README.md").read_text()
    files = [p.name for p in (ROOT / "scenarios").iterdir() if p.name != "README.md"]
    assert files and all(f"`{name}`" in stories for name in files)


def test_reference_data_names_its_source() -> None:
    """tests/data says where its reference instances come from (TSPLIB)."""
    assert "TSPLIB" in (ROOT / "tests" / "data" / "README.md").read_text()
