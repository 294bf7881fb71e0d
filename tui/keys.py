"""Key remapping: a small TOML file maps binding ids to keys, applied as Textual's keymap.

The file is `$PRUNETRAIL_KEYS` when that is set, else `~/.config/prunetrail/keys.toml`.
It holds one table, `[keys]`, of binding id = "key" or "key1,key2" (ids are listed on the
help screen), for example:

    [keys]
    next = "j,down"
    run_forward = "ctrl+f"

Unknown ids and malformed values are reported in one line and skipped; the file is small
and bounded, and nothing in it is evaluated.
"""

from __future__ import annotations

import os
import re
import tomllib
from collections.abc import Iterable
from pathlib import Path

ENV_VAR = "PRUNETRAIL_KEYS"
DEFAULT_PATH = Path("~/.config/prunetrail/keys.toml")
MAX_FILE_BYTES = 64 * 1024
_KEYS = re.compile(r"^[A-Za-z0-9_+\-]+(,[A-Za-z0-9_+\-]+)*$")


def keymap_path() -> Path:
    """Where the key file is looked for."""
    chosen = os.environ.get(ENV_VAR)
    return Path(chosen).expanduser() if chosen else DEFAULT_PATH.expanduser()


def load_keymap(path: Path, known_ids: Iterable[str]) -> tuple[dict[str, str], list[str]]:
    """The keymap in `path` (binding id -> keys) and one line per problem found.

    A missing file is an empty keymap without problems.
    """
    known = set(known_ids)
    try:
        if path.stat().st_size > MAX_FILE_BYTES:
            return {}, [f"{path}: larger than {MAX_FILE_BYTES} bytes, ignored"]
        raw = tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        return {}, []
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
        return {}, [f"{path}: not a key file ({exc})"]
    table = raw.get("keys")
    if not isinstance(table, dict):
        return {}, [f"{path}: expected a [keys] table"]
    keymap: dict[str, str] = {}
    problems: list[str] = []
    for binding_id, keys in table.items():
        if binding_id not in known:
            problems.append(f"{path}: unknown binding id {binding_id[:40]!r}")
        elif not isinstance(keys, str) or not _KEYS.match(keys.replace(" ", "")):
            problems.append(f'{path}: keys for {binding_id!r} must be text like "j,down"')
        else:
            keymap[binding_id] = keys.replace(" ", "")
    return keymap, problems
