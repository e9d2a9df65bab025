"""RFC 8785 JSON Canonicalization Scheme (JCS): one byte string per JSON value.

The digests of a decision (``input_sha256``, ``answer_sha256``) and the leaves of the log
hash these bytes, so that anyone can recompute them with any RFC 8785 implementation.

Two encoders give the same bytes:

* :func:`reference_json` walks the value and writes it as RFC 8785 §3.2 states: object
  members sorted by the UTF-16 code units of their names (§3.2.3), strings with the
  escapes of §3.2.2.2 and everything else as UTF-8, numbers as ECMAScript's
  ``Number.prototype.toString`` writes them (§3.2.2.3, :func:`number_text`).
* :func:`canonical_json`, the one the service calls, lets orjson write the value with
  sorted keys in C and then mends what orjson writes differently. orjson's string escapes
  are those of §3.2.2.2 already; its key order is code-point order, which equals UTF-16
  order unless a member name holds a character beyond U+FFFF (then the walk is used); its
  floats are the same shortest round-trip digits, spelled differently in some ranges
  (``3.0``, ``1e+16``, ``1e-6``, ``-0.0``), so every float token outside a string is
  found with numpy and rewritten by :func:`number_text` where it differs. On a
  600,000-arc body this is 15 to 40 times faster than the walk
  (``tests/records/bench/canonical_speed.py``).

Only JSON values are accepted (dict with str keys, list, tuple, str, int, float, bool,
None). Integers must lie within ±(2**53 - 1), the range in which every integer is exactly
an IEEE 754 double (RFC 7493 §2.2): beyond it two different integers would canonicalise
alike. NaN and the infinities are not JSON and are refused, as are lone surrogates
(RFC 8785 §3.2.2.2 requires valid Unicode). Other Python objects are refused, except
the few orjson writes by itself (``uuid.UUID``, ``enum.Enum`` members) on the fast path:
pass plain JSON data.

References
----------
A. Rundgren, B. Jordan, S. Erdtman, "JSON Canonicalization Scheme (JCS)", RFC 8785, 2020.
ECMA-262, "Number::toString" (the number format RFC 8785 §3.2.2.3 adopts).
"""

from __future__ import annotations

import hashlib
import json.encoder
import math
from collections.abc import Iterator
from itertools import chain
from typing import Any

import numpy as np
import orjson
from numpy.lib.stride_tricks import sliding_window_view

__all__ = [
    "MAX_SAFE_INTEGER",
    "CanonicalizationError",
    "canonical_json",
    "canonical_sha256",
    "number_text",
    "reference_json",
]

#: Largest integer magnitude accepted: 2**53 - 1 (RFC 7493 §2.2, I-JSON).
MAX_SAFE_INTEGER = 2**53 - 1

_OPTIONS = (orjson.OPT_SORT_KEYS | orjson.OPT_STRICT_INTEGER | orjson.OPT_PASSTHROUGH_DATACLASS
            | orjson.OPT_PASSTHROUGH_DATETIME | orjson.OPT_PASSTHROUGH_SUBCLASS)
# More than the longest float token orjson writes ("-2.2250738585072014e-308", 24 bytes).
_TOKEN_WINDOW = 26
_NUMBER_BYTES = np.zeros(256, bool)
_NUMBER_BYTES[list(b"0123456789+-.e")] = True
_encode_string = json.encoder.encode_basestring   # the escapes of RFC 8785 §3.2.2.2


class CanonicalizationError(ValueError):
    """The value is not JSON that RFC 8785 can canonicalise; the message names where."""


def canonical_sha256(value: Any, *, parsed: bool = False) -> str:
    """SHA-256 of the RFC 8785 form of ``value``, lower-case hex."""
    return hashlib.sha256(canonical_json(value, parsed=parsed)).hexdigest()


def canonical_json(value: Any, *, parsed: bool = False) -> bytes:
    """The RFC 8785 canonical UTF-8 bytes of a JSON value.

    Parameters
    ----------
    value
        dict (str keys), list, tuple, str, int, float, bool or None, nested.
    parsed
        True when ``value`` is what a JSON parser that refuses NaN and Infinity returned
        (orjson.loads, the service's body parser): it cannot hold a non-finite float, so
        the walk that looks for one behind a ``null`` is skipped (on a 600,000-arc body
        with null capacities it costs about as much as the serialisation).

    Raises
    ------
    CanonicalizationError
        For a value that is not JSON, naming the first culprit by JSON Pointer.
    """
    try:
        out = orjson.dumps(value, default=_refuse, option=_OPTIONS)
    except (orjson.JSONEncodeError, TypeError):
        return reference_json(value)          # raises with the culprit's pointer
    raw = np.frombuffer(out, np.uint8)
    quotes = _Quotes(out, raw)
    if len(raw) and raw.max() >= 0xF0 and _beyond_bmp_in_a_key(raw, quotes()):
        # A member name with a character beyond U+FFFF sorts differently in UTF-16 than
        # in code points; the walk sorts right. (In values such characters change nothing.)
        return reference_json(value)
    if not parsed and b"null" in out:
        _require_finite(value)               # orjson writes NaN and infinities as null
    return _mend_numbers(out, raw, quotes)


class _Quotes:
    """Positions of the quotes of ``out`` that delimit strings, found once when needed."""

    def __init__(self, out: bytes, raw: np.ndarray) -> None:
        self._out, self._raw = out, raw
        self._found: np.ndarray | None = None

    def __call__(self) -> np.ndarray:
        if self._found is None:
            scan = self._raw
            if b"\\" in self._out:
                # Blank escaped backslashes, then escaped quotes (same length), so that
                # every quote left delimits a string.
                scan = np.frombuffer(self._out.replace(b"\\\\", b"__")
                                     .replace(b'\\"', b"__"), np.uint8)
            self._found = np.flatnonzero(scan == ord('"'))
        return self._found


def _beyond_bmp_in_a_key(raw: np.ndarray, quotes: np.ndarray) -> bool:
    """Whether a 4-byte UTF-8 sequence lies in a member name: the string holding it
    (every such byte is inside one) closes with a quote followed by ':'."""
    leads = np.flatnonzero(raw >= 0xF0)
    closing = quotes[np.searchsorted(quotes, leads)]
    return bool((raw[np.minimum(closing + 1, len(raw) - 1)] == ord(":")).any())


def _refuse(obj: Any) -> Any:
    raise TypeError(f"{type(obj).__name__} is not a JSON value")


def _require_finite(value: Any) -> None:
    """Refuse NaN and infinities, walking the containers level by level with C-level
    passes (a type census, then the values of all dicts and items of all lists at once)."""
    level = [value]
    while level:
        kinds = set(map(type, level))
        if float in kinds and not all(map(math.isfinite, (v for v in level
                                                          if type(v) is float))):
            reference_json(value)            # raises, naming the culprit's pointer
        nested: list[Any] = []
        if dict in kinds:
            dicts = level if len(kinds) == 1 else [v for v in level if type(v) is dict]
            nested.extend(chain.from_iterable(map(dict.values, dicts)))
        for sequence in (list, tuple):
            if sequence in kinds:
                items = level if len(kinds) == 1 else [v for v in level
                                                       if type(v) is sequence]
                nested.extend(chain.from_iterable(items))
        level = nested


def _mend_numbers(out: bytes, raw: np.ndarray, quotes: _Quotes) -> bytes:
    """Rewrite the float tokens of orjson's output that ECMAScript spells differently.

    orjson writes a float with the same shortest round-trip digits as ECMAScript, in
    positional notation from 1e-5 to 1e16 and in exponent notation outside. Positional
    spellings agree, except that an integral value ends in ".0" there and not in
    ECMAScript, which is cut with one mask. Every other token that may differ (exponent
    notation, "-0.0", a positional value below 1e-6) is rewritten by :func:`number_text`.
    """
    exps = np.flatnonzero(raw[:-1] == ord("e")) if b"e" in out else np.zeros(0, np.intp)
    exps = exps[(raw[exps + 1] == ord("+")) | (raw[exps + 1] == ord("-"))]
    if b"." not in out and not len(exps):
        return out                           # no float at all
    marks = np.flatnonzero(raw == ord("."))
    if len(exps):
        marks = np.sort(np.concatenate([marks, exps]))
    # A byte is outside strings when an even number of delimiting quotes precede it.
    marks = marks[np.searchsorted(quotes(), marks) % 2 == 0]
    if not len(marks):
        return out
    w = _TOKEN_WINDOW
    pad = np.full(w, ord(","), np.uint8)
    padded = np.concatenate([pad, raw, pad])
    starts, ends, exponent = _tokens(padded, marks + w)
    first = np.diff(starts, prepend=-1) != 0                 # "1.5e+30" has two marks
    marks, starts, ends, exponent = marks[first] + w, starts[first], ends[first], exponent[first]
    dot0 = (padded[ends - 2] == ord(".")) & (padded[ends - 1] == ord("0"))
    negative = padded[starts] == ord("-")
    digit = starts + negative
    minus_zero = dot0 & negative & (ends - starts == 4) & (padded[digit] == ord("0"))
    below = (padded[digit] == ord("0")) & (padded[digit + 1] == ord("."))
    below[below] = (sliding_window_view(padded, 6)[digit[below] + 2] == ord("0")).all(axis=1)
    long_integral = dot0 & (marks - digit > 21)
    general = exponent | minus_zero | below | long_integral
    cut = ends[dot0 & ~general] - 2 - w
    edits = []
    for s, e in zip((starts[general] - w).tolist(), (ends[general] - w).tolist(), strict=True):
        token = out[s:e]
        fixed = number_text(float(token)).encode()
        if fixed != token:
            edits.append((s, e, fixed))
    return _apply(raw, cut, edits)


def _tokens(padded: np.ndarray, marks: np.ndarray) -> tuple[np.ndarray, ...]:
    """Start, end and 'has an exponent' of the number token around each mark, found by
    stepping outwards from all marks at once until a byte that is not part of a number."""
    starts, ends = marks.copy(), marks.copy()
    exponent = padded[marks] == ord("e")
    for edge, step in ((starts, -1), (ends, 1)):
        going = np.ones(len(marks), bool)
        for _ in range(_TOKEN_WINDOW):
            nxt = padded[edge + step]
            going &= _NUMBER_BYTES[nxt]
            if not going.any():
                break
            exponent |= going & (nxt == ord("e"))
            edge += step * going
    return starts, ends + 1, exponent


def _apply(raw: np.ndarray, cut: np.ndarray, edits: list[tuple[int, int, bytes]]) -> bytes:
    """``raw`` with the two bytes at each ``cut`` removed and each (start, end, text)
    edit made; cuts and edits lie in different tokens."""
    if len(cut):
        keep = np.ones(len(raw), bool)
        keep[cut] = False
        keep[cut + 1] = False
        # Each edit moves left by the bytes cut before it.
        shift = (2 * np.searchsorted(cut, [s for s, _, _ in edits])).tolist()
        edits = [(s - d, e - d, f) for (s, e, f), d in zip(edits, shift, strict=True)]
        raw = raw[keep]
    out = raw.tobytes()
    if not edits:
        return out
    pieces: list[bytes] = []
    done = 0
    for s, e, f in edits:
        pieces += (out[done:s], f)
        done = e
    pieces.append(out[done:])
    return b"".join(pieces)


def number_text(x: float | int) -> str:
    """A JSON number as ECMAScript's ``Number.prototype.toString`` writes it (RFC 8785
    §3.2.2.3): the shortest digits that round-trip, in positional notation from 1e-6 up
    to 1e21 and in exponent notation outside it; -0 is written 0."""
    if type(x) is int:
        if abs(x) > MAX_SAFE_INTEGER:
            raise CanonicalizationError(f"integer {x} is beyond ±(2**53 - 1)")
        return str(x)
    if not math.isfinite(x):
        raise CanonicalizationError(f"{x} is not a JSON number")
    if x == 0:
        return "0"
    sign, text = ("-", repr(-x)) if x < 0 else ("", repr(x))   # repr: shortest round-trip
    mantissa, _, exponent = text.partition("e")
    whole, _, fraction = mantissa.partition(".")
    digits = (whole + fraction).lstrip("0")
    # x = 0.DIGITS * 10**n, as ECMA-262 states it (digits s, k of them, exponent n).
    n = len(whole) - (len(whole) + len(fraction) - len(digits)) + int(exponent or 0)
    digits = digits.rstrip("0")
    k = len(digits)
    if k <= n <= 21:
        body = digits + "0" * (n - k)
    elif 0 < n <= 21:
        body = digits[:n] + "." + digits[n:]
    elif -6 < n <= 0:
        body = "0." + "0" * -n + digits
    else:
        e = n - 1
        head = digits if k == 1 else digits[0] + "." + digits[1:]
        body = f"{head}e{'+' if e > 0 else '-'}{abs(e)}"
    return sign + body


def reference_json(value: Any) -> bytes:
    """RFC 8785 bytes by a plain walk of the value, written as the RFC states it."""
    try:
        return "".join(_walk(value, "")).encode("utf-8")
    except RecursionError:
        raise CanonicalizationError("the value is nested too deeply to canonicalise") from None


def _utf16(key: str) -> bytes:
    # Big-endian UTF-16 bytes compare as the code units do (RFC 8785 §3.2.3).
    return key.encode("utf-16-be", "surrogatepass")


def _walk(value: Any, pointer: str) -> Iterator[str]:
    kind = type(value)
    if kind is str:
        yield _string(value, pointer)
    elif value is None:
        yield "null"
    elif value is True:
        yield "true"
    elif value is False:
        yield "false"
    elif kind is int or kind is float:
        try:
            yield number_text(value)
        except CanonicalizationError as e:
            raise CanonicalizationError(f"{pointer or '/'}: {e}") from None
    elif kind is list or kind is tuple:
        yield "["
        for i, item in enumerate(value):
            if i:
                yield ","
            yield from _walk(item, f"{pointer}/{i}")
        yield "]"
    elif kind is dict:
        for key in value:
            if type(key) is not str:
                raise CanonicalizationError(f"{pointer or '/'}: member name {key!r} is "
                                            "not a string")
        yield "{"
        for i, key in enumerate(sorted(value, key=_utf16)):
            inner = f"{pointer}/{_escape_pointer(key)}"
            yield ("," if i else "") + _string(key, inner) + ":"
            yield from _walk(value[key], inner)
        yield "}"
    else:
        raise CanonicalizationError(f"{pointer or '/'}: {kind.__name__} is not a JSON value")


def _string(text: str, pointer: str) -> str:
    try:
        text.encode("utf-8")
    except UnicodeEncodeError:
        raise CanonicalizationError(f"{pointer or '/'}: a lone surrogate is not "
                                    "Unicode text") from None
    return _encode_string(text)


def _escape_pointer(key: str) -> str:
    return key.replace("~", "~0").replace("/", "~1")   # RFC 6901 §4
