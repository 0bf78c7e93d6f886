"""The data-line codec of JCAMP-DX: ASDF (SQZ, DIF, DUP pseudo-digits) and AFFN, both ways.

Decoding
    :func:`decode_table` turns the ``(line number, text)`` lines of an ``X++(Y..Y)`` table
    into a :class:`Table` (raw ordinates before FACTOR, and the abscissa written on each
    line for the caller's axis check).  ASDF goes through :func:`decode_asdf_fast` (numpy,
    no per-value Python) and, when that declines (damaged or unusual input), through
    :func:`decode_asdf`, which gives the same values for good input and the line-numbered
    error for bad input.  Every DIF y-check (a line after one that ended in DIF form starts
    with that line's last ordinate again) is verified.  Decoding never produces more than
    ``limit`` values, and a DUP count is checked against it before it is expanded.
Encoding
    :func:`encode_table` writes integer ordinates as DIF/DUP lines with a SQZ start and a
    y-check at each line start, or as plain AFFN integers, 80 characters a line at most.
"""

from __future__ import annotations

import re
from array import array
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from kinetics.errors import InputFileError
from kinetics.spectra.text import MAX_POINTS

_FIX_HINT = "re-export the file from the instrument software, or repair the line shown"

_SQZ = {"@": "0", **{c: str(i) for i, c in enumerate("ABCDEFGHI", 1)},
        **{c: f"-{i}" for i, c in enumerate("abcdefghi", 1)}}
_DIF = {"%": "0", **{c: str(i) for i, c in enumerate("JKLMNOPQR", 1)},
        **{c: f"-{i}" for i, c in enumerate("jklmnopqr", 1)}}
_DUP = {c: str(i) for i, c in enumerate("STUVWXYZs", 1)}
# One pass of str.translate turns an ASDF line into space-separated tokens: absolute
# values as plain numbers, differences prefixed "d", duplicate counts prefixed "u".
_ASDF_TABLE = str.maketrans(
    {**{c: f" {v}" for c, v in _SQZ.items()}, **{c: f" d{v}" for c, v in _DIF.items()},
     **{c: f" u{v}" for c, v in _DUP.items()}, "+": " +", "-": " -", ",": " ", ";": " "}
)
_NAN_WORD = re.compile(r"(?i)\b(?:nan|inf|infinity)\b")
_PSEUDO_NOT_E = re.compile(r"[@A-DF-Ia-df-i%J-Rj-rS-Zs]")
_ABSCISSA_ASDF = re.compile(r"\s*([+-]?(?:[0-9]+\.?[0-9]*|\.[0-9]+))")
_AFFN_NUMBER = re.compile(r"[+-]?(?:[0-9]+\.?[0-9]*|\.[0-9]+)(?:[eE][+-]?[0-9]+)?")
_AFFN_SEPARATORS = re.compile(r"[\s,;]*")


@dataclass
class Table:
    """Decoded ordinates of one data table and the abscissa written on each line."""

    values: np.ndarray  # raw ordinates (before FACTOR)
    line_x: list[tuple[int, float, int, int]]  # (file line, X as written, index of its point, decimals)


def _decimals(text: str) -> int:
    _, dot, tail = text.partition(".")
    return len(tail) if dot else 0


def affn_tokens(path: str, line_number: int, text: str) -> list[float]:
    if text.isascii() and "_" not in text:  # float() also takes "1_0" and non-ASCII digits
        parts = text.replace(",", " ").replace(";", " ").split()
        try:
            return [float(part) for part in parts]
        except ValueError:
            pass
    # PAC form ("1+2-3"): numbers separated by their signs.
    numbers = _AFFN_NUMBER.findall(text)
    leftover = _AFFN_NUMBER.sub(" ", text)
    if _AFFN_SEPARATORS.fullmatch(leftover) is None or not numbers:
        bad = leftover.strip(" ,;\t")[:20]
        raise InputFileError(path, f"non-numeric data {bad!r}", line=line_number, hint=_FIX_HINT)
    return [float(number) for number in numbers]


def _too_many(path: str, limit: int, line: int) -> InputFileError:
    if limit < MAX_POINTS:
        return InputFileError(path, f"data table holds more points than the {limit} its header declares "
                              "(##NPOINTS=/##VAR_DIM=)", line=line, hint="the file is damaged; re-export it")
    return InputFileError(path, f"data table holds more than {MAX_POINTS} points", line=line,
                          hint="check the file; split very large data sets")


def decode_affn(path: str, lines: Sequence[tuple[int, str]], limit: int = MAX_POINTS) -> Table:
    """Decode AFFN (plain numbers, also the sign-separated PAC form) X++(Y..Y) lines."""
    values = array("d")
    line_x: list[tuple[int, float, int, int]] = []
    for number, text in lines:
        tokens = affn_tokens(path, number, text)
        if len(tokens) < 2:
            raise InputFileError(path, "data line has an abscissa but no ordinates", line=number, hint=_FIX_HINT)
        first = _AFFN_NUMBER.search(text)
        line_x.append((number, tokens[0], len(values), _decimals(first.group(0)) if first else 0))
        values.extend(tokens[1:])
        if len(values) > limit:
            raise _too_many(path, limit, number)
    return Table(np.frombuffer(values, dtype=float).copy(), line_x)


# ---- fast path: the whole table decoded with numpy (no per-value Python)
_K_OTHER, _K_DIGIT, _K_DOT, _K_SQZ, _K_DIF, _K_DUP, _K_NEWLINE, _K_SIGN = range(8)


def _byte_tables() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    kind = np.zeros(256, dtype=np.int8)
    digit = np.zeros(256, dtype=np.float64)
    sign = np.ones(256, dtype=np.float64)
    for char in "0123456789":
        kind[ord(char)], digit[ord(char)] = _K_DIGIT, int(char)
    kind[ord(".")] = _K_DOT
    kind[ord("\n")] = _K_NEWLINE
    kind[ord("+")] = kind[ord("-")] = _K_SIGN
    sign[ord("-")] = -1.0
    for table, code in ((_SQZ, _K_SQZ), (_DIF, _K_DIF), (_DUP, _K_DUP)):
        for char, value in table.items():
            kind[ord(char)] = code
            digit[ord(char)] = abs(int(value))
            sign[ord(char)] = -1.0 if value.startswith("-") else 1.0
    return kind, digit, sign


_BYTE_KIND, _BYTE_DIGIT, _BYTE_SIGN = _byte_tables()
_BYTE_DIGIT_INT = _BYTE_DIGIT.astype(np.int64)
_POW10_INT = 10 ** np.arange(13, dtype=np.int64)
_CHUNK_CHARS = 256 * 1024


def decode_asdf_fast(lines: Sequence[tuple[int, str]], limit: int = MAX_POINTS) -> Table | None:
    """Vectorised decoding of 'pure' ASDF lines (X, then SQZ/DIF/DUP tokens, no spaces).

    Returns None for anything unusual, damaged or out of range; the caller then runs
    :func:`decode_asdf`, which gives the same values for good input and the precise,
    line-numbered error for bad input.  Integers only (exact in float64 below 2**53).

    The lines go through in chunks of about :data:`_CHUNK_CHARS` characters, so the work
    arrays (some 40 bytes a character) stay a constant, not a multiple of the file; a
    chunk that starts after a line ended in DIF form starts with that line's y-check.
    """
    pieces: list[np.ndarray] = []
    line_x: list[tuple[int, float, int, int]] = []
    n_values = 0
    previous: float | None = None
    start = 0
    while start < len(lines):
        stop, size = start, 0
        while stop < len(lines) and (size < _CHUNK_CHARS or stop == start):
            size += len(lines[stop][1]) + 1
            stop += 1
        decoded = _decode_chunk(lines[start:stop], limit - n_values, previous)
        if decoded is None:
            return None
        values, chunk_x, ends_dif = decoded
        line_x += [(number, x, index + n_values, decimals) for number, x, index, decimals in chunk_x]
        pieces.append(values)
        n_values += values.size
        previous = float(values[-1]) if ends_dif and values.size else (previous if ends_dif else None)
        start = stop
    if not pieces:
        return None
    return Table(np.concatenate(pieces) if len(pieces) > 1 else pieces[0], line_x)


def _decode_chunk(lines: Sequence[tuple[int, str]], limit: int, previous: float | None):
    """(values, line_x with chunk-local indices, last line ended in DIF) or None.

    ``previous`` is the last value of the preceding chunk when its last line ended in DIF
    form: this chunk's first line then starts with the y-check of that value.
    """
    try:
        raw = "\n".join(text for _, text in lines).encode("ascii")
    except UnicodeEncodeError:
        return None
    if not raw:
        return None
    chars = np.frombuffer(raw, dtype=np.uint8)
    kind = _BYTE_KIND[chars]
    if np.any(kind == _K_OTHER):
        return None
    n_chars = chars.size
    line_start = np.zeros(n_chars, dtype=bool)
    line_start[0] = True
    newline = kind == _K_NEWLINE
    line_start[1:] = newline[:-1]
    if np.any(line_start & newline):
        return None
    pseudo = (kind == _K_SQZ) | (kind == _K_DIF) | (kind == _K_DUP)
    if np.any(pseudo & line_start) or np.any((kind == _K_SIGN) & ~line_start):
        return None
    is_start = pseudo | line_start
    starts = np.flatnonzero(is_start)
    ends = np.append(starts[1:], n_chars)
    token = np.cumsum(is_start, dtype=np.int32) - 1
    counted = (kind == _K_DIGIT) | pseudo
    # Per-token sums as differences of running sums (int64: exact, no reduceat).
    cum = np.zeros(n_chars + 1, dtype=np.int32)
    np.cumsum(counted, out=cum[1:])
    total = cum[ends] - cum[starts]
    if total.max() > 12:  # keeps every running sum below 2**63
        return None
    after = cum[ends][token] - cum[1:]
    contribution = _BYTE_DIGIT_INT[chars] * _POW10_INT[np.clip(after, 0, 12)] * counted
    running = np.zeros(n_chars + 1, dtype=np.int64)
    np.cumsum(contribution, out=running[1:])
    magnitude = (running[ends] - running[starts]).astype(np.float64)
    token_kind = np.where(line_start[starts], 0, kind[starts])
    is_x = token_kind == 0
    dot_count = np.zeros(n_chars + 1, dtype=np.int32)
    np.cumsum(kind == _K_DOT, out=dot_count[1:])
    dots = dot_count[ends] - dot_count[starts]
    if np.any(dots[~is_x] > 0) or np.any(dots > 1) or np.any(total[is_x] == 0):
        return None
    x_sign = np.where(kind[starts] == _K_SIGN, _BYTE_SIGN[chars[starts]], 1.0)
    value = np.where(is_x, x_sign, _BYTE_SIGN[chars[starts]]) * magnitude
    # decimals of X: digits after its dot
    decimals = np.zeros(starts.size, dtype=np.int64)
    dot_positions = np.flatnonzero(kind == _K_DOT)
    if dot_positions.size:
        dot_tokens = token[dot_positions]
        decimals[dot_tokens] = cum[ends[dot_tokens]] - cum[dot_positions + 1]
        value[dot_tokens] = value[dot_tokens] / 10.0 ** decimals[dot_tokens]
    # --- per-line semantics
    next_kind = np.append(token_kind[1:], 0)
    prev_kind = np.insert(token_kind[:-1], 0, 0)
    if np.any(is_x & (next_kind != _K_SQZ)):
        return None  # a line without ordinates or starting with a difference/repeat
    is_dup = token_kind == _K_DUP
    if np.any(is_dup & ~np.isin(prev_kind, (_K_SQZ, _K_DIF))) or np.any(is_dup & (value < 1)):
        return None
    line_of = np.cumsum(is_x) - 1
    is_op = (token_kind == _K_SQZ) | (token_kind == _K_DIF)
    op_tokens = np.flatnonzero(is_op)
    op_index = np.cumsum(is_op) - 1
    counts = np.ones(op_tokens.size, dtype=np.int64)
    counts[op_index[is_dup]] = value[is_dup].astype(np.int64)
    op_kind, op_value, op_line = token_kind[op_tokens], value[op_tokens], line_of[op_tokens]
    first_op = prev_kind[op_tokens] == 0
    n_lines = int(is_x.sum())
    last_op_of_line = np.zeros(n_lines, dtype=np.int64)
    last_op_of_line[op_line] = np.arange(op_tokens.size)  # later ops overwrite earlier ones
    ends_dif = op_kind[last_op_of_line] == _K_DIF
    check = np.zeros(op_tokens.size, dtype=bool)
    check[first_op] = np.insert(ends_dif[:-1], 0, previous is not None)[op_line[first_op]]
    if np.any(counts[check] != 1):
        return None
    kept = np.where(check, 0, counts)
    synthetic = previous is not None  # op 0 is the y-check of the previous chunk's last value
    if synthetic:
        if abs(op_value[0] - previous) > 1e-9 * max(1.0, abs(previous)):
            return None
        kept[0], check[0] = 1, False  # expanded as a start value, dropped below
    # Before expanding: a few DUP bytes must not claim gigabytes (max first: no wrap-around).
    if kept.max() > limit + synthetic or kept.sum() > limit + synthetic:
        return None
    points_before = np.cumsum(kept) - kept  # points decoded before each op
    expanded_kind = np.repeat(op_kind, kept)
    expanded_value = np.repeat(op_value, kept)
    is_abs = expanded_kind == _K_SQZ
    increments = np.where(is_abs, 0.0, expanded_value)
    running = np.cumsum(increments)
    segment = np.cumsum(is_abs) - 1
    abs_at = np.flatnonzero(is_abs)
    values = expanded_value[abs_at][segment] + running - running[abs_at][segment]
    checked_at = points_before[check] - 1
    if np.any(checked_at < 0):
        return None
    expected = values[checked_at]
    if np.any(np.abs(op_value[check] - expected) > 1e-9 * np.maximum(1.0, np.abs(expected))):
        return None
    line_first_point = points_before[first_op] - check[first_op] - synthetic
    x_tokens = np.flatnonzero(is_x)
    line_x = list(zip([number for number, _ in lines], value[x_tokens].tolist(),
                      line_first_point.tolist(), decimals[x_tokens].tolist()))
    return (values[1:] if synthetic else values), line_x, bool(ends_dif[-1])


# ---- reference path: line by line, strict grammar, every error with its line
# A pseudo-digit followed by digits and a decimal point: ASDF tokens are integers.
_PSEUDO_WITH_DOT = re.compile(r"[@A-Ia-i%J-Rj-rS-Zs][0-9]*\.")


def decode_asdf(path: str, lines: Sequence[tuple[int, str]], limit: int = MAX_POINTS) -> Table:
    """Decode SQZ/DIF/DUP ordinates line by line, verifying every DIF y-check.

    Grammar (strict): after the abscissa, tokens are SQZ (``@A-Ia-i``) or DIF (``%J-Rj-r``)
    pseudo-digits followed by digits, DUP counts (``S-Zs`` and digits) right after a SQZ or
    DIF token, or plain signed integers.  A decimal point inside a compressed token
    (``B5.886``) is an error, not 25.886.  A line after one that ended in DIF form starts
    with the y-check: the previous line's last ordinate again.
    """
    values = array("d")
    line_x: list[tuple[int, float, int, int]] = []
    expect_check = False  # previous line ended in DIF form: its last value is repeated
    for number, text in lines:
        match = _ABSCISSA_ASDF.match(text)
        if match is None:
            raise InputFileError(path, f"data line does not start with an abscissa value: {text[:20]!r}",
                                 line=number, hint=_FIX_HINT)
        ordinates = text[match.end():]
        bad = _PSEUDO_WITH_DOT.search(ordinates)
        if bad is not None:
            raise InputFileError(path, f"decimal point inside the compressed (ASDF) value {bad.group(0)!r}",
                                 line=number, hint="ASDF values are integers; " + _FIX_HINT)
        tokens = ordinates.translate(_ASDF_TABLE).split()
        if not tokens:
            raise InputFileError(path, "data line has an abscissa but no ordinates", line=number, hint=_FIX_HINT)
        first = tokens[0]
        if first[0] in "du":
            raise InputFileError(path, "data line starts with a difference or repeat, not a value",
                                 line=number, hint=_FIX_HINT)
        start_value = _integer(path, number, first)
        if expect_check:
            if abs(start_value - values[-1]) > 1e-9 * max(1.0, abs(values[-1])):
                raise InputFileError(
                    path, f"DIF y-check failed: line starts with {start_value:g} but the previous "
                    f"line ended at {values[-1]:g}",
                    line=number, hint="the file is damaged (a line changed or missing); re-export it",
                )
            line_x.append((number, float(match.group(1)), len(values) - 1, _decimals(match.group(1))))
        else:
            line_x.append((number, float(match.group(1)), len(values), _decimals(match.group(1))))
            values.append(start_value)
        last_is_dif = False
        last_step = start_value  # what a DUP repeats: a difference or an absolute value
        after_value = True  # a DUP count may follow a value, not the abscissa or another DUP
        for token in tokens[1:]:
            kind = token[0]
            if kind == "d":
                step = _integer(path, number, token[1:])
                values.append(values[-1] + step)
                last_is_dif, last_step, after_value = True, step, True
            elif kind == "u":
                if not after_value:
                    raise InputFileError(path, "a repeat count (DUP) must follow a value or a difference",
                                         line=number, hint=_FIX_HINT)
                repeat = int(_integer(path, number, token[1:])) - 1
                if repeat < 0:
                    raise InputFileError(path, f"repeat count {token[1:]} is out of range",
                                         line=number, hint=_FIX_HINT)
                if len(values) + repeat > limit:
                    raise _too_many(path, limit, number)
                run = (values[-1] + last_step * np.arange(1, repeat + 1, dtype=float) if last_is_dif
                       else np.full(repeat, last_step))
                values.frombytes(run.tobytes())
                after_value = False
            else:
                step = _integer(path, number, token)
                values.append(step)
                last_is_dif, last_step, after_value = False, step, True
            if len(values) > limit:
                raise _too_many(path, limit, number)
        expect_check = last_is_dif
    return Table(np.frombuffer(values, dtype=float).copy(), line_x)


def _integer(path: str, line: int, token: str) -> float:
    """A token of a compressed line: an optionally signed integer (AFFN decimals allowed
    when the token carries no pseudo-digit, which the caller has already checked)."""
    if not token.isascii() or "_" in token:
        raise InputFileError(path, f"non-numeric data {token[:20]!r}", line=line, hint=_FIX_HINT)
    try:
        return float(token)
    except ValueError:
        raise InputFileError(path, f"non-numeric data {token[:20]!r}", line=line, hint=_FIX_HINT) from None


def decode_table(path: str, lines: Sequence[tuple[int, str]], form: str | None,
                 limit: int = MAX_POINTS) -> Table:
    """Decode an X++(Y..Y) data table; more than ``limit`` values (the declared count) is an error.

    ``form`` is "ASDF", "AFFN" or None (told from the text: any pseudo-digit means ASDF).
    """
    if not lines:
        raise InputFileError(path, "data table has no data lines", hint=_FIX_HINT)
    if form is None:
        body = _NAN_WORD.sub(" ", " ".join(text for _, text in lines))
        form = "ASDF" if _PSEUDO_NOT_E.search(body) else "AFFN"
    if form == "ASDF":
        return decode_asdf_fast(lines, limit) or decode_asdf(path, lines, limit)
    return decode_affn(path, lines, limit)


# ============================================================ encoding
_SQZ_POS, _SQZ_NEG = "@ABCDEFGHI", "@abcdefghi"
_DIF_POS, _DIF_NEG = "%JKLMNOPQR", "%jklmnopqr"
_DUP_CHARS = "@STUVWXYZs"
_LINE_WIDTH = 80


def _pseudo(value: int, positive: str, negative: str) -> str:
    digits = str(abs(value))
    lead = (positive if value >= 0 else negative)[int(digits[0])]
    return lead + digits[1:]


def _dup(count: int) -> str:
    digits = str(count)
    return _DUP_CHARS[int(digits[0])] + digits[1:]


def _format_x(value: float) -> str:
    text = f"{value:.10g}"
    return text if "e" not in text else f"{value:.6f}"


def _encode_affn(x_values: np.ndarray, integers: np.ndarray) -> list[str]:
    lines = []
    index, n = 0, integers.size
    while index < n:
        line = _format_x(x_values[index])
        while index < n:
            token = f" {integers[index]}"
            if len(line) + len(token) > _LINE_WIDTH and " " in line:
                break
            line += token
            index += 1
        lines.append(line)
    return lines


def _encode_dif(x_values: np.ndarray, integers: np.ndarray) -> list[str]:
    """DIF/DUP lines, each starting with an SQZ value that repeats (y-checks) the last one."""
    diffs = np.diff(integers).tolist()
    ints = integers.tolist()
    n = len(ints)
    lines = []
    start = 0
    while True:
        line = _format_x(x_values[start]) + _pseudo(ints[start], _SQZ_POS, _SQZ_NEG)
        k = start
        while k < n - 1:
            run = 1
            while k + run < n - 1 and diffs[k + run] == diffs[k]:
                run += 1
            token = _pseudo(diffs[k], _DIF_POS, _DIF_NEG)
            if run > 1:
                token += _dup(run)
            if len(line) + len(token) > _LINE_WIDTH:
                if k > start:
                    break
                # a single huge token still goes out whole rather than not at all
            line += token
            k += run
        lines.append(line)
        if k == n - 1:
            if k > start:  # the line ended in DIF form: close with the y-check of the last point
                lines.append(_format_x(x_values[k]) + _pseudo(ints[k], _SQZ_POS, _SQZ_NEG))
            return lines
        start = k


def encode_table(x_values: np.ndarray, integers: np.ndarray, compression: str) -> list[str]:
    """X++(Y..Y) lines of integer ordinates: ``"dif"`` (ASDF) or ``"affn"`` (plain integers)."""
    if compression == "dif":
        return _encode_dif(x_values, integers)
    return _encode_affn(x_values, integers)


__all__ = ["Table", "decode_table", "decode_asdf", "decode_asdf_fast", "decode_affn", "affn_tokens",
           "encode_table"]
