"""Ctrl-C and SIGTERM as a polite request to stop: the search finishes its slice and the
trail gets its `end` frame. A second Ctrl-C stops at once."""

from __future__ import annotations

import signal
import threading
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from types import FrameType


@contextmanager
def stop_requests() -> Iterator[Callable[[], bool]]:
    """Within the block, SIGINT/SIGTERM set a flag; yields a function reading it."""
    requested = threading.Event()

    def handler(signum: int, frame: FrameType | None) -> None:
        if requested.is_set():
            raise KeyboardInterrupt
        requested.set()

    previous = {sig: signal.signal(sig, handler) for sig in (signal.SIGINT, signal.SIGTERM)}
    try:
        yield requested.is_set
    finally:
        for sig, old in previous.items():
            signal.signal(sig, old)
