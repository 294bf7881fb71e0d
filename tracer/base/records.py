"""Checks for the values of one node record and one best tour, shared by every trace reader.

A trail's single-record `node` frames (MessagePack) and a JSON Lines trace's `node` lines
hold the same fields: a decision, a city, lengths, and the two links as [city, length]; both
formats' best tours are every city once, starting at city 0. Each check here takes a decoded
value and either returns it in the form the columns hold or raises `FieldError` saying what
was expected; the caller adds where (a byte offset or a line) and which field.
"""

from __future__ import annotations

import math
from typing import Any, TypeGuard

from tracer.base.limits import MAX_LENGTH
from tracer.base.schema import DECISION_BY_NAME, DECISION_NAMES


class FieldError(ValueError):
    """A decoded value that cannot be what its field holds (the message says what can)."""


def is_int(value: Any) -> TypeGuard[int]:
    """Whether a decoded value is a whole number (true and false are not)."""
    return isinstance(value, int) and not isinstance(value, bool)


def is_number(value: Any) -> TypeGuard[int | float]:
    """Whether a decoded value is a finite number (true and false are not)."""
    return isinstance(value, int | float) and not isinstance(value, bool) and math.isfinite(value)


def show_value(value: Any) -> str:
    """A short description of a decoded value for a message (never the whole of a big one)."""
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return repr(value[:30]) + ("..." if len(value) > 30 else "")
    if isinstance(value, list | tuple):
        return f"a list of {len(value)}"
    if isinstance(value, dict):
        return "an object"
    text = repr(value)
    return text if len(text) <= 30 else text[:30] + "..."


def text_value(value: Any, limit: int) -> str:
    """Text of at most `limit` characters (longer text is refused, never cut)."""
    if not isinstance(value, str):
        raise FieldError(f"must be text, found {show_value(value)}")
    if len(value) > limit:
        raise FieldError(f"must be text of at most {limit} characters, found {len(value)}")
    return value


def decision_code(value: Any, *, codes: bool) -> int:
    """A decision given by name (or, where `codes`, by its code) as its code."""
    if isinstance(value, str) and value in DECISION_BY_NAME:
        return int(DECISION_BY_NAME[value])
    if codes and is_int(value) and 0 <= value < len(DECISION_NAMES):
        return value
    raise FieldError(
        f"unknown decision {show_value(value)}; expected one of {', '.join(DECISION_NAMES)}"
    )


def city_value(value: Any, n: int) -> int:
    """A city of an n-city instance."""
    if not is_int(value) or not 0 <= value < n:
        raise FieldError(f"must be a city 0..{n - 1}, found {show_value(value)}")
    return value


def recorded_length(value: Any) -> float:
    """A recorded length: a finite number below `MAX_LENGTH` in magnitude."""
    if not is_number(value) or not abs(value) < MAX_LENGTH:
        raise FieldError(f"must be a number within ±2**53, found {show_value(value)}")
    return float(value)


def link_value(value: Any, n: int) -> tuple[int, float]:
    """A link: [city, length], the city the cheapest edge reaches and that edge's length."""
    if (
        isinstance(value, list | tuple)
        and len(value) == 2
        and is_number(value[0])
        and not (is_int(value[0]) and 0 <= value[0] < n)
        and is_int(value[1])
        and 0 <= value[1] < n
    ):
        raise FieldError(
            f"city {show_value(value[0])} is out of range 0..{n - 1}; a link is written "
            f"[city, length], and {show_value(list(value))} looks like [length, city]"
        )
    if not (
        isinstance(value, list | tuple)
        and len(value) == 2
        and is_int(value[0])
        and 0 <= value[0] < n
        and is_number(value[1])
        and abs(value[1]) < MAX_LENGTH
    ):
        raise FieldError(f"must be null or [city 0..{n - 1}, length], found {show_value(value)}")
    return int(value[0]), float(value[1])


def best_tour(value: Any, n: int) -> tuple[int, ...]:
    """A best tour: every one of the n cities once, starting at city 0 (the only rule)."""
    if not (
        isinstance(value, list | tuple)
        and len(value) == n
        and all(is_int(c) and 0 <= c < n for c in value)
        and value[0] == 0
        and len(set(value)) == n
    ):
        raise FieldError(f"must list all {n} cities once each, starting at 0")
    return tuple(int(c) for c in value)
