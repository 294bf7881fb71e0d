"""A run still being written: a thread appends a finished trail to a new file block by
block, for tests of what follows a growing trail (the follower, the block index, the viewer)."""

from __future__ import annotations

import contextlib
import threading
import time
from collections.abc import Iterator
from pathlib import Path

from tracer.base import Trail
from tracer.trails import TrailWriter


def write_blocks(writer: TrailWriter, trail: Trail, lo: int, hi: int, size: int) -> None:
    """Records [lo, hi) of `trail` in blocks of `size`, each best update before its block."""
    for start in range(lo, hi, size):
        stop = min(hi, start + size)
        for update in trail.best:
            if start <= update.at < stop or (start == 0 and update.at < 0):
                writer.write_best(update)
        writer.write_nodes({k: v[start:stop] for k, v in trail.columns.items()})


@contextlib.contextmanager
def live_run(
    path: Path, trail: Trail, first: int, step: int, pause: float, block: int = 1000
) -> Iterator[threading.Event]:
    """A run writing `trail` to `path`: records [0, first) at once, then, once the event it
    yields is set, the rest `step` at a time `pause` seconds apart, and the run's end."""
    writer = TrailWriter(path, trail.header, threaded=False)
    write_blocks(writer, trail, 0, first, block)
    go = threading.Event()

    def write_rest() -> None:
        go.wait(10)
        for lo in range(first, trail.count, step):
            write_blocks(writer, trail, lo, min(lo + step, trail.count), block)
            time.sleep(pause)
        assert trail.end is not None
        writer.close(trail.end)

    thread = threading.Thread(target=write_rest)
    thread.start()
    try:
        yield go
    finally:
        go.set()
        thread.join()
