"""Where the CLI writes: results on stdout, progress and errors on stderr, JSON verbatim."""

from __future__ import annotations

import json
import sys
from typing import Any

from rich.console import Console

#: Results (tables, summaries). Progress and errors go to `err` so `--json` stays clean.
#: Markup is off: text from files (names, comments, paths) is never read as Rich markup;
#: styles are given as `Text` styles instead.
out = Console(highlight=False, markup=False)
err = Console(stderr=True, highlight=False, markup=False, soft_wrap=True)


def emit_json(obj: Any) -> None:
    """Print one JSON object on stdout (no Rich processing at all)."""
    sys.stdout.write(json.dumps(obj) + "\n")
    sys.stdout.flush()
