"""The one error type the CLI prints without a traceback: bad input, named where it is."""

from __future__ import annotations

from pathlib import Path


class PrunetrailError(Exception):
    """A problem with the user's input or request (not a bug): printed as one clear line."""


class InputError(PrunetrailError):
    """Bad content in a file, with the place it was found (line, or byte offset)."""

    def __init__(
        self,
        path: str | Path,
        message: str,
        *,
        line: int | None = None,
        offset: int | None = None,
    ) -> None:
        self.path = str(path)
        self.line = line
        self.offset = offset
        self.message = message
        where = self.path
        if line is not None:
            where += f":{line}"
        if offset is not None:
            where += f" at byte {offset}"
        super().__init__(f"{where}: {message}")
