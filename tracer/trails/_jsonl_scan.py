"""The quickest lane of the JSON Lines importer: plain node lines read straight from the
bytes into columns by one compiled pass, with no Python object per line.

It reads only a narrow, exactly defined subset of JSON: a `node` line whose keys are plain
ASCII, whose known fields hold integers, plain decimals (at most 15 significant digits and
a power of ten within ±22, which one IEEE operation rounds exactly as any correct JSON
decoder does), null, a decision name or a `[city, length]` pair, and whose unknown keys hold
scalars. At the first line outside that subset it stops and says why; the caller hands that
line (and, for a node line, a batch after it) to the msgspec path in `_jsonl_typed.py`, which
decides, and then resumes here. So this lane only ever accepts lines the typed path accepts,
with the same values (tests/test_jsonl_scan.py checks it against msgspec).
"""

from __future__ import annotations

import numpy as np
from numba import njit
from numpy.typing import NDArray

from tracer.base import DECISION_BY_NAME, MAX_LENGTH

#: Why a scan stopped: every byte read, the output is full, a line of another kind (or
#: not an object at all), a node line outside the subset above.
DONE, FULL, OTHER_KIND, UNSUPPORTED = 0, 1, 2, 3
#: Rows of the float output: the lengths, then the two links' lengths.
PARTIAL_ROW, TREE_ROW, BOUND_ROW, LENGTH_ROW, LINK_IN_ROW, LINK_OUT_ROW = range(6)
FLOAT_ROWS = 6

# Known keys, in the order of the `_K_*` codes below.
_KEYS = (
    "kind",
    "id",
    "parent",
    "city",
    "partial",
    "decision",
    "tree",
    "bound",
    "length",
    "link_in",
    "link_out",
    "path",
)
(_K_KIND, _K_ID, _K_PARENT, _K_CITY, _K_PARTIAL, _K_DECISION) = range(6)
(_K_TREE, _K_BOUND, _K_LENGTH, _K_LINK_IN, _K_LINK_OUT, _K_PATH) = range(6, 12)
_REQUIRED = (1 << _K_KIND) | (1 << _K_ID) | (1 << _K_PARENT) | (1 << _K_CITY)
_REQUIRED |= (1 << _K_PARTIAL) | (1 << _K_DECISION)


def _table(words: tuple[str, ...]) -> tuple[NDArray[np.uint8], NDArray[np.int64]]:
    width = max(len(w) for w in words)
    table = np.zeros((len(words), width), dtype=np.uint8)
    for i, word in enumerate(words):
        table[i, : len(word)] = np.frombuffer(word.encode("ascii"), dtype=np.uint8)
    return table, np.array([len(w) for w in words], dtype=np.int64)


_KEY_TABLE, _KEY_LEN = _table(_KEYS)
_DECISIONS = tuple(DECISION_BY_NAME)
_DECISION_TABLE, _DECISION_LEN = _table(_DECISIONS)
_DECISION_CODE = np.array([int(DECISION_BY_NAME[d]) for d in _DECISIONS], dtype=np.uint8)
_NODE_TABLE, _NODE_LEN = _table(("node",))
#: 10**0 .. 10**22: every one is exact in float64.
_POW10 = np.array([10.0**k for k in range(23)], dtype=np.float64)
_MAX_DIGITS = 15  # below 2**53, so the mantissa is exact
_MAX_INT_DIGITS = 18  # fits int64 with room, within the node id limits


@njit(cache=True, nogil=True, inline="always")
def _ws(buf: NDArray[np.uint8], pos: int, end: int) -> int:
    while pos < end:
        b = buf[pos]
        if b != 32 and b != 9 and b != 13:
            return pos
        pos += 1
    return pos


@njit(cache=True, nogil=True)
def _word(
    buf: NDArray[np.uint8],
    start: int,
    size: int,
    table: NDArray[np.uint8],
    sizes: NDArray[np.int64],
) -> int:
    """Index of buf[start:start+size] in `table`, or -1 (words told apart by size and their
    first and last bytes before the rest is compared)."""
    if size == 0:
        return -1
    head, last = buf[start], buf[start + size - 1]
    for k in range(table.shape[0]):
        if sizes[k] != size or table[k, 0] != head or table[k, size - 1] != last:
            continue
        same = True
        for j in range(1, size - 1):
            if buf[start + j] != table[k, j]:
                same = False
                break
        if same:
            return k
    return -1


@njit(cache=True, nogil=True)
def _string(buf: NDArray[np.uint8], pos: int, end: int) -> int:
    """Position after a plain string at `pos`, or -1 if there is none (or it is not plain:
    an escape, a control character or a non-ASCII byte)."""
    if pos >= end or buf[pos] != 34:
        return -1
    pos += 1
    while pos < end:
        b = buf[pos]
        if b == 34:
            return pos + 1
        if b == 92 or b < 32 or b >= 128:
            return -1
        pos += 1
    return -1


@njit(cache=True, nogil=True)
def _number(buf: NDArray[np.uint8], pos: int, end: int, whole: bool) -> tuple[int, float, int]:
    """A JSON number at `pos`: (position after it or -1, its float value, its integer value).

    `whole`: only an integer literal is accepted (at most 18 digits). Otherwise the value
    must be exact by one IEEE operation (at most 15 significant digits, power within ±22);
    anything else gives -1, for the msgspec path to decide.
    """
    negative = False
    if pos < end and buf[pos] == 45:
        negative = True
        pos += 1
    if pos >= end or not 48 <= buf[pos] <= 57:
        return -1, 0.0, 0
    mantissa = 0
    digits = 0  # significant digits so far
    if buf[pos] == 48:
        pos += 1
        if pos < end and 48 <= buf[pos] <= 57:
            return -1, 0.0, 0  # a leading zero is not JSON
    else:
        while pos < end and 48 <= buf[pos] <= 57:
            mantissa = mantissa * 10 + (buf[pos] - 48)
            digits += 1
            pos += 1
            if digits > _MAX_INT_DIGITS:
                return -1, 0.0, 0
    exponent = 0
    plain = True
    if pos < end and buf[pos] == 46:
        plain = False
        pos += 1
        if pos >= end or not 48 <= buf[pos] <= 57:
            return -1, 0.0, 0
        while pos < end and 48 <= buf[pos] <= 57:
            if mantissa or buf[pos] != 48:
                mantissa = mantissa * 10 + (buf[pos] - 48)
                digits += 1
                if digits > _MAX_INT_DIGITS:
                    return -1, 0.0, 0
            exponent -= 1
            pos += 1
    if pos < end and (buf[pos] == 101 or buf[pos] == 69):
        plain = False
        pos += 1
        sign = 1
        if pos < end and (buf[pos] == 43 or buf[pos] == 45):
            sign = -1 if buf[pos] == 45 else 1
            pos += 1
        if pos >= end or not 48 <= buf[pos] <= 57:
            return -1, 0.0, 0
        power = 0
        count = 0
        while pos < end and 48 <= buf[pos] <= 57:
            power = power * 10 + (buf[pos] - 48)
            count += 1
            pos += 1
            if count > 4:
                return -1, 0.0, 0
        exponent += sign * power
    if whole:
        if not plain:
            return -1, 0.0, 0
        return pos, 0.0, -mantissa if negative else mantissa
    if negative and mantissa == 0:
        return -1, 0.0, 0  # negative zero: left to the decoder
    if digits > _MAX_DIGITS:
        return -1, 0.0, 0
    if mantissa == 0:
        value = 0.0
    elif exponent >= 0:
        if exponent > 22:
            return -1, 0.0, 0
        value = float(mantissa) * _POW10[exponent]
    else:
        if exponent < -22:
            return -1, 0.0, 0
        value = float(mantissa) / _POW10[-exponent]
    if not abs(value) < MAX_LENGTH:
        return -1, 0.0, 0
    return pos, -value if negative else value, 0


@njit(cache=True, nogil=True)
def _scalar(buf: NDArray[np.uint8], pos: int, end: int) -> int:
    """Position after an unknown key's value if it is a scalar this lane can skip, else -1."""
    if pos >= end:
        return -1
    b = buf[pos]
    if b == 34:
        return _string(buf, pos, end)
    if b == 110 or b == 116 or b == 102:  # null, true, false
        size = 5 if b == 102 else 4
        if pos + size > end:
            return -1
        if b == 110:
            ok = buf[pos + 1] == 117 and buf[pos + 2] == 108 and buf[pos + 3] == 108
        elif b == 116:
            ok = buf[pos + 1] == 114 and buf[pos + 2] == 117 and buf[pos + 3] == 101
        else:
            ok = (
                buf[pos + 1] == 97
                and buf[pos + 2] == 108
                and buf[pos + 3] == 115
                and buf[pos + 4] == 101
            )
        return pos + size if ok else -1
    after, _, _ = _number(buf, pos, end, False)
    if after < 0:
        after, _, _ = _number(buf, pos, end, True)
    return after


@njit(cache=True, nogil=True, inline="always")
def _null(buf: NDArray[np.uint8], pos: int, end: int) -> bool:
    return (
        pos + 4 <= end
        and buf[pos] == 110
        and buf[pos + 1] == 117
        and buf[pos + 2] == 108
        and buf[pos + 3] == 108
    )


@njit(cache=True, nogil=True)
def scan_nodes(
    buf: NDArray[np.uint8],
    pos: int,
    n: int,
    max_line: int,
    max_rows: int,
    first_line: int,
    first_visit: int,
    row: int,
    ident: NDArray[np.int64],
    parent: NDArray[np.int64],
    city: NDArray[np.int32],
    decision: NDArray[np.uint8],
    lengths: NDArray[np.float64],
    link_city: NDArray[np.int32],
    line: NDArray[np.int64],
) -> tuple[int, int, int, int]:
    """Read node lines from `buf[pos:]` (whole lines joined by newlines) into the outputs
    from index `row` on; row 0 is visit position `first_visit`. `n` is the city count,
    `max_line` the longest line and `max_rows` the most rows read (past either, the caller
    refuses). The root (visit 0) is always left to the typed path, which checks what only
    the root may be.

    Returns:
        (position reached: the start of the line it stopped at, or the end; rows filled;
        lines passed; why it stopped: DONE, FULL, OTHER_KIND or UNSUPPORTED).
    """
    end = buf.shape[0]
    cap = min(ident.shape[0], max_rows)
    lines = 0
    while pos < end:
        if row >= cap:
            return pos, row, lines, FULL
        start = pos
        stop = UNSUPPORTED
        seen = 0
        p = _ws(buf, pos, end)
        if p >= end or buf[p] != 123:  # "{"
            return start, row, lines, OTHER_KIND
        p = _ws(buf, p + 1, end)
        lengths[TREE_ROW, row] = np.nan
        lengths[BOUND_ROW, row] = np.nan
        lengths[LENGTH_ROW, row] = np.nan
        lengths[LINK_IN_ROW, row] = np.nan
        lengths[LINK_OUT_ROW, row] = np.nan
        link_city[0, row] = -1
        link_city[1, row] = -1
        ok = p < end and buf[p] == 34
        while ok:
            after = _string(buf, p, end)
            if after < 0:
                ok = False
                break
            key = _word(buf, p + 1, after - p - 2, _KEY_TABLE, _KEY_LEN)
            p = _ws(buf, after, end)
            if p >= end or buf[p] != 58:  # ":"
                ok = False
                break
            p = _ws(buf, p + 1, end)
            if key >= 0:
                if seen & (1 << key):
                    ok = False  # a repeated key: left to the decoder
                    break
                seen |= 1 << key
            if key < 0:
                p = _scalar(buf, p, end)
            elif key == _K_KIND:
                after = _string(buf, p, end)
                if after < 0 or _word(buf, p + 1, after - p - 2, _NODE_TABLE, _NODE_LEN) < 0:
                    stop = OTHER_KIND
                    ok = False
                    break
                p = after
            elif key in (_K_ID, _K_PARENT, _K_CITY):
                p, _, whole = _number(buf, p, end, True)
                if key == _K_ID:
                    ident[row] = whole
                elif key == _K_PARENT:
                    parent[row] = whole
                else:
                    if not 0 <= whole < n:
                        ok = False
                        break
                    city[row] = whole
            elif key == _K_DECISION:
                after = _string(buf, p, end)
                if after < 0:
                    ok = False
                    break
                k = _word(buf, p + 1, after - p - 2, _DECISION_TABLE, _DECISION_LEN)
                if k < 0:
                    ok = False
                    break
                decision[row] = _DECISION_CODE[k]
                p = after
            elif key in (_K_LINK_IN, _K_LINK_OUT):
                side = key - _K_LINK_IN
                if _null(buf, p, end):
                    p += 4
                else:
                    if p >= end or buf[p] != 91:  # "["
                        ok = False
                        break
                    p, _, whole = _number(buf, _ws(buf, p + 1, end), end, True)
                    if p < 0 or not 0 <= whole < n:
                        ok = False
                        break
                    p = _ws(buf, p, end)
                    if p >= end or buf[p] != 44:  # ","
                        ok = False
                        break
                    p, value, _ = _number(buf, _ws(buf, p + 1, end), end, False)
                    if p < 0:
                        ok = False
                        break
                    p = _ws(buf, p, end)
                    if p >= end or buf[p] != 93:  # "]"
                        ok = False
                        break
                    p += 1
                    link_city[side, row] = whole
                    lengths[LINK_IN_ROW + side, row] = value
            elif key == _K_PATH:
                ok = False
                break
            else:  # partial, tree, bound, length
                target = PARTIAL_ROW if key == _K_PARTIAL else TREE_ROW + key - _K_TREE
                if key != _K_PARTIAL and _null(buf, p, end):
                    p += 4
                else:
                    p, value, _ = _number(buf, p, end, False)
                    lengths[target, row] = value
            if p < 0:
                ok = False
                break
            p = _ws(buf, p, end)
            if p < end and buf[p] == 44:  # ","
                p = _ws(buf, p + 1, end)
                ok = p < end and buf[p] == 34
                continue
            if p < end and buf[p] == 125:  # "}"
                p = _ws(buf, p + 1, end)
                break
            ok = False
        if not ok or seen & _REQUIRED != _REQUIRED or first_visit + row == 0:
            return start, row, lines, stop
        if p < end and buf[p] != 10:  # more after the object
            return start, row, lines, UNSUPPORTED
        if p - start > max_line:
            return start, row, lines, UNSUPPORTED
        line[row] = first_line + lines
        row += 1
        lines += 1
        pos = p + 1
    return end, row, lines, DONE


@njit(cache=True, nogil=True)
def skip_lines(buf: NDArray[np.uint8], pos: int, count: int) -> int:
    """Position after `count` more lines from `pos` (or the end)."""
    end = buf.shape[0]
    while pos < end and count > 0:
        if buf[pos] == 10:
            count -= 1
        pos += 1
    return pos
