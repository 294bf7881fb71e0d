"""Regenerate the README's generated parts: screenshots, the walkthrough excerpt, --help.

    python tests/make_readme_assets.py

The README's walkthrough commands are the recipe: they run in a scratch copy of the
scenarios (so the trails they write land there), and the SVGs their `--screenshot`
options write into `scenarios/screens/` are copied back. The command reference is every
command's `--help` at a fixed width, and the walkthrough excerpt is the viewer's Markdown
export of the teaching scenario. `tests/test_readme.py` runs the same functions and fails
when a generated part is stale.
"""

from __future__ import annotations

import contextlib
import html
import io
import os
import re
import shlex
import shutil
import sys
import tempfile
from collections.abc import Iterator
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:  # run as a script from anywhere
    sys.path.insert(0, str(ROOT))

README = ROOT / "README.md"
SCREENS = ROOT / "scenarios" / "screens"
#: Width of the --help text in the command reference (argparse reads $COLUMNS).
HELP_COLUMNS = 100
#: Sections of the README whose ```bash blocks are commands to run.
COMMAND_SECTIONS = ("## Walkthroughs", "## Recording your own solver")
#: The walkthrough excerpt: the teaching scenario's trail, the node, and how many steps.
WALK_SOLVE = ["solve", "scenarios/meter_lane.tsp", "--improve", "none"]
WALK_NODE = 59
WALK_STEPS = 2


def section(text: str, heading: str) -> str:
    """The README text from `heading` to the next heading of the same level or higher
    (lines inside fenced blocks are not headings)."""
    level = len(heading.split(" ", 1)[0])
    lines = text.splitlines(keepends=True)
    start = lines.index(heading + "\n")
    fenced = False
    for at in range(start + 1, len(lines)):
        line = lines[at]
        if line.startswith("```"):
            fenced = not fenced
        marks = len(line) - len(line.lstrip("#"))
        if not fenced and 0 < marks <= level and line[marks : marks + 1] == " ":
            return "".join(lines[start:at])
    return "".join(lines[start:])


def readme_commands(text: str, sections: tuple[str, ...] = COMMAND_SECTIONS) -> list[str]:
    """Every command line of the ```bash blocks in these sections of the README."""
    lines: list[str] = []
    for heading in sections:
        for block in re.findall(r"```bash\n(.*?)```", section(text, heading), re.S):
            lines += [line.strip() for line in block.splitlines() if line.strip()]
    return lines


def interactive(command: str) -> bool:
    """Whether a README command waits for a person (the viewer on screen, or a server)."""
    words = shlex.split(command)
    return words[:2] == ["prunetrail", "view"] and (
        "--serve" in words or "--screenshot" not in words
    )


def screenshot_target(command: str) -> str | None:
    """The SVG a README command writes, if any."""
    words = shlex.split(command)
    return words[words.index("--screenshot") + 1] if "--screenshot" in words else None


def generated(text: str, name: str, body: str) -> str:
    """`text` with the generated block `name` replaced by `body`."""
    pattern = re.compile(rf"(<!-- generated: {name} [^\n]*-->\n).*?(<!-- end generated -->)", re.S)
    if not pattern.search(text):
        raise ValueError(f"README has no generated block {name!r}")
    return pattern.sub(lambda m: m.group(1) + body + m.group(2), text, count=1)


def generated_body(text: str, name: str) -> str:
    """The current content of the generated block `name`."""
    match = re.search(rf"<!-- generated: {name} [^\n]*-->\n(.*?)<!-- end generated -->", text, re.S)
    if match is None:
        raise ValueError(f"README has no generated block {name!r}")
    return match.group(1)


@contextlib.contextmanager
def _columns(width: int) -> Iterator[None]:
    old = os.environ.get("COLUMNS")
    os.environ["COLUMNS"] = str(width)
    try:
        yield
    finally:
        if old is None:
            del os.environ["COLUMNS"]
        else:
            os.environ["COLUMNS"] = old


def command_reference() -> str:
    """Every `prunetrail` command's --help, as collapsible Markdown blocks."""
    import argparse

    from tui.cli import build_parser

    with _columns(HELP_COLUMNS):
        parser = build_parser()
        sub = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
        blocks = [("prunetrail", "the command and its first session", parser.format_help())]
        helps = {a.dest: a.help or "" for a in sub._get_subactions()}
        for name, command in sub.choices.items():
            blocks.append((f"prunetrail {name}", helps.get(name, ""), command.format_help()))
    out = []
    for title, summary, text in blocks:
        out.append(
            f"<details><summary><code>{title}</code>: {html.escape(summary)}</summary>\n\n"
            f"```text\n{text.rstrip()}\n```\n\n</details>\n"
        )
    return "\n".join(out)


def walkthrough_excerpt(workdir: Path) -> str:
    """The first steps of the viewer's Markdown walkthrough of the teaching scenario."""
    from tracer.analysis import TreeIndex, best_completions, completion_table
    from tracer.cli import main
    from tracer.trails import open_trail
    from tui.walkthrough import walkthrough

    trail_path = workdir / "walkthrough.trail"
    verb, instance, *options = WALK_SOLVE
    with contextlib.redirect_stdout(io.StringIO()):
        status = main([verb, str(ROOT / instance), *options, "-o", str(trail_path)])
    assert status == 0
    trail = open_trail(trail_path)
    index = TreeIndex(trail.columns, trail.best)
    completions = best_completions(trail, index, completion_table(trail.header.instance))
    text = walkthrough(trail, index, WALK_NODE, completions)
    parts = re.split(r"(?m)^(?=## )", text.rstrip() + "\n")
    title, steps = parts[0], parts[1:]
    left_out = len(steps) - WALK_STEPS - 1
    shown = [title, *steps[:WALK_STEPS], f"(... {left_out} more steps ...)\n\n", steps[-1]]
    return "```markdown\n" + "".join(shown).rstrip() + "\n```\n"


def scratch_copy(workdir: Path) -> Path:
    """A copy of the scenarios in `workdir` (without the screens), for commands to write into."""
    shutil.copytree(
        ROOT / "scenarios",
        workdir / "scenarios",
        ignore=shutil.ignore_patterns("screens", "__pycache__"),
    )
    (workdir / "scenarios" / "screens").mkdir()
    return workdir


def run_command(command: str, workdir: Path) -> int:
    """Run one README `prunetrail` command in this process, in `workdir`; its exit status."""
    from tui.cli import main

    words = shlex.split(command)
    assert words[0] == "prunetrail", command
    here = Path.cwd()
    os.chdir(workdir)
    try:
        return main(words[1:])
    finally:
        os.chdir(here)


def svg_text(svg: str) -> str:
    """The characters an SVG screenshot shows, in order (ids and styling left out)."""
    return "".join(html.unescape(t) for t in re.findall(r"<text[^>]*>(.*?)</text>", svg, re.S))


def make_screens(workdir: Path) -> dict[str, Path]:
    """Run the README's screenshot commands (and the commands before them) in `workdir`."""
    made = {}
    for command in readme_commands(README.read_text(), COMMAND_SECTIONS[:1]):
        if interactive(command):
            continue
        target = screenshot_target(command)
        if target is None and " sweep " in f" {command} ":
            continue  # timing only: no screenshot depends on it
        status = run_command(command, workdir)
        if status not in (0, 1):
            raise SystemExit(f"`{command}` ended with status {status}")
        if target is not None:
            made[Path(target).name] = workdir / target
    return made


def main() -> None:
    """Rewrite the SVGs under scenarios/screens and the README's generated blocks."""
    SCREENS.mkdir(exist_ok=True)
    with tempfile.TemporaryDirectory() as tmp:
        workdir = scratch_copy(Path(tmp))
        for name, made in make_screens(workdir).items():
            shutil.copyfile(made, SCREENS / name)
            print(f"wrote {SCREENS / name}")
        text = README.read_text()
        text = generated(text, "walkthrough", walkthrough_excerpt(workdir))
        text = generated(text, "commands", command_reference())
    README.write_text(text)
    print(f"wrote {README}")


if __name__ == "__main__":
    main()
