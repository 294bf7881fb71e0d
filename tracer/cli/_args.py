"""Argument types shared by the subcommands: each explains what it expected."""

from __future__ import annotations

import argparse


def count(text: str) -> int:
    """A whole number, 0 or more."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, not {text!r}") from None
    if value < 0:
        raise argparse.ArgumentTypeError("must be 0 or more")
    return value


def seconds(text: str) -> float:
    """A positive number of seconds."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected seconds, not {text!r}") from None
    if not value > 0:
        raise argparse.ArgumentTypeError("must be more than 0")
    return value


def path_prefix(text: str) -> tuple[int, ...]:
    """A path prefix such as '0 5 2' or '0,5,2'."""
    try:
        return tuple(int(part) for part in text.replace(",", " ").split())
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"expected cities separated by spaces, like '0 5 2', not {text!r}"
        ) from None


def id_range(text: str) -> tuple[int, int | None]:
    """An id range 'A:B' (either side may be empty)."""
    lo, sep, hi = text.partition(":")
    try:
        if not sep:
            raise ValueError
        start = int(lo) if lo.strip() else 0
        stop = int(hi) if hi.strip() else None
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected A:B (node ids), not {text!r}") from None
    if start < 0 or (stop is not None and stop < start):
        raise argparse.ArgumentTypeError("expected 0 <= A <= B")
    return start, stop
