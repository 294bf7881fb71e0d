"""Snapshot tests of the viewer's panels and screens, at a fixed terminal size.

Every app is the viewer (`tui.app.PrunetrailApp`) on a trail recorded in memory from the
fixed nine-city instance of `tests.test_viewer_panels`; background work is waited for and
toasts are cleared before the picture is taken, and no file path or timing reaches the
screen, so the pictures are the same on every machine. Update them with
`pytest --snapshot-update` after a change that is meant to alter what the viewer draws,
and look at the new SVGs before committing.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pytest
from textual.pilot import Pilot

from tests.test_viewer_panels import PanelModel, model_of, planted_instance, record_trail
from tracer.analysis import TreeIndex
from tracer.base import DECISION, Decision
from tui.app import PrunetrailApp

SIZE = (120, 40)


@pytest.fixture(scope="module")
def clean() -> PanelModel:
    """A clean trail of the nine-city instance, with the oracle's completions."""
    return model_of(record_trail(planted_instance()), oracle=True)


@pytest.fixture(scope="module")
def planted() -> PanelModel:
    """The same search with `stale-keys` planted (trees come out too light)."""
    return model_of(record_trail(planted_instance(), fault="stale-keys"), oracle=True)


@pytest.fixture(autouse=True)
def quiet_home(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """Bookmarks and key files are looked for in an empty folder, never the user's."""
    monkeypatch.chdir(tmp_path)
    monkeypatch.setenv("PRUNETRAIL_KEYS", str(tmp_path / "no-keys.toml"))


async def settle(pilot: Pilot[Any], *keys: str) -> None:
    """Let the background work finish, press `keys` (waiting again), drop the toasts."""
    app = pilot.app
    await app.workers.wait_for_complete()
    await pilot.pause()
    for key in keys:
        await pilot.press(key)
        await app.workers.wait_for_complete()
        await pilot.pause()
    app.clear_notifications()
    await pilot.pause()


def _first_pruned_wrong(model: PanelModel) -> int:
    """The first wrong record whose decision is a prune (the re-check's own list)."""
    decisions = model.trail.columns[DECISION][model.wrong_ids]
    return int(model.wrong_ids[np.flatnonzero(decisions == Decision.PRUNE)[0]])


def _deep_node(index: TreeIndex) -> int:
    return int(np.flatnonzero(index.depth == 4)[0])


def test_main_screen(snap_compare: Any, clean: PanelModel) -> None:
    """The viewer on a depth-4 node of a clean trail: list, bound panel, map, top line."""
    app = PrunetrailApp(clean.trail, at=_deep_node(clean.index))
    assert snap_compare(app, terminal_size=SIZE, run_before=settle)


def test_bound_panel_on_a_wrong_record(snap_compare: Any, planted: PanelModel) -> None:
    """The viewer on the first wrongly recorded prune of a `stale-keys` trail."""
    app = PrunetrailApp(planted.trail, at=_first_pruned_wrong(planted))
    assert snap_compare(app, terminal_size=SIZE, run_before=settle)


def test_why_screen(snap_compare: Any) -> None:
    """The why screen of a `tree-spans-ends` trail, opened with its key."""
    trail = record_trail(planted_instance(), fault="tree-spans-ends")
    app = PrunetrailApp(trail)
    assert snap_compare(app, terminal_size=SIZE, run_before=lambda p: settle(p, "w"))


def test_stats_screen(snap_compare: Any, clean: PanelModel) -> None:
    """The stats screen of the clean trail, tightness against the oracle."""
    app = PrunetrailApp(clean.trail)
    assert snap_compare(app, terminal_size=SIZE, run_before=lambda p: settle(p, "t"))
